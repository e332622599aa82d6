"""Digits lost at a pivot, -log10(D_ii / K_ii), against closed forms and LAPACK's LDL^T."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.io
import scipy.linalg
import scipy.sparse as sp

from conditioning.stages.pivots import pivot_loss
from conditioning.engine.scipy_engine import factorize
from conditioning.model import DofTable, Model
from conftest import reference_matrix_path


def second_difference(n: int) -> sp.csr_array:
    """tridiag(-1, 2, -1): a fixed-fixed chain of n+1 unit springs."""
    return sp.csr_array(sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(n, n)))


def test_fixed_chain_natural_order_closed_form():
    """tridiag(-1, 2, -1) eliminated in natural order: pivot k is (k+1)/k
    (classical closed form of the LDL^T of the second-difference matrix; the
    recurrence d_1 = 2, d_k = 2 - 1/d_{k-1} gives it by induction), so the
    share kept is D_kk / K_kk = (k+1)/(2k) and the worst loss is log10(2n/(n+1)) -> log10 2."""
    n = 200
    K = second_difference(n)
    result = pivot_loss(Model(K), factorize(K, ordering="NATURAL"), worst=n)
    k = np.array([e.row for e in result.worst]) + 1
    kept = np.array([e.kept for e in result.worst])
    np.testing.assert_allclose(kept, (k + 1) / (2 * k), rtol=1e-12)
    np.testing.assert_allclose([e.digits for e in result.worst], np.log10(2 * k / (k + 1)), rtol=1e-12, atol=1e-14)
    assert result.worst[0].row == n - 1
    assert result.max_digits == pytest.approx(math.log10(2 * n / (n + 1)), rel=1e-12)
    assert "NATURAL" in result.method


def test_worst_rows_named_by_node():
    """The worst DOF is named by node and dof through the model's DOF map."""
    n = 6
    K = second_difference(n)
    dofs = DofTable(node=np.arange(10, 10 + n, dtype=np.int64), dof=np.zeros(n, dtype=np.int8))
    result = pivot_loss(Model(K, dofs=dofs), factorize(K, ordering="NATURAL"), worst=2)
    assert [e.label for e in result.worst] == ["node 15 ux", "node 14 ux"]


def test_bcsstk01_matches_lapack_ldl_same_ordering():
    """BCSSTK01 (Harwell-Boeing, via ../shared): D_ii / K_ii agrees with the
    dense LDL^T of scipy.linalg.ldl (LAPACK ?sytrf, Bunch-Kaufman) when the
    shared factorization eliminates in the same order as LAPACK did."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    A = K.toarray()
    lu, d, perm = scipy.linalg.ldl(A)
    assert np.count_nonzero(np.diag(d, 1)) == 0, "LAPACK chose a 2x2 pivot; no LDL^T to compare"
    reference = np.empty(A.shape[0])
    reference[perm] = np.diag(d) / np.diag(A)[perm]  # step k eliminates row perm[k]
    fac = factorize(K, ordering=lambda pattern, coords: perm)
    result = pivot_loss(Model(K), fac, worst=A.shape[0])
    rows = np.array([e.row for e in result.worst])
    np.testing.assert_allclose([e.kept for e in result.worst], reference[rows], rtol=1e-9)
    assert result.max_digits == pytest.approx(-np.log10(reference.min()), rel=1e-9)


def test_singular_chain_reports_lower_bound():
    """A free-free chain (tridiag(-1, 2, -1) with end diagonals 1) is singular.
    Its natural-order pivots are d_1 = ... = d_{n-1} = 1 and d_n = 0 (the
    recurrence d_k = K_kk - 1/d_{k-1}; closed form), so the true share kept is 1
    at the first row, 1/2 inside and 0 at the last. The shared factorization
    is shifted; every reported loss is a lower bound of the true one, close
    to it away from the null space, and large (not infinite) at the last row."""
    n = 50
    K = second_difference(n).tolil()
    K[0, 0] = K[n - 1, n - 1] = 1.0
    K = sp.csr_array(K)
    assert np.linalg.matrix_rank(K.toarray()) == n - 1  # LAPACK SVD: one null vector
    fac = factorize(K, ordering="NATURAL")
    assert fac.shift != 0.0
    result = pivot_loss(Model(K), fac, worst=n)
    assert "lower bound" in result.method
    true = np.r_[1.0, 0.5 * np.ones(n - 2), 0.0]
    rows = np.array([e.row for e in result.worst])
    kept = np.array([e.kept for e in result.worst])
    assert np.all(kept >= true[rows] * (1 - 1e-12))
    inner = rows < n - 1
    np.testing.assert_allclose(kept[inner], true[rows[inner]], rtol=1e-5)
    assert result.worst[0].row == n - 1 and math.log10(2.0) + 3 < result.max_digits < math.inf


def test_negative_pivot_is_infinite_loss():
    """An indefinite stiffness (a negative spring, K = [[1, -2], [-2, 1]] with
    eigenvalues -1 and 3) has a negative pivot 1 - 4 = -3 in natural order:
    reported first with infinite digits and named in the method."""
    K = sp.csr_array(np.array([[1.0, -2.0], [-2.0, 1.0]]))
    assert np.linalg.eigvalsh(K.toarray())[0] < 0  # LAPACK: indefinite
    fac = factorize(K, ordering="NATURAL", shift=0.0)
    result = pivot_loss(Model(K), fac)
    assert result.worst[0].row == 1
    assert math.isinf(result.worst[0].digits) and result.worst[0].kept == pytest.approx(-3.0)
    assert math.isinf(result.max_digits)
    assert "negative" in result.method


def test_rows_without_stiffness_are_not_listed():
    """A row with no stiffness is left out of the factorization and of the
    ranking, and counted in the method."""
    K = sp.block_diag([second_difference(4), sp.csr_array((1, 1))], format="csr")
    fac = factorize(sp.csr_array(K), ordering="NATURAL")
    result = pivot_loss(Model(sp.csr_array(K)), fac, worst=10)
    assert 4 not in [e.row for e in result.worst]
    assert len(result.worst) == 4
    assert "1 row(s) without stiffness" in result.method


def test_docstring_example_runs():
    """The Examples section of the module's docstrings (a closed-form case) runs as a doctest."""
    import doctest

    import conditioning.stages.pivots

    result = doctest.testmod(conditioning.stages.pivots)
    assert result.attempted > 0 and result.failed == 0
