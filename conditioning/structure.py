"""Checks on the stiffness matrix that need no factorization.

DOFs without stiffness, zero or negative diagonal entries, asymmetry, and the
connected parts of the matrix graph (scipy.sparse.csgraph). A part that shares
no stiffness with the rest of the model is a separate body: unless it is
supported on its own it brings its own rigid-body modes.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse import csgraph

from conditioning.model import Model
from conditioning.results import Asymmetry, StructureResult


def rows_with_stiffness(K: sp.csr_array) -> np.ndarray:
    """(n,) bool: rows holding at least one nonzero entry (stored zeros do not count)."""
    K = sp.csr_array(K)
    n = K.shape[0]
    rows = np.repeat(np.arange(n), np.diff(K.indptr))
    out = np.zeros(n, dtype=bool)
    out[rows[K.data != 0]] = True
    return out


def _asymmetry(K: sp.csr_array) -> Asymmetry:
    """Largest |K_ij - K_ji| relative to max |K|, and where."""
    A = sp.csr_array(K - K.T)
    A.eliminate_zeros()
    if A.nnz == 0:
        return Asymmetry(relative=0.0, row=-1, col=-1)
    scale = float(np.max(np.abs(K.data))) if K.nnz else 1.0
    coo = A.tocoo()
    k = int(np.argmax(np.abs(coo.data)))
    i, j = int(coo.row[k]), int(coo.col[k])
    return Asymmetry(relative=float(abs(coo.data[k]) / scale), row=min(i, j), col=max(i, j))


def _parts(model: Model, K: sp.csr_array) -> tuple[int, np.ndarray]:
    """Connected parts, per row. With a DOF map the graph is over nodes (two
    nodes are connected when any of their DOFs couple), so that a truss whose
    bars happen to be axis-aligned is still one part; without a map, over rows."""
    if model.dofs is None:
        return csgraph.connected_components(K, directed=True, connection="weak")
    _, inv = np.unique(model.dofs.node, return_inverse=True)
    coo = K.tocoo()
    m = int(inv.max()) + 1 if inv.size else 0
    G = sp.coo_array((np.ones(coo.nnz), (inv[coo.row], inv[coo.col])), shape=(m, m))
    n_comp, node_labels = csgraph.connected_components(G, directed=True, connection="weak")
    return n_comp, node_labels[inv]


def check_structure(model: Model) -> StructureResult:
    """Structural checks of ``model.K``.

    Returns
    -------
    StructureResult
        Empty rows, zero and negative diagonals, the largest relative
        asymmetry, and the connected parts (labels per row, sizes). Rows
        without any entry count as parts of their own in ``part_of_row`` but
        not in ``parts``.
    """
    K = sp.csr_array(model.K)
    n = K.shape[0]
    has_stiffness = rows_with_stiffness(K)
    row_nnz = np.where(has_stiffness, np.diff(K.indptr), 0)
    empty = np.flatnonzero(~has_stiffness)
    diag = K.diagonal()
    zero_diag = np.flatnonzero((diag == 0) & (row_nnz > 0))
    negative = np.flatnonzero(diag < 0)
    n_comp, labels = _parts(model, K)
    sizes = np.bincount(labels, minlength=n_comp)
    # Relabel so that parts are numbered by size, largest first (stable for reports).
    order = np.lexsort((np.arange(n_comp), -sizes))
    relabel = np.empty(n_comp, dtype=np.intp)
    relabel[order] = np.arange(n_comp)
    labels = relabel[labels]
    sizes = sizes[order]
    parts_with_stiffness = int(np.count_nonzero(np.bincount(labels[row_nnz > 0], minlength=n_comp)))
    return StructureResult(
        n=n,
        stored_entries=int(K.nnz),
        empty_rows=empty.astype(np.intp),
        zero_diagonal=zero_diag.astype(np.intp),
        negative_diagonal=negative.astype(np.intp),
        asymmetry=_asymmetry(K),
        part_of_row=labels.astype(np.intp),
        part_sizes=sizes.astype(np.intp),
        parts=parts_with_stiffness,
    )
