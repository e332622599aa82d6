"""Element shapes (--elements): closed-form values and scikit-fem's own Jacobians.

Outside references: closed forms (a unit square: angles 90, scaled Jacobian 1;
a parallelogram with 45/135 degree corners: scaled Jacobian sin 45 = sqrt(2)/2
and Jacobian ratio 1, as its Jacobian is constant; an arrowhead quadrilateral
whose reflex corner has the corner Jacobian -2 against 4, 1, 1 at the others;
a tetrahedron flattened onto its base: volume 0) and scikit-fem's isoparametric
mapping (``detDF`` at the reference corners, test-only). The limits are
common practice (conditioning.stages.element_quality).
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest

import conditioning
from conditioning.errors import InputError
from conditioning.io.load import load_model
from conditioning.linalg import element_shape as shape
from conditioning.stages.element_quality import element_measures

skfem = pytest.importorskip("skfem")
from fe_reference import quad_plate, restrained, three_two_one_supports  # noqa: E402

SQUARE = [[0, 0], [1, 0], [1, 1], [0, 1]]
PARALLELOGRAM = [[0, 0], [2, 0], [3, 1], [1, 1]]
ARROWHEAD = [[0, 0], [2, 0], [0.5, 0.5], [0, 2]]


def corners(points) -> np.ndarray:
    P = np.zeros((1, len(points), 3))
    P[0, :, : len(points[0])] = points
    return P


def quad(points):
    P = corners(points)
    return shape.polygon_corners(P, shape.polygon_normal(P, True))


def skfem_corner_det(points) -> np.ndarray:
    """scikit-fem's Jacobian determinant of the bilinear map at the reference
    corners (0,0), (1,0), (1,1), (0,1): equal to the corner determinant, as
    the reference square has unit edges."""
    m = skfem.MeshQuad(np.asarray(points, dtype=float).T, np.arange(4)[:, None])
    return m._mapping().detDF(np.array([[0, 1, 1, 0], [0, 0, 1, 1.0]]))[0]


@pytest.mark.parametrize("points", [SQUARE, PARALLELOGRAM, ARROWHEAD])
def test_corner_jacobians_are_scikit_fem_s(points):
    det, _, _ = quad(points)
    np.testing.assert_allclose(det[0], skfem_corner_det(points), rtol=1e-14)


def test_unit_square_and_parallelogram_closed_forms():
    det, scaled, angle = quad(SQUARE)
    np.testing.assert_allclose(scaled[0], 1.0)
    np.testing.assert_allclose(angle[0], 90.0)
    assert shape.jacobian_ratio(det)[0] == 1.0
    assert shape.aspect_ratio(corners(SQUARE), shape.EDGES[4])[0] == 1.0
    det, scaled, angle = quad(PARALLELOGRAM)
    np.testing.assert_allclose(scaled[0], math.sqrt(2) / 2, rtol=1e-14)        # sin 45
    np.testing.assert_allclose(sorted(angle[0]), [45, 45, 135, 135], rtol=1e-12)
    np.testing.assert_allclose(shape.jacobian_ratio(det)[0], 1.0, rtol=1e-14)  # constant Jacobian
    np.testing.assert_allclose(shape.aspect_ratio(corners(PARALLELOGRAM), shape.EDGES[4])[0], math.sqrt(2))


def test_inverted_quadrilateral_closed_form():
    det, scaled, angle = quad(ARROWHEAD)
    np.testing.assert_allclose(det[0], [4, 1, -2, 1], rtol=1e-14)
    assert shape.jacobian_ratio(det)[0] == pytest.approx(-0.5)
    assert angle[0][2] > 180  # the reflex corner


def test_flattened_and_right_tetrahedra():
    flat = np.array([[[0, 0, 0], [1, 0, 0], [0, 1, 0], [0.3, 0.3, 0.0]]])
    det, scaled = shape.solid_corners(flat, shape.TET_CORNER_EDGES)
    np.testing.assert_allclose(det, 0.0, atol=1e-15)                          # volume 0
    right = np.array([[[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1.0]]])
    det, scaled = shape.solid_corners(right, shape.TET_CORNER_EDGES)
    np.testing.assert_allclose(det, 1.0, rtol=1e-14)                           # 6 V = 1 at every corner
    assert scaled[0, 0] == pytest.approx(1.0)                                  # the right-angled corner
    regular = np.array([[[1, 1, 1], [1, -1, -1], [-1, 1, -1], [-1, -1, 1.0]]])
    det, scaled = shape.solid_corners(regular, shape.TET_CORNER_EDGES)
    np.testing.assert_allclose(np.abs(scaled), 1 / math.sqrt(2), rtol=1e-14)   # 6V / l^3 of a regular tet


def test_unit_cube_corners():
    cube = np.array([[[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1.0]]])
    det, scaled = shape.solid_corners(cube, shape.HEX_CORNER_EDGES)
    np.testing.assert_allclose(det, 1.0)
    np.testing.assert_allclose(shape.quad_warping(cube[:, [0, 1, 2, 3]]), 0.0, atol=1e-12)


def plate_with(points_of_22=None, t_swap=False):
    """A 4 x 2 plane-stress quad plate (scikit-fem), its elements as a table."""
    mesh = skfem.MeshQuad.init_tensor(np.linspace(0, 40, 5), np.linspace(0, 20, 3))
    p, t = mesh.p.copy(), mesh.t.copy()
    ref = restrained(quad_plate(p, t), three_two_one_supports(quad_plate(p, t)))
    elements = {k + 1: [int(v) + 1 for v in t[:, k]] for k in range(t.shape[1])}
    return ref, elements, p, t


def test_healthy_scikit_fem_mesh_has_no_element_finding():
    ref, elements, _, _ = plate_with()
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, elements=elements, measure=False)
    assert report.geometry_checks.elements == 8 and report.geometry_checks.element_kinds == {"quad4": 8}
    assert not report.geometry_checks.flagged_elements
    assert report.status == "healthy"


def test_inverted_and_collapsed_elements_are_named():
    ref, elements, p, t = plate_with()
    # element 3 numbered as an arrowhead-like bow tie; element 5 with a repeated node (collapsed)
    elements[3] = [elements[3][0], elements[3][2], elements[3][1], elements[3][3]]
    elements[5] = [elements[5][0], elements[5][1], elements[5][1], elements[5][3]]
    model = load_model(ref.K, dofs=ref.dofs, coords=ref.coords, elements=elements)
    report = conditioning.diagnose(model, measure=False)
    codes = {f.code: f for f in report.findings}
    assert "element 3" in codes["geometry.element-inverted"].message
    assert "element 5" in codes["geometry.element-collapsed"].message
    assert report.verdict.startswith("suspect geometry: 1 element inverted or folded"), report.verdict
    assert "1 element collapsed" in report.verdict and report.status == "errors"
    q = {e.element: e for e in element_measures(model)}
    assert q[3].problems[0] == "inverted" and q[5].problems[0] == "collapsed"


def test_clockwise_mesh_is_not_inverted():
    ref, elements, _, _ = plate_with()
    clockwise = {k: v[::-1] for k, v in elements.items()}
    model = load_model(ref.K, dofs=ref.dofs, coords=ref.coords, elements=clockwise)
    assert not any(e.problems for e in element_measures(model))


@pytest.mark.parametrize("line, problem", [
    ("9,1,2,999,4", "line 2: element 9 names node 999, which is neither in the DOF map nor in the coordinates"),
    ("9,1,2,3,4,5", "line 2: element 9 has 5 nodes, which is no element kind of a 2D model"),
    ("1,1,2,7,6", "line 1 and line 2 both define element 1"),
    ("9,1,x,7,6", "line 2: node 'x' is not an integer"),
])
def test_bad_element_files_name_the_line(tmp_path, line, problem):
    ref, elements, _, _ = plate_with()
    path = tmp_path / "elements.csv"
    path.write_text(f"1,{','.join(map(str, elements[1]))}\n{line}\n")
    with pytest.raises(InputError) as err:
        load_model(ref.K, dofs=ref.dofs, coords=ref.coords, elements=str(path))
    assert problem in str(err.value)
    assert str(path) in str(err.value)


def test_cli_elements_bad_input_and_vtu_cells(tmp_path):
    case_dir = tmp_path
    ref, elements, _, _ = plate_with()
    import scipy.io
    scipy.io.mmwrite(str(case_dir / "k.mtx"), ref.K, symmetry="symmetric")
    (case_dir / "dofs.csv").write_text("node,dof\n" + "".join(
        f"{n},{('ux', 'uy')[d]}\n" for n, d in zip(ref.dofs.node, ref.dofs.dof)))
    (case_dir / "coords.csv").write_text("node,x,y\n" + "".join(
        f"{n},{x},{y}\n" for n, (x, y, _) in zip(ref.coords.node, ref.coords.xyz)))
    (case_dir / "el.csv").write_text("element,n1,n2,n3,n4\n" + "".join(
        f"{k},{','.join(map(str, v))}\n" for k, v in elements.items()))
    (case_dir / "bad.csv").write_text("1,1,2,3\n1,2,3,4\n")
    base = [sys.executable, "-m", "conditioning", "diagnose", str(case_dir / "k.mtx"), "--dofs",
            str(case_dir / "dofs.csv"), "--coords", str(case_dir / "coords.csv"), "--samples", "0"]
    bad = subprocess.run(base + ["--elements", str(case_dir / "bad.csv")], capture_output=True, text=True)
    assert bad.returncode == 2
    assert bad.stderr.strip().count("\n") == 0 and "line 1 and line 2 both define element 1" in bad.stderr
    vtu = case_dir / "modes.vtu"
    ok = subprocess.run(base + ["--elements", str(case_dir / "el.csv"), "--modes-vtk", str(vtu)],
                        capture_output=True, text=True)
    assert ok.returncode == 0, ok.stderr
    meshio = pytest.importorskip("meshio")
    grid = meshio.read(str(vtu))
    quads = [c for c in grid.cells if c.type == "quad"]
    assert quads and quads[0].data.shape == (8, 4)


# ------------------------------------------------ scikit-fem basis, mesh files
def _basis_model(mesh, element):
    from skfem.models.elasticity import lame_parameters, linear_elasticity
    basis = skfem.Basis(mesh, skfem.ElementVector(element))
    K = linear_elasticity(*lame_parameters(210000.0, 0.3)).assemble(basis)
    return basis, (K + K.T) / 2


@pytest.mark.parametrize("make", [
    lambda: (skfem.MeshTri.init_symmetric().refined(2), skfem.ElementTriP1()),
    lambda: (skfem.MeshQuad.init_tensor(np.linspace(0, 4, 5), np.linspace(0, 2, 3)), skfem.ElementQuad1()),
    lambda: (skfem.MeshTet.init_tensor(*[np.linspace(0, 1, 3)] * 3), skfem.ElementTetP1()),
    lambda: (skfem.MeshHex.init_tensor(*[np.linspace(0, 1, 3)] * 3), skfem.ElementHex1()),
])
def test_basis_gives_map_coordinates_and_healthy_elements(make):
    """load_model(K, basis=...) numbers rows as scikit-fem does (nodal_dofs) and
    reads its mesh's elements; a healthy mesh flags none (an inverted corner order
    of scikit-fem's hexahedra would flag every one)."""
    mesh, element = make()
    basis, K = _basis_model(mesh, element)
    model = load_model(K, basis=basis)
    for c in range(basis.nodal_dofs.shape[0]):
        rows = basis.nodal_dofs[c]
        assert np.all(model.dofs.node[rows] == np.arange(mesh.p.shape[1]) + 1)
        assert np.all(model.dofs.dof[rows] == c)
    np.testing.assert_array_equal(model.coords.xyz[:, : mesh.p.shape[0]], mesh.p.T)
    assert len(model.elements) == mesh.t.shape[1]
    measures = element_measures(model)
    assert not [q for q in measures if q.problems], [q for q in measures if q.problems][:2]


