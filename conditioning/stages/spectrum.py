"""Extreme eigenvalues of the scaled stiffness and the near-singular split.

Works on S = D^-1/2 K D^-1/2 restricted to the rows that have stiffness,
using the shared factorization for shift-and-invert Lanczos (ARPACK through
scipy.sparse.linalg.eigsh). The shift is the factorization's: zero for a
nonsingular S, a small negative number otherwise (never exactly zero on a
singular matrix).

The split between near-singular modes and the rest is a spectral gap, and the
count below it is cross-checked by Sylvester's law of inertia: the number of
negative pivots of S - c*I equals the number of eigenvalues below c.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.linalg as la
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.engine.scipy_engine import EPS, SharedFactorization, factorize, scaled_matrix

logger = logging.getLogger(__name__)

#: Eigenvalues of S at most this fraction of lambda_max(S) are candidates for
#: near-singular modes: such a mode alone costs at least 8 of the ~16 digits.
MODE_THRESHOLD = 1e-8
#: A split needs at least this ratio between the last mode and the next eigenvalue.
MIN_GAP = 1e3
#: Below this many active rows the spectrum of S (and, in the condition stage,
#: that of K) is computed densely (LAPACK syevd): every eigenvalue, with no
#: Lanczos convergence to doubt, for 11.5 MB of dense matrix at 1200 rows (the
#: project's choice).
DENSE_LIMIT = 1200

GAP_RULE = (
    "near-singular = eigenvalues of S up to the largest ratio gap (>= 1e3) among "
    "eigenvalues <= 1e-8 lambda_max(S), with eigenvalues below n*eps*lambda_max(S) "
    "treated as zero; without such a gap, only eigenvalues <= n eps lambda_max(S) (the usual numerical-rank "
    "tolerance)"
)


@dataclass(frozen=True)
class ScaledSpectrum:
    """Smallest eigenpairs of S on the active rows.

    Attributes
    ----------
    values : (k,) float64, ascending
    vectors : (n_active, k) float64, orthonormal columns
    lambda_max : float
        Largest eigenvalue of S.
    count : int
        Number of near-singular eigenvalues (below the split), from the start of
        ``values`` and not counting true negative eigenvalues.
    first : int
        Index in ``values`` of the first near-singular eigenvalue (after the
        true negative ones).
    gap : float or None
    zero_level : float
        n*eps*lambda_max(S): eigenvalues below it in magnitude are zero at
        working precision.
    split_point : float or None
        c, the geometric mean of the eigenvalues on either side of the gap.
    inertia_count : int or None
        Eigenvalues of S below c counted from the pivots of S - c*I.
    inertia_expected : int or None
        The same count from the computed eigenvalues and the main
        factorization's inertia.
    negative : int
        Eigenvalues of S (hence of K, by Sylvester) below -zero_level.
    method : str
    """

    values: NDArray[np.float64]
    vectors: NDArray[np.float64]
    lambda_max: float
    count: int
    first: int
    gap: Optional[float]
    zero_level: float
    split_point: Optional[float]
    inertia_count: Optional[int]
    inertia_expected: Optional[int]
    negative: int
    method: str


def largest_eigenvalue(A, rtol: float = 1e-3, max_steps: int = 600, v0: Optional[NDArray] = None) -> float:
    """lambda_max of a symmetric matrix by plain Lanczos, to relative accuracy ``rtol``.

    Returns the largest Ritz value theta of the Lanczos tridiagonal T_m, which
    approaches lambda_max from below, once its residual bound
    |beta_m y_m| (y the eigenvector of T_m, y_m its last entry) is at most
    rtol*theta: an eigenvalue of A then lies within rtol*theta of theta [1]_.
    No reorthogonalization: loss of orthogonality only duplicates converged
    Ritz values, it does not move the extreme one [2]_. Costs m matrix-vector
    products and O(m) vectors of memory, against ARPACK's restarts.

    References
    ----------
    .. [1] B. N. Parlett (1998), *The Symmetric Eigenvalue Problem*, SIAM,
           section 13.2 (from memory).
    .. [2] C. C. Paige (1976), "Error analysis of the Lanczos algorithm for
           tridiagonalizing a symmetric matrix", J. Inst. Maths Applics 18,
           pp. 341-349 (from memory).
    """
    n = A.shape[0]
    if n <= 50 and sp.issparse(A):
        return float(np.linalg.eigvalsh(A.toarray())[-1])
    q = np.random.default_rng(2024).standard_normal(n) if v0 is None else np.array(v0, dtype=np.float64)
    q /= np.linalg.norm(q)
    q_prev = np.zeros(n)
    alphas: list[float] = []
    betas: list[float] = []
    beta = 0.0
    theta = -np.inf
    for m in range(1, max_steps + 1):
        w = A @ q - beta * q_prev
        alpha = float(q @ w)
        w -= alpha * q
        beta = float(np.linalg.norm(w))
        alphas.append(alpha)
        if m % 10 == 0 or beta == 0.0 or m == max_steps:
            vals, vecs = la.eigh_tridiagonal(np.array(alphas), np.array(betas))
            theta = float(vals[-1])
            if beta * abs(vecs[-1, -1]) <= rtol * abs(theta) or beta == 0.0:
                return theta
        betas.append(beta)
        q_prev, q = q, w / beta
    logger.warning("Lanczos for lambda_max stopped after %d steps above tolerance %.0e", max_steps, rtol)
    return theta


def _smallest_sparse(Sa, fac: SharedFactorization, k: int) -> tuple[NDArray, NDArray]:
    na = Sa.shape[0]
    op = spla.LinearOperator((na, na), matvec=fac.solve_active, dtype=np.float64)
    v0 = np.random.default_rng(12345).standard_normal(na)  # fixed: results repeat
    vals, vecs = spla.eigsh(Sa, k=k, sigma=fac.shift, which="LM", OPinv=op, tol=1e-10, v0=v0)
    order = np.argsort(vals)
    return vals[order], vecs[:, order]


def split_near_singular(values: NDArray, lam_max: float, n: int) -> tuple[int, int, Optional[float]]:
    """Apply :data:`GAP_RULE` to ascending eigenvalues of S.

    Returns
    -------
    (first, count, gap)
        ``values[first:first + count]`` are the near-singular eigenvalues
        (``first`` = number of eigenvalues below -n*eps*lambda_max, true
        negatives); ``gap`` is the ratio across the split, None without modes.
    """
    zero = n * EPS * lam_max
    first = int(np.count_nonzero(values < -zero))
    a = np.maximum(values[first:], zero)
    cand = np.flatnonzero(a <= MODE_THRESHOLD * lam_max)
    if cand.size == 0:
        return first, 0, None
    ratios = np.array([a[i + 1] / a[i] if i + 1 < a.size else np.inf for i in cand])
    best = int(np.argmax(ratios))
    if ratios[best] >= MIN_GAP:
        m = int(cand[best]) + 1
    else:  # a graded spectrum without a gap: only numerical zeros are modes
        # (numpy.linalg.matrix_rank's default tolerance, n*eps*largest)
        m = int(np.count_nonzero(a <= zero))
        if m == 0:
            return first, 0, None
    gap = float(a[m] / a[m - 1]) if m < a.size else None
    return first, m, gap


def count_below(K: sp.csr_array, fac: SharedFactorization, c: float) -> Optional[int]:
    """Eigenvalues of S (active rows) below c, from the pivots' signs of S - c*I.

    Sylvester's law of inertia: S - c*I = L D L^T has as many negative pivots
    as S has eigenvalues below c. Costs one more factorization; None when
    SuperLU had to pivot off the diagonal (the count would not be an inertia)
    or S - c*I was exactly singular.
    """
    idx = np.flatnonzero(fac.active)
    Sa = sp.csr_array(scaled_matrix(K, fac.scale)[idx][:, idx])
    ordering = fac.info.ordering if fac.info.ordering in ("MMD_AT_PLUS_A", "COLAMD", "NATURAL") else "auto"
    try:
        check = factorize(Sa, shift=c, ordering=ordering)
    except RuntimeError as exc:  # c hit an eigenvalue exactly
        logger.warning("inertia check failed: %s", exc)
        return None
    return check.info.negative_pivots if check.info.symmetric_pivoting else None


def scaled_spectrum(K: sp.csr_array, fac: SharedFactorization, *, k: Optional[int] = None,
                    check_inertia: bool = True) -> ScaledSpectrum:
    """Smallest eigenpairs of S (active rows), the near-singular split and its inertia check.

    Parameters
    ----------
    K : (n, n) sparse, symmetric
    fac : SharedFactorization
        The shared factorization of S - sigma*I on ``fac.active``.
    k : int, optional
        Number of smallest eigenpairs to start with (default 4: a healthy
        model needs no more, and each pair costs solves); doubled
        while all computed ones are below the mode threshold.
    check_inertia : bool
        Count the eigenvalues below the split point from the inertia of
        S - c*I now (one more factorization, while ``fac`` is alive). The
        pipeline defers it with :func:`count_below` until the shared factor
        has been released.

    Returns
    -------
    ScaledSpectrum
    """
    idx = np.flatnonzero(fac.active)
    na = idx.size
    Sa = sp.csr_array(scaled_matrix(K, fac.scale)[idx][:, idx])
    if na <= DENSE_LIMIT:
        w, V = np.linalg.eigh(Sa.toarray())
        lam_max = float(w[-1])
        method = "dense symmetric eigensolver (LAPACK syevd), all eigenvalues"
        kk = min(na, max(k or 12, 12))
        values, vectors = w, V
        first, count, gap = split_near_singular(values, lam_max, na)
        values, vectors = w[: max(kk, first + count + 1)], V[:, : max(kk, first + count + 1)]
    else:
        lam_max = largest_eigenvalue(Sa)
        kk = min(na - 2, k or 4)
        while True:
            values, vectors = _smallest_sparse(Sa, fac, kk)
            first, count, gap = split_near_singular(values, lam_max, na)
            if first + count < values.size or kk >= min(na - 2, 512):
                break
            kk = min(na - 2, 2 * kk)
        method = (f"shift-and-invert Lanczos (ARPACK eigsh, shift {fac.shift:.3g}) for the "
                  f"{values.size} smallest, Lanczos for lambda_max")
    zero = na * EPS * lam_max
    split_point = expected = None
    if count > 0 and first + count < values.size:
        lo = max(values[first + count - 1], zero)
        hi = values[first + count]
        split_point = float(np.sqrt(lo * hi))
        expected = int(fac.info.negative_pivots + np.count_nonzero((values >= fac.shift) & (values < split_point)))
    inertia_count = count_below(K, fac, split_point) if (check_inertia and split_point is not None) else None
    negative = first if na <= DENSE_LIMIT else int(fac.info.negative_pivots)
    return ScaledSpectrum(values, vectors, lam_max, count, first, gap, zero, split_point,
                          inertia_count, expected, negative, method)
