"""The element connectivity (``--elements``): which nodes each element joins.

File layout (comma-separated text; blank lines and lines starting with ``#``
skipped; an optional header line whose first cell is not an integer): one
element a line, ``element id, node id, node id, ...``, the corner nodes first
in the usual order of open mesh formats (VTK, Gmsh): counter-clockwise for
triangles and quadrilaterals, the bottom face then the top face for a
hexahedron. The kind follows from the node count and the model's dimension:

========  ===================  =====================================
nodes     2D model             3D model
========  ===================  =====================================
2         line                 line
3, 6      triangle             triangle (shell)
4         quadrilateral        tetrahedron; quadrilateral (shell) when
                               its nodes carry rotations
8         quadrilateral        hexahedron; quadrilateral (shell) when
                               its nodes carry rotations
9         quadrilateral        quadrilateral (shell)
10        -                    tetrahedron
20        -                    hexahedron
========  ===================  =====================================

Every node of an element must have coordinates (a node with every DOF
restrained, absent from the DOF map, is allowed when the coordinates list it).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Optional, Union

import numpy as np

from conditioning.errors import InputError
from conditioning.io.matrix_formats import read_csv_rows
from conditioning.model import ROTATIONS, Coordinates, DofTable
from conditioning.results import ELEMENT_KINDS, ElementTable

ARRAY_SOURCE = "<array>"

#: Node count -> kind in a 2D model.
KINDS_2D = {2: "line2", 3: "tri3", 6: "tri6", 4: "quad4", 8: "quad8", 9: "quad9"}
#: Node count -> kind in a 3D model (4 and 8 nodes with rotations: a shell quadrilateral).
KINDS_3D = {2: "line2", 3: "tri3", 6: "tri6", 9: "quad9", 4: "tet4", 10: "tet10", 8: "hex8", 20: "hex20"}
_SHELL = {4: "quad4", 8: "quad8"}
_WHAT = {2: "2-node lines, 3/6-node triangles, 4/8/9-node quadrilaterals",
         3: "2-node lines, 3/6-node triangles, 9-node (or with rotations 4/8-node) quadrilaterals, "
            "4/10-node tetrahedra, 8/20-node hexahedra"}


def read_elements(elements, coords: Optional[Coordinates], dofs: Optional[DofTable]) -> ElementTable:
    """Read an element table and check it against the coordinates and DOF map.

    Parameters
    ----------
    elements : path, mapping {id: node ids}, or sequence of (id, node ids)
        The connectivity (see the module docstring for the file layout).
    coords : Coordinates
        Node positions; every element node must be listed.
    dofs : DofTable
        The DOF map (before restraints): tells a 4- or 8-node shell element
        (its nodes carry rotations) from a solid in 3D.

    Returns
    -------
    ElementTable
        In the order given.

    Raises
    ------
    InputError
        Naming the file and line: a node id that is not an integer, an
        element id given twice, a node count that is no element kind of the
        model's dimension, a node without coordinates (or unknown to both the
        DOF map and the coordinates); and elements given without coordinates.
    """
    is_path = isinstance(elements, (str, bytes)) or hasattr(elements, "__fspath__")
    source = str(elements) if is_path else ARRAY_SOURCE
    if coords is None:
        raise InputError(source, "elements need node coordinates (--coords) to be read as geometry")
    rows = _rows_from_file(source) if is_path else _rows_from_data(elements, source)
    if not rows:
        raise InputError(source, "no element lines")
    rotating = set()
    if dofs is not None:
        rotating = {int(v) for v in np.unique(dofs.node[np.isin(dofs.dof, ROTATIONS)])}
    mapped = set() if dofs is None else {int(v) for v in dofs.nodes}
    dim = int(coords.dim)
    seen: dict[int, str] = {}
    ids, kinds, offsets, flat = [], [], [0], []
    for where, eid, nodes in rows:
        if eid in seen:
            raise InputError(source, f"{seen[eid]} and {where} both define element {eid}")
        seen[eid] = where
        known = coords.has(np.asarray(nodes, dtype=np.int64))
        if not np.all(known):
            v = int(nodes[int(np.flatnonzero(~known)[0])])
            why = ("has no coordinates" if v in mapped else
                   "is neither in the DOF map nor in the coordinates")
            raise InputError(source, f"{where}: element {eid} names node {v}, which {why}")
        kind = _kind(len(nodes), dim, any(v in rotating for v in nodes))
        if kind is None:
            raise InputError(source, f"{where}: element {eid} has {len(nodes)} nodes, which is no element kind "
                                     f"of a {dim}D model ({_WHAT[dim]})")
        ids.append(eid)
        kinds.append(ELEMENT_KINDS.index(kind))
        flat.extend(nodes)
        offsets.append(len(flat))
    return ElementTable(ids=np.asarray(ids, dtype=np.int64), kind=np.asarray(kinds, dtype=np.int8),
                        offsets=np.asarray(offsets, dtype=np.intp), nodes=np.asarray(flat, dtype=np.int64),
                        source=source)


def _kind(count: int, dim: int, rotations: bool) -> Optional[str]:
    if dim == 2:
        return KINDS_2D.get(count)
    if rotations and count in _SHELL:
        return _SHELL[count]
    return KINDS_3D.get(count)


def _is_int(cell: str) -> bool:
    cell = cell.strip()
    return cell.lstrip("+-").isdigit()


def _rows_from_file(source: str) -> list[tuple[str, int, list[int]]]:
    out = []
    rows = read_csv_rows(source)
    if rows and not _is_int(rows[0][1][0]):
        rows = rows[1:]  # a header
    for line_no, cells in rows:
        cells = [c for c in cells if c != ""]
        where = f"line {line_no}"
        if len(cells) < 2:
            raise InputError(source, f"{where}: expected an element id and its node ids, found {','.join(cells)!r}")
        bad = next((c for c in cells if not _is_int(c)), None)
        if bad is not None:
            what = "element id" if bad is cells[0] else "node"
            raise InputError(source, f"{where}: {what} {bad!r} is not an integer")
        out.append((where, int(cells[0]), [int(c) for c in cells[1:]]))
    return out


def _rows_from_data(elements, source: str) -> list[tuple[str, int, list[int]]]:
    items = sorted(elements.items()) if isinstance(elements, Mapping) else list(elements)
    out = []
    for k, item in enumerate(items):
        where = f"element entry {k + 1}"
        try:
            eid, nodes = item
            nodes = [int(v) for v in np.asarray(nodes).ravel()]
            if np.ndim(eid) != 0 or int(eid) != eid:
                raise ValueError
        except (TypeError, ValueError):
            raise InputError(source, f"{where}: expected (element id, node ids) with integer ids") from None
        out.append((where, int(eid), nodes))
    return out


ElementsInput = Union[str, Mapping, list]
