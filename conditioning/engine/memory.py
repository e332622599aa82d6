"""How much memory the factorization will take, known before it runs.

    pattern of K, ordering perm  =>  entries of the factor L + U, bytes

The structure of the Cholesky factor of P K P^T follows from the pattern
alone (symbolic analysis): the elimination tree and the column counts of L.
SuperLU in symmetric mode with diagonal pivoting produces exactly that
structure (U = D L^T), so the count predicts its fill; its bytes follow from
bytes per entry calibrated on the benchmark models (docs/benchmarks.md).

The symbolic analysis runs on the graph of *supernodes*: consecutive rows of
the elimination order with identical sparsity patterns (the DOFs of a node)
are merged, which is exact and shrinks the loop by the DOFs per node.
"""

from __future__ import annotations

import logging
import math
import os
import re
from dataclasses import dataclass
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.engine.ordering import coincident, choose_ordering, nested_dissection, supervariables
from conditioning.engine.base import FactorMemoryPrediction
from conditioning.errors import SettingError

logger = logging.getLogger(__name__)

#: Bytes per stored factor entry while SuperLU factors and holds the factor
#: (an 8-byte value, row indices per supernode and per entry of U's
#: column-compressed part, array growth); measured 9.7 to 13.4 on the
#: benchmark models (peak RSS over fill, docs/benchmarks.md).
SUPERLU_BYTES_PER_ENTRY = 12.0
#: Peak bytes per factor entry of reading the pivots through scipy's
#: ``SuperLU.U`` (a CSC copy of U, about half the entries, built through a
#: temporary), as the shared factorization does; measured 15.2.
PIVOT_READ_BYTES_PER_ENTRY = 15.0
#: Bytes per stored entry of K for the copies made around the factorization
#: (scaled matrix, its active part, the permuted CSC matrix: 12 bytes each).
MATRIX_COPY_BYTES_PER_NNZ = 36.0
#: Share of MemAvailable a factorization may plan to use by default.
DEFAULT_SHARE = 0.7
#: Relative accuracy of the byte prediction measured on the benchmark models.
BYTES_ACCURACY = 0.25

_SIZE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][+]?[0-9]+)?)\s*([kKmMgGtT]?)(i?[bB])?\s*$")


