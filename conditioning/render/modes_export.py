"""Near-singular modes as files a standard viewer opens: VTK XML and CSV.

* :func:`write_modes_vtu` writes a VTK XML UnstructuredGrid (``.vtu``, the
  open format of the VTK file-format specification, "VTK File Formats",
  Kitware): one point per node of the coordinates (the DOF map's nodes
  first, then the nodes without rows, i.e. fully restrained supports), one
  VTK_LINE cell per pair of nodes K couples (the members as K's graph shows
  them) and one VTK_VERTEX cell per point no line reaches; per mode a
  3-component point-data array ``mode_k`` with the translations (ux, uy,
  uz) and, when the model has rotational DOFs, ``mode_k_rotation`` with
  (rx, ry, rz). A DOF the node does not carry (restrained) is 0, so a
  viewer's warp-by-vector filter draws the deformed structure with its
  supports in place. Point data ``node`` holds the node ids and
  ``has_dofs`` is 1 for a node with rows, 0 for one without. Field data
  ``eigenvalue`` lists the scaled eigenvalue of each written mode.
* :func:`write_modes_csv` writes ``node,dof,mode_1,mode_2,...``, one line per
  matrix row in row order; without a DOF map, ``node`` is the 1-based row
  and ``dof`` is empty. Without near-singular modes it writes the header
  ``node,dof`` and no rows.

Mode ``k`` is the k-th near-singular mode of the report (1-based), in K's
DOFs with unit max-norm (dimensionless shape). Modes without a stored
vector are left out and the numbering of the others is kept. Nodes,
positions and the row map come from the report's
:class:`~conditioning.results.ModelGeometry`.
"""

from __future__ import annotations

import csv
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Optional, Union

import numpy as np
from numpy.typing import NDArray

from conditioning import results
from conditioning.errors import ConditioningError

#: VTK cell type ids ("VTK File Formats", cell type table): a point, a 2-node line.
VTK_VERTEX = 1
VTK_LINE = 3


class ExportError(ConditioningError):
    """The requested export needs model context the report does not hold."""


def mode_vectors(report: results.Report) -> list[tuple[int, results.NearSingularMode]]:
    """``(k, mode)`` for every near-singular mode with a vector (k 1-based)."""
    if report.spectrum is None:
        return []
    return [(k, m) for k, m in enumerate(report.spectrum.modes, start=1)
            if m.vector is not None]


def nodal_field(geometry: results.ModelGeometry, vector: NDArray[np.float64],
                dof_ids: tuple[int, int, int]) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """Arrange a row vector by node: ``(nodes, values)`` with values (m, 3).

    ``dof_ids`` picks three entries of :data:`~conditioning.results.DOF_NAMES`
    (0-2 translations, 3-5 rotations); a DOF a node does not carry is 0.
    Values keep the vector's units.
    """
    if geometry.nodes is None:
        raise ExportError("the mode export by node needs a DOF map (--dofs or --dofs-per-node)")
    nodes = geometry.nodes
    values = np.zeros((nodes.size, 3))
    where = geometry.node_index()
    for c, d in enumerate(dof_ids):
        rows = np.flatnonzero(geometry.row_dof == d)
        values[where[rows], c] = vector[rows]
    return nodes, values


def write_modes_vtu(report: results.Report, path: Union[str, Path]) -> int:
    """Write the near-singular modes as a VTK XML UnstructuredGrid.

    Parameters
    ----------
    report : results.Report
        The diagnosis: modes with vectors, and ``report.geometry`` with a DOF
        map and node positions.
    path : str or Path
        Output ``.vtu`` file.

    Returns
    -------
    int
        Number of modes written.

    Raises
    ------
    ExportError
        When the report has no DOF map or lacks positions of mapped nodes.
    """
    g = report.geometry
    if g is None or g.nodes is None or g.xyz is None:
        raise ExportError("--modes-vtk needs a DOF map and node coordinates")
    nodes = g.nodes
    have = g.has_position()
    if not have.all():
        raise ExportError(f"--modes-vtk: no coordinates for {int((~have).sum())} mapped nodes "
                          f"(first: node {int(nodes[~have][0])})")
    other = g.other_nodes if g.other_nodes is not None else np.zeros(0, dtype=np.int64)
    other_xyz = g.other_xyz if g.other_xyz is not None else np.zeros((0, 3))
    xyz = np.vstack([g.xyz, other_xyz])
    m = xyz.shape[0]
    has_rotations = bool(np.isin(g.row_dof, (3, 4, 5)).any())
    element_ids = None
    if g.elements is not None:
        connectivity, offsets, types, element_ids = _element_cells(g.elements, np.concatenate([nodes, other]))
    else:
        connectivity, offsets, types = _cells(g.edges, m)

    root = ET.Element("VTKFile", type="UnstructuredGrid", version="1.0",
                      byte_order="LittleEndian", header_type="UInt64")
    grid = ET.SubElement(root, "UnstructuredGrid")
    modes = mode_vectors(report)
    if modes:
        field_data = ET.SubElement(grid, "FieldData")
        _array(field_data, "eigenvalue", "Float64", 1, [m_.eigenvalue for _, m_ in modes])
        field_data[0].set("NumberOfTuples", str(len(modes)))
    piece = ET.SubElement(grid, "Piece", NumberOfPoints=str(m), NumberOfCells=str(types.size))
    point_data = ET.SubElement(piece, "PointData")
    if modes:
        point_data.set("Vectors", f"mode_{modes[0][0]}")
    _array(point_data, "node", "Int64", 1, np.concatenate([nodes, other]))
    _array(point_data, "has_dofs", "UInt8", 1,
           np.concatenate([np.ones(nodes.size), np.zeros(other.size)]))
    restrained = np.zeros((other.size, 3))      # no rows: the node does not move
    for k, mode in modes:
        _, trans = nodal_field(g, mode.vector, (0, 1, 2))
        _array(point_data, f"mode_{k}", "Float64", 3, np.vstack([trans, restrained]).ravel())
        if has_rotations:
            _, rot = nodal_field(g, mode.vector, (3, 4, 5))
            _array(point_data, f"mode_{k}_rotation", "Float64", 3,
                   np.vstack([rot, restrained]).ravel())
    if element_ids is not None:
        cell_data = ET.SubElement(piece, "CellData")
        _array(cell_data, "element", "Int64", 1, element_ids)
        checks = report.geometry_checks
        flagged = {e.element for e in checks.flagged_elements} if checks is not None else set()
        _array(cell_data, "shape_flagged", "UInt8", 1,
               [1 if (e >= 0 and int(e) in flagged) else 0 for e in element_ids])
    points = ET.SubElement(piece, "Points")
    _array(points, "Points", "Float64", 3, xyz.ravel())
    cells = ET.SubElement(piece, "Cells")
    _array(cells, "connectivity", "Int64", 1, connectivity)
    _array(cells, "offsets", "Int64", 1, offsets)
    _array(cells, "types", "UInt8", 1, types)
    ET.indent(root)
    ET.ElementTree(root).write(str(path), encoding="utf-8", xml_declaration=True)
    return len(modes)


