"""The model's geometry for the views: nodes, positions, row map, K's node graph.

Model -> :class:`~conditioning.results.ModelGeometry`. Nothing is diagnosed
here: the input is restated in the report so that the renderers read the
report alone (figures, mode files) and never the :class:`~conditioning.model.Model`.
"""

from __future__ import annotations

from typing import Optional

import numpy as np
from numpy.typing import NDArray

from conditioning.model import Model
from conditioning.results import ModelGeometry

#: Node pairs kept as edges, at most; beyond, the views draw the nodes only.
#: This project's choice: a mode-shape figure with more lines is unreadable,
#: and the pairs of a larger model cost memory in every report.
MAX_EDGES = 20000

#: Stored entries above which the pairs are not even counted: a generous 60
#: entries per pair (two coupled 6-DOF nodes store 2 x 36 off-diagonal
#: entries, two 3-DOF nodes 2 x 9). This project's choice, with MAX_EDGES.
_MAX_ENTRIES_FOR_EDGES = 60 * MAX_EDGES


def model_geometry(model: Model) -> ModelGeometry:
    """The model's nodes, positions, row map and node graph, for display.

    Parameters
    ----------
    model : Model
        The model the report is about (after ``--fix`` restraints).

    Returns
    -------
    ModelGeometry
        Node ids and the row -> (node, dof) map from ``model.dofs``,
        positions from ``model.coords`` (model length unit), the nodes the
        coordinates list without rows and their positions, K's diagonal
        (K's units) and the node pairs K couples; the fields that need a map
        or coordinates are None without them.
    """
    diagonal = np.asarray(model.K.diagonal(), dtype=np.float64)
    if model.dofs is None:
        return ModelGeometry(rows=model.n, diagonal=diagonal)
    nodes = model.dofs.nodes
    xyz, dim, other_nodes, other_xyz = None, None, None, None
    if model.coords is not None:
        dim = int(model.coords.dim)
        xyz = np.full((nodes.size, 3), np.nan)
        have = model.coords.has(nodes)
        xyz[have] = model.coords.lookup(nodes[have])
        # nodes without rows (fully restrained supports) still belong in the picture
        other = ~np.isin(model.coords.node, nodes)
        other_nodes = np.asarray(model.coords.node[other], dtype=np.int64)
        other_xyz = np.asarray(model.coords.xyz[other], dtype=np.float64)
    return ModelGeometry(rows=model.n, diagonal=diagonal, nodes=nodes,
                         row_node=np.asarray(model.dofs.node, dtype=np.int64),
                         row_dof=np.asarray(model.dofs.dof, dtype=np.int8),
                         xyz=xyz, dim=dim, edges=_node_edges(model, nodes),
                         other_nodes=other_nodes, other_xyz=other_xyz,
                         lacks_dofs=_lacks_dofs(model, nodes), elements=model.elements)


def _lacks_dofs(model: Model, nodes: NDArray[np.int64]) -> NDArray[np.bool_]:
    """(m,) True where a node carries fewer of the model's DOF types than exist."""
    types = np.unique(model.dofs.dof)
    per_node = np.zeros((nodes.size, 6), dtype=bool)
    per_node[np.searchsorted(nodes, model.dofs.node), model.dofs.dof] = True
    return per_node[:, types].sum(axis=1) < types.size


def _node_edges(model: Model, nodes: NDArray[np.int64]) -> Optional[NDArray[np.intp]]:
    """Pairs of nodes coupled by a stored entry of K, as indices into ``nodes``;
    None when there are more than :data:`MAX_EDGES`."""
    if model.K.nnz > _MAX_ENTRIES_FOR_EDGES or _fewest_pairs(model, nodes) > MAX_EDGES:
        return None
    coo = model.K.tocoo()
    a = np.searchsorted(nodes, model.dofs.node[coo.row])
    b = np.searchsorted(nodes, model.dofs.node[coo.col])
    keep = a < b
    pairs = np.unique(np.column_stack([a[keep], b[keep]]), axis=0)
    if pairs.shape[0] > MAX_EDGES:
        return None
    return pairs


def _fewest_pairs(model: Model, nodes: NDArray[np.int64]) -> float:
    """A lower bound on the node pairs K couples, from counts alone (no pass
    over the entries): at most sum(d_i^2) entries lie within nodes (d_i DOFs
    at node i), and a pair of nodes holds at most 2 d_max^2 entries."""
    per_node = np.bincount(np.searchsorted(nodes, model.dofs.node), minlength=nodes.size)
    within = float(np.sum(per_node.astype(np.float64) ** 2))
    return (model.K.nnz - within) / (2.0 * float(per_node.max()) ** 2)
