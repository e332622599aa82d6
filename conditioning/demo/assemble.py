"""A small, readable, vectorised finite element assembler for the demo models.

Every element routine works on all elements at once: element stiffness
matrices are built as one ``(n_elements, k, k)`` array with numpy
broadcasting and ``einsum``, scattered with a single
``scipy.sparse.coo_array`` and converted to CSR (duplicates summed). There
is no Python loop over elements.

Each routine returns an :class:`Assembly`: the stiffness matrix with full
(both triangles) symmetric storage and the :class:`~conditioning.model.DofTable`
saying which node and which displacement component each row is. Rows are
numbered node by node (node ids ascending), components in the order of
:data:`~conditioning.model.DOF_NAMES`. Assemblies of different element types
are summed with :func:`combine`; springs, restraints and loads are added by
node id and component name (``(12, "uy")``).

Units are whatever consistent set the caller uses; the demo scenarios use
newton and millimetre, so E is in MPa (N/mm^2), areas in mm^2, second moments
of area in mm^4, stiffness in N/mm (translations) and N mm/rad (rotations).

References
----------
.. [1] J. S. Przemieniecki (1968), *Theory of Matrix Structural Analysis*,
       McGraw-Hill (beam-column and bar stiffness matrices; from memory).
.. [2] R. D. Cook, D. S. Malkus, M. E. Plesha, R. J. Witt (2002), *Concepts
       and Applications of Finite Element Analysis*, 4th ed., Wiley
       (bilinear isoparametric quadrilateral, 2 x 2 Gauss rule; from memory).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Iterable, Mapping, Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray

from conditioning.model import DOF_NAMES, DofIndex, DofTable

logger = logging.getLogger(__name__)

#: A degree of freedom named by node id and component, e.g. ``(12, "uy")``.
NodeDof = tuple[int, str]

FRAME2D_LAYOUT = ("ux", "uy", "rz")
TRUSS2D_LAYOUT = ("ux", "uy")
TRUSS3D_LAYOUT = ("ux", "uy", "uz")
FRAME3D_LAYOUT = DOF_NAMES

# Enough room for the 6 components when a (node, dof) pair is packed into one key.
_KEY_STRIDE = 8


@dataclass(frozen=True)
class Assembly:
    """An assembled stiffness matrix and its row-to-(node, dof) map.

    Attributes
    ----------
    K : (n, n) scipy.sparse.csr_array, float64
        Stiffness matrix, full symmetric storage, no explicit zeros; units of
        the caller (N/mm and N mm/rad in the demo).
    dofs : DofTable
        Node id and component of each row, rows sorted by (node, component).
    """

    K: sp.csr_array
    dofs: DofTable

    @property
    def n(self) -> int:
        return int(self.K.shape[0])

    def rows(self, pairs: Iterable[NodeDof]) -> DofIndex:
        """Matrix rows (0-based) of ``(node, "ux")`` pairs; ValueError if absent."""
        pairs = list(pairs)
        if not pairs:
            return np.zeros(0, dtype=np.intp)
        wanted = np.array([_key(node, name) for node, name in pairs], dtype=np.int64)
        keys = _keys(self.dofs)
        order = np.argsort(keys, kind="stable")
        pos = np.clip(np.searchsorted(keys[order], wanted), 0, keys.size - 1)
        missing = keys[order][pos] != wanted
        if np.any(missing):
            node, name = pairs[int(np.flatnonzero(missing)[0])]
            raise ValueError(f"node {node} has no {name} degree of freedom in this assembly")
        return order[pos].astype(np.intp)


# ---------------------------------------------------------------- element routines


def truss2d(nodes: ArrayLike, xy: ArrayLike, bars: ArrayLike, *,
            E: ArrayLike, A: ArrayLike) -> Assembly:
    """Pin-jointed bars in the plane (dofs ux, uy per node).

    Parameters
    ----------
    nodes : (m,) int
        Node ids (unique, any order).
    xy : (m, 2) float
        Node positions; length unit (mm in the demo).
    bars : (e, 2) int
        End node ids of each bar.
    E, A : float or (e,) float
        Young's modulus (MPa) and cross-section area (mm^2) per bar.

    Returns
    -------
    Assembly
        K in force/length (N/mm), rows ux, uy of every node in ``nodes``.

    Notes
    -----
    With direction cosines d = (x_2 - x_1) / L and b = [-d, d], the bar
    stiffness in global axes is k_e = (E A / L) b b^T ([1]_, from memory).
    """
    return _truss(nodes, xy, bars, E, A, TRUSS2D_LAYOUT)


def truss3d(nodes: ArrayLike, xyz: ArrayLike, bars: ArrayLike, *,
            E: ArrayLike, A: ArrayLike) -> Assembly:
    """Pin-jointed bars in space (dofs ux, uy, uz per node).

    Same as :func:`truss2d` with ``xyz`` of shape (m, 3); k_e = (E A / L) b b^T
    with b = [-d, d] and d the unit vector from end 1 to end 2 ([1]_, from
    memory). Returns an :class:`Assembly` in force/length.
    """
    return _truss(nodes, xyz, bars, E, A, TRUSS3D_LAYOUT)


def frame2d(nodes: ArrayLike, xy: ArrayLike, members: ArrayLike, *,
            E: ArrayLike, A: ArrayLike, I: ArrayLike) -> Assembly:  # noqa: E741
    """Euler-Bernoulli beam-columns in the plane (dofs ux, uy, rz per node).

    Parameters
    ----------
    nodes : (m,) int
        Node ids (unique, any order).
    xy : (m, 2) float
        Node positions (mm in the demo).
    members : (e, 2) int
        End node ids of each member.
    E, A, I : float or (e,) float
        Young's modulus (MPa), area (mm^2), second moment of area about the
        out-of-plane axis (mm^4).

    Returns
    -------
    Assembly
        K with rows ux, uy (N/mm) and rz (N mm/rad) of every node.

    Notes
    -----
    In local axes (x along the member) with dofs (u1, v1, th1, u2, v2, th2)
    the stiffness is the textbook beam-column matrix ([1]_, from memory)::

        EA/L on (u1, u2) as [[1, -1], [-1, 1]]
        EI/L^3 * [[ 12,   6L,  -12,   6L ],
                  [ 6L,  4L^2, -6L,  2L^2],
                  [-12,  -6L,   12,  -6L ],
                  [ 6L,  2L^2, -6L,  4L^2]]   on (v1, th1, v2, th2)

    and k_e = T^T k_local T with T = diag(R, R), R = [[c, s, 0], [-s, c, 0],
    [0, 0, 1]], c and s the direction cosines of the member axis.
    """
    ids, pos, conn = _nodes_and_connectivity(nodes, xy, members, nen=2, dim=2)
    d = pos[conn[:, 1]] - pos[conn[:, 0]]
    L = _lengths(d)
    c, s = d[:, 0] / L, d[:, 1] / L
    E, A, I = (_per_element(v, L.size) for v in (E, A, I))  # noqa: E741

    k = np.zeros((L.size, 6, 6))
    axial = E * A / L
    for i, j, sign in ((0, 0, 1), (3, 3, 1), (0, 3, -1), (3, 0, -1)):
        k[:, i, j] = sign * axial
    EI = E * I
    bend = np.array([[12.0, 6.0, -12.0, 6.0],
                     [6.0, 4.0, -6.0, 2.0],
                     [-12.0, -6.0, 12.0, -6.0],
                     [6.0, 2.0, -6.0, 4.0]])
    # Powers of L that turn the pattern above into EI/L^3 * [...] with L and L^2 entries.
    power = np.array([[3, 2, 3, 2], [2, 1, 2, 1], [3, 2, 3, 2], [2, 1, 2, 1]])
    bend_dofs = np.array([1, 2, 4, 5])
    k[:, bend_dofs[:, None], bend_dofs[None, :]] = (
        bend * EI[:, None, None] / L[:, None, None] ** power)

    R = np.zeros((L.size, 3, 3))
    R[:, 0, 0], R[:, 0, 1], R[:, 1, 0], R[:, 1, 1], R[:, 2, 2] = c, s, -s, c, 1.0
    T = np.zeros((L.size, 6, 6))
    T[:, :3, :3] = R
    T[:, 3:, 3:] = R
    ke = np.einsum("eji,ejk,ekl->eil", T, k, T)
    return _scatter(ids, conn, ke, FRAME2D_LAYOUT)


def frame3d(nodes: ArrayLike, xyz: ArrayLike, members: ArrayLike, *,
            E: ArrayLike, G: ArrayLike, A: ArrayLike, Iy: ArrayLike, Iz: ArrayLike,
            J: ArrayLike, ref: Optional[ArrayLike] = None) -> Assembly:
    """Euler-Bernoulli beam-columns in space (dofs ux, uy, uz, rx, ry, rz per node).

    Parameters
    ----------
    nodes : (m,) int
        Node ids (unique, any order).
    xyz : (m, 3) float
        Node positions (mm in the demo).
    members : (e, 2) int
        End node ids of each member.
    E, G : float or (e,) float
        Young's and shear modulus (MPa).
    A, Iy, Iz, J : float or (e,) float
        Area (mm^2), second moments of area about the local y and z axes and
        torsion constant (mm^4).
    ref : (3,) or (e, 3) float, optional
        A vector in each member's local x-y plane. Default: global Z, or
        global X for members parallel to Z.

    Returns
    -------
    Assembly
        K with translational rows in N/mm and rotational rows in N mm/rad.

    Notes
    -----
    Local axes: e1 along the member (node 1 to node 2), e2 the part of
    ``ref`` normal to e1, e3 = e1 x e2. In local axes the stiffness is the
    textbook 12 x 12 space-frame matrix ([1]_, from memory): EA/L on (u1, u2),
    GJ/L on (th_x1, th_x2), the beam block of :func:`frame2d` with EI_z on
    (v1, th_z1, v2, th_z2) and with EI_y and the signs of the 6L terms flipped
    on (w1, th_y1, w2, th_y2) (because th_y = -dw/dx). In global axes
    k_e = T^T k_local T with T = diag(R, R, R, R), R = [e1; e2; e3].
    """
    ids, pos, conn = _nodes_and_connectivity(nodes, xyz, members, nen=2, dim=3)
    d = pos[conn[:, 1]] - pos[conn[:, 0]]
    L = _lengths(d)
    ne = L.size
    E, G, A, Iy, Iz, J = (_per_element(v, ne) for v in (E, G, A, Iy, Iz, J))

    e1 = d / L[:, None]
    if ref is None:
        v = np.broadcast_to([0.0, 0.0, 1.0], (ne, 3)).copy()
        v[np.abs(e1[:, 2]) > 1.0 - 1e-6] = [1.0, 0.0, 0.0]
    else:
        v = np.broadcast_to(np.asarray(ref, dtype=float), (ne, 3))
    e2 = v - np.sum(v * e1, axis=1)[:, None] * e1
    norm = np.linalg.norm(e2, axis=1)
    parallel = norm <= 1e-9 * np.linalg.norm(v, axis=1)
    if np.any(parallel):
        raise ValueError(f"member {int(np.flatnonzero(parallel)[0])} is parallel to its "
                         "reference vector; give another ref")
    e2 = e2 / norm[:, None]
    e3 = np.cross(e1, e2)

    k = np.zeros((ne, 12, 12))
    for (i, j), stiff in (((0, 6), E * A / L), ((3, 9), G * J / L)):
        k[:, i, i] = k[:, j, j] = stiff
        k[:, i, j] = k[:, j, i] = -stiff
    bend = np.array([[12.0, 6.0, -12.0, 6.0],
                     [6.0, 4.0, -6.0, 2.0],
                     [-12.0, -6.0, 12.0, -6.0],
                     [6.0, 2.0, -6.0, 4.0]])
    power = np.array([[3, 2, 3, 2], [2, 1, 2, 1], [3, 2, 3, 2], [2, 1, 2, 1]])
    flip = np.array([1.0, -1.0, 1.0, -1.0])          # th_y = -dw/dx flips the 6L terms
    for dofs, EI, pattern in ((np.array([1, 5, 7, 11]), E * Iz, bend),
                              (np.array([2, 4, 8, 10]), E * Iy, bend * np.outer(flip, flip))):
        k[:, dofs[:, None], dofs[None, :]] = (
            pattern * EI[:, None, None] / L[:, None, None] ** power)

    R = np.stack([e1, e2, e3], axis=1)                # rows are the local axes
    T = np.zeros((ne, 12, 12))
    for b in range(4):
        T[:, 3 * b:3 * b + 3, 3 * b:3 * b + 3] = R
    ke = np.einsum("eji,ejk,ekl->eil", T, k, T)
    return _scatter(ids, conn, ke, FRAME3D_LAYOUT)


def plane_stress_quad(nodes: ArrayLike, xy: ArrayLike, quads: ArrayLike, *,
                      E: ArrayLike, nu: ArrayLike, t: ArrayLike) -> Assembly:
    """Bilinear isoparametric quadrilaterals in plane stress (dofs ux, uy).

    Parameters
    ----------
    nodes : (m,) int
        Node ids (unique, any order).
    xy : (m, 2) float
        Node positions (mm in the demo).
    quads : (e, 4) int
        Corner node ids of each element, counter-clockwise.
    E, nu, t : float or (e,) float
        Young's modulus (MPa), Poisson's ratio, thickness (mm).

    Returns
    -------
    Assembly
        K in force/length (N/mm), rows ux, uy of every node.

    Raises
    ------
    ValueError
        When an element is inverted or degenerate (det J <= 0 at a Gauss point).

    Notes
    -----
    k_e = t * sum_g B_g^T D B_g det J_g over the 2 x 2 Gauss points
    xi, eta = +-1/sqrt(3) (weights 1), with shape functions
    N_a = (1 + xi xi_a)(1 + eta eta_a) / 4 and the plane-stress elasticity
    matrix D = E / (1 - nu^2) [[1, nu, 0], [nu, 1, 0], [0, 0, (1 - nu)/2]]
    acting on (eps_xx, eps_yy, gamma_xy) ([2]_, from memory). The rule
    integrates the stiffness of a parallelogram exactly.
    """
    ids, pos, conn = _nodes_and_connectivity(nodes, xy, quads, nen=4, dim=2)
    ne = conn.shape[0]
    E, nu, t = (_per_element(v, ne) for v in (E, nu, t))
    X = pos[conn]                                                   # (e, 4, 2)

    corners = np.array([[-1.0, -1.0], [1.0, -1.0], [1.0, 1.0], [-1.0, 1.0]])
    g = 1.0 / np.sqrt(3.0)
    gauss = np.array([[-g, -g], [g, -g], [g, g], [-g, g]])
    # dN_a/dxi = xi_a (1 + eta eta_a) / 4, dN_a/deta = eta_a (1 + xi xi_a) / 4: (g, 4, 2)
    dN = np.stack([corners[None, :, 0] * (1 + gauss[:, None, 1] * corners[None, :, 1]),
                   corners[None, :, 1] * (1 + gauss[:, None, 0] * corners[None, :, 0])],
                  axis=-1) / 4.0

    J = np.einsum("gai,eaj->egij", dN, X)                          # J_ij = dx_j / dxi_i
    detJ = np.linalg.det(J)
    if np.any(detJ <= 0):
        bad = int(np.flatnonzero(np.any(detJ <= 0, axis=1))[0])
        raise ValueError(f"quad {bad} (nodes {ids[conn[bad]].tolist()}) is inverted or "
                         "degenerate; give its corners counter-clockwise")
    grad = np.einsum("egij,gaj->egai", np.linalg.inv(J), dN)       # dN_a/dx_i

    B = np.zeros((ne, 4, 3, 8))
    B[:, :, 0, 0::2] = grad[..., 0]
    B[:, :, 1, 1::2] = grad[..., 1]
    B[:, :, 2, 0::2] = grad[..., 1]
    B[:, :, 2, 1::2] = grad[..., 0]

    D = np.zeros((ne, 3, 3))
    factor = E / (1.0 - nu ** 2)
    D[:, 0, 0] = D[:, 1, 1] = factor
    D[:, 0, 1] = D[:, 1, 0] = factor * nu
    D[:, 2, 2] = factor * (1.0 - nu) / 2.0

    ke = np.einsum("egki,ekl,eglj,eg->eij", B, D, B, detJ) * t[:, None, None]
    return _scatter(ids, conn, ke, TRUSS2D_LAYOUT)


# ---------------------------------------------------------------- springs, supports, loads


def spring(assembly: Assembly, a: NodeDof, b: NodeDof, k: float) -> Assembly:
    """Add a spring of stiffness ``k`` between two degrees of freedom.

    Adds k to K[a, a] and K[b, b] and -k to K[a, b] and K[b, a]. A very large
    ``k`` is the penalty way of tying two dofs together.

    Returns
    -------
    Assembly
        A new assembly with the same dof table.
    """
    ra, rb = assembly.rows([a, b])
    if ra == rb:
        raise ValueError(f"spring from node {a[0]} {a[1]} to itself")
    rows = np.array([ra, rb, ra, rb])
    cols = np.array([ra, rb, rb, ra])
    vals = np.array([k, k, -k, -k], dtype=float)
    return _add_entries(assembly, rows, cols, vals)


def ground_spring(assembly: Assembly, a: NodeDof, k: float) -> Assembly:
    """Add a spring of stiffness ``k`` from one dof to the ground (K[a, a] += k).

    A very large ``k`` is the penalty way of applying a support. Returns a new
    :class:`Assembly`.
    """
    (ra,) = assembly.rows([a])
    return _add_entries(assembly, np.array([ra]), np.array([ra]), np.array([k], dtype=float))


def apply_restraints(assembly: Assembly, fixed: Iterable[NodeDof]) -> Assembly:
    """Remove the rows and columns of restrained (zero-displacement) dofs.

    Parameters
    ----------
    assembly : Assembly
    fixed : iterable of (node, component name)
        Supported dofs, e.g. ``[(1, "ux"), (1, "uy")]``; duplicates allowed.

    Returns
    -------
    Assembly
        The reduced matrix and dof table; ``assembly.n - result.n`` rows removed.
    """
    drop = np.unique(assembly.rows(fixed))
    keep = np.setdiff1d(np.arange(assembly.n), drop)
    K = assembly.K[keep][:, keep]
    return Assembly(_tidy(K), assembly.dofs.take(keep))


def load_vector(dofs: DofTable, loads: Mapping[NodeDof, float]) -> NDArray[np.float64]:
    """Load vector with ``loads[(node, name)]`` at the matching rows, 0 elsewhere.

    Forces in N and moments in N mm in the demo. Loads on dofs not in the
    table (for example on a restrained dof) raise ValueError.

    Returns
    -------
    (n,) float64 array
    """
    f = np.zeros(len(dofs))
    if loads:
        rows = Assembly(sp.csr_array((len(dofs), len(dofs))), dofs).rows(loads.keys())
        np.add.at(f, rows, np.fromiter(loads.values(), dtype=float, count=len(loads)))
    return f


def combine(*assemblies: Assembly) -> Assembly:
    """Sum assemblies on the union of their degrees of freedom.

    Rows with the same (node, component) are added; the result's rows are
    sorted by node id, then component. Use it to mix element types, e.g. a
    frame with pin-jointed bracing.

    Returns
    -------
    Assembly
    """
    if not assemblies:
        raise ValueError("combine needs at least one assembly")
    keys = [_keys(a.dofs) for a in assemblies]
    union = np.unique(np.concatenate(keys))
    n = union.size
    parts = []
    for a, key in zip(assemblies, keys):
        where = np.searchsorted(union, key)
        coo = a.K.tocoo()
        parts.append((where[coo.row], where[coo.col], coo.data))
    rows, cols, vals = (np.concatenate(p) for p in zip(*parts))
    K = sp.coo_array((vals, (rows, cols)), shape=(n, n)).tocsr()
    dofs = DofTable((union // _KEY_STRIDE).astype(np.int64),
                    (union % _KEY_STRIDE).astype(np.int8))
    return Assembly(_tidy(K), dofs)


# ---------------------------------------------------------------- private helpers


def _truss(nodes, xyz, bars, E, A, layout) -> Assembly:
    dim = len(layout)
    ids, pos, conn = _nodes_and_connectivity(nodes, xyz, bars, nen=2, dim=dim)
    d = pos[conn[:, 1]] - pos[conn[:, 0]]
    L = _lengths(d)
    b = np.concatenate([-d, d], axis=1) / L[:, None]               # (e, 2 dim)
    axial = _per_element(E, L.size) * _per_element(A, L.size) / L
    ke = axial[:, None, None] * b[:, :, None] * b[:, None, :]
    return _scatter(ids, conn, ke, layout)


def _nodes_and_connectivity(nodes, coords, connectivity, *, nen: int, dim: int):
    """Sorted node ids, their positions and the connectivity as positions."""
    ids = np.asarray(nodes, dtype=np.int64).ravel()
    pos = np.asarray(coords, dtype=float)
    if pos.shape != (ids.size, dim):
        raise ValueError(f"coordinates have shape {pos.shape}; expected ({ids.size}, {dim})")
    order = np.argsort(ids, kind="stable")
    ids, pos = ids[order], pos[order]
    if np.any(np.diff(ids) == 0):
        raise ValueError("node ids must be unique")
    conn_ids = np.asarray(connectivity, dtype=np.int64).reshape(-1, nen)
    conn = np.searchsorted(ids, conn_ids)
    conn_clipped = np.clip(conn, 0, ids.size - 1)
    if np.any(ids[conn_clipped] != conn_ids):
        missing = conn_ids[ids[conn_clipped] != conn_ids][0]
        raise ValueError(f"element refers to node {int(missing)}, which has no coordinates")
    return ids, pos, conn


def _lengths(d: NDArray[np.float64]) -> NDArray[np.float64]:
    L = np.linalg.norm(d, axis=1)
    if np.any(L == 0):
        raise ValueError(f"element {int(np.flatnonzero(L == 0)[0])} has zero length")
    return L


def _per_element(value: ArrayLike, ne: int) -> NDArray[np.float64]:
    return np.broadcast_to(np.asarray(value, dtype=float), (ne,)).copy()


def _scatter(ids, conn, ke, layout: tuple[str, ...]) -> Assembly:
    """One COO scatter of all element matrices ``ke`` (e, k, k) into global K."""
    nd = len(layout)
    edofs = (conn[:, :, None] * nd + np.arange(nd)).reshape(conn.shape[0], -1)
    ke = 0.5 * (ke + np.swapaxes(ke, 1, 2))          # exact symmetry per element
    rows = np.broadcast_to(edofs[:, :, None], ke.shape).ravel()
    cols = np.broadcast_to(edofs[:, None, :], ke.shape).ravel()
    n = ids.size * nd
    K = sp.coo_array((ke.ravel(), (rows, cols)), shape=(n, n)).tocsr()
    codes = np.array([DOF_NAMES.index(name) for name in layout], dtype=np.int8)
    dofs = DofTable(np.repeat(ids, nd), np.tile(codes, ids.size))
    logger.debug("assembled %d elements into %d dofs", conn.shape[0], n)
    return Assembly(_tidy(K), dofs)


def _add_entries(assembly: Assembly, rows, cols, vals) -> Assembly:
    n = assembly.n
    extra = sp.coo_array((vals, (rows, cols)), shape=(n, n)).tocsr()
    return Assembly(_tidy(assembly.K + extra), assembly.dofs)


def _tidy(K) -> sp.csr_array:
    """CSR, duplicates summed, exactly symmetric, explicit zeros dropped, indices sorted."""
    K = sp.csr_array(K)
    K.sum_duplicates()
    K = sp.csr_array(0.5 * (K + K.T))
    K.eliminate_zeros()
    K.sort_indices()
    return K


def _key(node: int, name: str) -> int:
    if name not in DOF_NAMES:
        raise ValueError(f"unknown degree of freedom {name!r}; expected one of {DOF_NAMES}")
    return int(node) * _KEY_STRIDE + DOF_NAMES.index(name)


def _keys(dofs: DofTable) -> NDArray[np.int64]:
    return dofs.node.astype(np.int64) * _KEY_STRIDE + dofs.dof.astype(np.int64)


__all__ = [
    "Assembly", "NodeDof", "truss2d", "truss3d", "frame2d", "frame3d", "plane_stress_quad",
    "spring", "ground_spring", "apply_restraints", "load_vector", "combine",
]