#: VTK cell type of each element kind (results.ELEMENT_KINDS); the node order
#: of the element table is VTK's (corners first, as the reader documents).
VTK_CELL = {"line2": 3, "tri3": 5, "tri6": 22, "quad4": 9, "quad8": 23, "quad9": 28,
            "tet4": 10, "tet10": 24, "hex8": 12, "hex20": 25}


def _element_cells(table: results.ElementTable, point_ids: NDArray[np.int64]):
    """VTK cell arrays from the element table, then a vertex per point no
    element uses; and the element id of each cell (-1 for a vertex)."""
    order = np.argsort(point_ids)
    index = order[np.searchsorted(point_ids, table.nodes, sorter=order)]
    alone = np.setdiff1d(np.arange(point_ids.size), index)
    connectivity = np.concatenate([index, alone]).astype(np.int64)
    offsets = np.concatenate([table.offsets[1:], table.offsets[-1] + np.arange(1, alone.size + 1)]).astype(np.int64)
    kinds = np.array([VTK_CELL[k] for k in results.ELEMENT_KINDS])
    types = np.concatenate([kinds[table.kind], np.full(alone.size, VTK_VERTEX)])
    ids = np.concatenate([table.ids, np.full(alone.size, -1)]).astype(np.int64)
    return connectivity, offsets, types, ids


def _cells(edges: Optional[NDArray[np.intp]], points: int
           ) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]]:
    """VTK cell arrays ``(connectivity, offsets, types)``: a line per edge
    (point indices), then a vertex per point no line reaches (all points when
    ``edges`` is None), so that every node stays visible in a viewer."""
    lines = np.zeros((0, 2), dtype=np.int64) if edges is None else np.asarray(edges, dtype=np.int64)
    alone = np.setdiff1d(np.arange(points), lines.ravel())
    connectivity = np.concatenate([lines.ravel(), alone])
    offsets = np.concatenate([2 * np.arange(1, lines.shape[0] + 1),
                              2 * lines.shape[0] + np.arange(1, alone.size + 1)])
    types = np.concatenate([np.full(lines.shape[0], VTK_LINE), np.full(alone.size, VTK_VERTEX)])
    return connectivity, offsets, types


def write_modes_csv(report: results.Report, path: Union[str, Path]) -> int:
    """Write the near-singular modes as CSV ``node,dof,mode_1,...``.

    One line per matrix row; ``node`` and ``dof`` from ``report.geometry``,
    or the 1-based row and an empty dof without a DOF map. Without a mode
    to write, the header ``node,dof`` alone (a row of node ids would carry
    no information).

    Returns
    -------
    int
        Number of modes written.
    """
    g = report.geometry
    mapped = g is not None and g.nodes is not None
    modes = mode_vectors(report)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        out = csv.writer(fh)
        out.writerow(["node", "dof"] + [f"mode_{k}" for k, _ in modes])
        columns = [np.asarray(m.vector, dtype=float) for _, m in modes]
        for row in range(report.summary.rows if modes else 0):
            if mapped:
                head = [int(g.row_node[row]), results.DOF_NAMES[int(g.row_dof[row])]]
            else:
                head = [row + 1, ""]
            out.writerow(head + [repr(float(c[row])) for c in columns])
    return len(modes)


def _array(parent: ET.Element, name: str, vtk_type: str, components: int, values) -> None:
    el = ET.SubElement(parent, "DataArray", type=vtk_type, Name=name, format="ascii")
    if components > 1:
        el.set("NumberOfComponents", str(components))
    if vtk_type.startswith("Float"):
        el.text = " ".join(repr(float(v)) for v in np.asarray(values).ravel())
    else:
        el.text = " ".join(str(int(v)) for v in np.asarray(values).ravel())
