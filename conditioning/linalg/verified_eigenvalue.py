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

with gamma_k = k u / (1 - k u), u = 2^-53 and k the longest column of U,
diagonal included: an entry in column j of L U sums at most that many nonzero
products, the division by the pivot counted in (the terms with an exactly zero
factor add nothing and round nothing). The LU error analysis holds for any
order of summation, so for SuperLU's supernodal, blocked and fused-multiply-add
evaluation too. As B - (S - cI) is symmetric, its 2-norm is at most its
largest absolute row sum, and so at most the largest row sum of the entrywise
bound

    G = |L| |D L^T - U|  +  gamma_k |L| |U|  (+ the rounding of S's diagonal minus c),

which one sparse product with a vector gives once the row sums of
|D L^T - U| and |U| are known. D L^T - U pairs row j of L with column j of U,
so L is transposed once (its rows become the columns of L^T) and the
difference is formed one block of columns at a time, beside U's own columns:
no copy of U and no full copy of the difference. Every sum of nonnegative
terms has at most n terms, so the computed G is enlarged by 1 + 4(n + 4) u
(about 1 + 4e-10 at a million rows); gamma_k, the term that matters, depends
on the factor's column lengths, not on n.

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
    shift: Optional[float] = None,
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
    shift : float, optional
        The one shift c to try (E K E's scale), e.g. just below a Rayleigh
        quotient of E K E; by default SHIFT_FRACTION * estimate / 4 and
        SHIFT_RETRIES lower ones.

    Returns
    -------
    VerifiedEigenvalueBound
        ``verified`` False with the reason when nothing could be proved; never
        a bound that the rounding analysis does not cover.
    """
    K = sp.csr_array(K, dtype=np.float64)
    n = K.shape[0]
    if K.shape[0] != K.shape[1] or n == 0:
        raise ValueError(f"K must be square and nonempty, got shape {K.shape}")
    if not K.has_canonical_format:        # repeated entries summed, rows sorted (a copy)
        K = K.copy()
        K.sum_duplicates()
    e = power_of_two_scaling(K)
    if np.any(e == 0):
        return VerifiedEigenvalueBound(False, None, None, None, e,
                                       "a diagonal entry is not positive: K is not positive definite")
    # A K that is not exactly symmetric (an export's round-off) is bounded
    # through its symmetric part H: x'Kx = x'Hx, so sigma_min(E K E) >=
    # lambda_min(E H E), which is what the error bound needs. H = (K + K^T)/2
    # is rounded once per entry: at most u |H| entrywise, whose largest row sum
    # is taken off the bound.
    symmetric_error = 0.0
    H = _symmetric_part(K)
    if H is not None:
        K = H
        S_abs_rows = (abs(K) @ e) * e
        symmetric_error = UNIT_ROUNDOFF * float(np.max(S_abs_rows)) * (1 + 4 * UNIT_ROUNDOFF)
    del H
    if not (math.isfinite(estimate) and estimate > 0):
        return VerifiedEigenvalueBound(False, None, None, None, e,
                                       "no positive estimate of the smallest eigenvalue")
    # S = E K E entry by entry: exact, as E holds powers of two.
    rows = np.repeat(np.arange(n), np.diff(K.indptr))
    S = sp.csr_array((K.data * e[rows] * e[K.indices], K.indices, K.indptr), shape=(n, n))
    del rows
    if perm is not None:
        S = sp.csr_array(S[perm][:, perm])
        S.sum_duplicates()                # sorts the rows the column selection left unsorted
    spec = "NATURAL" if perm is not None else "MMD_AT_PLUS_A"
    c = SHIFT_FRACTION * estimate / 4.0 if shift is None else float(shift)
    reason = ""
    for _ in range(SHIFT_RETRIES + 1 if shift is None else 1):
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
    return VerifiedEigenvalueBound(False, None, c * SHIFT_RETRY if shift is None else c, None, e,
                                   reason + "; K may not be positive definite")


def _symmetric_part(K: sp.csr_array) -> Optional[sp.csr_array]:
    """None when K equals K^T entry by entry, else H = fl(K + K^T) / 2 (K canonical CSR).

    K's arrays are compared with its transpose's. Same pattern: the values
    decide, and H is formed on that pattern. Different patterns without a
    stored zero in K: K is not symmetric (a stored nonzero has no stored
    mirror). Otherwise H is formed and compared with K: H is symmetric, so H
    equal to K entry by entry means K is symmetric.
    """
    Kt = K.T.tocsr()                      # rows sorted, as K's
    if np.array_equal(K.indptr, Kt.indptr) and np.array_equal(K.indices, Kt.indices):
        if np.array_equal(K.data, Kt.data):
            return None
        H = sp.csr_array(((K.data + Kt.data) * 0.5, K.indices.copy(), K.indptr.copy()), shape=K.shape)
        return H                          # rounded once per entry; * 0.5 is exact
    H = sp.csr_array(K + Kt)              # canonical; rounded once per entry
    H.data *= 0.5                         # exact
    if np.all(K.data != 0):
        return H
    same = bool(np.max(np.abs((H - K).data), initial=0.0) == 0)
    return None if same else H


#: Entries of U per column block when D L^T - U is formed (memory: a few
#: arrays of this length at once; project's choice).
BLOCK_ENTRIES = 2_000_000


def _bound_at_shift(S: sp.csr_array, c: float, permc_spec: str):
    """(bound on ||L D L^T - (S - cI)||_2, how) or None when a pivot is not positive.

    S must be exactly symmetric and in canonical form (rows sorted, no repeated
    entry), with every diagonal entry stored. Returns (None, reason) when the
    factorization cannot be analysed (row pivoting).
    """
    A, a_diag = _shifted(S, c)
    lu = _factor_without_pivoting(A, permc_spec)
    del A
    if lu is None:                            # an exactly zero pivot
        return None
    # The ordering (and SuperLU's postorder of the elimination tree) is a
    # symmetric permutation P: P A P^T = L U has A's eigenvalues. Row
    # pivoting (perm_r != perm_c) would not.
    if not np.array_equal(lu.perm_r, lu.perm_c):
        return None, "SuperLU pivoted rows: no symmetric LU without pivoting to analyse"
    # scipy copies both factors out of SuperLU at once; SuperLU's own storage
    # is freed with the object.
    L, U = lu.L, lu.U                          # csc; L with its unit diagonal
    del lu
    d = U.diagonal()
    if not np.all(d > 0):
        return None
    k = int(np.diff(U.indptr).max())
    return _rounding_bound(L, U, d, a_diag), f"SuperLU without pivoting, {k} entries in the longest column of U"


def _shifted(S: sp.csr_array, c: float):
    """(S - cI as CSC, max |S_ii - c|) for an exactly symmetric canonical S storing its diagonal.

    S is symmetric, so its CSR arrays are its CSC arrays; only the diagonal
    changes, rounded once per entry (fl(S_ii - c)).
    """
    n = S.shape[0]
    rows = np.repeat(np.arange(n), np.diff(S.indptr))
    diagonal = np.flatnonzero(S.indices == rows)
    del rows
    if diagonal.size != n:
        raise ValueError("S must store every diagonal entry exactly once")
    data = S.data.copy()
    data[diagonal] -= c
    A = sp.csc_array((data, S.indices.copy(), S.indptr.copy()), shape=(n, n))
    return A, float(np.max(np.abs(data[diagonal])))


def _factor_without_pivoting(A: sp.csc_array, permc_spec: str):
    """SuperLU's LU of A in symmetric mode, no row pivoting; None on an exactly zero pivot."""
    try:
        return spla.splu(A, permc_spec=permc_spec, diag_pivot_thresh=0.0,
                         options=dict(SymmetricMode=True, Equil=False))
    except RuntimeError:
        return None


def _rounding_bound(L: sp.csc_array, U: sp.csc_array, d: NDArray[np.float64], a_diag: float) -> float:
    """Proved upper bound on ||L D L^T - (S - cI)||_2 for SuperLU's factors of A = fl(S - cI).

    L (unit lower) and U (upper, pivots d = diag U > 0) in CSC form, as scipy
    copies them out; consumed (their values are overwritten). ``a_diag`` is
    max |A_ii|: the diagonal of A was rounded once, |error| <= u |A_ii| (A and
    the factors are in different row orders, so the two maxima are added).
    """
    n = L.shape[0]
    u = UNIT_ROUNDOFF
    k = int(np.diff(U.indptr).max())           # longest column of U, diagonal included
    g = _rounding_row_sums(L, U, d, k)
    # Every sum of nonnegative terms has at most n terms, every other rounding
    # is one of a handful per term: enlarged by 1 + 4(n + 4) u.
    return (g + u * a_diag) * (1.0 + 4 * (n + 4) * u)


def _rounding_row_sums(L: sp.csc_array, U: sp.csc_array, d: NDArray[np.float64], k: int) -> float:
    """The largest row sum of |L| |D L^T - U| + gamma_k |L| |U| (as computed; dimensionless).

    L (unit lower) and U (upper, pivots d > 0) are SuperLU's computed factors
    in CSC form, consumed: their values are overwritten by their absolute
    values. Every rounding below is upward-accounted by the caller's factor
    1 + 4(n + 4) u except those of D L^T - U, bounded here:
    fl(fl(d_i L_ji) - U_ij) = (d_i L_ji (1 + e1) - U_ij)(1 + e2), |e1|, |e2| <= u, so
    |d_i L_ji - U_ij| <= |fl(...)| (1 + 2u) + 2u |d_i L_ji|, and |D L^T| 1 = D (|L|^T 1).
    """
    n = L.shape[0]
    u = UNIT_ROUNDOFF
    gamma_k = k * u / (1.0 - k * u)
    ones = np.ones(n)
    Lr = L.tocsr()                             # rows of L = columns of L^T, each sorted
    np.abs(L.data, out=L.data)
    lt1 = L.T @ ones                           # |L|^T 1, the column sums of |L|
    del L
    absF = np.zeros(n)                         # row sums of |fl(D L^T - U)|
    absU = np.zeros(n)                         # row sums of |U|
    # Column j of D L^T - U is d_i L_ji (row j of L, scaled row by row) minus
    # column j of U; scipy forms the difference of two CSC blocks with
    # unsorted rows through a sparse accumulator, without sorting. A position
    # held by one side only is copied exactly (x - 0, 0 - x); no index repeats
    # within a column of SuperLU's factors, so no sum is formed before the
    # difference. Differences that are exactly zero are dropped (they add 0).
    cuts = np.searchsorted(U.indptr, np.arange(0, U.indptr[-1], BLOCK_ENTRIES), side="right") - 1
    edges = np.unique(np.concatenate([cuts, [0, n]]))
    for a, b in zip(edges[:-1], edges[1:]):
        pa, pb = Lr.indptr[a], Lr.indptr[b]
        qa, qb = U.indptr[a], U.indptr[b]
        li = Lr.indices[pa:pb]
        X = sp.csc_array((Lr.data[pa:pb] * d[li], li, Lr.indptr[a:b + 1] - pa), shape=(n, b - a))
        Y = sp.csc_array((U.data[qa:qb], U.indices[qa:qb], U.indptr[a:b + 1] - qa), shape=(n, b - a))
        F = X - Y
        np.abs(F.data, out=F.data)
        absF += F @ ones[: b - a]
        np.abs(Y.data, out=Y.data)             # U's own values (a view): not needed signed again
        absU += Y @ ones[: b - a]
        del X, Y, F, li
    del U
    np.abs(Lr.data, out=Lr.data)
    h = absF * (1 + 2 * u) + (2 * u) * d * lt1 + gamma_k * absU
    return float(np.max(Lr @ h))


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
