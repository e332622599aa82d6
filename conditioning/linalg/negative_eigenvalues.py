"""Negative eigenvalues of a sparse symmetric S proved from a few Lanczos vectors.

    S (n x n, symmetric, sparse)  =>  S has at least j negative eigenvalues (proved), j >= 0

Shift-and-invert on a factorization finds the eigenvalues nearest zero; a
negative eigenvalue far below zero lies outside its window and is seen only
through the factor's inertia. When the inertia is not available, the low end
of the spectrum is searched with products alone: Lanczos on S for its
smallest algebraic eigenvalues (ARPACK's implicitly restarted variant [1]_,
a bounded number of products).

Whatever vectors the search returns, the conclusion is rigorous: if
H = V^T S V (k x k) is negative definite, x^T S x < 0 on the k-dimensional
span of V, so S has at least k negative eigenvalues (Courant-Fischer). H is
formed in floating point; with m the longest row of S,

    |fl(V^T fl(S V)) - V^T S V| <= gamma_n |V|^T |fl(S V)| + gamma_m |V|^T |S| |V|

entrywise (Higham [2]_, eq. 3.13 for each dot product, from memory), so the
ball matrix fl(H) +- that bound holds the exact V^T S V, and Gaussian
elimination on -H in ball arithmetic (Arb [3]_, through python-flint) proves
the sign of each leading pivot for every matrix in the ball, the exact one
included. Finding none proves nothing: the search is bounded, and an
eigenvalue just below zero converges slowly.

References
----------
.. [1] R. B. Lehoucq, D. C. Sorensen and C. Yang (1998), *ARPACK Users'
       Guide*, SIAM (scipy.sparse.linalg.eigsh).
.. [2] N. J. Higham (2002), *Accuracy and Stability of Numerical
       Algorithms*, 2nd ed., SIAM, section 3.1.
.. [3] F. Johansson (2017), "Arb: efficient arbitrary-precision
       midpoint-radius interval arithmetic", IEEE Transactions on
       Computers 66(8), pp. 1281-1292.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS

#: Eigenpairs sought at the low end (the proof's count is at most this).
LOW_END_K = 3
#: Lanczos basis size and restarts: at most about LANCZOS_NCV + LANCZOS_RESTARTS
#: * (LANCZOS_NCV - LOW_END_K) products with S (project's choice: a few hundred
#: sparse products, seconds on a 300k-row model; a negative eigenvalue
#: separated from the rest converges in a few dozen).
LANCZOS_NCV = 30
LANCZOS_RESTARTS = 8
#: Below this order S is searched by the dense eigensolver (LAPACK), exactly.
DENSE_BELOW = 60


@dataclass(frozen=True)
class LowEndSearch:
    """Outcome of :func:`search_negative_eigenvalues`."""

    proved: int
    """Negative eigenvalues of S proved to exist (a lower bound on their
    number; 0 when none was found, which proves nothing)."""
    lowest_ritz_value: float
    """The smallest Ritz value the search reached (dimensionless, S's units):
    an approximation from above of lambda_min(S); nan when the search
    returned no vector."""
    products: int
    """Products with S the search used."""
    how: str
    """What was searched and what it showed, in words."""


def search_negative_eigenvalues(S: sp.sparray, *, rng=0) -> LowEndSearch:
    """Search the low end of S's spectrum and prove the negative eigenvalues found.

    Parameters
    ----------
    S : (n, n) sparse, symmetric, float64
        Typically the diagonally scaled stiffness D^-1/2 K D^-1/2, whose
        negative eigenvalues are K's in number (Sylvester's law of inertia).
    rng : int or numpy.random.Generator
        Draws the Lanczos start vector.

    Returns
    -------
    LowEndSearch
        ``proved`` negative eigenvalues, each one certain; the search itself
        is not exhaustive.
    """
    S = sp.csr_array(S, dtype=np.float64)
    n = S.shape[0]
    if S.shape != (n, n) or n == 0:
        raise ValueError(f"S must be square and nonempty, got shape {S.shape}")
    rng = np.random.default_rng(rng)
    if n < DENSE_BELOW:
        w, V = np.linalg.eigh(S.toarray())
        products, how = 0, "all eigenvalues of S (LAPACK)"
    else:
        w, V, products = _lanczos_smallest(S, rng)
        how = f"a Lanczos search of the low end of S ({products} products)"
    negative = w < 0
    order = np.argsort(w[negative])
    proved = proved_negative_count(S, V[:, negative][:, order]) if np.any(negative) else 0
    lowest = float(np.min(w)) if w.size else float("nan")
    if proved:
        how += f" proved {proved} (Rayleigh-Ritz in ball arithmetic; lowest Ritz value {lowest:.3g})"
    elif w.size:
        how += f" found none below zero (lowest Ritz value {lowest:.3g}; not a proof that there is none)"
    else:
        how += " converged on no eigenvalue (not a proof that there is no negative one)"
    return LowEndSearch(proved, lowest, products, how)


def _lanczos_smallest(S: sp.csr_array, rng: np.random.Generator):
    """(Ritz values, Ritz vectors, products) at the low end of S, within the product budget."""
    n = S.shape[0]
    count = [0]

    def product(x):
        count[0] += 1
        return S @ x

    op = spla.LinearOperator((n, n), matvec=product, dtype=np.float64)
    ncv = min(LANCZOS_NCV, n - 1)
    k = min(LOW_END_K, ncv - 1)
    try:
        w, V = spla.eigsh(op, k=k, which="SA", ncv=ncv, maxiter=LANCZOS_RESTARTS, tol=1e-6,
                          v0=rng.standard_normal(n))
    except spla.ArpackNoConvergence as exc:  # keep the pairs that converged
        w, V = exc.eigenvalues, exc.eigenvectors
    except spla.ArpackError:  # ARPACK gave up otherwise: nothing found, nothing claimed
        w, V = np.zeros(0), np.zeros((n, 0))
    return np.asarray(w, dtype=np.float64), np.asarray(V, dtype=np.float64).reshape(n, -1), count[0]


def proved_negative_count(S: sp.sparray, V: NDArray[np.float64]) -> int:
    """Largest j such that V[:, :j]^T S V[:, :j] is proved negative definite (so S has >= j negative eigenvalues).

    Parameters
    ----------
    S : (n, n) sparse, symmetric, float64
    V : (n, k) float64
        Any vectors (normally Ritz vectors, most negative first); they need not
        be orthonormal: a negative definite H forces them to be independent.

    Returns
    -------
    int
        0 <= j <= k; every leading pivot of -H up to j is positive for every
        matrix within the rounding bound of the computed H.
    """
    import flint  # run-time dependency; imported here, as only this proof needs it

    S = sp.csr_array(S, dtype=np.float64)
    V = np.asarray(V, dtype=np.float64)
    n, k = V.shape
    if k == 0:
        return 0
    u = EPS / 2
    m = int(np.max(np.diff(S.indptr), initial=0))
    gamma_n, gamma_m = n * u / (1 - n * u), m * u / (1 - m * u)
    W = S @ V
    H = V.T @ W
    Va = np.abs(V)
    radius = gamma_n * (Va.T @ np.abs(W)) + gamma_m * (Va.T @ (abs(S) @ Va))
    # Sums of nonnegative terms with at most n + m terms each: enlarged for their own rounding.
    radius *= 1 + 4 * (n + m + 4) * u
    A = [[-flint.arb(float(H[i, j]), float(radius[i, j])) for j in range(k)] for i in range(k)]
    for j in range(k):  # elimination without pivoting: pivot j > 0 <=> leading (j+1) block positive definite
        if not A[j][j] > 0:
            return j
        for i in range(j + 1, k):
            factor = A[i][j] / A[j][j]
            for c in range(j + 1, k):
                A[i][c] -= factor * A[j][c]
    return k


__all__ = ["LowEndSearch", "proved_negative_count", "search_negative_eigenvalues"]
