"""Every output on real diagnoses: the bundled invented demo models and public
reference matrices (../shared, skipped when absent).

The answers the outputs must carry come from outside the renderers: the demo
cases' own expected diagnoses (conditioning.demo.scenarios, each written from
the model's mechanics: which supports are missing, which part is loose), the
rigid motions of a plane body (common practice), numpy's LAPACK for null
vectors, and the SuiteSparse collection's published figures
(computed_stats.csv).
"""

from __future__ import annotations

import csv
import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

import conditioning
from conditioning.cli import exit_status
from conditioning.compare import compare_reports
from conditioning.render.html import render_html
from conditioning.render.json_report import dumps, report_to_dict
from conditioning.render.modes_export import write_modes_csv, write_modes_vtu
from conditioning.render.terminal import render_text
from conftest import computed_stats, reference_matrix_path


def _strict(text: str):
    def refuse(token):
        raise ValueError(token)
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def demo():
    """name -> (case, report) for every bundled demo model (a few seconds)."""
    from conditioning.demo.scenarios import scenarios

    return {name: (case, conditioning.diagnose(case.model, seed=0, samples=2))
            for name, case in scenarios().items()}


def test_demo_json_terminal_and_exit_status(demo):
    for name, (case, report) in demo.items():
        exp = case.expected
        data = _strict(dumps(report_to_dict(report)))
        free = exp.rigid_body_modes + exp.near_zero_modes
        assert len(data["near_singular_modes"]) == free, name
        assert data["rows"] == case.model.n
        if exp.rigid_body_modes:
            assert data["condition"]["singular"] is True, name
            assert data["suggested_restraints"], name
        text = render_text(report, width=100)
        flat = " ".join(text.split())
        assert flat.startswith(" ".join(f"Verdict: {report.verdict}".split()))
        assert "Defer to the applicable codes" in " ".join(text.split())
        code = exit_status(report)
        if free:
            assert code == 3, name
        elif not exp.ill_conditioned and not exp.penalty_nodes:
            assert code in (0, 1), name


def test_demo_modes_export_are_null_vectors(demo, tmp_path):
    """Exported rigid-body and mechanism shapes satisfy K u = 0 to round-off
    (LAPACK 2-norm); the rack's sway mode is a uniform x translation."""
    for name, (case, report) in demo.items():
        if not case.expected.rigid_body_modes:
            continue
        model = case.model
        vtu, csvp = tmp_path / f"{name}.vtu", tmp_path / f"{name}.csv"
        written = write_modes_vtu(report, vtu)
        assert written == write_modes_csv(report, csvp) >= 1
        with csvp.open(newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert len(rows) == model.n
        K = model.K.toarray()
        normK = np.linalg.norm(K, 2)
        for k in range(1, written + 1):
            u = np.array([float(r[f"mode_{k}"]) for r in rows])
            assert np.linalg.norm(K @ u) <= 1e-9 * normK * np.linalg.norm(u), (name, k)
    rack_case, rack = demo["rack_no_sway_support"]
    write_modes_vtu(rack, tmp_path / "rack.vtu")
    piece = ET.parse(tmp_path / "rack.vtu").getroot().find("UnstructuredGrid/Piece")
    arrays = {a.get("Name"): np.array(a.text.split(), float) for a in piece.find("PointData")}
    u = arrays["mode_1"].reshape(-1, 3)
    assert np.allclose(np.abs(u[:, 0]), 1.0, atol=1e-8) and np.allclose(u[:, 1:], 0, atol=1e-8)


def test_demo_html_with_every_figure(demo):
    pytest.importorskip("matplotlib")
    case, report = demo["bracket_loose_pad"]
    page = render_html(report)
    assert report.verdict in page
    # spectrum, diagonal histogram, digits per node (when measured), the geometry
    # checks (the pad's unmerged coincident nodes), 3 mode shapes
    images = page.count('src="data:image/png;base64,')
    assert images == 6 + (report.digits is not None and not report.digits.skipped)
    case, report = demo["footbridge"]
    page = render_html(report)
    assert "Trustworthy digits per node" in page


def test_demo_compare_with_itself_changes_nothing(demo):
    """A report compared with itself: no mode, finding or digit changes (the
    before/after pair on real exports is in tests/test_cli.py)."""
    _, bracket = demo["bracket_loose_pad"]
    same = compare_reports(bracket, bracket)
    assert not same.modes_removed and not same.modes_added
    assert not same.findings_new and not same.findings_resolved
    assert all(d.change == 0 for d in same.digits if d.change is not None)


# ------------------------------------------------------- reference matrices
def test_reference_matrix_every_output(tmp_path):
    """bcsstk02 (HB/bcsstk02, SuiteSparse): no DOF map, so rows stand for
    nodes; the condition figure in JSON, text and HTML is the published one
    within 1% (computed_stats.csv pub_site_cond)."""
    path = reference_matrix_path("bcsstk02")
    row = [r for r in computed_stats() if r["file"] == "bcsstk02.mtx"][0]
    model = conditioning.load_model(path)
    report = conditioning.diagnose(model, samples=1)
    data = _strict(dumps(report_to_dict(report)))
    assert data["condition"]["estimate"] == pytest.approx(float(row["pub_site_cond"]), rel=0.01)
    assert data["summary"]["nodes"] is None
    text = render_text(report, width=120)
    assert "no DOF map" in text
    assert f"{report.condition.estimate:.2e}" in text or f"{report.condition.estimate:.3g}" in text
    page = render_html(report)
    assert "singular" not in report.verdict and report.verdict in page
    assert write_modes_csv(report, tmp_path / "m.csv") == 0
    with (tmp_path / "m.csv").open(newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows == [["node", "dof"]]             # no mode: the header alone
    assert exit_status(report) in (0, 1)