def predict_factor_memory(
    K: sp.sparray,
    perm: Optional[NDArray[np.intp]] = None,
    *,
    coords: Optional[NDArray[np.float64]] = None,
) -> FactorMemoryPrediction:
    """Predict the fill and bytes of the factorization of K[perm][:, perm].

    Parameters
    ----------
    K : (n, n) sparse array
        The matrix to factor; only its pattern (of K + K^T) is used.
    perm : (n,) intp array, optional
        The fill-reducing permutation that will be used. ``None`` when the
        ordering is chosen inside SuperLU (MMD, COLAMD) and cannot be known
        in advance: the nested-dissection ordering is analysed instead, as a
        proxy (less accurate, see ``confidence``).
    coords : (n, 3) float64 array, optional
        Row positions: rows at one position (a node's DOFs) are analysed as
        one block with the union of their patterns (an upper bound that is
        exact unless couplings inside the node cancel), which shrinks the
        analysis by the DOFs per node; also used for the proxy ordering.

    Returns
    -------
    FactorMemoryPrediction
        Predicted factor entries (L + U as SuperLU counts them), flops, and
        the bytes the shared factorization (conditioning.engine.scipy_engine) adds
        at its peak: SuperLU's storage, the copy of U it reads the pivots
        from, and the matrix copies, with the method and its measured
        accuracy.

    Notes
    -----
    The elimination tree is computed by Liu's algorithm with path
    compression [1]_ and the column counts of L by the algorithm of Gilbert,
    Ng and Peyton [2]_ (in the form of CSparse's ``cs_counts`` [3]_), both in
    O(|A| alpha(|A|, n)) time, weighted by the rows per supernode.

    Examples
    --------
    A tridiagonal matrix in its natural order factors without fill: L and U
    are bidiagonal, 3n - 2 entries together.

    >>> import numpy as np, scipy.sparse as sp
    >>> T = sp.csr_array(sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(50, 50)))
    >>> predict_factor_memory(T, np.arange(50)).factor_entries
    148

    References
    ----------
    .. [1] J. W. H. Liu (1990), "The role of elimination trees in sparse
           factorization", SIAM J. Matrix Anal. Appl. 11(1), pp. 134-172.
    .. [2] J. R. Gilbert, E. G. Ng and B. W. Peyton (1994), "An efficient
           algorithm to compute row and column counts for sparse Cholesky
           factorization", SIAM J. Matrix Anal. Appl. 15(4), pp. 1075-1091.
    .. [3] T. A. Davis (2006), *Direct Methods for Sparse Linear Systems*,
           SIAM, section 4.5 (from memory).
    """
    K = sp.csr_array(K)
    n = K.shape[0]
    if K.shape != (n, n):
        raise ValueError(f"matrix is {K.shape[0]} x {K.shape[1]}; a stiffness matrix must be square")
    proxy = perm is None
    if proxy:
        perm = nested_dissection(K, coords)
    perm = np.asarray(perm, dtype=np.intp)
    if perm.shape != (n,) or not np.array_equal(np.sort(perm), np.arange(n)):
        raise ValueError(f"perm must be a permutation of 0..{n - 1}")
    node = None if coords is None else coincident(np.asarray(coords, dtype=np.float64))[0]
    counts, weights = cholesky_column_counts(K, perm, node=node)
    nnz_l = int(np.sum(weights * (weights + 1) // 2 + weights * (counts - weights)))
    fill = 2 * nnz_l - n
    # Flops: sum over the DOF columns of (column count)^2.
    flops = float(np.sum(_dof_column_square_sums(counts, weights)))
    pivot_read = int(PIVOT_READ_BYTES_PER_ENTRY * fill)
    nbytes = int(SUPERLU_BYTES_PER_ENTRY * fill + MATRIX_COPY_BYTES_PER_NNZ * K.nnz) + pivot_read
    method = ("symbolic Cholesky column counts (elimination tree, Gilbert-Ng-Peyton) "
              + ("of a nested-dissection proxy ordering" if proxy else "of the given ordering"))
    return FactorMemoryPrediction(
        bytes=nbytes, factor_entries=fill, flops=flops, method=method,
        confidence=BYTES_ACCURACY if not proxy else 2 * BYTES_ACCURACY, pivot_read_bytes=pivot_read,
    )


def refactorization_bytes(factor_entries: int, matrix_entries: int) -> int:
    """Predicted peak bytes of one more factorization with a known fill that
    reads its factors back (the inertia check, the verified eigenvalue bound):
    SuperLU's storage, the copies of L and U, the matrix copies."""
    return int((SUPERLU_BYTES_PER_ENTRY + PIVOT_READ_BYTES_PER_ENTRY) * factor_entries
               + MATRIX_COPY_BYTES_PER_NNZ * matrix_entries)


@dataclass(frozen=True)
class FactorizationPlan:
    """The ordering to factor with and whether its factor fits, decided together.

    Attributes
    ----------
    ordering : str or callable
        What to pass as ``factorize(..., ordering=...)``: a SuperLU name, or
        a callable that returns the permutation already computed here (and
        recomputes it only if called on a matrix of another size).
    prediction : FactorMemoryPrediction
    fits : bool
        The factorization runs: the factor itself (``prediction.bytes -
        prediction.pivot_read_bytes``) is within :func:`memory_limit` (or the
        given limit).
    limit_bytes : int
    reads_pivots : bool
        The copy of the factor that reading its pivots makes fits too
        (``prediction.bytes`` within the limit); when False the shared
        factorization runs without its pivots (no inertia count, no digits
        lost at pivots, no verified eigenvalue bound).
    """

    ordering: object
    prediction: FactorMemoryPrediction
    fits: bool
    limit_bytes: int
    reads_pivots: bool = True


def plan_factorization(
    K: sp.sparray,
    coords: Optional[NDArray[np.float64]] = None,
    *,
    limit_bytes: Optional[int] = None,
) -> FactorizationPlan:
    """Choose the ordering, predict the factor's size, and check it fits.

    Parameters
    ----------
    K : (n, n) sparse array
        The matrix the shared factorization will factor.
    coords : (n, 3) float64 array, optional
        Position of each row's node.
    limit_bytes : int, optional
        Memory allowed; default :func:`memory_limit`.

    Returns
    -------
    FactorizationPlan

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> T = sp.csr_array(sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(50, 50)))
    >>> plan = plan_factorization(T, limit_bytes=10**9)
    >>> plan.ordering, plan.fits
    ('MMD_AT_PLUS_A', True)
    """
    K = sp.csr_array(K)
    choice = choose_ordering(K, coords)
    perm = None
    ordering = choice
    if callable(choice):
        perm = choice(K, coords)
        ordering = _precomputed(perm, choice)
    prediction = predict_factor_memory(K, perm, coords=coords)
    limit = memory_limit() if limit_bytes is None else int(limit_bytes)
    alone = prediction.bytes - prediction.pivot_read_bytes
    return FactorizationPlan(ordering, prediction, alone <= limit, limit, prediction.bytes <= limit)


def _precomputed(perm, fallback):
    def ordering(pattern, coords=None):
        if pattern.shape[0] == perm.size:
            return perm
        return fallback(pattern, coords)

    ordering.ordering_name = getattr(fallback, "ordering_name", "custom")
    return ordering


def fits(prediction: FactorMemoryPrediction, limit_bytes: Optional[int] = None) -> bool:
    """True when the predicted factorization, pivot read included, fits in the memory limit.

    Parameters
    ----------
    prediction : FactorMemoryPrediction
    limit_bytes : int, optional
        Bytes allowed. Default: the environment variable
        ``CONDITIONING_MEMORY_LIMIT`` (e.g. ``"2G"``, ``"512M"``) when set,
        otherwise :data:`DEFAULT_SHARE` of MemAvailable in /proc/meminfo.

    Returns
    -------
    bool
    """
    limit = memory_limit() if limit_bytes is None else int(limit_bytes)
    return prediction.bytes <= limit


def memory_limit() -> int:
    """Bytes a factorization may use: ``CONDITIONING_MEMORY_LIMIT`` or a share of MemAvailable."""
    limit = memory_limit_setting()
    return int(DEFAULT_SHARE * available_memory()) if limit is None else limit


def memory_limit_setting() -> Optional[int]:
    """``CONDITIONING_MEMORY_LIMIT`` in bytes; None when unset or blank (the default applies).

    Raises
    ------
    conditioning.errors.SettingError
        The value is not a positive size (``abc``, ``-1``, ``0``): one line, exit 2.
    """
    env = os.environ.get("CONDITIONING_MEMORY_LIMIT")
    if env is None or not env.strip():
        return None
    try:
        return parse_size(env)
    except ValueError as exc:
        raise SettingError(f"CONDITIONING_MEMORY_LIMIT={env!r}: {exc}") from None


def parse_size(text: str) -> int:
    """``"2G"`` -> 2 * 1024**3 bytes; accepts k, M, G, T (binary) with optional ``B``/``iB``,
    and a plain or scientific number of bytes (``1e9``). A size must be positive and finite."""
    m = _SIZE.match(text)
    if not m:
        raise ValueError(f"memory size {text!r} not understood; write e.g. 2G, 512M, 1e9 or 1000000 (bytes)")
    unit = {"": 1, "k": 2**10, "m": 2**20, "g": 2**30, "t": 2**40}[m.group(2).lower()]
    value = float(m.group(1)) * unit
    if not (math.isfinite(value) and value >= 1):
        raise ValueError(f"memory size {text!r} must be a positive number of bytes")
    return int(value)


def available_memory() -> int:
    """MemAvailable from /proc/meminfo in bytes (total physical memory elsewhere)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))


# ------------------------------------------------------------------ core
def cholesky_column_counts(
    K: sp.csr_array, perm: NDArray[np.intp], *, node: Optional[NDArray[np.intp]] = None
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """Weighted column counts of the Cholesky factor of K[perm][:, perm].

    ``node`` (optional, one label per row) groups rows to be merged when
    consecutive in the elimination order; by default rows with identical
    sparsity patterns are merged, which is exact.

    Returns
    -------
    counts : (m,) int64 array
        For each supernode (run of consecutive rows of the elimination order
        with identical patterns), the rows of L in its first column,
        the supernode's own rows included.
    weights : (m,) int64 array
        Rows in each supernode.
    """
    n = K.shape[0]
    group = supervariables(K)[0] if node is None else np.asarray(node)
    g = group[perm]
    new = np.r_[True, g[1:] != g[:-1]]
    snode_of_pos = np.cumsum(new) - 1
    m = int(snode_of_pos[-1]) + 1 if n else 0
    weights = np.bincount(snode_of_pos, minlength=m).astype(np.int64)
    pos = np.empty(n, dtype=np.intp)
    pos[perm] = np.arange(n)
    snode = snode_of_pos[pos]  # supernode of each original row
    rows = np.repeat(np.arange(n), np.diff(K.indptr))
    i, j = snode[rows], snode[K.indices]
    keep = i != j
    G = sp.coo_array((np.ones(int(keep.sum()), dtype=np.int8), (i[keep], j[keep])), shape=(m, m)).tocsr()
    G = sp.csr_array(G + G.T)
    G.sum_duplicates()
    G.sort_indices()
    parent = _etree(G.indptr.tolist(), G.indices.tolist(), m)
    counts = _column_counts(G.indptr.tolist(), G.indices.tolist(), parent, weights.tolist())
    return np.asarray(counts, dtype=np.int64), weights


def _etree(indptr: list, indices: list, m: int) -> list:
    """Elimination tree of a symmetric pattern (Liu 1990; CSparse cs_etree)."""
    parent = [-1] * m
    ancestor = [-1] * m
    for k in range(m):
        for p in range(indptr[k], indptr[k + 1]):
            i = indices[p]
            if i >= k:
                break  # indices sorted: only the lower part of row k
            # Traverse from i to the root of its current tree, compressing.
            while i != -1 and i < k:
                inext = ancestor[i]
                ancestor[i] = k
                if inext == -1:
                    parent[i] = k
                i = inext
    return parent


def _postorder(parent: list) -> list:
    m = len(parent)
    head = [-1] * m
    nxt = [-1] * m
    for j in range(m - 1, -1, -1):
        p = parent[j]
        if p != -1:
            nxt[j] = head[p]
            head[p] = j
    post = []
    for root in range(m):
        if parent[root] != -1:
            continue
        stack = [root]
        while stack:
            p = stack[-1]
            c = head[p]
            if c == -1:
                stack.pop()
                post.append(p)
            else:
                head[p] = nxt[c]
                stack.append(c)
    return post


def _column_counts(indptr: list, indices: list, parent: list, w: list) -> list:
    """Weighted column counts (Gilbert, Ng and Peyton 1994; CSparse cs_counts).

    Row i contributes w[i] at each leaf of its row subtree, -w[i] at the
    least common ancestor of consecutive leaves and at parent(i); the column
    count of j is the sum of the contributions over the subtree of j.
    """
    m = len(parent)
    post = _postorder(parent)
    first = [-1] * m
    maxfirst = [-1] * m
    prevleaf = [-1] * m
    ancestor = list(range(m))
    delta = [0] * m
    for k in range(m):
        j = post[k]
        delta[j] = w[j] if first[j] == -1 else 0  # j is a leaf of the tree
        while j != -1 and first[j] == -1:
            first[j] = k
            j = parent[j]
    for k in range(m):
        j = post[k]
        if parent[j] != -1:
            delta[parent[j]] -= w[j]
        fj = first[j]
        for p in range(indptr[j], indptr[j + 1]):
            i = indices[p]
            # cs_leaf: is j a leaf of row i's subtree?
            if i <= j or fj <= maxfirst[i]:
                continue
            maxfirst[i] = fj
            jprev = prevleaf[i]
            prevleaf[i] = j
            delta[j] += w[i]
            if jprev != -1:  # subsequent leaf: subtract at lca(jprev, j)
                q = jprev
                while q != ancestor[q]:
                    q = ancestor[q]
                s = jprev
                while s != q:
                    sparent = ancestor[s]
                    ancestor[s] = q
                    s = sparent
                delta[q] -= w[i]
        if parent[j] != -1:
            ancestor[j] = parent[j]
    for j in post:  # children before parents
        if parent[j] != -1:
            delta[parent[j]] += delta[j]
    return delta


def _dof_column_square_sums(counts, weights):
    """Sum over the DOF columns of a supernode of (column count)^2."""
    below = (counts - weights).astype(np.float64)
    d = weights.astype(np.float64)
    # columns have counts below + d, below + d - 1, ..., below + 1
    s1 = d * below**2
    s2 = 2 * below * d * (d + 1) / 2
    s3 = d * (d + 1) * (2 * d + 1) / 6
    return s1 + s2 + s3
