"""Building the Model: conditioning.io.load.load_model.

Outside references: numpy fancy indexing (np.delete / np.ix_) for what
removing restrained rows and columns must give; scipy.io.mmread for the
matrix; the public bcsstk01 file (../shared, via tests/conftest.py), whose
SuiteSparse record describes 48 rows = 8 nodes x 6 dofs (from memory);
the rest is "common practice" of finite element exports (one DOF map line per
row, restraints as (node, dof) pairs).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.errors import InputError
from conditioning.io.load import load_model
from conditioning.model import DOF_NAMES, Coordinates, DofTable, Model
from conftest import reference_matrix_path

BANNER_SYM = "%%MatrixMarket matrix coordinate real symmetric\n"


def chain(n: int) -> np.ndarray:
    """tridiag(-1, 2, -1): a fixed-fixed chain of unit springs, one dof per node."""
    return 2 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)


@pytest.fixture
def frame(tmp_path):
    """Invented 2-node plane frame: 6 rows = 2 nodes x (ux, uy, rz), with its files."""
    rng = np.random.default_rng(7)
    B = rng.standard_normal((6, 6))
    K = B @ B.T + 6 * np.eye(6)
    paths = {
        "K": tmp_path / "frame.mtx",
        "dofs": tmp_path / "dofs.csv",
        "coords": tmp_path / "coords.csv",
        "load": tmp_path / "load.csv",
        "solution": tmp_path / "u.csv",
        "fix": tmp_path / "fix.csv",
    }
    scipy.io.mmwrite(paths["K"], sp.coo_array(K), symmetry="symmetric", precision=17)
    paths["dofs"].write_text("node,dof\n10,ux\n10,uy\n10,rz\n20,ux\n20,uy\n20,rz\n")
    paths["coords"].write_text("node,x,y\n10,0.0,0.0\n20,3.5,0.0\n")
    paths["load"].write_text("\n".join(str(v) for v in np.arange(6.0)) + "\n")
    paths["solution"].write_text("u\n" + "\n".join(str(v) for v in -np.arange(6.0)) + "\n")
    paths["fix"].write_text("node,dof\n10,ux\n10,uy\n")
    return K, paths


def test_full_model_from_files(frame):
    """All files together; restraints remove rows/columns 0 and 1 exactly as np.ix_ does."""
    K, p = frame
    model = load_model(p["K"], dofs=p["dofs"], coords=p["coords"], load=p["load"],
                       solution=p["solution"], fix=p["fix"])
    assert isinstance(model, Model)
    keep = [2, 3, 4, 5]
    np.testing.assert_allclose(model.K.toarray(), K[np.ix_(keep, keep)], rtol=1e-15)
    assert model.restrained == 2 and model.n == 4
    assert model.source == str(p["K"])
    np.testing.assert_array_equal(model.load, np.arange(6.0)[keep])
    np.testing.assert_array_equal(model.solution, -np.arange(6.0)[keep])
    assert [model.row_label(r) for r in range(4)] == ["node 10 rz", "node 20 ux", "node 20 uy", "node 20 rz"]
    assert model.coords.dim == 2
    np.testing.assert_array_equal(model.coords.lookup(np.array([20])), [[3.5, 0.0, 0.0]])
    notes = " | ".join(model.notes)
    for fragment in ("Matrix Market coordinate real symmetric", "DOF map from", "coordinates from",
                     "load vector from", "solution vector from", "2 restrained dofs from"):
        assert fragment in notes


@pytest.mark.parametrize("k, layout", [
    (2, ("ux", "uy")),                              # plane truss / plane solid
    (3, ("ux", "uy", "uz")),                        # space truss / solid
    (6, ("ux", "uy", "uz", "rx", "ry", "rz")),      # space frame / shell
])
def test_dofs_per_node_layouts(k, layout):
    """Nodes 1..N in row order, each with the usual layout of its element family (common practice)."""
    n = 12
    model = load_model(chain(n), dofs_per_node=k)
    expected = [f"node {r // k + 1} {layout[r % k]}" for r in range(n)]
    assert [model.row_label(r) for r in range(n)] == expected
    assert any(f"{n // k} nodes numbered 1..{n // k}" in s for s in model.notes)


def test_bcsstk01_six_dofs_per_node_and_fix_node_one():
    """bcsstk01: 48 rows = 8 nodes x 6 dofs; fixing node 1 leaves rows 6..47 of the scipy-read matrix."""
    path = reference_matrix_path("bcsstk01")
    fix = [(1, name) for name in DOF_NAMES]
    model = load_model(path, dofs_per_node=6, fix=fix, load=np.ones(48))
    ref = scipy.io.mmread(path).toarray()
    np.testing.assert_array_equal(model.K.toarray(), ref[6:, 6:])
    assert model.restrained == 6 and model.load.shape == (42,)
    assert model.dofs.nodes.tolist() == list(range(2, 9))


def test_array_inputs(tmp_path):
    """Arrays instead of files: ndarray / scipy sparse matrix, DofTable, pairs, coordinate arrays."""
    K = chain(4)
    for given in (K, sp.coo_matrix(K), sp.csc_array(K)):
        model = load_model(given, dofs=[(1, "ux"), (1, "uy"), (2, "ux"), (2, "uy")],
                           coords=np.array([[1, 0.0, 0.0, 0.0], [2, 1.0, 0.0, 0.0]]),
                           load=np.ones(4), solution=np.zeros((4, 1)), fix=[(1, "ux")])
        assert model.source == "<array>"
        np.testing.assert_array_equal(model.K.toarray(), K[1:, 1:])
        assert model.coords.dim == 2  # all z are zero
    table = DofTable(node=np.array([5, 5, 6, 6]), dof=np.array([0, 1, 0, 1], dtype=np.int8))
    model = load_model(K, dofs=table, coords={5: (0.0, 0.0, 1.0), 6: (1.0, 0.0, 2.0)})
    assert model.coords.dim == 3
    model = load_model(K, dofs=[(5, 0), (5, 1), (6, 0), (6, 1)], coords=Coordinates(
        node=np.array([5, 6]), xyz=np.zeros((2, 3)), dim=2))
    assert model.row_label(3) == "node 6 uy"


def test_asymmetric_array_kept_and_triangle_mirrored():
    """An asymmetric matrix is not refused (the structure stage reports it); one triangle is mirrored."""
    A = np.array([[4.0, 1.0], [1.5, 4.0]])
    np.testing.assert_array_equal(load_model(A).K.toarray(), A)
    model = load_model(np.tril(chain(3)))
    np.testing.assert_array_equal(model.K.toarray(), chain(3))
    assert any("mirrored" in s for s in model.notes)


def test_coordinates_3d_and_all_zero_z(tmp_path):
    """A z column with a nonzero value gives dim 3; all z == 0 gives dim 2."""
    (tmp_path / "c3.csv").write_text("node,x,y,z\n1,0,0,0\n2,1,0,0.5\n")
    (tmp_path / "c0.csv").write_text("1,0,0,0\n2,1,0,0\n")
    assert load_model(chain(2), dofs_per_node=2, coords=[[1, 0, 0], [2, 1, 0]]).coords.dim == 2
    model = load_model(chain(4), dofs_per_node=2, coords=tmp_path / "c3.csv")
    assert model.coords.dim == 3
    assert load_model(chain(4), dofs_per_node=2, coords=tmp_path / "c0.csv").coords.dim == 2


# --------------------------------------------------------------------------- #
# Bad input
# --------------------------------------------------------------------------- #

BAD_CONTEXT = {
    # name: (file text, option, expected fragment); the matrix is chain(4) written to k.mtx
    "dofs_length": ("node,dof\n1,ux\n1,uy\n2,ux\n", "dofs", "DOF map has 3 rows but the matrix has 4 rows"),
    "dofs_unknown_name": ("node,dof\n1,ux\n1,uy\n2,ux\n2,uw\n", "dofs", "line 5: unknown dof 'uw'"),
    "dofs_duplicate": ("node,dof\n1,ux\n1,uy\n2,ux\n1,UY\n", "dofs", "lines 3 and 5 both map node 1 uy"),
    "dofs_node_not_integer": ("node,dof\n1,ux\n1,uy\nA,ux\n2,uy\n", "dofs", "line 4: node 'A' is not an integer"),
    "dofs_header": ("node,component\n1,ux\n", "dofs", "lacks a 'dof' column"),
    "dofs_empty": ("", "dofs", "file is empty"),
    "coords_missing": ("node,x,y\n1,0,0\n", "coords", "coordinates missing for 1 node of the DOF map (first: 2)"),
    "coords_non_numeric": ("node,x,y\n1,0,0\n2,one,0\n", "coords", "line 3: x 'one' is not a number"),
    "coords_duplicate": ("1,0,0\n2,1,0\n1,5,5\n", "coords", "lines 1 and 3 both give coordinates of node 1"),
    "coords_width": ("1,0\n2,1\n", "coords", "expected node,x,y or node,x,y,z"),
    "load_length": ("1\n2\n3\n", "load", "the load vector has 3 values but the matrix has 4 rows"),
    "solution_non_numeric": ("u\n1\n2\n3\n4x\n", "solution", "line 5: value '4x' is not a number"),
    "fix_not_in_map": ("node,dof\n1,ux\n3,uy\n", "fix", "line 3: restraint on node 3 uy, which is not in the DOF map"),
    "fix_unknown_name": ("node,dof\n1,uq\n", "fix", "line 2: unknown dof 'uq'"),
    "fix_everything": ("1,ux\n1,uy\n2,ux\n2,uy\n", "fix", "restraints remove all 4 rows"),
    "dofs_not_utf8": ("node,dof\n1,ux\n1,\xfcy\n", "dofs", "not UTF-8 text"),
    "load_nul_byte": ("1\n2\x00\n3\n4\n", "load", "NUL byte"),
}


@pytest.mark.parametrize("case", sorted(BAD_CONTEXT))
def test_bad_context_file_raises_input_error_naming_it(tmp_path, case):
    text, option, expected = BAD_CONTEXT[case]
    matrix = tmp_path / "k.mtx"
    scipy.io.mmwrite(matrix, sp.coo_array(chain(4)), symmetry="symmetric")
    bad = tmp_path / f"{case}.csv"
    bad.write_bytes(text.encode("latin-1"))
    kwargs = {option: bad}
    if option != "dofs":
        kwargs["dofs"] = _two_node_map(tmp_path)
    with pytest.raises(InputError) as info:
        load_model(matrix, **kwargs)
    assert info.value.path == str(bad)
    assert str(info.value).startswith(f"{bad}: ")
    assert expected in str(info.value)


def _two_node_map(tmp_path):
    p = tmp_path / "map.csv"
    p.write_text("node,dof\n1,ux\n1,uy\n2,ux\n2,uy\n")
    return p


def test_fix_and_coords_need_a_dof_map(tmp_path):
    fix = tmp_path / "fix.csv"
    fix.write_text("1,ux\n")
    with pytest.raises(InputError, match="need a DOF map") as info:
        load_model(chain(2), fix=fix)
    assert info.value.path == str(fix)
    with pytest.raises(InputError, match="coordinates need a DOF map"):
        load_model(chain(2), coords=[[1, 0, 0]])


def test_dofs_per_node_must_divide_n(tmp_path):
    matrix = tmp_path / "k.mtx"
    scipy.io.mmwrite(matrix, sp.coo_array(chain(4)), symmetry="symmetric")
    with pytest.raises(InputError, match="matrix has 4 rows, not a multiple of 3 dofs per node") as info:
        load_model(matrix, dofs_per_node=3)
    assert info.value.path == str(matrix)
    with pytest.raises(InputError, match=r"one of \[2, 3, 6\]"):
        load_model(matrix, dofs_per_node=4)
    with pytest.raises(InputError, match="not both"):
        load_model(matrix, dofs_per_node=2, dofs=_two_node_map(tmp_path))


def test_bad_arrays():
    """Array inputs are checked like files, with the source '<array>'."""
    with pytest.raises(InputError, match=r"^<array>: matrix has shape \(2, 3\)"):
        load_model(np.zeros((2, 3)))
    with pytest.raises(InputError, match="complex"):
        load_model(np.eye(2) * 1j)
    with pytest.raises(InputError, match="1 entry is NaN or Inf"):
        load_model(np.diag([1.0, np.inf]))
    with pytest.raises(InputError, match="load vector has shape"):
        load_model(chain(3), load=np.ones(2))
    with pytest.raises(InputError, match="solution vector has 1 NaN"):
        load_model(chain(3), solution=[1.0, np.inf, 0.0])
    with pytest.raises(InputError, match="expected a file path or a matrix"):
        load_model(42)
    with pytest.raises(InputError, match="unknown dof 'zz'"):
        load_model(chain(2), dofs=[(1, "ux"), (1, "zz")])


def test_missing_matrix_file(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        load_model(tmp_path / "absent.mtx")


def test_dof_codes_one_to_six_are_read_as_ux_to_rz(tmp_path):
    """Issue 11: exports often number the DOFs 1-6 (ux, uy, uz, rx, ry, rz);
    such a --dofs file is accepted and the notes say how it was read."""
    import scipy.io
    import scipy.sparse as sp
    from conditioning.io.load import load_model

    K = sp.random(12, 12, density=0.5, random_state=1)
    K = sp.csr_array(K + K.T + 12 * sp.eye(12))
    scipy.io.mmwrite(tmp_path / "k.mtx", K)
    (tmp_path / "dofs.csv").write_text("node,dof\n" + "".join(f"{n},{c}\n" for n in (1, 2) for c in range(1, 7)))
    model = load_model(str(tmp_path / "k.mtx"), dofs=str(tmp_path / "dofs.csv"))
    assert model.dofs.dof.tolist() == list(range(6)) * 2
    assert any("DOF codes 1-6" in note for note in model.notes)
