"""Negative eigenvalues proved from Lanczos vectors (conditioning.linalg.negative_eigenvalues).

Outside references: LAPACK (numpy eigvalsh) for the true number of negative
eigenvalues; a weighted graph Laplacian is positive semi-definite with the
constant vector in its null space (classical), so no negative eigenvalue may
ever be "proved" for it, however its Rayleigh quotient rounds.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from conditioning.linalg.negative_eigenvalues import proved_negative_count, search_negative_eigenvalues


def _scaled_grid(m: int) -> sp.csr_array:
    """The 5-point Laplacian on an m x m grid with Dirichlet ends, scaled to a unit diagonal
    (positive definite; its smallest eigenvalue is about 2 pi^2 / (4 (m+1)^2))."""
    T = sp.diags_array([-np.ones(m - 1), 2 * np.ones(m), -np.ones(m - 1)], offsets=[-1, 0, 1])
    A = sp.kronsum(T, T, format="csr")
    d = 1 / np.sqrt(A.diagonal())
    return sp.csr_array(A * d[:, None] * d[None, :])


def _coupled(S: sp.csr_array, pairs) -> sp.csr_array:
    """S with symmetric couplings stronger than the coupled rows' diagonals: the diagonal stays
    positive, but each coupling makes an eigenvalue near 1 - c, far below zero."""
    L = sp.lil_array(S)
    for a, b, c in pairs:
        L[a, b] = L[b, a] = c
    return sp.csr_array(L)


def test_psd_laplacian_is_never_proved_negative():
    """Rounding may make the computed Rayleigh quotient of a near-null vector negative; the
    ball bound must then refuse (reference: a graph Laplacian is PSD, classical). The test
    also checks that the computed quotient does come out negative in many trials, so the
    bound is what decides."""
    rng = np.random.default_rng(1)
    negative_quotients = 0
    for _ in range(100):
        n = 300
        i, j = rng.integers(0, n, 3 * n), rng.integers(0, n, 3 * n)
        w = rng.integers(1, 1000, 3 * n).astype(float)
        A = sp.coo_array((w, (i, j)), shape=(n, n)).tocsr()
        A = A + A.T
        A.setdiag(0)
        A.eliminate_zeros()
        L = sp.csr_array(sp.diags_array(np.asarray(A.sum(axis=1)).ravel()) - A)  # integers: exact
        v = np.ones(n) / np.sqrt(n) * (1 + 1e-9 * rng.standard_normal(n))
        negative_quotients += bool(v @ (L @ v) < 0)
        assert proved_negative_count(L, v[:, None]) == 0
    assert negative_quotients >= 10


def test_far_negative_eigenvalues_are_found_and_proved():
    """Three couplings of strength 2-3 put three eigenvalues near -1..-2 while the positive ones
    start near 2e-3: the search proves exactly as many as LAPACK counts (numpy eigvalsh)."""
    S = _coupled(_scaled_grid(40), [(100, 900, 2.0), (200, 1300, 2.5), (300, 1500, 3.0)])
    w = np.linalg.eigvalsh(S.toarray())  # LAPACK syevd
    assert np.count_nonzero(w < 0) == 3 and w[3] > 1e-3
    search = search_negative_eigenvalues(S, rng=0)
    assert search.proved == 3
    assert abs(search.lowest_ritz_value - w[0]) <= 1e-6 * abs(w[0])
    assert "proved 3" in search.how and search.products > 0


def test_one_far_negative_eigenvalue_among_positive_ones():
    S = _coupled(_scaled_grid(40), [(500, 1100, 2.0)])
    w = np.linalg.eigvalsh(S.toarray())  # LAPACK syevd
    assert np.count_nonzero(w < 0) == 1
    assert search_negative_eigenvalues(S, rng=5).proved == 1


def test_positive_definite_gives_no_proof_either_way():
    S = _scaled_grid(40)
    assert np.linalg.eigvalsh(S.toarray())[0] > 0  # LAPACK: positive definite
    search = search_negative_eigenvalues(S, rng=0)
    assert search.proved == 0 and search.lowest_ritz_value > 0
    assert "not a proof" in search.how


def test_count_stops_at_the_first_vector_that_is_not_negative():
    """Only a negative definite leading block counts: a negative Ritz vector then a positive
    one proves one, the positive one first proves none (LAPACK eigenvectors, numpy eigh)."""
    S = _coupled(_scaled_grid(12), [(10, 100, 2.5)])
    w, V = np.linalg.eigh(S.toarray())
    assert w[0] < 0 < w[1]
    assert proved_negative_count(S, V[:, [0, 1]]) == 1
    assert proved_negative_count(S, V[:, [1, 0]]) == 0
    assert proved_negative_count(S, V[:, :0]) == 0


def test_small_matrix_uses_all_eigenvalues():
    S = _coupled(_scaled_grid(5), [(0, 20, 3.0), (4, 24, 3.0)])
    w = np.linalg.eigvalsh(S.toarray())  # LAPACK syevd
    search = search_negative_eigenvalues(S)
    assert search.proved == np.count_nonzero(w < 0) == 2
    assert search.products == 0 and "LAPACK" in search.how
