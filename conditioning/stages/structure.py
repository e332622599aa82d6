"""Checks on the stiffness matrix that need no factorization.

DOFs without stiffness, zero or negative diagonal entries, asymmetry, rows
that hold only their diagonal (placeholders), and the connected parts of the
matrix graph (scipy.sparse.csgraph). A part that shares no stiffness with the
rest of the model is a separate body: unless it is supported on its own it
brings its own rigid-body modes. A row holding only a positive diagonal is
supported by that diagonal and can bring none, so it is not counted as a part.
"""

from __future__ import annotations

from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from scipy.sparse import csgraph

from conditioning.model import Model
from conditioning.results import Asymmetry, StructureResult

#: A pair (K_ij, K_ji) differs when |K_ij - K_ji| exceeds this share of
#: max |K| (the project's own choice: far above the 1e-16 of a value written
#: twice in full precision) ...
ASYMMETRY_IGNORED = 1e-10
#: ... or exceeds this share of max |K| and PAIR_DIFFERS of the entry itself:
#: a small entry changed beyond its 6th significant digit is not
#: round-off, while differences below 1e-12 of max |K| are cancellation noise
#: of assembly (entries that should be 0), whatever their own size (the
#: project's own choices).
ASYMMETRY_NOISE = 1e-12
PAIR_DIFFERS = 1e-6
#: A placeholder diagonal differs from the typical diagonal of the coupled rows
#: by at least this many orders of magnitude (the project's own choice).
PLACEHOLDER_ORDERS_APART = 2.0


def rows_with_stiffness(K: sp.csr_array) -> np.ndarray:
    """(n,) bool: rows holding at least one nonzero entry (stored zeros do not count)."""
    K = sp.csr_array(K)
    n = K.shape[0]
    rows = np.repeat(np.arange(n), np.diff(K.indptr))
    out = np.zeros(n, dtype=bool)
    out[rows[K.data != 0]] = True
    return out


def _asymmetry(K: sp.csr_array) -> Asymmetry:
    """Largest |K_ij - K_ji| relative to max |K|, where, and how many pairs differ."""
    A = sp.csr_array(K - K.T)
    A.eliminate_zeros()
    if A.nnz == 0:
        return Asymmetry(relative=0.0, row=None, col=None)
    scale = float(np.max(np.abs(K.data))) if K.nnz else 1.0
    coo = A.tocoo()
    upper = coo.row < coo.col  # K - K^T is antisymmetric: each pair appears twice
    r, c, d = coo.row[upper], coo.col[upper], np.abs(coo.data[upper])
    k = int(np.argmax(d))
    i, j = int(r[k]), int(c[k])
    kij, kji = float(K[i, j]), float(K[j, i])
    size = np.maximum(np.abs(K[r, c]), np.abs(K[c, r]))
    differs = (d > ASYMMETRY_IGNORED * scale) | ((d > ASYMMETRY_NOISE * scale) & (d > PAIR_DIFFERS * size))
    return Asymmetry(relative=float(d[k] / scale), row=i, col=j,
                     pair_relative=float(d[k] / max(abs(kij), abs(kji))),
                     pair_values=(kij, kji), pairs=int(np.count_nonzero(differs)))


def asymmetry_reported(a: Asymmetry) -> bool:
    """True when the worst pair differs beyond round-off (see :data:`ASYMMETRY_IGNORED`)."""
    return a.relative > ASYMMETRY_IGNORED or (a.relative > ASYMMETRY_NOISE and a.pair_relative > PAIR_DIFFERS)


def uncoupled_rows(K: sp.csr_array) -> np.ndarray:
    """0-based rows with a positive diagonal and no other nonzero in their row or column.

    Returns
    -------
    (m,) ndarray of intp
        The rows, ascending. ``StructureResult.placeholder_rows`` holds them
        unless K is diagonal (then no row is a placeholder).
    """
    K = sp.csr_array(K)
    n = K.shape[0]
    coo = K.tocoo()
    off = (coo.row != coo.col) & (coo.data != 0)
    coupled = np.zeros(n, dtype=bool)
    coupled[coo.row[off]] = True
    coupled[coo.col[off]] = True  # an asymmetric matrix may couple a row only through its column
    return np.flatnonzero(~coupled & (K.diagonal() > 0)).astype(np.intp)


