"""Mode export: VTK XML UnstructuredGrid and CSV, read back independently.

The .vtu is parsed with xml.etree and checked against the structure the VTK
file-format specification ("VTK File Formats", Kitware, XML UnstructuredGrid
section) requires: Points with 3 components, Cells with connectivity /
offsets / types (type 1 = VTK_VERTEX), PointData arrays of NumberOfPoints
tuples. The exported shapes are checked against mechanics, not against the
writer: a rigid-body mode of a free plane truss is a rigid motion
u = a + theta x r at every node (common practice), and K u = 0 to round-off
(numpy LAPACK null vectors).
"""

from __future__ import annotations

import csv
import dataclasses
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from conditioning.model import Model
from conditioning.stages.geometry import model_geometry
from conditioning.render.modes_export import ExportError, write_modes_csv, write_modes_vtu
from test_report_fixtures import healthy_report, singular_report


def _arrays(piece, section):
    out = {}
    for el in piece.find(section).findall("DataArray"):
        comps = int(el.get("NumberOfComponents", "1"))
        vals = np.array(el.text.split(), dtype=float) if el.text else np.zeros(0)
        out[el.get("Name")] = vals.reshape(-1, comps) if comps > 1 else vals
    return out


def test_vtu_structure_and_rigid_motion(tmp_path):
    report, model = singular_report()
    path = tmp_path / "modes.vtu"
    assert write_modes_vtu(report, path) == 3
    root = ET.parse(path).getroot()
    assert root.tag == "VTKFile" and root.get("type") == "UnstructuredGrid"
    piece = root.find("UnstructuredGrid/Piece")
    m = int(piece.get("NumberOfPoints"))
    assert m == int(piece.get("NumberOfCells")) == 10
    points = _arrays(piece, "Points")["Points"]
    assert points.shape == (m, 3)
    np.testing.assert_allclose(points, model.coords.xyz)
    cells = _arrays(piece, "Cells")
    np.testing.assert_array_equal(cells["connectivity"], np.arange(m))
    np.testing.assert_array_equal(cells["offsets"], np.arange(1, m + 1))
    np.testing.assert_array_equal(cells["types"], np.ones(m))
    data = _arrays(piece, "PointData")
    np.testing.assert_array_equal(data["node"], np.arange(1, 11))
    K = model.K.toarray()
    for k in (1, 2, 3):
        u = data[f"mode_{k}"]
        assert u.shape == (m, 3) and np.all(u[:, 2] == 0)
        # rigid plane motion: ux = a - theta*y, uy = b + theta*x
        x, y = points[:, 0], points[:, 1]
        A = np.zeros((2 * m, 3))
        A[0::2, 0], A[1::2, 1] = 1, 1
        A[0::2, 2], A[1::2, 2] = -y, x
        rhs = u[:, :2].ravel()
        coef, *_ = np.linalg.lstsq(A, rhs, rcond=None)
        assert np.linalg.norm(A @ coef - rhs) < 1e-10 * np.linalg.norm(rhs)
        # zero strain energy: K u = 0 relative to ||K|| ||u||
        urow = u[:, :2].ravel()
        assert np.linalg.norm(K @ urow) < 1e-12 * np.linalg.norm(K, 2) * np.linalg.norm(urow)
    assert "mode_1_rotation" not in data        # no rotational DOFs in a truss
    ev = root.find("UnstructuredGrid/FieldData/DataArray")
    assert ev.get("Name") == "eigenvalue" and ev.get("NumberOfTuples") == "3"


def test_vtu_rotations_as_separate_array(tmp_path):
    """A model with rotational DOFs gets mode_k_rotation; values go to the
    right node and component."""
    import dataclasses

    import scipy.sparse as sp

    from conditioning.model import Coordinates, DofTable

    node = np.repeat([1, 2], 3).astype(np.int64)
    dof = np.tile(np.array([0, 1, 5], dtype=np.int8), 2)
    vec = np.arange(1.0, 7.0)
    model = Model(K=sp.csr_array(np.eye(6)), dofs=DofTable(node, dof),
                  coords=Coordinates(np.array([1, 2]), np.array([[0., 0, 0], [1, 0, 0]]), 2))
    report, _ = singular_report()
    mode = dataclasses.replace(report.spectrum.modes[0], vector=vec)
    report = dataclasses.replace(report, spectrum=dataclasses.replace(report.spectrum,
                                                                      modes=[mode]),
                                 geometry=model_geometry(model))
    path = tmp_path / "frame.vtu"
    write_modes_vtu(report, path)
    data = _arrays(ET.parse(path).getroot().find("UnstructuredGrid/Piece"), "PointData")
    np.testing.assert_array_equal(data["mode_1"], [[1, 2, 0], [4, 5, 0]])
    np.testing.assert_array_equal(data["mode_1_rotation"], [[0, 0, 3], [0, 0, 6]])


def test_csv_round_trip(tmp_path):
    report, model = singular_report()
    path = tmp_path / "modes.csv"
    assert write_modes_csv(report, path) == 3
    with path.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == ["node", "dof", "mode_1", "mode_2", "mode_3"]
    assert len(rows) == model.n
    assert [(int(r["node"]), r["dof"]) for r in rows[:4]] == [(1, "ux"), (1, "uy"), (2, "ux"),
                                                             (2, "uy")]
    for k, mode in enumerate(report.spectrum.modes, start=1):
        np.testing.assert_array_equal([float(r[f"mode_{k}"]) for r in rows], mode.vector)


def test_csv_without_map_uses_rows(tmp_path):
    report, model = singular_report()
    bare = Model(K=model.K)
    path = tmp_path / "bare.csv"
    write_modes_csv(dataclasses.replace(report, geometry=model_geometry(bare)), path)
    with path.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["node"] for r in rows[:3]] == ["1", "2", "3"] and rows[0]["dof"] == ""


def test_vtu_needs_map_and_coordinates(tmp_path):
    report, model = singular_report()
    with pytest.raises(ExportError, match="DOF map and node coordinates"):
        write_modes_vtu(dataclasses.replace(report, geometry=model_geometry(
            Model(K=model.K, dofs=model.dofs))), tmp_path / "x.vtu")


def test_no_modes_writes_points_only(tmp_path):
    report, model = healthy_report()
    path = tmp_path / "none.vtu"
    assert write_modes_vtu(report, path) == 0
    piece = ET.parse(path).getroot().find("UnstructuredGrid/Piece")
    assert set(_arrays(piece, "PointData")) == {"node"}
