"""Double-double residual against an exact residual computed by mpmath.

Source of truth: mpmath (arbitrary precision; at 120 digits the products
and sums of the float64 data below are exact). The accuracy claim checked is
the one in :func:`conditioning.linalg.doubledouble.dd_residual`: each row of
r = f - K x agrees with the exact residual to at least 28 significant digits
relative to T_i = |f_i| + sum_j |K_ij x_j| (a condition-aware measure: the
residual itself may be cancelled to zero), and within the stated bound
u^2 |r_i| + (2 n_i + 16) u^2 T_i.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from conditioning.linalg.doubledouble import (
    U,
    dd_add,
    dd_operator,
    dd_residual,
    split,
    two_prod,
    two_sum,
)
from conftest import reference_matrix_path


def _exact_errors(K, x_hi, x_lo, f, r_hi, r_lo):
    """Per row: (|computed - exact|, T_i, |exact|, n_i) with mpmath at 120 digits."""
    K = sp.csr_array(K)
    out = []
    with mpmath.workdps(120):
        for i in range(K.shape[0]):
            s = mpmath.mpf(float(f[i]))
            T = abs(s)
            for jj in range(K.indptr[i], K.indptr[i + 1]):
                j = K.indices[jj]
                term = mpmath.mpf(float(K.data[jj])) * (mpmath.mpf(float(x_hi[j])) + mpmath.mpf(float(x_lo[j])))
                s -= term
                T += abs(term)
            got = mpmath.mpf(float(r_hi[i])) + mpmath.mpf(float(r_lo[i]))
            out.append((abs(got - s), T, abs(s), K.indptr[i + 1] - K.indptr[i]))
    return out


def _check_rows(rows):
    for err, T, r, n_i in rows:
        bound = U**2 * r + (2 * n_i + 16) * U**2 * T
        assert err <= bound, f"error {float(err):.3e} above the stated bound {float(bound):.3e}"
        assert err <= mpmath.mpf("1e-28") * T, "fewer than 28 significant digits relative to sum |terms|"


def test_error_free_transformations_are_exact():
    """TwoSum, Split and TwoProduct (Ogita, Rump and Oishi 2005, Algorithms 3.1-3.3) are exact (mpmath)."""
    rng = np.random.default_rng(3)
    a = rng.standard_normal(200) * 10.0 ** rng.uniform(-20, 20, 200)
    b = rng.standard_normal(200) * 10.0 ** rng.uniform(-20, 20, 200)
    s, e = two_sum(a, b)
    p, q = two_prod(a, b)
    h, l = split(a)
    with mpmath.workdps(200):
        for i in range(200):
            A, B = mpmath.mpf(a[i]), mpmath.mpf(b[i])
            assert mpmath.mpf(s[i]) + mpmath.mpf(e[i]) == A + B
            assert mpmath.mpf(p[i]) + mpmath.mpf(q[i]) == A * B
            assert mpmath.mpf(h[i]) + mpmath.mpf(l[i]) == A
    hi, lo = dd_add(np.array([1.0]), np.array([1e-17]), np.array([-1.0]), np.array([1e-20]))
    assert hi[0] + lo[0] == pytest.approx(1e-17 + 1e-20, rel=1e-15)


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(1, 40),
    density=st.floats(0.05, 1.0),
    spread=st.floats(0.0, 12.0),
    cancel=st.booleans(),
    seed=st.integers(0, 2**32 - 1),
)
def test_residual_random_sparse_against_mpmath(n, density, spread, cancel, seed):
    """Random sparse K with entries over 10^+-spread; f = fl(K x) makes r nearly cancel (mpmath exact residual)."""
    rng = np.random.default_rng(seed)
    K = sp.random_array((n, n), density=density, rng=rng, format="csr")
    K.data = rng.standard_normal(K.nnz) * 10.0 ** rng.uniform(-spread, spread, K.nnz)
    x_hi = rng.standard_normal(n) * 10.0 ** rng.uniform(-spread, spread, n)
    x_lo = x_hi * rng.uniform(-1, 1, n) * U
    f = K @ x_hi if cancel else rng.standard_normal(n)
    r_hi, r_lo = dd_residual(K, x_hi, x_lo, f)
    _check_rows(_exact_errors(K, x_hi, x_lo, f, r_hi, r_lo))


def test_residual_block_of_right_hand_sides_matches_columns():
    """(n, k) input gives the residual of each column (common practice: block = columns)."""
    rng = np.random.default_rng(5)
    K = sp.random_array((30, 30), density=0.3, rng=rng, format="csr")
    X = rng.standard_normal((30, 3))
    F = K @ X
    R_hi, R_lo = dd_residual(K, X, None, F)
    for c in range(3):
        r_hi, r_lo = dd_residual(K, X[:, c], None, F[:, c])
        assert np.array_equal(R_hi[:, c], r_hi) and np.array_equal(R_lo[:, c], r_lo)


@pytest.mark.parametrize("name", ["bcsstk01", "bcsstk02", "bcsstk03", "bcsstk04", "bcsstk05", "bcsstk06",
                                  "nos4", "LF10"])
def test_residual_reference_matrices_against_mpmath(name):
    """Harwell-Boeing matrices (../shared/reference-matrices, PROVENANCE.md); mpmath exact residual."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    rng = np.random.default_rng(11)
    x = rng.standard_normal(K.shape[0])
    f = K @ x  # the residual of x is then pure round-off of K x: heavy cancellation
    op = dd_operator(K)
    r_hi, r_lo = dd_residual(op, x, None, f)
    _check_rows(_exact_errors(K, x, np.zeros_like(x), f, r_hi, r_lo))


def test_residual_of_exact_solution_is_zero():
    """tridiag(-1, 2, -1) x = f with integer data: the exact residual is 0 (closed form)."""
    n = 50
    K = sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1], format="csr")
    x = np.arange(1.0, n + 1)
    f = K @ x
    r_hi, r_lo = dd_residual(K, x, None, f)
    assert not np.any(r_hi) and not np.any(r_lo)


def test_residual_long_rows_wide_range_heavy_cancellation():
    """Dense 300 x 300 rows (n_i = 300), entries over 10^+-30, f = fl(K x): the
    stated bound holds row by row against mpmath's exact residual."""
    rng = np.random.default_rng(9)
    n = 300
    A = rng.standard_normal((n, n)) * 10.0 ** rng.uniform(-30, 30, (n, n))
    K = sp.csr_array(A)
    x_hi = rng.standard_normal(n) * 10.0 ** rng.uniform(-30, 30, n)
    f = K @ x_hi
    r_hi, r_lo = dd_residual(K, x_hi, None, f)
    rows = _exact_errors(K[:40], x_hi, np.zeros(n), f[:40], r_hi[:40], r_lo[:40])
    _check_rows(rows)


def test_doctest_example_second_difference():
    """The docstring example of dd_residual (second difference matrix, closed form)."""
    import doctest

    import conditioning.linalg.doubledouble as module

    failures, _ = doctest.testmod(module)
    assert failures == 0