def test_mesh_file_read_with_meshio(tmp_path):
    meshio = pytest.importorskip("meshio")
    ref, elements, p, t = plate_with()
    path = tmp_path / "plate.vtu"
    # vertex i of scikit-fem is node i + 1 (fe_reference); a point array names the ids
    meshio.write(str(path), meshio.Mesh(np.c_[p.T, np.zeros(p.shape[1])], [("quad", t.T)],
                                        point_data={"node": np.arange(p.shape[1]) + 1}))
    model = load_model(ref.K, dofs=ref.dofs, mesh=str(path))
    assert len(model.elements) == t.shape[1]
    np.testing.assert_array_equal(model.coords.xyz[:, :2], p.T)
    with pytest.raises(InputError):
        load_model(ref.K, dofs=ref.dofs, mesh=str(path), coords=ref.coords)


def test_warped_quadrilateral_closed_form():
    """Corner (1, 1) lifted by h: the triangles of the diagonal 0-2 have normals
    (0, -h, 1) and (-h, 0, 1), at acos(1 / (1 + h^2)) (the larger of the two splits)."""
    h = 0.2
    P = np.array([[[0, 0, 0], [1, 0, 0], [1, 1, h], [0, 1, 0.0]]])
    assert shape.quad_warping(P)[0] == pytest.approx(math.degrees(math.acos(1 / (1 + h * h))), rel=1e-12)


def test_shell_quadrilaterals_in_3d_are_read_with_rotations(tmp_path):
    """In a 3D model whose nodes carry rotations, 4 nodes are a shell quadrilateral, not a tetrahedron."""
    import scipy.sparse as sp
    from conditioning.model import DofTable, Coordinates
    n_nodes = 4
    dofs = DofTable(np.repeat(np.arange(1, n_nodes + 1), 6), np.tile(np.arange(6, dtype=np.int8), n_nodes))
    coords = Coordinates(np.arange(1, 5), np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0.3], [0, 1, 0.0]]), 3)
    K = sp.identity(24, format="csr") * 2.0 - sp.eye(24, k=6, format="csr") - sp.eye(24, k=-6, format="csr")
    model = load_model(K, dofs=dofs, coords=coords, elements={7: [1, 2, 3, 4]})
    (q,) = element_measures(model)
    assert q.kind == "quad4" and "warping" in q.problems
    translations = DofTable(np.repeat(np.arange(1, 5), 3), np.tile(np.arange(3, dtype=np.int8), 4))
    model = load_model(sp.identity(12, format="csr"), dofs=translations, coords=coords, elements={7: [1, 2, 3, 4]})
    assert model.elements.kind_name(0) == "tet4"
