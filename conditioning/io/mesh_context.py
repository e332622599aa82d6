"""Coordinates and elements from the tools engineers already have.

* A scikit-fem basis (``load_model(K, basis=...)``): its DOF numbering gives
  the DOF map (row ``basis.nodal_dofs[c, i]`` is component c of vertex i,
  node id i + 1), its mesh the coordinates and the elements. Only bases whose
  every DOF sits at a vertex (vector P1/Q1-type elements) are read; scikit-fem
  itself is not imported (the basis is read by its attributes).
* A mesh file read with meshio (``--mesh FILE``; the optional ``mesh``
  extra): points and cells of open formats (Gmsh ``.msh``, VTK/VTU, XDMF).
  Node ids are the point numbers from 1, unless the points carry an integer
  array named ``node`` or ``node_id``.

Both give :class:`~conditioning.model.Coordinates` and an element table in
the forms :func:`conditioning.io.load.load_model` takes.
"""

from __future__ import annotations

from typing import Optional

import numpy as np

from conditioning.errors import InputError
from conditioning.model import DOF_NAMES, Coordinates, DofTable

#: scikit-fem's corner order of a hexahedron into the VTK order the element
#: table uses (scikit-fem's reference hexahedron numbers its corners
#: (0,0,0), (0,1,0), (1,0,0), (0,0,1), (1,1,0), (0,1,1), (1,0,1), (1,1,1)).
SKFEM_HEX_TO_VTK = (0, 2, 4, 1, 3, 6, 7, 5)

#: meshio cell types read as elements (corner-first node orders, as VTK's).
MESHIO_KINDS = {"line": 2, "triangle": 3, "triangle6": 6, "quad": 4, "quad8": 8, "quad9": 9,
                "tetra": 4, "tetra10": 10, "hexahedron": 8, "hexahedron20": 20}


def from_basis(basis, n: int) -> tuple[DofTable, Coordinates, list[tuple[int, list[int]]]]:
    """(DOF map, coordinates, elements) of a scikit-fem vector basis with ``n`` DOFs.

    Raises InputError when the basis has DOFs that are not at vertices, or
    does not number exactly the ``n`` rows of K.
    """
    source = "<basis>"
    try:
        nodal = np.asarray(basis.nodal_dofs)
        p = np.asarray(basis.mesh.p, dtype=np.float64)
        t = np.asarray(basis.mesh.t)
        total = int(basis.N)
    except AttributeError:
        raise InputError(source, "basis must be a scikit-fem Basis (nodal_dofs, mesh.p, mesh.t, N)") from None
    dim, nverts = p.shape
    if total != n:
        raise InputError(source, f"the basis numbers {total} DOFs but K has {n} rows")
    if nodal.ndim != 2 or nodal.shape[1] != nverts or nodal.size != n or nodal.shape[0] > 3:
        raise InputError(source, "only bases whose every DOF sits at a vertex (vector P1/Q1-type elements) "
                                 f"are read: {nodal.shape[0] if nodal.ndim == 2 else '?'} vertex DOFs per "
                                 f"vertex for {n} rows")
    node = np.empty(n, dtype=np.int64)
    dof = np.empty(n, dtype=np.int8)
    for c in range(nodal.shape[0]):
        node[nodal[c]] = np.arange(nverts) + 1
        dof[nodal[c]] = DOF_NAMES.index(("ux", "uy", "uz")[c])
    xyz = np.zeros((nverts, 3))
    xyz[:, :dim] = p.T
    coords = Coordinates(np.arange(nverts, dtype=np.int64) + 1, xyz, 3 if dim == 3 and np.any(xyz[:, 2]) else 2)
    order = list(SKFEM_HEX_TO_VTK) if (dim == 3 and t.shape[0] == 8) else list(range(t.shape[0]))
    elements = [(k + 1, [int(v) + 1 for v in t[order, k]]) for k in range(t.shape[1])]
    return DofTable(node, dof), coords, elements


def read_mesh(path: str) -> tuple[Coordinates, list[tuple[int, list[int]]]]:
    """Coordinates and elements of a mesh file, read with meshio (optional)."""
    try:
        import meshio
    except ImportError:
        raise InputError(path, "reading a mesh file needs meshio: pip install 'conditioning[mesh]'") from None
    try:
        mesh = meshio.read(path)
    except Exception as exc:  # meshio raises many kinds for unreadable files
        raise InputError(path, f"not a mesh meshio can read ({type(exc).__name__}: {exc})"[:300]) from None
    points = np.asarray(mesh.points, dtype=np.float64)
    ids: Optional[np.ndarray] = None
    for name in ("node", "node_id"):
        if name in mesh.point_data:
            ids = np.asarray(mesh.point_data[name]).ravel().astype(np.int64)
    if ids is None:
        ids = np.arange(points.shape[0], dtype=np.int64) + 1
    xyz = np.zeros((points.shape[0], 3))
    xyz[:, : min(points.shape[1], 3)] = points[:, :3]
    coords = Coordinates(np.sort(ids), xyz[np.argsort(ids)], 3 if np.any(xyz[:, 2]) else 2)
    elements, eid = [], 0
    for block in mesh.cells:
        if block.type not in MESHIO_KINDS:
            continue
        for row in np.asarray(block.data):
            eid += 1
            elements.append((eid, [int(ids[v]) for v in row]))
    return coords, elements
