"""Near-singular modes as files a standard viewer opens: VTK XML and CSV.

* :func:`write_modes_vtu` writes a VTK XML UnstructuredGrid (``.vtu``, the
  open format of the VTK file-format specification, "VTK File Formats",
  Kitware): one point per node, one VTK_VERTEX cell per point, and per mode
  a 3-component point-data array ``mode_k`` with the translations (ux, uy,
  uz) and, when the model has rotational DOFs, ``mode_k_rotation`` with
  (rx, ry, rz). A DOF the node does not carry is 0. Field data
  ``eigenvalue`` lists the scaled eigenvalue of each written mode.
* :func:`write_modes_csv` writes ``node,dof,mode_1,mode_2,...``, one line per
  matrix row in row order; without a DOF map, ``node`` is the 1-based row
  and ``dof`` is empty.

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
from typing import Union

import numpy as np
from numpy.typing import NDArray

from conditioning import results
from conditioning.errors import ConditioningError

#: VTK cell type id of a single point ("VTK File Formats", cell type table).
VTK_VERTEX = 1


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
    xyz = g.xyz
    m = nodes.size
    has_rotations = bool(np.isin(g.row_dof, (3, 4, 5)).any())

    root = ET.Element("VTKFile", type="UnstructuredGrid", version="1.0",
                      byte_order="LittleEndian", header_type="UInt64")
    grid = ET.SubElement(root, "UnstructuredGrid")
    modes = mode_vectors(report)
    if modes:
        field_data = ET.SubElement(grid, "FieldData")
        _array(field_data, "eigenvalue", "Float64", 1, [m_.eigenvalue for _, m_ in modes])
        field_data[0].set("NumberOfTuples", str(len(modes)))
    piece = ET.SubElement(grid, "Piece", NumberOfPoints=str(m), NumberOfCells=str(m))
    point_data = ET.SubElement(piece, "PointData")
    if modes:
        point_data.set("Vectors", f"mode_{modes[0][0]}")
    _array(point_data, "node", "Int64", 1, nodes)
    for k, mode in modes:
        _, trans = nodal_field(g, mode.vector, (0, 1, 2))
        _array(point_data, f"mode_{k}", "Float64", 3, trans.ravel())
        if has_rotations:
            _, rot = nodal_field(g, mode.vector, (3, 4, 5))
            _array(point_data, f"mode_{k}_rotation", "Float64", 3, rot.ravel())
    points = ET.SubElement(piece, "Points")
    _array(points, "Points", "Float64", 3, xyz.ravel())
    cells = ET.SubElement(piece, "Cells")
    _array(cells, "connectivity", "Int64", 1, np.arange(m))
    _array(cells, "offsets", "Int64", 1, np.arange(1, m + 1))
    _array(cells, "types", "UInt8", 1, np.full(m, VTK_VERTEX))
    ET.indent(root)
    ET.ElementTree(root).write(str(path), encoding="utf-8", xml_declaration=True)
    return len(modes)


def write_modes_csv(report: results.Report, path: Union[str, Path]) -> int:
    """Write the near-singular modes as CSV ``node,dof,mode_1,...``.

    One line per matrix row; ``node`` and ``dof`` from ``report.geometry``,
    or the 1-based row and an empty dof without a DOF map.

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
        for row in range(report.summary.rows):
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
