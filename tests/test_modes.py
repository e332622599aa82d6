"""Near-singular modes: counts, kinds and locations.

Outside references:
- scikit-fem (independent general-purpose FE library, test-only) assembles the
  free solids and plates; an unsupported body has exactly 3 rigid-body modes in
  2D and 6 in 3D (textbook fact, common practice; also the count of PETSc's
  MatNullSpaceCreateRigidBody), one fewer per independent restraint;
- the pin-jointed truss panels below are statically determinate or not by
  Maxwell's counting rule b + r = 2j (common practice) and the dense LAPACK
  eigvalsh null space confirms each count.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

pytest.importorskip("skfem", reason="scikit-fem (test-only reference assembler) is not installed")

import fe_reference as fe  # noqa: E402
from conditioning.pipeline import diagnose  # noqa: E402
from conditioning.model import Coordinates, DofTable, Model  # noqa: E402


def _model(ref) -> Model:
    return Model(ref.K, dofs=ref.dofs, coords=ref.coords)


def _lapack_nullity(K) -> int:
    w = np.linalg.eigvalsh(K.toarray())
    return int(np.count_nonzero(w < 1e-9 * w[-1]))


def _kinds(report):
    return [m.kind for m in report.spectrum.modes]


def test_free_solid_block_has_six_rigid_body_modes():
    ref = fe.solid_block()
    report = diagnose(_model(ref), measure=False)
    assert report.spectrum.count == 6 == _lapack_nullity(ref.K)
    assert _kinds(report) == ["rigid-body"] * 6
    assert report.spectrum.inertia_agrees is True
    # The six are the three translations and three rotations, each pure.
    names = sorted(max(m.motion, key=m.motion.get) for m in report.spectrum.modes)
    assert names == ["rx", "ry", "rz", "ux", "uy", "uz"]
    assert report.status == "errors" and report.verdict.startswith("singular: 6 free mode")


def test_free_plate_has_three_rigid_body_modes():
    ref = fe.free_plate()
    report = diagnose(_model(ref), measure=False)
    assert report.spectrum.count == 3 == _lapack_nullity(ref.K)
    names = sorted(max(m.motion, key=m.motion.get) for m in report.spectrum.modes)
    assert names == ["rz", "ux", "uy"]
    assert all(abs(sum(m.motion.values()) - 1) < 1e-9 for m in report.spectrum.modes)


@pytest.mark.parametrize("builder, dim", [(fe.solid_block, 3), (fe.free_plate, 2)])
def test_one_restraint_too_few_in_each_direction(builder, dim):
    """3-2-1 supports minus one restraint leave exactly one rigid-body mode."""
    ref = builder()
    supports = fe.three_two_one_supports(ref)
    for dropped in range(len(supports)):
        fixed = supports[:dropped] + supports[dropped + 1:]
        sub = fe.restrained(ref, fixed)
        report = diagnose(_model(sub), measure=False)
        assert report.spectrum.count == 1 == _lapack_nullity(sub.K), supports[dropped]
        assert _kinds(report) == ["rigid-body"]
        # Suggested restraints remove it.
        assert len(report.restraints) == 1
    full = diagnose(_model(fe.restrained(ref, supports)), measure=False)
    assert full.spectrum.count == 0 and not full.condition.singular


def test_two_bodies_that_do_not_touch():
    ref = fe.two_plates()
    report = diagnose(_model(ref), measure=False)
    assert report.structure.parts == 2
    assert report.spectrum.count == 6 == _lapack_nullity(ref.K)
    by_part = {}
    for m in report.spectrum.modes:
        by_part.setdefault(m.part, []).append(m)
    assert sorted(len(v) for v in by_part.values()) == [3, 3]
    # Each part's modes name that part's nodes only.
    nodes = [set(v[0].nodes) for v in by_part.values()]
    assert not (nodes[0] & nodes[1])


def _truss(X, bars, fixed, EA=1000.0):
    """Pin-jointed truss (ux, uy per node), assembled densely for these small tests."""
    nn = len(X)
    K = np.zeros((2 * nn, 2 * nn))
    for a, b in bars:
        d = X[b] - X[a]
        L = np.linalg.norm(d)
        c = d / L
        k = EA / L * np.outer(c, c)
        idx = [2 * a, 2 * a + 1, 2 * b, 2 * b + 1]
        K[np.ix_(idx, idx)] += np.block([[k, -k], [-k, k]])
    node = np.repeat(np.arange(1, nn + 1), 2)
    dof = np.tile([0, 1], nn).astype(np.int8)
    keep = np.ones(2 * nn, bool)
    for nd, dd in fixed:
        keep[2 * (nd - 1) + dd] = False
    coords = Coordinates(np.arange(1, nn + 1, dtype=np.int64), np.column_stack([X, np.zeros(nn)]), 2)
    return Model(sp.csr_array(K[keep][:, keep]), dofs=DofTable(node[keep].astype(np.int64), dof[keep]),
                 coords=coords)


# Two square panels, both braced; pinned at node 1, roller (uy) at node 3.
X2 = np.array([[0, 0], [1, 0], [2, 0], [0, 1], [1, 1], [2, 1]], float)
BARS2 = [(0, 1), (1, 2), (3, 4), (4, 5), (0, 3), (1, 4), (2, 5), (0, 4), (1, 5)]
SUPPORTS2 = [(1, 0), (1, 1), (3, 1)]


def test_braced_truss_is_healthy():
    """b + r = 9 + 3 = 12 = 2j: statically determinate and stable."""
    report = diagnose(_truss(X2, BARS2, SUPPORTS2), measure=False)
    assert report.spectrum.count == 0 and not report.condition.singular


def test_missing_brace_is_a_mechanism_at_the_open_panel():
    """Without the right panel's brace, b + r = 11 < 12: one mechanism; the
    unbraced panel is nodes 2, 3, 5, 6."""
    model = _truss(X2, BARS2[:-1], SUPPORTS2)
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 1 == _lapack_nullity(model.K)
    (mode,) = report.spectrum.modes
    assert mode.kind == "mechanism"
    # Where the groups meet is the open panel; the nodes named are those that
    # move in LAPACK's null vector (node weight >= 1% of the largest).
    assert set(mode.meeting) <= {2, 3, 5, 6} and mode.meeting
    w, V = np.linalg.eigh(model.K.toarray())
    weight = np.bincount(model.dofs.node, weights=V[:, 0] ** 2)
    assert set(mode.nodes) == set(np.flatnonzero(weight >= 1e-2 * weight.max()))
    assert any(f.code == "support.mechanism" for f in report.findings)


def test_penalty_spring_is_a_jump_not_a_mode():
    """A 1e12-times-stiffer link between two nodes of a supported truss makes the
    scaled matrix nearly singular, but it is a stiffness jump, not a free mode."""
    model = _truss(X2, BARS2, SUPPORTS2)
    K = model.K.toarray()
    rows = {(int(n), int(d)): i for i, (n, d) in enumerate(zip(model.dofs.node, model.dofs.dof))}
    i, j = rows[(5, 0)], rows[(6, 0)]
    k = 1e12 * 1000.0
    K[i, i] += k
    K[j, j] += k
    K[i, j] -= k
    K[j, i] -= k
    stiff = Model(sp.csr_array(K), dofs=model.dofs, coords=model.coords)
    report = diagnose(stiff, measure=False)
    assert report.spectrum.count == 0
    assert not report.condition.singular
    assert report.jumps and max(j.digits_cost for j in report.jumps) > 8
    assert any(set(j.nodes) == {5, 6} for j in report.jumps)


def test_slender_cantilever_in_mm_is_not_near_singular():
    """A 10 m long, 100 mm deep steel cantilever in N and mm with 200 beam
    elements: badly scaled (rotations next to translations) and with a large
    condition number, but properly supported."""
    from conditioning.demo import assemble

    n_el = 200
    L = 10000.0
    ids = np.arange(1, n_el + 2)
    xy = np.column_stack([np.linspace(0, L, n_el + 1), np.zeros(n_el + 1)])
    members = np.column_stack([ids[:-1], ids[1:]])
    b, h = 50.0, 100.0
    frame = assemble.frame2d(ids, xy, members, E=210000.0, A=b * h, I=b * h**3 / 12)
    frame = assemble.apply_restraints(frame, [(1, "ux"), (1, "uy"), (1, "rz")])
    model = Model(frame.K, dofs=frame.dofs,
                  coords=Coordinates(ids.astype(np.int64), np.column_stack([xy, np.zeros(n_el + 1)]), 2))
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 0
    assert not report.condition.singular
    assert report.condition.estimate > 1e8


def _frame_model(frame, ids, xyz, dim):
    keep_nodes = np.unique(frame.dofs.node)
    pos = np.searchsorted(ids, keep_nodes)
    return Model(frame.K, dofs=frame.dofs,
                 coords=Coordinates(keep_nodes.astype(np.int64), np.asarray(xyz, float)[pos], dim))


def test_free_space_frame_has_six_rigid_body_modes_with_rotation_dofs():
    """A free 3D frame (demo assembler; 6 DOFs per node, rotations included):
    6 rigid-body modes (common practice), each a pure translation or rotation;
    the nodes' rotation DOFs turn with the body."""
    from conditioning.demo import assemble

    ids = np.arange(1, 9)
    xyz = np.array([[0, 0, 0], [3000, 0, 0], [3000, 2000, 0], [0, 2000, 0],
                    [0, 0, 2500], [3000, 0, 2500], [3000, 2000, 2500], [0, 2000, 2500]], float)
    members = np.array([[1, 2], [2, 3], [3, 4], [4, 1], [5, 6], [6, 7], [7, 8], [8, 5],
                        [1, 5], [2, 6], [3, 7], [4, 8]])
    frame = assemble.frame3d(ids, xyz, members, E=210000.0, G=81000.0, A=5000.0,
                             Iy=2e7, Iz=3e7, J=1e6)
    model = _frame_model(frame, ids, xyz, 3)
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 6 == _lapack_nullity(model.K)
    assert _kinds(report) == ["rigid-body"] * 6
    names = sorted(max(m.motion, key=m.motion.get) for m in report.spectrum.modes)
    assert names == ["rx", "ry", "rz", "ux", "uy", "uz"]
    assert all(max(m.motion.values()) > 0.999 for m in report.spectrum.modes)
    # Restraining the suggested DOFs leaves K positive definite (LAPACK eigvalsh).
    rows = [r.row for r in report.restraints]
    keep = np.setdiff1d(np.arange(model.n), rows)
    assert np.linalg.eigvalsh(model.K.toarray()[np.ix_(keep, keep)])[0] > 0


