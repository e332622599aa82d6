"""Suggested restraints remove the null space: closed forms, LAPACK, scikit-fem.

Each test builds a free structure, takes its null space from LAPACK
(scipy.linalg.null_space, SVD) or a closed form, asks for restraints, then
checks with LAPACK (numpy.linalg.eigvalsh) that the restrained matrix is
positive definite. A restraint removes at most one dimension of the null
space, so the smallest set has exactly as many restraints as the nullity
(linear algebra; common practice: 3 for a free body in 2D, 6 in 3D).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from conditioning.model import Coordinates, DofTable, Model
from conditioning.stages.restraints import nonsingular_after_restraints, suggest_restraints
from test_jumps import frame_2d, portal_frame_mm


def free_chain(n: int, *, coords: bool = True, first_node: int = 1) -> Model:
    """n nodes joined by n-1 unit springs along x, no support (1D, ux only)."""
    K = sp.diags_array([-np.ones(n - 1), np.r_[1.0, 2 * np.ones(n - 2), 1.0], -np.ones(n - 1)],
                       offsets=[-1, 0, 1], format="csr")
    nodes = np.arange(first_node, first_node + n, dtype=np.int64)
    table = DofTable(node=nodes, dof=np.zeros(n, dtype=np.int8))
    xyz = np.c_[np.arange(n, dtype=float), np.zeros(n), np.zeros(n)]
    return Model(sp.csr_array(K), dofs=table, coords=Coordinates(nodes, xyz, 2) if coords else None)


def skfem_model(mesh, element, dim: int) -> Model:
    """Stiffness of linear elasticity, a(u, v) = int sigma(u) : eps(v) dx,
    assembled by scikit-fem (skfem.models.elasticity; E = 210000, nu = 0.3),
    with a DOF map from basis.nodal_dofs (component c of vertex i)."""
    import skfem
    from skfem.models.elasticity import lame_parameters, linear_elasticity

    basis = skfem.Basis(mesh, skfem.ElementVector(element))
    K = sp.csr_array(linear_elasticity(*lame_parameters(210000.0, 0.3)).assemble(basis))
    nodal = np.asarray(basis.nodal_dofs)
    node = np.empty(basis.N, dtype=np.int64)
    dof = np.empty(basis.N, dtype=np.int8)
    for c in range(dim):
        node[nodal[c]] = np.arange(nodal.shape[1]) + 1
        dof[nodal[c]] = c
    p = np.asarray(mesh.p, dtype=float).T
    xyz = np.c_[p, np.zeros((p.shape[0], 3 - dim))]
    coords = Coordinates(np.arange(1, p.shape[0] + 1, dtype=np.int64), xyz, dim)
    return Model(K, dofs=DofTable(node, dof), coords=coords)


def reduced(K, restraints) -> np.ndarray:
    keep = np.setdiff1d(np.arange(K.shape[0]), [r.row for r in restraints])
    return K.toarray()[np.ix_(keep, keep)]


def is_positive_definite(A: np.ndarray) -> bool:
    """LAPACK eigvalsh on the diagonally scaled matrix: every eigenvalue
    above 1e-10 (the scaled spectrum is O(1))."""
    s = 1.0 / np.sqrt(np.diag(A))
    return bool(np.linalg.eigvalsh(s[:, None] * A * s)[0] > 1e-10)


def test_free_chain_one_restraint_at_an_end():
    """A free-free chain of unit springs has the single null vector (1, ..., 1)
    (closed form). One restraint; with coordinates it goes to an end node,
    and the restrained chain is the fixed-free chain whose smallest
    eigenvalue is 2 - 2 cos(pi / (2N + 1)), N = n - 1 (classical closed form
    of tridiag(-1, 2, -1) with last diagonal 1; from memory), checked
    against LAPACK eigvalsh."""
    n = 30
    model = free_chain(n)
    restraints = suggest_restraints(model, np.ones(n))
    assert len(restraints) == 1
    r = restraints[0]
    assert r.node in (1, n) and r.dof == "ux"
    assert "translation ux" in r.reason
    lam = np.linalg.eigvalsh(reduced(model.K, restraints))
    N = n - 1
    assert lam[0] == pytest.approx(2 - 2 * math.cos(math.pi / (2 * N + 1)), rel=1e-10)
    assert nonsingular_after_restraints(model.K, restraints)
    assert not nonsingular_after_restraints(model.K, [])


def test_free_chain_without_coordinates_or_map():
    """Without a DOF map the restraint names the 1-based row and still removes
    the null vector (LAPACK eigvalsh: positive definite)."""
    n = 12
    model = Model(free_chain(n).K)
    restraints = suggest_restraints(model, np.ones(n))
    assert len(restraints) == 1 and restraints[0].node == restraints[0].row + 1
    assert "uniform motion" in restraints[0].reason
    assert is_positive_definite(reduced(model.K, restraints))


def test_free_plate_2d_scikit_fem_three_translations():
    """A free plate (scikit-fem, 4-node quads, 6 x 3 cells) has 3 rigid modes
    (textbook; LAPACK null_space finds 3). Three restraints, all
    translations, one of them at a corner of the plate, and the restrained
    stiffness is positive definite (LAPACK eigvalsh)."""
    import skfem

    mesh = skfem.MeshQuad.init_tensor(np.linspace(0, 6.0, 7), np.linspace(0, 3.0, 4))
    model = skfem_model(mesh, skfem.ElementQuad1(), dim=2)
    basis = scipy.linalg.null_space(model.K.toarray(), rcond=1e-10)
    assert basis.shape[1] == 3
    restraints = suggest_restraints(model, basis)
    assert len(restraints) == 3
    assert {r.dof for r in restraints} <= {"ux", "uy"}
    xyz = model.coords.lookup(np.array([r.node for r in restraints]))
    assert any(x in (0.0, 6.0) and y in (0.0, 3.0) for x, y, _ in xyz)
    assert is_positive_definite(reduced(model.K, restraints))
    # The rotation is held by two uy (or ux) supports as far apart as the plate
    # allows: its length 6 (geometry of the invented plate).
    arms = [float(r.reason.split("lever arm of ")[1].split()[0]) for r in restraints if "rotation rz" in r.reason]
    assert arms and max(arms) == pytest.approx(6.0)


def test_free_frame_prefers_translations_over_rotations():
    """A free plane frame with rotational DOFs (ux, uy, rz per node, N and mm):
    3 rigid modes (LAPACK null_space); all 3 restraints are translations even
    though restraining an rz row would also stop the rotation, and the
    restrained matrix is positive definite (LAPACK eigvalsh)."""
    model = portal_frame_mm()
    basis = scipy.linalg.null_space(model.K.toarray(), rcond=1e-12)
    assert basis.shape[1] == 3
    restraints = suggest_restraints(model, basis)
    assert len(restraints) == 3
    assert all(r.dof in ("ux", "uy") for r in restraints)
    assert is_positive_definite(reduced(model.K, restraints))
    assert nonsingular_after_restraints(model.K, restraints)


def test_free_block_3d_scikit_fem_six_restraints():
    """A free 3D solid (scikit-fem MeshHex, trilinear hexahedra, 3 x 2 x 2
    cells): 6 rigid modes by LAPACK null_space (textbook count), 6 restraints,
    positive definite after removing them (LAPACK eigvalsh). Five of the six
    leave one free motion, which the nonsingularity check must catch."""
    import skfem

    mesh = skfem.MeshHex.init_tensor(np.linspace(0, 3.0, 4), np.linspace(0, 2.0, 3), np.linspace(0, 1.0, 3))
    model = skfem_model(mesh, skfem.ElementHex1(), dim=3)
    basis = scipy.linalg.null_space(model.K.toarray(), rcond=1e-10)
    assert basis.shape[1] == 6
    restraints = suggest_restraints(model, basis)
    assert len(restraints) == 6
    assert len({r.row for r in restraints}) == 6
    assert all(r.dof in ("ux", "uy", "uz") for r in restraints)
    assert is_positive_definite(reduced(model.K, restraints))
    assert nonsingular_after_restraints(model.K, restraints)
    assert not nonsingular_after_restraints(model.K, restraints[:5])
    lam = np.linalg.eigvalsh(reduced(model.K, restraints[:5]))
    assert lam[0] < 1e-9 * lam[-1]  # LAPACK agrees: one zero eigenvalue left


def test_two_separate_chains_one_restraint_each():
    """Two chains that do not touch: null space of dimension 2 (LAPACK), one
    restraint on each part, each reason naming its part."""
    a, b = free_chain(8), free_chain(5, first_node=101)
    K = sp.csr_array(sp.block_diag([a.K, b.K]))
    table = DofTable(np.r_[a.dofs.node, b.dofs.node], np.r_[a.dofs.dof, b.dofs.dof])
    xyz = np.r_[a.coords.xyz, b.coords.xyz + [0.0, 10.0, 0.0]]
    model = Model(K, dofs=table, coords=Coordinates(table.node.copy(), xyz, 2))
    basis = scipy.linalg.null_space(K.toarray())
    assert basis.shape[1] == 2
    restraints = suggest_restraints(model, basis)
    assert sorted(r.node // 100 for r in restraints) == [0, 1]
    assert {r.reason.split("of part ")[1] for r in restraints} == {"1", "2"}  # parts numbered from 1
    assert is_positive_definite(reduced(K, restraints))


def test_square_truss_without_diagonal_has_a_mechanism():
    """A pin-jointed square of 4 bars (unit EA/L, ux, uy per node) without a
    diagonal: 3 rigid modes plus 1 mechanism (the square shears to a
    rhombus; statics of trusses, m + r < 2j). LAPACK null_space finds 4; 4
    restraints make it positive definite and one of them is said to stop a
    mechanism."""
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    K = np.zeros((8, 8))
    for i, j in [(0, 1), (1, 2), (2, 3), (3, 0)]:
        e = xy[j] - xy[i]
        e = e / np.linalg.norm(e)
        k = np.outer(e, e)
        idx = np.r_[2 * i, 2 * i + 1, 2 * j, 2 * j + 1]
        K[np.ix_(idx, idx)] += np.block([[k, -k], [-k, k]])
    table = DofTable(np.repeat(np.arange(1, 5), 2).astype(np.int64), np.tile(np.array([0, 1], np.int8), 4))
    model = Model(sp.csr_array(K), dofs=table, coords=Coordinates(np.arange(1, 5), np.c_[xy, np.zeros(4)], 2))
    basis = scipy.linalg.null_space(K)
    assert basis.shape[1] == 4
    restraints = suggest_restraints(model, basis)
    assert len(restraints) == 4
    assert is_positive_definite(reduced(model.K, restraints))
    assert any("mechanism" in r.reason for r in restraints)


def test_dof_without_stiffness():
    """A frame with an extra node 4 whose rotation no element touches (an
    empty row and column): the null space is 3 rigid modes plus that unit
    vector (LAPACK null_space); that DOF is restrained, the reason says it has
    no stiffness of its own, and the rest are translations."""
    frame = frame_2d(np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]), [(0, 1), (1, 2)], E=1.0, A=1.0, I=0.01)
    K = sp.csr_array(sp.block_diag([frame.K, sp.csr_array((1, 1))]))
    table = DofTable(np.r_[frame.dofs.node, 4], np.r_[frame.dofs.dof, 5].astype(np.int8))
    coords = Coordinates(np.arange(1, 5), np.r_[frame.coords.xyz, [[3.0, 0.0, 0.0]]], 2)
    model = Model(K, dofs=table, coords=coords)
    basis = scipy.linalg.null_space(K.toarray(), rcond=1e-12)
    assert basis.shape[1] == 4
    restraints = suggest_restraints(model, basis)
    free = [r for r in restraints if r.row == 9]
    assert len(free) == 1 and free[0].node == 4 and free[0].dof == "rz"
    assert "no stiffness" in free[0].reason
    assert all(r.dof in ("ux", "uy") for r in restraints if r.row != 9)
    assert nonsingular_after_restraints(K, restraints)


def test_basis_rank_and_shape_checks():
    """A dependent column adds no restraint; a basis of the wrong length is
    rejected with the expected shape in the message."""
    model = free_chain(6)
    ones = np.ones(6)
    assert len(suggest_restraints(model, np.c_[ones, 2 * ones])) == 1
    assert suggest_restraints(model, np.zeros((6, 0))) == []
    with pytest.raises(ValueError, match="n = 6"):
        suggest_restraints(model, np.ones(5))


def test_docstring_example_runs():
    """The Examples section of the module's docstrings (a closed-form case) runs as a doctest."""
    import doctest

    import conditioning.stages.restraints

    result = doctest.testmod(conditioning.stages.restraints)
    assert result.attempted > 0 and result.failed == 0


def test_frame_without_coordinates_still_names_a_translation():
    """Without coordinates rotations cannot be recognised, but a uniform
    translation of one DOF type can: of the 3 restraints of the free N-mm
    frame, the one whose motion is the ux translation says so, even though
    LAPACK's null space of this mixed-unit matrix carries round-off of about
    1e-8 of its largest entry. Positive definite after removal (eigvalsh)."""
    frame = portal_frame_mm()
    model = Model(frame.K, dofs=frame.dofs)
    restraints = suggest_restraints(model, scipy.linalg.null_space(model.K.toarray(), rcond=1e-12))
    assert len(restraints) == 3
    assert [r.dof for r in restraints if "translation" in r.reason] == ["ux"]
    assert is_positive_definite(reduced(model.K, restraints))
