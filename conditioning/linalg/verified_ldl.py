"""Positive definiteness of S - cI proved by an L D L^T in high precision.

    S (sparse, symmetric, float64 entries), c  =>  lambda_min(S) >= c - g (proved), or None

The float64 proof of :mod:`conditioning.linalg.verified_eigenvalue` bounds
the rounding of SuperLU's factors by about gamma_k |L| |U|, which is
larger than the smallest eigenvalue of S once that is within a few dozen
units of round-off of lambda_max (a clamped slender strip, a cantilever of
thousands of beam elements). The same argument in a working precision of p
bits (unit round-off u_p = 2^(1-p), a full unit in the last place) makes the
rounding term some 40 orders of magnitude smaller:

* S - cI (every float64 entry and c exactly) is eliminated without pivoting,
  right-looking on column dictionaries in a fill-reducing order given by the
  caller, in python-flint's arb numbers at p bits with the radius dropped
  after every operation (midpoint arithmetic: each result is rounded to p
  bits, an error of at most u_p relative [1]_). Row j of U is column j of
  the lower part as it stands when j is eliminated, L_kj = U_jk / d_j.
* As in Higham's analysis of LU without pivoting [2]_ (any order of
  summation), |L U - (S - cI)| <= gamma_k |L| |U| with k the longest column
  of the factor plus one; the lower part is updated instead of the upper,
  which changes each product by at most 2 u_p relatively, and
  |D L^T - U| <= u_p |U| from the division, so with B = L D L^T
  |B - (S - cI)| <= gamma_(k+4) |L| |U| entrywise.
* Every pivot d_j > 0: B is congruent to D, so positive definite (Sylvester),
  and lambda_min(S) >= c - ||B - (S - cI)||_2 >= c - g with g the largest row
  sum of the entrywise bound (B - (S - cI) is symmetric), computed in
  float64 from the factors and enlarged by 1 + 4(n + 4) u for that
  computation's own rounding.

With p = 192 and a factor column of 100 entries g is about 1e-54 times
the row sums of |L| |U|: the proof succeeds whenever the elimination's
pivots are positive, that is for any shift c below lambda_min(S) by more than
the high-precision round-off. The cost is the factorization's flop count in
Python-level operations (about 1 us each with python-flint 0.9, measured in
2026), hence :data:`LDL_MAX_FLOPS`.

References
----------
.. [1] F. Johansson (2017), "Arb: efficient arbitrary-precision
       midpoint-radius interval arithmetic", IEEE Trans. Computers 66(8),
       pp. 1281-1292 (from memory).
.. [2] N. J. Higham (2002), *Accuracy and Stability of Numerical Algorithms*,
       2nd ed., SIAM, Theorem 9.3 (from memory).
"""

from __future__ import annotations

import math
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

#: Largest flop count (sum of squared column counts of the float64 factor in
#: the same order) for which the high-precision elimination is attempted:
#: about 20 s of Python-level operations (project's choice).
LDL_MAX_FLOPS = 1.0e7
#: Working precision of the elimination (bits; project's choice: far beyond
#: the 53 bits of the data, so that the rounding term is negligible).
LDL_PRECISION = 192
#: Unit round-off of float64.
_U = 2.0 ** -53


def flint_available() -> bool:
    """True when python-flint can be imported."""
    try:
        import flint  # noqa: F401
    except ImportError:
        return False
    return True