def test_free_plane_frame_has_three_rigid_body_modes():
    """A free portal frame in the plane (ux, uy, rz per node): 3 rigid-body modes."""
    from conditioning.demo import assemble

    ids = np.array([1, 2, 3, 4])
    xy = np.array([[0, 0], [0, 3000], [4000, 3000], [4000, 0]], float)
    frame = assemble.frame2d(ids, xy, np.array([[1, 2], [2, 3], [3, 4]]), E=210000.0, A=4000.0, I=5e7)
    model = _frame_model(frame, ids, np.column_stack([xy, np.zeros(4)]), 2)
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 3 == _lapack_nullity(model.K)
    assert sorted(max(m.motion, key=m.motion.get) for m in report.spectrum.modes) == ["rz", "ux", "uy"]


def test_mechanism_groups_said_moving_or_standing_still():
    """The shipped mast without its top braces (invented demo data): its sway
    mechanism has a rigid group at the top that moves and one at the bottom
    that stands still. Each is said as such, checked against LAPACK's null
    vector of K (numpy eigh): a group standing still moves less than 1% of the
    largest displacement, a moving group more."""
    from pathlib import Path

    from conditioning.io.load import load_model

    here = Path(__file__).resolve().parent.parent / "matrices"
    model = load_model(str(here / "mast_missing_brace.mtx"), dofs=str(here / "mast_missing_brace_dofs.csv"),
                       coords=str(here / "mast_missing_brace_coords.csv"))
    report = diagnose(model, measure=False)
    (mode,) = report.spectrum.modes
    w, V = np.linalg.eigh(model.K.toarray())
    u = np.abs(V[:, 0]) / np.abs(V[:, 0]).max()
    amplitude = {g: u[np.isin(model.dofs.node, g)].max() for g in map(tuple, mode.groups)}
    still = [g for g, a in amplitude.items() if a < 0.01]
    moving = [g for g, a in amplitude.items() if a >= 0.01]
    assert still and moving
    (finding,) = [f for f in report.findings if f.code == "support.mechanism"]
    text = finding.message
    for g in moving:
        assert "moving rigidly: {" + ", ".join(map(str, g)) + "}" in text
    for g in still:
        assert "standing still: {" + ", ".join(map(str, g)) + "}" in text
