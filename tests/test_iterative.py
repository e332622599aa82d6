"""Factorization-free smallest eigenpairs, checked against LAPACK
(numpy.linalg.eigvalsh of the dense scaled matrix) on scikit-fem models,
with each preconditioner: smoothed-aggregation multigrid (pyamg, the 'amg'
extra) and the incomplete-LU fallback used without it."""

from __future__ import annotations

import sys

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from conditioning.engine.scaling import diagonal_scaling, scaled_matrix
from conditioning.stages.spectrum import iterative_spectrum
from conditioning.engine.memory import fits, predict_factor_memory
from conditioning.model import Coordinates, DofTable, Model
from conditioning.engine.ordering import nested_dissection

skfem = pytest.importorskip("skfem", reason="scikit-fem (test extra) builds the reference models")
from skfem import Basis, ElementHex1, ElementQuad1, ElementVector, MeshHex, MeshQuad, asm  # noqa: E402
from skfem.models.elasticity import lame_parameters, linear_elasticity  # noqa: E402


def free_body(n: int, dim: int) -> Model:
    """Unsupported elastic square/cube of n^dim elements (scikit-fem), with
    DOF map and coordinates; 3 (2D) or 6 (3D) rigid-body modes."""
    x = np.linspace(0.0, 2.0, n + 1)
    mesh = MeshQuad.init_tensor(x, x) if dim == 2 else MeshHex.init_tensor(x, x, x)
    elem = ElementQuad1() if dim == 2 else ElementHex1()
    lam, mu = lame_parameters(1.0e4, 0.3)
    K = sp.csr_array(asm(linear_elasticity(lam, mu), Basis(mesh, ElementVector(elem), intorder=2)))
    rows = np.arange(K.shape[0])
    xyz = np.zeros((mesh.p.shape[1], 3))
    xyz[:, :dim] = mesh.p.T
    ids = np.arange(1, xyz.shape[0] + 1, dtype=np.int64)
    return Model(K, dofs=DofTable((rows // dim + 1).astype(np.int64), (rows % dim).astype(np.int8)),
                 coords=Coordinates(ids, xyz, dim))


def lapack_smallest(K, k):
    S = scaled_matrix(K, diagonal_scaling(K)).toarray()
    return np.linalg.eigvalsh(S)[:k]


MULTIGRID = "smoothed-aggregation multigrid (pyamg"
ILU = "incomplete LU of S"


@pytest.fixture(params=["multigrid", "ilu"])
def preconditioner(request, monkeypatch):
    """The words the method names the preconditioner with: multigrid when
    pyamg is installed (skipped otherwise), the incomplete-LU fallback when
    the import of pyamg fails (None in sys.modules makes ``import`` raise
    ImportError)."""
    if request.param == "multigrid":
        pytest.importorskip("pyamg", reason="the 'amg' extra (pyamg) gives the multigrid preconditioner")
        return MULTIGRID
    monkeypatch.setitem(sys.modules, "pyamg", None)
    return ILU


@pytest.mark.parametrize("dim,n,modes", [(2, 20, 3), (3, 6, 6)])
def test_rigid_body_count_and_eigenvalues_match_lapack(dim, n, modes, preconditioner):
    """An unsupported body has 3 (2D) or 6 (3D) rigid-body modes (textbook
    fact, /work/shared/REFERENCES.md); LOBPCG finds that many near-zero
    eigenvalues of S and the next ones as LAPACK does, with either
    preconditioner, and the method names the one used."""
    model = free_body(n, dim)
    assert model.n > 600  # the iterative path, not the dense fallback
    res = iterative_spectrum(model, k=modes + 4, rng=0)
    ref = lapack_smallest(model.K, modes + 4)
    assert res.converged
    assert "LOBPCG" in res.method and preconditioner in res.method
    if preconditioner == ILU:
        assert "pyamg, the 'amg' extra, is not installed" in res.method
    assert res.count == modes and res.below_split is None  # no inertia to compare with
    assert np.all(np.abs(res.values[:modes]) < 1e-10)
    np.testing.assert_allclose(res.values[modes:modes + 4], ref[modes:], rtol=1e-7)


def clamped_plate(n: int) -> Model:
    """The free plate of :func:`free_body` with its left edge x = 0 removed (clamped)."""
    model = free_body(n, 2)
    xyz = model.coords.xyz[model.dofs.node - 1]
    keep = np.flatnonzero(xyz[:, 0] > 0)
    return Model(sp.csr_array(model.K[keep][:, keep]), dofs=model.dofs.take(keep), coords=model.coords)


def test_supported_body_has_no_near_null_mode(preconditioner):
    """Clamp the left edge of the plate: the smallest eigenvalue of S is
    clearly positive, as LAPACK confirms, with either preconditioner."""
    clamped = clamped_plate(24)
    res = iterative_spectrum(clamped, k=4, rng=1)
    ref = lapack_smallest(clamped.K, 4)
    assert res.count == 0 and res.converged and preconditioner in res.method
    np.testing.assert_allclose(res.values[:4], ref, rtol=1e-7)


def test_multigrid_near_null_space_and_node_blocks():
    """What the multigrid is given, checked through the eigenvalues LAPACK
    finds: the clamped plate's rows are whole nodes (2 DOFs each, so node
    blocks of 2) and its coordinates give 3 rigid-body motions; the free 3D
    body without coordinates gets the 3 translations only, and LOBPCG still
    finds its 6 rigid-body modes (textbook count) and the next eigenvalues."""
    pytest.importorskip("pyamg", reason="the 'amg' extra (pyamg) gives the multigrid preconditioner")
    clamped = clamped_plate(24)
    res = iterative_spectrum(clamped, k=4, rng=6)
    assert "3 rigid-body motions, node blocks of 2" in res.method
    np.testing.assert_allclose(res.values[:4], lapack_smallest(clamped.K, 4), rtol=1e-7)

    body = free_body(6, 3)
    bare = Model(body.K, dofs=body.dofs)
    res = iterative_spectrum(bare, k=10, rng=7)
    assert "3 translations per DOF type (no coordinates)" in res.method
    ref = lapack_smallest(body.K, 10)
    assert res.converged and res.count == 6
    np.testing.assert_allclose(res.values[6:10], ref[6:], rtol=1e-7)


def test_row_without_stiffness_is_a_zero_mode():
    """A DOF with no stiffness at all is an exact zero eigenvalue (common practice)."""
    model = free_body(20, 2)
    xyz = model.coords.xyz[model.dofs.node - 1]
    keep = np.flatnonzero(xyz[:, 0] > 0)
    K = sp.lil_array(model.K[keep][:, keep])
    K[5, :] = 0.0
    K[:, 5] = 0.0
    K = sp.csr_array(K)
    K.eliminate_zeros()
    reduced = Model(K, dofs=model.dofs.take(keep), coords=model.coords)
    res = iterative_spectrum(reduced, k=3, rng=2)
    # The row is left out of S on every path (as with a factorization) ...
    assert res.vectors.shape[0] == reduced.n - 1 and res.count == 0
    # ... and the diagnosis without a factorization lists it as a zero mode.
    import conditioning
    from conditioning.engine import scipy_engine

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(scipy_engine, "PREDICT_ABOVE", 100)
        report = conditioning.diagnose(reduced, memory_limit=1 << 12)
    assert report.factorization is None
    assert [m.kind for m in report.spectrum.modes] == ["dof-without-stiffness"]
    assert report.spectrum.modes[0].eigenvalue == 0.0 and report.spectrum.modes[0].vector[5] == 1.0


def test_model_too_big_for_the_limit_takes_the_iterative_path(monkeypatch):
    """Memory guard: under CONDITIONING_MEMORY_LIMIT=1M the factor of a
    free 3D body (about 2 MB predicted) does not fit; the prediction says so
    without factorizing, and the factorization-free path still finds the 6
    rigid-body modes LAPACK finds."""
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "1M")
    model = free_body(6, 3)
    xyz = model.coords.xyz[model.dofs.node - 1]
    factorized = []
    monkeypatch.setattr(spla, "splu", lambda *a, **k: factorized.append(1))
    pred = predict_factor_memory(model.K, nested_dissection(model.K, xyz))
    assert not fits(pred)
    assert factorized == []
    monkeypatch.undo()  # the incomplete factorization uses spilu, not splu
    res = iterative_spectrum(model, k=8, rng=3)
    ref = lapack_smallest(model.K, 8)
    assert res.count == int(np.count_nonzero(ref < 1e-10)) == 6


def test_modes_located_without_a_factorization():
    """The factorization-free eigenpairs feed the mode stage unchanged: the
    free plate's 3 rigid-body modes are located as rigid-body motions
    (two translations and the in-plane rotation; textbook count)."""
    from conditioning.stages.modes import locate_modes
    from conditioning.stages.structure import check_structure

    model = free_body(20, 2)
    spec = iterative_spectrum(model, k=6, rng=4)
    assert spec.count == 3 and spec.below_split is None
    located = locate_modes(model, check_structure(model), diagonal_scaling(model.K),
                           np.ones(model.n, dtype=bool), spec)
    assert len(located.modes) == 3
    assert all(m.kind == "rigid-body" for m in located.modes)


def test_more_modes_than_asked_for_are_all_found():
    """Three separate free plates (3 rigid-body modes each, textbook count)
    and k = 4: the search widens until the 9 near-null eigenvalues are all
    found, as LAPACK's eigvalsh counts them."""
    one = free_body(12, 2)
    K = sp.csr_array(sp.block_diag([one.K] * 3))
    n1 = one.n
    rows = np.arange(3 * n1)
    node = (rows // 2 + 1).astype(np.int64)
    xyz = np.vstack([one.coords.xyz + [3.0 * c, 0.0, 0.0] for c in range(3)])
    model = Model(K, dofs=DofTable(node, (rows % 2).astype(np.int8)),
                  coords=Coordinates(np.arange(1, xyz.shape[0] + 1, dtype=np.int64), xyz, 2))
    assert model.n > 600
    res = iterative_spectrum(model, k=4, rng=5)
    ref = lapack_smallest(K, 12)
    assert res.count == int(np.count_nonzero(ref < 1e-10)) == 9
