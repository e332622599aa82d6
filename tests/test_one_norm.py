"""The one wrapper of the block 1-norm estimator (Higham and Tisseur 2000).

References: numpy.linalg.norm(A, 1) (exact, LAPACK-free column sums); the
paper's remark, quoted in scipy's implementation, that "for a matrix with
nonnegative elements the algorithm converges with an exact estimate on the
second iteration".
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from conditioning.linalg.one_norm import one_norm_estimate


def _hilbert_inverse_operator(n):
    H = 1.0 / (np.arange(n)[:, None] + np.arange(n)[None, :] + 1.0)
    return spla.aslinearoperator(np.linalg.inv(H)), np.linalg.inv(H)


def test_nonnegative_matrix_is_exact():
    """A nonnegative matrix: the estimate equals ||A||_1 (numpy's column sums)."""
    A = np.random.default_rng(5).uniform(0.0, 1.0, (40, 40))
    assert one_norm_estimate(A, rng=0) == pytest.approx(np.linalg.norm(A, 1), rel=1e-15)


def test_lower_bound_within_factor_three_on_hilbert_inverse():
    """inv(H_8): a lower bound, within the factor 3 the method is known for."""
    op, dense = _hilbert_inverse_operator(8)
    exact = np.linalg.norm(dense, 1)
    est = one_norm_estimate(op, rng=1)
    assert exact / 3 <= est <= exact * (1 + 1e-12)


def test_reproducible_and_leaves_the_global_generator_alone():
    """Same seed, same estimate; numpy's global legacy state is untouched."""
    n = 300
    A = sp.random_array((n, n), density=0.05, rng=np.random.default_rng(2), format="csr")
    A = A - 0.5 * sp.eye_array(n)
    np.random.seed(123)
    before = np.random.get_state()[1].copy()
    first = one_norm_estimate(A, rng=7)
    assert np.array_equal(np.random.get_state()[1], before)
    assert one_norm_estimate(A, rng=7) == first
    g1, g2 = np.random.default_rng(9), np.random.default_rng(9)
    assert one_norm_estimate(A, rng=g1) == one_norm_estimate(A, rng=g2)
    assert first <= np.abs(A).sum(axis=0).max() * (1 + 1e-12)


def test_input_checks():
    with pytest.raises(ValueError, match="square"):
        one_norm_estimate(np.ones((3, 4)))
    with pytest.raises(ValueError, match="at least one column"):
        one_norm_estimate(np.eye(3), t=0)
