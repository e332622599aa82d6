"""Coincident nodes K does not join, partly tied coincident nodes, and far nodes.

Outside references: the node positions of scikit-fem meshes (test-only; two
parts meshed separately on each other share the vertices of their interface,
a mesh made in one piece shares them once) and the coordinates of the bundled
bracket compared by brute force; K's entries read directly for "K joins none
of their DOFs".
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

import conditioning
from conditioning.model import Model
from conditioning.pipeline import explain
from conditioning.render.json_report import report_to_dict
from conditioning.render.terminal import render_text
from conditioning.demo.scenarios import scenarios

skfem = pytest.importorskip("skfem")
from fe_reference import FEReference, _stack, free_plate, quad_plate, restrained, solid_block, three_two_one_supports  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs" / "report-format.md"


def geometry_codes(report) -> list[str]:
    return [f.code for f in report.findings if f.code.startswith("geometry.")]


def what_to_do(report) -> list[str]:
    text = render_text(report, width=80)
    block = text.split("What to do", 1)[1].split("Key figures", 1)[0]
    return [line for line in block.splitlines()[1:] if line.strip()]


# ------------------------------------------------------------- the bracket
def test_bracket_leads_with_merging_the_pad_nodes():
    case = scenarios()["bracket_loose_pad"]
    m = case.model
    report = conditioning.diagnose(m, measure=False)
    # the pairs at one place, by brute force over the coordinates (outside the stage)
    c = m.coords
    dist = np.linalg.norm(c.xyz[:, None] - c.xyz[None], axis=-1)
    i, j = np.nonzero(np.triu(dist < 1e-9, 1))
    pairs = sorted(tuple(sorted((int(c.node[a]), int(c.node[b])))) for a, b in zip(i, j))
    assert pairs == [(83, 201), (84, 202), (85, 203), (86, 204), (87, 205)]
    # K joins none of their DOFs
    K = m.K.tocsr()
    for a, b in pairs:
        ra, rb = np.flatnonzero(m.dofs.node == a), np.flatnonzero(m.dofs.node == b)
        assert not K[ra][:, rb].count_nonzero()
    first = report.findings[0]
    assert first.code == "geometry.coincident-nodes" and first.severity == "error"
    assert "nodes 201-205 onto nodes 83-87" in first.message
    assert first.advice.startswith("Merge nodes 201-205 onto nodes 83-87")
    assert "nodes 201-205 and nodes 83-87 coincide" in report.verdict and report.verdict.startswith("singular")
    assert all(r.reason.startswith("second choice to merging") for r in report.restraints)
    rigid = [f for f in report.findings if f.code == "support.rigid-body-mode"]
    assert len(rigid) == 3 and all(f.advice.startswith("First merge nodes 201-205 onto nodes 83-87") for f in rigid)
    actions = what_to_do(report)
    assert actions[0].startswith("- Merge nodes 201-205 onto nodes 83-87"), actions
    assert any(a.startswith("Second choice") for a in actions[1:]), actions
    groups = report.geometry_checks.coincident
    assert [g.nodes for g in groups] == [[201, 83], [202, 84], [203, 85], [204, 86], [205, 87]]
    assert all(g.moved_apart_by == [1, 2, 3] and g.separation == 0.0 for g in groups)


def test_penalty_tie_is_a_hinge_not_unmerged_nodes():
    """rack_penalty_tie ties coincident nodes 31 and 301 in ux, uy by penalty
    springs and leaves rz free (matrices/README.md): said to be a hinge."""
    report = conditioning.diagnose(scenarios()["rack_penalty_tie"].model, measure=False)
    assert "geometry.coincident-nodes" not in geometry_codes(report)
    (note,) = [f for f in report.findings if f.code == "geometry.coincident-partly-tied"]
    assert note.severity == "note" and note.nodes == [31, 301]
    assert "ties ux, uy between them but not rz: a hinge" in note.message
    (g,) = report.geometry_checks.coincident
    assert (g.joined, g.tied, g.free) == ("partly", ["ux", "uy"], ["rz"])


@pytest.mark.parametrize("name", [n for n in scenarios() if n not in ("bracket_loose_pad", "rack_penalty_tie")])
def test_no_geometry_finding_on_the_other_demo_models(name):
    report = conditioning.diagnose(scenarios()[name].model, measure=False)
    assert geometry_codes(report) == []
    assert report.geometry_checks is not None and not report.geometry_checks.far


# ------------------------------------------------------------ scikit-fem
def cap_on_plinth(shift_top: float = 0.0) -> tuple[FEReference, list[tuple[int, int]]]:
    """A plinth (40 x 20) held 2-1 with a cap (40 x 10) meshed separately on it:
    both meshes have vertices at x = 0, 10, ..., 40 on y = 20. Returns the model
    and the (cap node, plinth node) pairs at one place, from the meshes."""
    plinth = free_plate(nx=4, ny=2, size=(40.0, 20.0))
    cap = free_plate(nx=4, ny=1, size=(40.0, 10.0), origin=(shift_top, 20.0))
    both = _stack(plinth, cap)
    shift = int(plinth.coords.node.max())
    pairs = []
    for k, p in zip(cap.coords.node, cap.coords.xyz):
        hit = np.flatnonzero(np.all(plinth.coords.xyz == p, axis=1))
        if hit.size:
            pairs.append((int(k) + shift, int(plinth.coords.node[hit[0]])))
    return restrained(both, three_two_one_supports(plinth)), sorted(pairs)


def test_two_parts_meshed_separately_lead_with_merging_the_pairs():
    ref, pairs = cap_on_plinth()
    assert len(pairs) == 5
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, measure=False)
    assert report.verdict.startswith("singular: 3 free modes")
    first = report.findings[0]
    assert first.code == "geometry.coincident-nodes" and first.severity == "error"
    # the cap's interface nodes are not consecutive: each pair is named, cap node first
    phrase = "node pairs " + ", ".join(f"{a}/{b}" for a, b in pairs)
    assert phrase in first.message and phrase in report.verdict
    assert {tuple(g.nodes) for g in report.geometry_checks.coincident} == set(pairs)
    assert what_to_do(report)[0].startswith(f"- Merge {phrase}")


def test_merged_mesh_and_a_gap_have_no_unmerged_nodes():
    """The same plinth and cap meshed in one piece (scikit-fem shares the
    interface vertices): healthy, no geometry finding. A cap lifted by 1 (a gap
    of a tenth of an element) has no coincident nodes either."""
    mesh = skfem.MeshQuad.init_tensor(np.linspace(0, 40, 5), np.array([0.0, 10.0, 20.0, 30.0]))
    ref = quad_plate(mesh.p, mesh.t)
    ref = restrained(ref, three_two_one_supports(ref))
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, measure=False)
    assert geometry_codes(report) == [] and report.status == "healthy"
    lifted, _ = cap_on_plinth(shift_top=1.0)
    report = conditioning.diagnose(lifted.K, dofs=lifted.dofs, coords=lifted.coords, measure=False)
    assert "geometry.coincident-nodes" not in geometry_codes(report)


def moved_plate(factor: float = 1000.0):
    """A plane-stress plate (scikit-fem) held 2-1 whose vertex 22 (at 200, 100)
    had its coordinates multiplied by ``factor`` before assembly."""
    mesh = skfem.MeshQuad.init_tensor(np.linspace(0, 400, 9), np.linspace(0, 200, 5))
    p = mesh.p.copy()
    assert np.allclose(p[:, 22], (200.0, 100.0))
    p[:, 22] *= factor
    ref = quad_plate(p, mesh.t)
    return restrained(ref, three_two_one_supports(ref)), mesh


def test_a_node_moved_far_away_is_named_with_its_rows():
    ref, mesh = moved_plate()
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords)
    assert report.verdict.startswith("suspect geometry: node 23 lies"), report.verdict
    (f,) = [f for f in report.findings if f.code == "geometry.far-node"]
    assert f.nodes == [23] and "Node 23 at (200000, 100000)" in f.message
    far = report.geometry_checks.far[0]
    # its neighbours in the mesh (scikit-fem's quads) and their member length (50 x 50 grid)
    quads = mesh.t[:, np.any(mesh.t == 22, axis=0)]
    assert far.neighbours == sorted(int(v) + 1 for v in np.unique(quads) if v != 22)
    assert far.usual_length == pytest.approx(50.0, rel=0.25)
    assert far.softer > 1e3
    # Its distorted elements' rows are balanced (K times a rigid motion is round-off there): a stiff
    # region at the moved node and its neighbours, tied to the node, never springs to ground.
    assert "stiff region reported at nodes" in f.message
    assert not [j for j in report.jumps if j.kind == "diagonal-outlier"]
    region = {v for j in report.jumps if j.kind == "stiff-region" for v in j.nodes}
    assert region and region <= set(far.neighbours) | {23}
    _, e = explain(Model(ref.K, dofs=ref.dofs, coords=ref.coords), int(np.flatnonzero(ref.dofs.node == 23)[0]))
    assert e.advice[0].startswith("Check the coordinates of node 23, (200000, 100000)")
    assert not any(a.startswith("Nothing at this row") for a in e.advice)
    neighbour = int(np.flatnonzero(ref.dofs.node == far.nearest_node)[0])
    _, e = explain(Model(ref.K, dofs=ref.dofs, coords=ref.coords), neighbour)
    assert e.advice[0].startswith("It is coupled to node 23")


def test_the_unmoved_plate_is_healthy():
    ref, _ = moved_plate(factor=1.0)
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, measure=False)
    assert geometry_codes(report) == [] and report.status == "healthy"


def test_healthy_scikit_fem_meshes_have_no_geometry_finding():
    block = solid_block(nx=4, ny=3, nz=2)
    block = restrained(block, three_two_one_supports(block))
    mesh = skfem.MeshTri.init_symmetric().refined(3)
    from fe_reference import _from_basis
    from skfem.models.elasticity import linear_elasticity, plane_stress
    basis = skfem.Basis(mesh, skfem.ElementVector(skfem.ElementTriP1()))
    tri = _from_basis(basis, linear_elasticity(*plane_stress(210000.0, 0.3)).assemble(basis), 2)
    tri = restrained(tri, three_two_one_supports(tri))
    for ref, t in ((block, None), (tri, mesh.t)):
        report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, measure=False)
        assert geometry_codes(report) == [], report.findings


def test_every_geometry_key_is_documented():
    documented = set(re.findall(r"`([a-z_0-9]+)`", DOCS.read_text()))
    keys: set[str] = set()

    def collect(x):
        if isinstance(x, dict):
            for k, v in x.items():
                if not k.endswith("_nonfinite"):
                    keys.add(k)
                collect(v)
        elif isinstance(x, list):
            for v in x:
                collect(v)

    for model in (scenarios()["bracket_loose_pad"].model, scenarios()["rack_penalty_tie"].model):
        report = conditioning.diagnose(model, measure=False)
        collect(json.loads(json.dumps(report_to_dict(report)))["geometry_checks"])
    ref, _ = moved_plate()
    collect(report_to_dict(conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords,
                                                 measure=False))["geometry_checks"])
    ref, _ = block_on_pedestal()
    collect(report_to_dict(conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords,
                                                 measure=False))["geometry_checks"])
    assert {"touching", "other_part", "share", "coincident", "far", "moved_apart_by"} <= keys
    assert not sorted(keys - documented)


def test_explain_from_a_saved_report_names_the_far_node(tmp_path):
    from conditioning.pipeline import explain_from_report
    from conditioning.render.json_report import write_json
    ref, _ = moved_plate()
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    path = tmp_path / "plate.json"
    write_json(conditioning.diagnose(model, measure=False), path)
    e = explain_from_report(model, int(np.flatnonzero(ref.dofs.node == 23)[0]), path)
    assert e.advice[0].startswith("Check the coordinates of node 23")


def test_html_draws_the_geometry_figure(tmp_path):
    pytest.importorskip("matplotlib")
    from conditioning.render.html import render_html
    report = conditioning.diagnose(scenarios()["bracket_loose_pad"].model, measure=False)
    assert 'alt="Geometry checks"' in render_html(report)
    healthy = conditioning.diagnose(scenarios()["footbridge"].model, measure=False)
    assert 'alt="Geometry checks"' not in render_html(healthy)


def block_on_pedestal():
    """A steel block (20 x 20 x 10, 10-unit hexahedra) meshed on its own on a
    concrete pedestal (30 x 30 x 20, 10-unit hexahedra) held 3-2-1, offset by half
    an element: its bottom nodes (scikit-fem's vertices at z = 20) sit on the
    pedestal's top face between the pedestal's nodes, at sqrt(5^2 + 5^2) from
    the nearest."""
    pedestal = solid_block(nx=3, ny=3, nz=2, size=(30.0, 30.0, 20.0), E=30000.0)
    block = solid_block(nx=2, ny=2, nz=1, size=(20.0, 20.0, 10.0), origin=(5.0, 5.0, 20.0))
    shift = int(pedestal.coords.node.max())
    bottom = [int(k) + shift for k, p in zip(block.coords.node, block.coords.xyz) if p[2] == 20.0]
    return restrained(_stack(pedestal, block), three_two_one_supports(pedestal)), bottom


def test_a_block_resting_on_a_pedestal_leads_with_tying_them():
    ref, bottom = block_on_pedestal()
    report = conditioning.diagnose(ref.K, dofs=ref.dofs, coords=ref.coords, measure=False)
    (t,) = report.geometry_checks.touching
    assert (t.part, t.other_part, t.nodes) == (2, 1, bottom)
    assert t.gap == pytest.approx(50 ** 0.5, rel=1e-12) and t.moved_apart_by == [1, 2, 3, 4, 5, 6]
    first = report.findings[0]
    assert first.code == "geometry.touching-parts" and first.severity == "error"
    assert report.verdict.startswith("singular") and "part 2 rests within 7.07 of part 1" in report.verdict
    assert what_to_do(report)[0].startswith("- Tie part 2 to part 1 where they touch")
    assert all(r.reason.startswith("second choice to tying part 2 to part 1") for r in report.restraints)