def looks_like_placeholder(values: np.ndarray, typical: float | None) -> np.ndarray:
    """(m,) bool: diagonal values that look like a placeholder for a restrained DOF.

    A placeholder is an exact power of ten (1 above all) that lies at least
    :data:`PLACEHOLDER_ORDERS_APART` orders of magnitude from ``typical``, the
    median diagonal of the coupled rows (any power of ten when there is none).
    A spring to ground rarely has such a value; a solver that keeps restrained
    DOFs in the matrix writes one.
    """
    values = np.asarray(values, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        exponent = np.round(np.log10(values))
        round_value = (values > 0) & (values == 10.0 ** exponent)
        if typical is None or not typical > 0:
            return round_value
        return round_value & (np.abs(np.log10(values / typical)) >= PLACEHOLDER_ORDERS_APART)


def connected_parts(K: sp.sparray, node: Optional[NDArray[np.int64]] = None) -> tuple[int, NDArray[np.intp]]:
    """Connected parts of the graph of K (scipy.sparse.csgraph), per row.

    Parameters
    ----------
    K : (n, n) sparse
        Stiffness matrix; its stored entries are the edges (an entry K_ij or
        K_ji joins rows i and j, so an asymmetric pattern still joins them).
    node : (n,) int, optional
        Node of each row. Given, the graph is over nodes (two nodes are
        connected when any of their DOFs couple, and the rows of one node are
        one point), so that a truss whose bars happen to be axis-aligned is
        still one part; without it, over rows.

    Returns
    -------
    count : int
        Number of parts (a row without any entry and no node to join is a part).
    labels : (n,) intp
        Part of each row, 0..count-1 in the order csgraph finds them.
    """
    if node is None:
        count, labels = csgraph.connected_components(K, directed=True, connection="weak")
        return int(count), labels.astype(np.intp)
    _, inv = np.unique(node, return_inverse=True)
    inv = inv.ravel()
    coo = sp.coo_array(K)
    m = int(inv.max()) + 1 if inv.size else 0
    G = sp.coo_array((np.ones(coo.nnz), (inv[coo.row], inv[coo.col])), shape=(m, m))
    count, node_labels = csgraph.connected_components(G, directed=True, connection="weak")
    return int(count), node_labels[inv].astype(np.intp)


def check_structure(model: Model) -> StructureResult:
    """Structural checks of ``model.K``.

    Returns
    -------
    StructureResult
        Empty rows, zero and negative diagonals, the largest relative
        asymmetry, placeholder rows (a positive diagonal and no coupling), and
        the connected parts (labels per row, sizes). Rows without any entry
        and placeholder rows count as parts of their own in ``part_of_row``
        (after the counted parts) but not in ``parts``.
    """
    K = sp.csr_array(model.K)
    n = K.shape[0]
    has_stiffness = rows_with_stiffness(K)
    row_nnz = np.where(has_stiffness, np.diff(K.indptr), 0)
    empty = np.flatnonzero(~has_stiffness)
    diag = K.diagonal()
    zero_diag = np.flatnonzero((diag == 0) & (row_nnz > 0))
    negative = np.flatnonzero(diag < 0)
    placeholders = uncoupled_rows(K)
    if placeholders.size == np.count_nonzero(has_stiffness):
        # A diagonal K has no structure for such rows to be left over from.
        placeholders = placeholders[:0]
    n_comp, labels = connected_parts(K, None if model.dofs is None else model.dofs.node)
    sizes = np.bincount(labels, minlength=n_comp)
    structural = has_stiffness.copy()
    structural[placeholders] = False
    counted = np.bincount(labels[structural], minlength=n_comp) > 0
    # Number the counted parts first, by size, largest first (stable for
    # reports); one-row parts of empty or placeholder rows come after them.
    order = np.lexsort((np.arange(n_comp), -sizes, ~counted))
    relabel = np.empty(n_comp, dtype=np.intp)
    relabel[order] = np.arange(n_comp)
    labels = relabel[labels]
    sizes = sizes[order]
    return StructureResult(
        n=n,
        stored_entries=int(K.nnz),
        empty_rows=empty.astype(np.intp),
        zero_diagonal=zero_diag.astype(np.intp),
        negative_diagonal=negative.astype(np.intp),
        asymmetry=_asymmetry(K),
        part_of_row=labels.astype(np.intp),
        part_sizes=sizes.astype(np.intp),
        parts=int(np.count_nonzero(counted)),
        placeholder_rows=placeholders,
        one_triangle=model.one_triangle,
        constraint_rows=constraint_rows(K, zero_diag),
    )


def constraint_rows(K: sp.csr_array, zero_diagonal: NDArray[np.intp]) -> NDArray[np.intp]:
    """Rows of a zero diagonal block coupled to the rest: multiplier or constraint rows.

    A row with a zero diagonal, no entry in the columns of the other
    zero-diagonal rows, and an entry in some other column is a row of C in
    [[K, C^T], [C, 0]] (a Lagrange multiplier or a constraint equation; common
    practice of the mixed and constrained formulations, e.g. M. Benzi, G. H.
    Golub, J. Liesen, "Numerical solution of saddle point problems", Acta
    Numerica 14, 2005, section 1, from memory). Returns them, 0-based, sorted.
    """
    if zero_diagonal.size == 0:
        return np.zeros(0, dtype=np.intp)
    zero = np.zeros(K.shape[0], dtype=bool)
    zero[zero_diagonal] = True
    block = sp.csr_array(K[zero_diagonal][:, zero])
    inside = np.diff(block.indptr) > 0
    return np.asarray(zero_diagonal[~inside], dtype=np.intp)
