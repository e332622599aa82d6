"""Double-double arithmetic and an accurate sparse residual r = f - K x.

A double-double number is an unevaluated sum ``hi + lo`` of two float64
numbers with ``|lo| <= u |hi|`` (u = 2^-53), about 32 significant digits.
Arrays of them are carried here as pairs ``(hi, lo)`` of float64 arrays.

The error-free transformations are those of Knuth (TwoSum) and Dekker
(Split, TwoProduct) as used by Ogita, Rump and Oishi [1]_; the residual
of :func:`dd_residual` sums each row exactly in the high part, by the
error-free extraction of Rump, Ogita and Oishi's accurate summation [2]_,
so that no Python loop over rows or entries is needed:
``numpy.add.reduceat`` adds the extracted parts of every row at once, and
the extraction guarantees that those additions make no rounding error.

Cost, measured on the plane-stress plate models of ``benchmarks/models.py``
(2 shared cores, numpy 2.4, best of 7): 179,400 rows / 3,035,742 entries,
one right-hand side 37 to 39 ms against 2.2 ms for ``K @ x`` (17x), four
right-hand sides 207 ms against 7.5 ms (28x); 50,244 rows / 871,837
entries, 12 ms against 0.39 ms (30x). The algorithm makes about 26 numpy
passes over the stored entries, each about as costly as scipy's whole
product, so the goal of 15x is near but not reached with numpy alone.

References
----------
.. [1] T. Ogita, S. M. Rump and S. Oishi (2005), "Accurate Sum and Dot
       Product", SIAM J. Sci. Comput. 26(6), pp. 1955-1988.
       :doi:`10.1137/030601818`.
.. [2] S. M. Rump, T. Ogita and S. Oishi (2008), "Accurate Floating-Point
       Summation Part I: Faithful Rounding", SIAM J. Sci. Comput. 31(1),
       pp. 189-224 (Lemma 3.3 on ExtractVector; from memory).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional, Union

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

logger = logging.getLogger(__name__)

#: Unit round-off of float64, u = 2^-53.
U = 2.0**-53
#: Dekker's splitting constant 2^27 + 1 for float64 [1]_ (Algorithm 3.2).
SPLITTER = 134217729.0
#: Entries (times right-hand sides) processed per block, sized so that the
#: temporaries of one block stay in the processor's cache.
_BLOCK_ENTRIES = 1 << 15

FloatArray = NDArray[np.float64]
DoubleDouble = tuple[FloatArray, FloatArray]


# ------------------------------------------------------ error-free transformations
def two_sum(a, b) -> DoubleDouble:
    """s + e = a + b exactly, s = fl(a + b) (Knuth; [1]_ Algorithm 3.1)."""
    s = a + b
    z = s - a
    e = (a - (s - z)) + (b - z)
    return s, e


def fast_two_sum(a, b) -> DoubleDouble:
    """s + e = a + b exactly, valid when |a| >= |b| or a == 0 (Dekker)."""
    s = a + b
    e = b - (s - a)
    return s, e


def split(a) -> DoubleDouble:
    """a = h + l exactly with h, l of at most 26 significant bits ([1]_ Algorithm 3.2).

    Valid for |a| below about 2^996 (the product 134217729*a must not overflow).
    """
    c = SPLITTER * a
    h = c - (c - a)
    return h, a - h


def two_prod(a, b) -> DoubleDouble:
    """p + e = a * b exactly, p = fl(a b) (Dekker; [1]_ Algorithm 3.3).

    Valid without underflow and for |a|, |b| below about 2^996.
    """
    p = a * b
    ah, al = split(a)
    bh, bl = split(b)
    e = al * bl - (((p - ah * bh) - al * bh) - ah * bl)
    return p, e


def dd_add(a_hi, a_lo, b_hi, b_lo) -> DoubleDouble:
    """(a_hi + a_lo) + (b_hi + b_lo) as a normalised double-double.

    The accurate addition (two TwoSums): relative error at most about 3 u^2.
    """
    s, e = two_sum(a_hi, b_hi)
    t, f = two_sum(a_lo, b_lo)
    e = e + t
    s, e = fast_two_sum(s, e)
    e = e + f
    return fast_two_sum(s, e)


# ------------------------------------------------------------ the sparse operator
@dataclass(frozen=True)
class DDOperator:
    """A CSR stiffness matrix prepared for repeated accurate residuals.

    Built once by :func:`dd_operator`; holds the Dekker split of the stored
    entries and the row blocks, so that each residual only splits x.
    """

    K: sp.csr_array
    """The matrix, CSR with sorted indices, float64."""
    a_hi: FloatArray
    """High halves of the stored entries (Dekker split)."""
    a_lo: FloatArray
    """Low halves of the stored entries."""
    K_abs: sp.csr_array
    """|K| entrywise, for the per-row magnitude bound t = |K| |x|."""
    bounds: NDArray[np.intp]
    """Row boundaries of the blocks processed together."""
    blocks: tuple
    """Per block: (first entry, end entry, rows with entries, their first
    entry within the block, their entry counts)."""
    max_row_entries: int
    """Largest number of stored entries in a row."""

    @property
    def n(self) -> int:
        return int(self.K.shape[0])


def dd_operator(K: Union[sp.sparray, sp.spmatrix, "DDOperator"]) -> DDOperator:
    """Prepare K for :func:`dd_residual` (split its entries once).

    Parameters
    ----------
    K : (n, n) sparse array or matrix, float64, or a DDOperator (returned as is)

    Returns
    -------
    DDOperator
    """
    if isinstance(K, DDOperator):
        return K
    K = sp.csr_array(K, dtype=np.float64)
    K.sum_duplicates()
    K.sort_indices()
    if not np.all(np.isfinite(K.data)):
        raise ValueError("K has non-finite entries; the residual is undefined")
    a_hi, a_lo = split(K.data)
    counts = np.diff(K.indptr)
    K_abs = sp.csr_array((np.abs(K.data), K.indices, K.indptr), shape=K.shape)
    bounds = _row_blocks(K.indptr, _BLOCK_ENTRIES)
    blocks = []
    for r0, r1 in zip(bounds[:-1], bounds[1:]):
        e0, e1 = int(K.indptr[r0]), int(K.indptr[r1])
        if e1 > e0:
            c = counts[r0:r1]
            filled = np.flatnonzero(c)
            blocks.append((e0, e1, r0 + filled, K.indptr[r0:r1][filled] - e0, c[filled]))
    return DDOperator(K, a_hi, a_lo, K_abs, bounds, tuple(blocks), int(counts.max(initial=0)))


def _row_blocks(indptr: NDArray, per_block: int) -> NDArray[np.intp]:
    """Row indices 0 = b_0 < b_1 < ... < b_m = n cutting about per_block entries each."""
    n = indptr.size - 1
    nnz = int(indptr[-1])
    targets = np.arange(per_block, nnz, per_block)
    cuts = np.searchsorted(indptr, targets, side="left")
    return np.unique(np.concatenate(([0], cuts, [n]))).astype(np.intp)


# ------------------------------------------------------------------- residual
def dd_residual(
    K: Union[sp.sparray, sp.spmatrix, DDOperator],
    x_hi: FloatArray,
    x_lo: Optional[FloatArray],
    f: FloatArray,
) -> DoubleDouble:
    """r = f - K (x_hi + x_lo), accurate to about twice the working precision.

    Parameters
    ----------
    K : (n, n) sparse, float64, or a DDOperator from :func:`dd_operator`
        Stiffness matrix (any square sparse matrix; symmetry not needed).
    x_hi, x_lo : (n,) or (n, k) float64
        The solution as a double-double; ``x_lo`` may be None (zero).
    f : (n,) or (n, k) float64
        Right-hand sides (loads), same shape as ``x_hi``.

    Returns
    -------
    (r_hi, r_lo) : tuple of two float64 arrays shaped like f
        The residual as a double-double, in the units of f.

    Notes
    -----
    For each row i let T_i = |f_i| + sum_j |K_ij| |x_j| (the sum of the
    magnitudes of the terms) and n_i the row's stored entries. To first order
    in u the result satisfies

        |r_hi + r_lo - r_i| <= u^2 |r_i| + (2 n_i + 16) u^2 T_i,

    the accuracy of a dot product computed "as if in twice the working
    precision" (Ogita, Rump and Oishi's Dot2, [1]_ Proposition 5.5, bounds
    the float64 result by u|r| + gamma_n^2 T), here without the n^2 factor.

    Algorithm, one block of rows at a time, one right-hand side at a time:

    1. Each product K_ij x_hi_j = p_ij + e_ij exactly (TwoProduct, [1]_
       Algorithm 3.3; the split of K_ij is precomputed).
    2. Extraction ([2]_, ExtractVector): with 2^M > max row length and the
       per-row power of two sigma_i = 2^M 2^ceil(log2 t_i), where
       t_i = (|K| |x_hi|)_i >= max_j |p_ij|, the parts q = fl((sigma + p) - sigma)
       and p' = p - q are exact, every q of the row is a multiple of
       u sigma_i bounded by 2^-M sigma_i, so the row sum of the q
       (``np.add.reduceat``, in any order) is exact; |p'| <= u sigma_i.
    3. The same extraction of p' against sigma'_i = u 2^M sigma_i leaves
       |p''| <= 8 (n_i + 1)^2 u^2 T_i, with an exact row sum of the q'.
    4. The row sums of e + p'' (each term at most about u T_i) and of
       K x_lo are formed in float64 (errors about n_i u^2 T_i each), and
       f_i - Q_i - Q'_i - R_i is assembled with TwoSum.

    The analysis assumes no overflow or underflow: entries and products
    between about 2^-900 and 2^990 in magnitude.

    Examples
    --------
    r = f - K x for x = 1 + 2^-60 (a double-double) with the second difference
    matrix tridiag(-1, 2, -1): exact, where float64 would lose the 2^-60.

    >>> import numpy as np, scipy.sparse as sp
    >>> K = sp.diags_array([[-1.0] * 2, [2.0] * 3, [-1.0] * 2], offsets=[-1, 0, 1], format="csr")
    >>> r_hi, r_lo = dd_residual(K, np.ones(3), np.full(3, 2.0**-60), np.zeros(3))
    >>> [float(v) for v in r_hi], [float(v) for v in r_lo * 2.0**60]
    ([-1.0, 0.0, -1.0], [-1.0, 0.0, -1.0])
    """
    op = dd_operator(K)
    x_hi = np.asarray(x_hi, dtype=np.float64)
    f = np.asarray(f, dtype=np.float64)
    if x_hi.shape != f.shape or x_hi.shape[0] != op.n or x_hi.ndim not in (1, 2):
        raise ValueError(f"x has shape {x_hi.shape} and f {f.shape}; both must be ({op.n},) or ({op.n}, k)")
    if x_hi.ndim == 2:
        cols = [dd_residual(op, x_hi[:, c], None if x_lo is None else x_lo[:, c], f[:, c])
                for c in range(x_hi.shape[1])]
        return np.column_stack([c[0] for c in cols]), np.column_stack([c[1] for c in cols])
    M = max(1, int(np.ceil(np.log2(op.max_row_entries + 1))))
    t = op.K_abs @ np.abs(x_hi)                      # t_i >= max_j |K_ij x_j|
    _, expo = np.frexp(t)
    sigma_row = np.ldexp(1.0, expo + M)
    q1 = np.zeros(op.n)
    q2 = np.zeros(op.n)
    rem = np.zeros(op.n) if x_lo is None else op.K @ np.asarray(x_lo, dtype=np.float64)
    work = _Workspace(int(np.max(np.diff(op.K.indptr[op.bounds]), initial=0)))
    for block in op.blocks:
        _residual_block(op, x_hi, sigma_row, block, M, q1, q2, rem, work)
    # Step 4: r = f - Q - Q' - R, the exact parts subtracted by TwoSum.
    h, l1 = two_sum(f, -q1)
    h, l2 = two_sum(h, -q2)
    return two_sum(h, (l1 + l2) - rem)


class _Workspace:
    """Scratch arrays of one block, reused across blocks."""

    def __init__(self, size: int):
        self.b, self.p, self.e, self.s, self.t, self.u = (np.empty(size) for _ in range(6))


def _residual_block(op: DDOperator, x, sigma_row, block, M: int, q1, q2, rem,
                    w: _Workspace) -> None:
    """Steps 1-3 of :func:`dd_residual` for one block of rows; writes q1, q2, adds to rem."""
    e0, e1, rows, starts, counts = block
    m = e1 - e0
    b, p, e, s, t, v = (a[:m] for a in (w.b, w.p, w.e, w.s, w.t, w.u))
    ah, al = op.a_hi[e0:e1], op.a_lo[e0:e1]
    np.take(x, op.K.indices[e0:e1], out=b)
    # Step 1: TwoProduct p + e = K_ij x_j (Dekker), split of K_ij stored.
    np.multiply(op.K.data[e0:e1], b, out=p)
    np.multiply(b, SPLITTER, out=t)                  # split b = bh + bl
    np.subtract(t, b, out=s)
    np.subtract(t, s, out=t)                         # t = bh
    np.subtract(b, t, out=b)                         # b = bl
    np.multiply(ah, t, out=e)
    np.subtract(p, e, out=e)
    np.multiply(al, t, out=s)
    np.subtract(e, s, out=e)
    np.multiply(ah, b, out=s)
    np.subtract(e, s, out=e)
    np.multiply(al, b, out=s)
    np.subtract(s, e, out=e)                         # e = al*bl - (((p - ah bh) - al bh) - ah bl)
    # Step 2: ExtractVector against sigma_i = 2^M 2^ceil(log2 t_i).
    s = np.repeat(sigma_row[rows], counts)
    np.add(s, p, out=v)
    np.subtract(v, s, out=v)                         # q
    np.subtract(p, v, out=p)                         # p' = p - q (exact)
    q1[rows] = np.add.reduceat(v, starts)
    # Step 3: again against sigma' = u 2^M sigma >= 2^M max |p'|.
    np.multiply(s, U * 2.0**M, out=s)
    np.add(s, p, out=v)
    np.subtract(v, s, out=v)
    np.subtract(p, v, out=p)
    q2[rows] = np.add.reduceat(v, starts)
    np.add(p, e, out=p)
    rem[rows] += np.add.reduceat(p, starts)
