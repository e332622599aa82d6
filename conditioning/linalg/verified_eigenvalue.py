"""A verified lower bound on the smallest eigenvalue of a sparse symmetric K.

    K (symmetric, sparse), an estimate of lambda_min  =>  lambda_min(S) >= lambda_lo (proved)

with S = E K E the scaling of K to a diagonal in (1/4, 1] by powers of two E
(exact in floating point, so S is the exported K's own scaled matrix, with no
rounding in between).

Method (Rump [1]_, in the sparse form for an LU without pivoting): factor
S - cI, with c below the smallest eigenvalue, by SuperLU without row
pivoting (symmetric mode, diagonal pivot threshold 0), giving the computed
unit lower triangular L, upper triangular U and pivots D = diag(U). The
symmetric matrix B = L D L^T is congruent to D, so when every pivot is
positive B is positive definite (Sylvester's law of inertia) and

    lambda_min(S) >= c - ||B - (S - cI)||_2 .

The difference is bounded without forming B:

    B - (S - cI) = L (D L^T - U) + (L U - (S - cI)),
    |L U - (S - cI)| <= gamma_k |L| |U|                      (Higham [2]_, Thm 9.3),

with gamma_k = k u / (1 - k u), u = 2^-53 and k the most terms any entry of
L or U sums (the longest row of L, plus one for the division by the pivot):
the LU error analysis holds for any order of summation, so for SuperLU's
supernodal, blocked and fused-multiply-add evaluation too. As B - (S - cI)
is symmetric, its 2-norm is at most its largest absolute row sum, and so at
most the largest row sum of the entrywise bound

    G = |L| |D L^T - U|  +  gamma_k |L| |U|  (+ the rounding of S's diagonal minus c),

which two sparse products with a vector give (the row sums of nonnegative
terms are rounded upward by a factor 1 + 2(m + 4) u, m their most terms).
The bound depends on the factor's row lengths, not on n.

References
----------
.. [1] S. M. Rump (2006), "Verification of positive definiteness", BIT
       Numerical Mathematics 46, pp. 433-452 (from memory; the constants here
       are re-derived for the algorithm actually run).
.. [2] N. J. Higham (2002), *Accuracy and Stability of Numerical Algorithms*,
       2nd ed., SIAM, Theorem 9.3 (LU without pivoting: |A - L U| <= gamma_n
       |L| |U|, with n the number of terms; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.linalg.doubledouble import U as UNIT_ROUNDOFF

#: The shift is this fraction of the estimated smallest eigenvalue of the
#: unscaled-by-powers-of-two S (the power-of-two scaling can lower it by up
#: to a factor 4): far enough below lambda_min that the shifted factor has
#: positive pivots, close enough that the bound stays sharp (project's choice).
SHIFT_FRACTION = 0.5
#: Further tries, each with the shift divided by SHIFT_RETRY, when a pivot of
#: the shifted factor is not positive (the estimate was too high).
SHIFT_RETRIES = 2
SHIFT_RETRY = 100.0


@dataclass(frozen=True)
class VerifiedEigenvalueBound:
    """Outcome of :func:`verified_smallest_eigenvalue`."""

    verified: bool
    """True when ``lower`` is proved: lambda_min(S) >= lower > 0, so K is
    positive definite (for a K not exactly symmetric: its symmetric part is,
    and the smallest singular value of S is at least ``lower``)."""
    lower: Optional[float]
    """The proved lower bound on lambda_min(S) (dimensionless; S has a
    diagonal in (1/4, 1]); None when not verified."""
    shift: Optional[float]
    """The shift c of the last factorization tried."""
    rounding_bound: Optional[float]
    """Proved upper bound on ||L D L^T - (S - cI)||_2 for that factorization;
    None when it did not run to completion."""
    scale: NDArray[np.float64]
    """The powers of two E_ii with S = E K E, one per row of K (1/length
    units of K's rows); a row without diagonal has 0."""
    reason: str
    """What was proved, or why nothing was: not positive definite at the
    shift, a rounding bound larger than the shift (the conditioning is beyond
    what this bound proves), row pivoting, or K not symmetric."""


def power_of_two_scaling(K: sp.csr_array) -> NDArray[np.float64]:
    """E_ii = 2^-ceil(log2(K_ii)/2), so that E_ii^2 K_ii lies in (1/4, 1]; 0 for K_ii <= 0.

    Multiplying by a power of two is exact in binary floating point (barring
    underflow and overflow), so E K E has no rounding error.
    """
    d = np.asarray(K.diagonal(), dtype=np.float64)
    e = np.zeros_like(d)
    pos = d > 0
    _, expo = np.frexp(d[pos])           # d = m 2^expo, m in [1/2, 1)
    e[pos] = np.ldexp(1.0, -((expo + 1) // 2))
    return e


def verified_smallest_eigenvalue(
    K: sp.csr_array,
    estimate: float,
    *,
    perm: Optional[NDArray[np.intp]] = None,
) -> VerifiedEigenvalueBound:
    """Prove lambda_min(E K E) >= lower > 0 from one shifted LU without pivoting.

    Parameters
    ----------
    K : (n, n) sparse, symmetric, float64
        The stiffness matrix as exported (every row with a positive diagonal).
    estimate : float
        An estimate of the smallest eigenvalue of D^-1/2 K D^-1/2, D = diag K
        (the spectrum stage's); the first shift is SHIFT_FRACTION of it.
    perm : (n,) int array, optional
        Fill-reducing ordering to reuse (applied symmetrically); SuperLU's
        MMD on A^T + A otherwise.

    Returns
    -------
    VerifiedEigenvalueBound
        ``verified`` False with the reason when nothing could be proved; never
        a bound that the rounding analysis does not cover.
    """
    K = sp.csr_array(K, dtype=np.float64)
    n = K.shape[0]
    e = power_of_two_scaling(K)
    if K.shape[0] != K.shape[1] or n == 0:
        raise ValueError(f"K must be square and nonempty, got shape {K.shape}")
    if np.any(e == 0):
        return VerifiedEigenvalueBound(False, None, None, None, e,
                                       "a diagonal entry is not positive: K is not positive definite")
    # A K that is not exactly symmetric (an export's round-off) is bounded
    # through its symmetric part H: x'Kx = x'Hx, so sigma_min(E K E) >=
    # lambda_min(E H E), which is what the error bound needs. H = (K + K^T)/2
    # is rounded once per entry: at most u |H| entrywise, whose largest row sum
    # is taken off the bound.
    symmetric_error = 0.0
    if (abs(K - K.T)).max() != 0:
        K = sp.csr_array((K + K.T) * 0.5)
        S_abs_rows = (abs(K) @ e) * e
        symmetric_error = UNIT_ROUNDOFF * float(np.max(S_abs_rows)) * (1 + 4 * UNIT_ROUNDOFF)
    if not (math.isfinite(estimate) and estimate > 0):
        return VerifiedEigenvalueBound(False, None, None, None, e,
                                       "no positive estimate of the smallest eigenvalue")
    S = sp.csr_array(K.multiply(e[:, None]).multiply(e[None, :]))   # exact: powers of two
    if perm is not None:
        S = sp.csr_array(S[perm][:, perm])
    spec = "NATURAL" if perm is not None else "MMD_AT_PLUS_A"
    c = SHIFT_FRACTION * estimate / 4.0
    reason = ""
    for _ in range(SHIFT_RETRIES + 1):
        outcome = _bound_at_shift(S, c, spec)
        if outcome is None:
            reason = f"a pivot of S - cI was not positive at c = {c:.2e}: lambda_min(S) may be below it"
            c /= SHIFT_RETRY
            continue
        g, how = outcome
        if g is None:
            return VerifiedEigenvalueBound(False, None, c, None, e, how)
        g += symmetric_error
        lower = (c - g) * (1.0 - 2 * UNIT_ROUNDOFF)
        if lower > 0:
            return VerifiedEigenvalueBound(True, lower, c, g, e,
                                           f"proved: lambda_min(S) >= {lower:.3e} (shift {c:.3e}, "
                                           f"rounding bound {g:.2e}; {how})")
        return VerifiedEigenvalueBound(False, None, c, g, e,
                                       f"the rounding bound {g:.2e} exceeds the shift {c:.2e}: the "
                                       "conditioning is beyond what this bound proves")
    return VerifiedEigenvalueBound(False, None, c * SHIFT_RETRY, None, e,
                                   reason + "; K may not be positive definite")


def _bound_at_shift(S: sp.csr_array, c: float, permc_spec: str):
    """(bound on ||L D L^T - (S - cI)||_2, how) or None when a pivot is not positive.

    Returns (None, reason) when the factorization cannot be analysed (row pivoting).
    """
    n = S.shape[0]
    A = sp.csc_array(S - c * sp.eye_array(n, format="csr"))
    try:
        lu = spla.splu(A, permc_spec=permc_spec, diag_pivot_thresh=0.0,
                       options=dict(SymmetricMode=True, Equil=False))
    except RuntimeError:                      # an exactly zero pivot
        return None
    # The ordering (and SuperLU's postorder of the elimination tree) is a
    # symmetric permutation P: P A P^T = L U has A's eigenvalues. Row
    # pivoting (perm_r != perm_c) would not.
    if not np.array_equal(lu.perm_r, lu.perm_c):
        return None, "SuperLU pivoted rows: no symmetric LU without pivoting to analyse"
    # Copies of the factors, then SuperLU's own storage is freed: at most the
    # two copies and one array of D L^T - U's values live at once.
    L = lu.L                                   # csc, unit diagonal
    U = sp.csr_array(lu.U)
    del lu
    d = U.diagonal()
    if not np.all(d > 0):
        return None
    u = UNIT_ROUNDOFF
    Lt = sp.csr_array(L.T)                     # csr view of L^T (shares L's arrays)
    Lt.sort_indices()
    U.sort_indices()
    row_len_L = np.diff(L.indptr)              # L's column counts = L^T's row counts
    k = int(np.bincount(L.indices, minlength=n).max()) + 1   # longest row of L, plus the division
    gamma_k = k * u / (1.0 - k * u)
    ones = np.ones(n)
    # D L^T row by row (entry-wise products, one rounding each), then F = D L^T - U:
    # on the same pattern a plain difference of the value arrays.
    dlt = Lt.data * np.repeat(d, np.diff(Lt.indptr))
    if np.array_equal(Lt.indptr, U.indptr) and np.array_equal(Lt.indices, U.indices):
        dlt -= U.data
        absF = sp.csr_array((np.abs(dlt), Lt.indices, Lt.indptr), shape=(n, n)) @ ones
        m = int(np.diff(Lt.indptr).max(initial=0))
    else:
        F = sp.csr_array((dlt, Lt.indices, Lt.indptr), shape=(n, n)) - U
        absF = abs(F) @ ones
        m = int(np.diff(F.indptr).max(initial=0))
        del F
    del dlt
    absU = abs(U) @ ones
    # |exact D L^T - U| <= |fl(F)| (1 + 2u) + 2u |D L^T|: the product and the
    # difference are rounded once each; |D L^T| 1 = |d| (|L^T| 1).
    np.abs(L.data, out=L.data)                 # |L|, in place (L is our copy)
    h1 = absF * (1 + 2 * u) + 2 * u * np.abs(d) * (L.T @ ones)
    g = L @ h1 + gamma_k * (L @ absU)
    m = max(m, k, int(row_len_L.max()), int(np.diff(U.indptr).max())) + 4
    # The diagonal of S - cI was rounded once: |error| <= u |S_ii - c| (A and
    # the factors are in different row orders, so the two maxima are added).
    bound = (float(np.max(g)) + u * float(np.max(np.abs(A.diagonal())))) * (1.0 + 4 * m * u)
    return bound, f"SuperLU without pivoting, {k - 1} entries in the longest row of L"



def certified_errors(
    K: sp.csr_array,
    scale: NDArray[np.float64],
    lower: float,
    f: NDArray[np.float64],
    x_hi: NDArray[np.float64],
    x_lo: NDArray[np.float64],
    r_hi: NDArray[np.float64],
    r_lo: NDArray[np.float64],
) -> NDArray[np.float64]:
    """Proved bounds on |x_r - x_exact|_i for a double-double solution x_r = x_hi + x_lo.

    With S = E K E (E = diag(scale), powers of two) and lambda_min(S) >= lower,
    x_r - x = -K^-1 r, r = f - K x_r, gives ||E^-1 (x_r - x)||_2 <= ||E r||_2 / lower,
    hence |x_r - x|_i <= E_ii ||E r||_2 / lower. The residual (r_hi, r_lo) from
    :func:`conditioning.linalg.doubledouble.dd_residual` is enlarged by twice
    its documented first-order error, u^2 |r| + (2 n_i + 16) u^2 T_i with
    T_i = |f_i| + (|K| |x_r|)_i.

    Returns
    -------
    (n,) float64
        Upper bounds, in the units of x.
    """
    u = UNIT_ROUNDOFF
    K_abs = abs(sp.csr_array(K))
    counts = np.diff(sp.csr_array(K).indptr)
    T = (np.abs(f) + K_abs @ (np.abs(x_hi) + np.abs(x_lo))) * (1 + 2 * (counts.max(initial=0) + 4) * u)
    r_abs = np.abs(r_hi) + np.abs(r_lo)
    r_up = r_abs * (1 + 4 * u) + 2 * (u * u * r_abs + (2 * counts + 16) * u * u * T)
    n = r_up.size
    norm = math.sqrt(float(np.sum((scale * r_up) ** 2))) * (1 + (n + 4) * u)
    beta = norm / lower * (1 + 4 * u)
    return scale * beta * (1 + 2 * u)