def proved_lower_bound(S: sp.csr_array, c: float, perm: Optional[NDArray[np.intp]] = None,
                       *, precision: int = LDL_PRECISION) -> tuple[Optional[float], str]:
    """(lower, how): lambda_min(S) >= lower proved from a high-precision L D L^T of S - cI.

    Parameters
    ----------
    S : (n, n) sparse, exactly symmetric, float64
    c : float
        The shift (taken exactly).
    perm : (n,) int, optional
        Elimination order, applied symmetrically; reverse Cuthill-McKee otherwise.
    precision : int
        Bits of the working precision.

    Returns
    -------
    (float or None, str)
        The proved lower bound c - g (dimensionless, S's scale), or None with
        why (a pivot not positive: lambda_min(S) may be below c; python-flint
        absent).
    """
    try:
        import flint
    except ImportError:
        return None, "python-flint is not installed"
    S = sp.csr_array(S, dtype=np.float64)
    n = S.shape[0]
    if perm is None:
        perm = sp.csgraph.reverse_cuthill_mckee(sp.csr_matrix(S), symmetric_mode=True)
    A = sp.csr_array(S[perm][:, perm])
    A.sum_duplicates()
    lower = sp.csc_array(sp.tril(A, k=-1))
    lower.sort_indices()
    diag = A.diagonal()
    u_p = 2.0 ** (1 - precision)
    pivots = np.empty(n)
    row_u = np.empty(n)                 # row sums of |U| (row j: |d_j| + column j below the diagonal)
    l_entries: list[tuple[NDArray, NDArray]] = []   # column j of L: (rows, |values|)
    longest = 1
    with flint.ctx.workprec(precision):
        arb = flint.arb
        cc = arb(float(c))
        d = [(arb(float(x)) - cc).mid() for x in diag]
        cols: list[dict[int, object]] = []
        for j in range(n):
            lo, hi = lower.indptr[j], lower.indptr[j + 1]
            cols.append({int(i): arb(float(v)) for i, v in zip(lower.indices[lo:hi], lower.data[lo:hi])})
        for j in range(n):
            p = d[j]
            if not p > 0:
                return None, (f"pivot {j + 1} of {n} of the {precision}-bit elimination of S - cI was not "
                              f"positive at c = {c:.3e}: lambda_min(S) may be below c")
            pf = float(p)
            pivots[j] = pf
            items = sorted(cols[j].items())
            cols[j] = {}
            longest = max(longest, len(items) + 1)
            if not items:
                row_u[j] = pf
                l_entries.append((np.zeros(0, dtype=np.intp), np.zeros(0)))
                continue
            inv = 1 / p
            ls = [(a * inv).mid() for _, a in items]
            u_abs = np.array([abs(float(a)) for _, a in items])
            row_u[j] = pf + float(np.sum(u_abs))
            l_entries.append((np.array([i for i, _ in items], dtype=np.intp),
                              np.array([abs(float(x)) for x in ls])))
            for m, (i, a_ij) in enumerate(items):
                li = ls[m]
                d[i] = (d[i] - (li * a_ij).mid()).mid()
                target = cols[i]
                for k, a_kj in items[m + 1:]:
                    upd = (li * a_kj).mid()
                    if k in target:
                        target[k] = (target[k] - upd).mid()
                    else:
                        target[k] = -upd
    # Row sums of |L| |U|: row i sums |L_ij| (row_u)_j over j < i, plus (row_u)_i (unit diagonal).
    lu_rows = row_u.copy()
    for j, (rows, vals) in enumerate(l_entries):
        if rows.size:
            np.add.at(lu_rows, rows, vals * row_u[j])
    # float64 conversions (relative 2^-53 each) and sums of at most n terms.
    lu_max = float(np.max(lu_rows)) * (1.0 + 4 * (n + 4) * _U)
    k = longest + 4
    gamma = k * u_p / (1.0 - k * u_p)
    g = gamma * lu_max + u_p * float(np.max(np.abs(diag) + abs(c)))
    g *= 1.0 + 4 * _U
    bound = (c - g) * (1.0 - 2 * _U) if c - g > 0 else c - g
    how = (f"{precision}-bit L D L^T of S - cI without pivoting (c = {c:.3e}): every pivot positive, "
           f"rounding bound {g:.1e}; lambda_min(S) >= {bound:.3e}")
    if not math.isfinite(bound):
        return None, "the rounding bound is not finite"
    return bound, how
