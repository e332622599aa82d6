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
import scipy.sparse as sp

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
    assert m == 10
    points = _arrays(piece, "Points")["Points"]
    assert points.shape == (m, 3)
    np.testing.assert_allclose(points, model.coords.xyz)
    # the 17 bars of the fixture, as line cells (type 3) between their end points
    cells = _arrays(piece, "Cells")
    assert int(piece.get("NumberOfCells")) == 17
    np.testing.assert_array_equal(cells["types"], np.full(17, 3))
    np.testing.assert_array_equal(cells["offsets"], 2 * np.arange(1, 18))
    lines = {tuple(sorted(p)) for p in cells["connectivity"].astype(int).reshape(-1, 2)}
    coupled = {(i, j) for i in range(m) for j in range(i + 1, m)
               if np.any(model.K.toarray()[2 * i:2 * i + 2, 2 * j:2 * j + 2])}
    assert lines == coupled
    lengths = sorted({round(float(np.linalg.norm(points[a] - points[b])), 6) for a, b in lines})
    assert lengths == [1.5, 2.0, 2.5]           # chords 2.0, posts 1.5, diagonals hypot(2, 1.5)
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
    assert set(_arrays(piece, "PointData")) == {"node", "has_dofs"}


def test_csv_without_modes_is_a_header(tmp_path):
    """No near-singular mode: the header alone, not a line per row with no value."""
    report, model = healthy_report()
    path = tmp_path / "none.csv"
    assert write_modes_csv(report, path) == 0
    assert path.read_text().splitlines() == ["node,dof"]


def test_vtu_keeps_a_node_without_rows(tmp_path):
    """Node 1 of the free truss pinned by removing its rows (as an FE export
    does): it stays a point, with zero displacement, has_dofs 0 and a vertex
    cell (K couples nothing to it), and the bars between the other nodes
    stay line cells."""
    from conditioning.model import DofTable

    report, model = singular_report()
    keep = np.arange(2, model.n)
    K = model.K.toarray()[np.ix_(keep, keep)]
    pinned = Model(K=sp.csr_array(K), dofs=DofTable(model.dofs.node[keep], model.dofs.dof[keep]),
                   coords=model.coords)
    modes = [dataclasses.replace(md, vector=md.vector[keep]) for md in report.spectrum.modes]
    report = dataclasses.replace(report, geometry=model_geometry(pinned),
                                 spectrum=dataclasses.replace(report.spectrum, modes=modes))
    path = tmp_path / "pinned.vtu"
    write_modes_vtu(report, path)
    piece = ET.parse(path).getroot().find("UnstructuredGrid/Piece")
    assert int(piece.get("NumberOfPoints")) == 10
    data = _arrays(piece, "PointData")
    cells = _arrays(piece, "Cells")
    points = _arrays(piece, "Points")["Points"]
    where = int(np.flatnonzero(data["node"] == 1)[0])
    np.testing.assert_allclose(points[where], model.coords.xyz[0])
    assert data["has_dofs"][where] == 0 and data["has_dofs"].sum() == 9
    assert np.all(data["mode_1"][where] == 0)
    # 17 bars less the 3 at node 1 (to nodes 2, 6 and 7), and a vertex for node 1
    types = cells["types"].astype(int)
    assert sorted(types.tolist()) == [1] + [3] * 14
    assert cells["connectivity"][-1] == where and types[-1] == 1


@pytest.mark.parametrize("name", ["mast_missing_brace", "rack_no_sway_support",
                                  "monorail_no_torsion_support"])
def test_vtu_of_a_demo_export_counts(tmp_path, name):
    """The bundled exports read back: a point per line of the coordinates
    file (read with the csv module), a line cell per node pair with a stored
    entry of the .mtx (read with scipy.io.mmread), a vertex for every point
    no line reaches, and a 3-component array per mode."""
    from pathlib import Path

    import scipy.io

    from conditioning import diagnose

    demo = Path(__file__).resolve().parents[1] / "matrices"
    files = {k: demo / f"{name}{s}" for k, s in (("K", ".mtx"), ("dofs", "_dofs.csv"),
                                                  ("coords", "_coords.csv"))}
    report = diagnose(str(files["K"]), dofs=str(files["dofs"]), coords=str(files["coords"]))
    path = tmp_path / f"{name}.vtu"
    written = write_modes_vtu(report, path)
    with files["coords"].open(newline="") as fh:
        coord_nodes = [int(r["node"]) for r in csv.DictReader(fh)]
    with files["dofs"].open(newline="") as fh:
        row_node = np.array([int(r["node"]) for r in csv.DictReader(fh)])
    coo = scipy.io.mmread(str(files["K"])).tocoo()
    pairs = {tuple(sorted((int(row_node[i]), int(row_node[j]))))
             for i, j in zip(coo.row, coo.col) if row_node[i] != row_node[j]}
    piece = ET.parse(path).getroot().find("UnstructuredGrid/Piece")
    data = _arrays(piece, "PointData")
    cells = _arrays(piece, "Cells")
    m = int(piece.get("NumberOfPoints"))
    assert m == len(coord_nodes) and sorted(data["node"].astype(int)) == sorted(coord_nodes)
    types = cells["types"].astype(int)
    ids = data["node"].astype(int)
    conn = cells["connectivity"].astype(int)
    lines = {tuple(sorted((int(ids[a]), int(ids[b])))) for a, b in conn[:2 * (types == 3).sum()]
             .reshape(-1, 2)}
    assert lines == pairs
    reached = {n for p in pairs for n in p}
    assert (types == 1).sum() == len(set(coord_nodes) - reached)
    assert int(piece.get("NumberOfCells")) == types.size == len(pairs) + (types == 1).sum()
    assert written == len(report.spectrum.modes) >= 1
    for k in range(1, written + 1):
        assert data[f"mode_{k}"].shape == (m, 3)
        assert np.all(data[f"mode_{k}"][data["has_dofs"] == 0] == 0)


@pytest.mark.parametrize("name", ["mast_missing_brace", "monorail_no_torsion_support"])
def test_vtu_reads_back_with_meshio(tmp_path, name):
    """meshio (a general-purpose mesh reader from the package index, test-only) reads the
    file: as many points as the coordinates file has nodes, line cells for the members,
    and one 3-component displacement array per mode whose restrained points are zero."""
    meshio = pytest.importorskip("meshio", reason="meshio (test extra) is not installed")
    from pathlib import Path

    from conditioning import diagnose

    demo = Path(__file__).resolve().parents[1] / "matrices"
    report = diagnose(str(demo / f"{name}.mtx"), dofs=str(demo / f"{name}_dofs.csv"),
                      coords=str(demo / f"{name}_coords.csv"), measure=False)
    path = tmp_path / "modes.vtu"
    written = write_modes_vtu(report, path)
    mesh = meshio.read(str(path))
    with (demo / f"{name}_coords.csv").open(newline="") as fh:
        nodes = sum(1 for _ in csv.DictReader(fh))
    assert mesh.points.shape == (nodes, 3)
    assert "line" in mesh.cells_dict and mesh.cells_dict["line"].shape[1] == 2
    for k in range(1, written + 1):
        u = mesh.point_data[f"mode_{k}"]
        assert u.shape == (nodes, 3) and np.abs(u).max() > 0
        assert np.all(u[mesh.point_data["has_dofs"] == 0] == 0)
