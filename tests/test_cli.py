"""The ``conditioning`` command: exit codes, one-line errors, outputs.

Exit codes (issue #5): 0 healthy, 1 warnings only, 2 unusable input,
3 errors found (singular, a free mode, or fewer trustworthy digits than
--min-digits). End-to-end checks run the real diagnosis on the bundled
invented demo exports (matrices/) and on public reference matrices from
../shared (through tests/conftest.py helpers, skipped when absent), and
compare with published SuiteSparse figures and numpy's LAPACK.
"""

from __future__ import annotations

import dataclasses
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from conditioning import cli
from conditioning.cli import exit_status, main
from conditioning.errors import InputError
from conftest import computed_stats, reference_matrix_path
from test_report_fixtures import healthy_report, singular_report

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "matrices"


def _demo_args(name: str) -> list[str]:
    return [str(DEMO / f"{name}.mtx"), "--dofs", str(DEMO / f"{name}_dofs.csv"),
            "--coords", str(DEMO / f"{name}_coords.csv"), "--load", str(DEMO / f"{name}_load.mtx")]


def _strict(text: str):
    def refuse(token):
        raise ValueError(token)
    return json.loads(text, parse_constant=refuse)


def _one_error_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("conditioning: error: ")
    assert "Traceback" not in err
    return lines[0]


# ------------------------------------------------------------ exit status
def test_exit_status_maps_the_report_status():
    singular, _ = singular_report()
    assert exit_status(singular) == 3
    healthy, _ = healthy_report(digits=12.5)
    assert exit_status(healthy) == 1                          # status "warnings"
    assert exit_status(dataclasses.replace(healthy, status="healthy", findings=[])) == 0


@pytest.mark.parametrize("name,min_digits", [("mast_soft_spring", "4"), ("mast_soft_spring", "1"),
                                             ("footbridge_spring_bearings", "4"),
                                             ("footbridge_spring_bearings", "15.5"),
                                             ("rack_penalty_tie", "4"), ("mast_missing_brace", "4")])
def test_json_status_and_exit_status_agree(tmp_path, name, min_digits, capsys):
    """One rule decides both: the JSON status, mapped 0/1/3 as the README's table
    says, is the command's exit status, whatever --min-digits is. The soft-spring
    mast (invented) has one nearly free mode: an error under any --min-digits."""
    out = tmp_path / "r.json"
    args = ["diagnose", *_demo_args(name), "--min-digits", min_digits, "--json", str(out), "--quiet"]
    code = main(args)
    capsys.readouterr()
    status = _strict(out.read_text())["status"]
    assert code == {"healthy": 0, "warnings": 1, "errors": 3}[status]
    if name == "mast_soft_spring":
        assert status == "errors"


# --------------------------------------------------------- bad input: exit 2
def test_missing_file(tmp_path, capsys):
    assert main(["diagnose", str(tmp_path / "nope.mtx")]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "nope.mtx" in line


def test_not_a_matrix_file(tmp_path, capsys):
    bad = tmp_path / "bad.mtx"
    bad.write_text("this is not a matrix\n")
    assert main(["diagnose", str(bad)]) == 2
    assert "bad.mtx" in _one_error_line(capsys.readouterr().err)


@pytest.mark.parametrize("argv, word", [
    (["diagnose"], "MATRIX"),
    (["diagnose", "k.mtx", "--dofs-per-node", "4"], "invalid choice"),
    (["diagnose", "k.mtx", "--dofs", "d.csv", "--dofs-per-node", "2"], "not allowed"),
    (["diagnose", "k.mtx", "--samples", "many"], "invalid int"),
    (["diagnose", "k.mtx", "--bogus"], "unrecognized"),
    (["frobnicate"], "invalid choice"),
    ([], "required"),
    (["diagnose", "k.mtx", "--modes-vtk", "m.vtu"], "DOF map"),
    (["diagnose", "k.mtx", "--dofs-per-node", "2", "--modes-vtk", "m.vtu"], "coordinates"),
    (["diagnose", "k.mtx", "--json", "/no/such/folder/r.json"], "does not exist"),
    (["diagnose", "k.mtx", "--samples", "-1"], "--samples"),
])
def test_bad_options(argv, word, capsys):
    assert main(argv) == 2
    assert word in _one_error_line(capsys.readouterr().err)


def test_help_exits_zero(capsys):
    assert main(["--help"]) == 0
    assert "diagnose" in capsys.readouterr().out


def test_version_exits_zero(capsys):
    from conditioning import __version__

    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"conditioning {__version__}"


def test_memory_error_and_interrupt(monkeypatch, capsys):
    def boom(*a, **k):
        raise MemoryError
    monkeypatch.setattr(cli, "_load", boom)
    assert main(["diagnose", "k.mtx"]) == 2
    assert "out of memory" in _one_error_line(capsys.readouterr().err)

    def interrupt(*a, **k):
        raise KeyboardInterrupt
    monkeypatch.setattr(cli, "_load", interrupt)
    assert main(["diagnose", "k.mtx"]) == 130
    assert "interrupted" in capsys.readouterr().err


def test_input_error_from_a_stage_is_one_line(monkeypatch, capsys):
    report, model = healthy_report()
    monkeypatch.setattr(cli, "_load", lambda *a, **k: model)

    def refuse(*a, **k):
        raise InputError("k.mtx", "something does not fit\nacross two lines")
    monkeypatch.setattr(cli, "diagnose_model", refuse)
    assert main(["diagnose", "k.mtx"]) == 2
    assert _one_error_line(capsys.readouterr().err) == (
        "conditioning: error: k.mtx: something does not fit across two lines")


# ------------------------------------------- outputs, on hand-built reports
@pytest.fixture
def fake_singular(monkeypatch):
    report, model = singular_report()
    monkeypatch.setattr(cli, "_load", lambda *a, **k: model)
    monkeypatch.setattr(cli, "diagnose_model", lambda *a, **k: report)
    return report, model


def test_json_to_stdout_keeps_stdout_clean(fake_singular, capsys):
    assert main(["diagnose", "k.mtx", "--json", "-"]) == 3
    out, err = capsys.readouterr()
    assert _strict(out)["condition"]["singular"] is True
    assert "Verdict" in err                      # the terminal report went to stderr


def test_quiet_prints_only_the_verdict(fake_singular, capsys):
    assert main(["diagnose", "k.mtx", "--quiet"]) == 3
    assert capsys.readouterr().out.strip() == "Verdict: singular: 3 free modes"


def test_all_outputs_written(fake_singular, tmp_path, capsys):
    paths = {k: tmp_path / f"r.{k}" for k in ("json", "html", "vtu", "csv")}
    code = main(["diagnose", "k.mtx", "--dofs-per-node", "2", "--coords", "c.csv",
                 "--json", str(paths["json"]), "--html", str(paths["html"]),
                 "--modes-vtk", str(paths["vtu"]), "--modes-csv", str(paths["csv"])])
    assert code == 3
    assert _strict(paths["json"].read_text())["schema"] == "conditioning-report/2"
    assert paths["html"].read_text().startswith("<!DOCTYPE html>")
    assert ET.parse(paths["vtu"]).getroot().tag == "VTKFile"
    assert paths["csv"].read_text().splitlines()[0] == "node,dof,mode_1,mode_2,mode_3"


def test_progress_callback_drives_bars():
    """The callback tolerates the lead's protocol: (stage, None) at start,
    (stage, 1.0) at the end, stages in sequence."""
    with cli._progress(True) as progress:
        for stage in ("reading", "structure", "factorization"):
            progress(stage, None)
            progress(stage, 0.5)
            progress(stage, 1.0)
    with cli._progress(False) as progress:
        assert progress is None


# ------------------------------------------------ end to end: demo models
def test_demo_healthy_footbridge(tmp_path, capsys):
    """Invented footbridge with its supports: no free mode, exit 0 or 1."""
    out = tmp_path / "f.json"
    code = main(["diagnose", *_demo_args("footbridge"), "--json", str(out), "--quiet"])
    data = _strict(out.read_text())
    assert code in (0, 1)
    assert data["condition"]["singular"] is False and data["near_singular_modes"] == []
    assert [d["sample"] for d in data["digits"]][0] == "load"
    assert all(d["trustworthy_digits"] > 4 for d in data["digits"])


def test_demo_rack_without_sway_support_is_exit_3(tmp_path, capsys):
    """Invented storage rack missing its horizontal support: a free mode."""
    out = tmp_path / "r.json"
    vtu, csvp = tmp_path / "m.vtu", tmp_path / "m.csv"
    code = main(["diagnose", *_demo_args("rack_no_sway_support"), "--json", str(out),
                 "--modes-vtk", str(vtu), "--modes-csv", str(csvp)])
    assert code == 3
    text = capsys.readouterr().out
    assert text.splitlines()[0].startswith("Verdict: singular")
    data = _strict(out.read_text())
    assert data["condition"]["singular"] is True and len(data["near_singular_modes"]) >= 1
    assert data["suggested_restraints"]
    piece = ET.parse(vtu).getroot().find("UnstructuredGrid/Piece")
    names = {a.get("Name") for a in piece.find("PointData")}
    assert "mode_1" in names and "mode_1_rotation" in names   # a frame has rz


def test_min_digits_above_double_precision_is_exit_3(capsys):
    """IEEE 754 binary64 carries about 15.95 decimal digits, so no solution
    can have 17 trustworthy digits: --min-digits 17 must fail (exit 3)."""
    assert main(["diagnose", *_demo_args("footbridge"), "--min-digits", "17", "--quiet"]) == 3
    out = capsys.readouterr().out
    assert "(required: 17" in out
    assert out.startswith("Verdict: fewer digits than required")


def test_compare_before_and_after_a_fix(tmp_path, capsys):
    """Invented footbridge exported without supports (BEFORE: 3 rigid-body
    modes, the free plane body's 3 rigid motions) and with spring bearings
    (AFTER, same DOF map and coordinates): the 3 modes are removed, and the
    exit status is AFTER's (not 3: no free mode)."""
    out = tmp_path / "c.json"
    code = main(["compare", str(DEMO / "footbridge_free.mtx"),
                 str(DEMO / "footbridge_spring_bearings.mtx"),
                 "--dofs", str(DEMO / "footbridge_free_dofs.csv"),
                 "--coords", str(DEMO / "footbridge_free_coords.csv"), "--json", str(out)])
    data = _strict(out.read_text())
    assert data["schema"] == "conditioning-compare/1"
    assert (data["modes_before"], data["modes_after"]) == (3, 0)
    assert sum(m["count"] for m in data["modes_removed"]) == 3
    assert {m["kind"] for m in data["modes_removed"]} == {"rigid-body"}
    assert data["modes_added"] == []
    assert data["findings_resolved"]
    assert code in (0, 1)
    text = capsys.readouterr().out
    assert text.startswith("Before: singular") and "removed: 3 x rigid-body" in text


def test_demo_command_runs_every_case(tmp_path, capsys):
    from conditioning.demo.scenarios import scenarios

    assert main(["demo", "--quiet", "--json", str(tmp_path), "--html", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    names = list(scenarios())
    for name in names:
        assert name in out
        assert _strict((tmp_path / f"{name}.json").read_text())["schema"]
        assert "</html>" in (tmp_path / f"{name}.html").read_text()
    assert out.count("Verdict:") == len(names)


def test_verbose_logs_the_stages(capsys):
    """-v logs each stage's time (INFO) on stderr; stdout keeps the report."""
    assert main(["diagnose", *_demo_args("lattice_tower_3d"), "-v"]) in (0, 1)
    out, err = capsys.readouterr()
    assert "INFO conditioning.pipeline: stage factorization" in err
    assert out.startswith("Verdict:")


# ------------------------------------------- end to end: reference matrices
def test_reference_matrix_condition_matches_suitesparse(tmp_path, capsys):
    """bcsstk02 (HB/bcsstk02, SuiteSparse): the JSON 2-norm estimate within
    1% of the published condition number (computed_stats.csv pub_site_cond)
    and of numpy.linalg.cond; positive definite, so exit 0 or 1."""
    path = reference_matrix_path("bcsstk02")
    row = [r for r in computed_stats() if r["file"] == "bcsstk02.mtx"][0]
    out = tmp_path / "k02.json"
    code = main(["diagnose", str(path), "--json", str(out), "--quiet"])
    assert code in (0, 1)
    data = _strict(out.read_text())
    assert data["rows"] == int(row["n"]) == 66
    assert data["condition"]["estimate"] == pytest.approx(float(row["pub_site_cond"]), rel=0.01)
    import scipy.io

    K = scipy.io.mmread(str(path)).toarray()
    assert data["condition"]["estimate"] == pytest.approx(np.linalg.cond(K), rel=0.01)


def test_reference_singular_matrix_is_exit_3(tmp_path, capsys):
    """bcsstm01 (HB/bcsstm01, a lumped mass matrix with zero diagonal
    entries; singular per computed_stats.csv posdef=False): exit 3."""
    path = reference_matrix_path("bcsstm01")
    row = [r for r in computed_stats() if r["file"] == "bcsstm01.mtx"][0]
    assert row["posdef"] == "False"
    out = tmp_path / "m01.json"
    assert main(["diagnose", str(path), "--json", str(out), "--quiet"]) == 3
    assert _strict(out.read_text())["condition"]["singular"] is True


def test_audited_solution_with_a_known_error(tmp_path, capsys):
    """--solution: a displacement vector with an error planted on purpose,
    1e-6 of the largest displacement in one component, must come out with
    6.0 trustworthy digits (-log10 of the planted relative error; the
    reference solve is scipy's spsolve, far more accurate than 1e-6)."""
    import scipy.io
    import scipy.sparse.linalg as spla

    from conditioning import load_model

    args = _demo_args("footbridge")
    model = load_model(args[0], dofs=args[2], coords=args[4], load=args[6])
    x = spla.spsolve(model.K.tocsc(), model.load)
    bad = x.copy()
    k = int(np.argmax(np.abs(x)))
    bad[k] += 1e-6 * np.abs(x).max()
    sol = tmp_path / "solution.mtx"
    scipy.io.mmwrite(str(sol), bad.reshape(-1, 1), precision=17)
    out = tmp_path / "audit.json"
    code = main(["diagnose", *args, "--solution", str(sol), "--json", str(out), "--quiet"])
    data = _strict(out.read_text())
    audit = [d for d in data["digits"] if d["sample"] == "solution"]
    assert len(audit) == 1
    # The planted relative error is 1e-6 (6.0 digits); the figure comes from an
    # upper bound rounded down to 0.1, so it is 6.0 or 5.9, never more.
    assert 5.9 <= audit[0]["trustworthy_digits"] <= 6.0
    # The vector does not solve K and f: the verdict and the finding blame it, not K.
    assert data["digits_summary"]["audit"]["fits"] is False
    assert data["verdict"].startswith("supplied solution does not fit")
    assert "solution.does-not-fit" in [f["code"] for f in data["findings"]]
    assert "condition.ill-conditioned" not in [f["code"] for f in data["findings"]]
    assert code == 3


def test_html_without_matplotlib_notes_it(fake_singular, tmp_path, capsys, monkeypatch):
    """matplotlib hidden (None in sys.modules makes its import fail): the page
    is still written and stderr says why it has no figures."""
    import sys

    for name in ("matplotlib", "matplotlib.figure"):
        monkeypatch.setitem(sys.modules, name, None)
    page = tmp_path / "r.html"
    assert main(["diagnose", "k.mtx", "--html", str(page), "--quiet"]) == 3
    assert "need matplotlib" in page.read_text()
    assert "matplotlib is not installed" in capsys.readouterr().err


def test_the_command_stays_thin():
    """Issue 10: parse -> diagnose -> render -> exit status, under 200 lines;
    the progress protocol is the pipeline's (not defined twice) and the
    command reaches no stage, kernel or engine directly."""
    import ast

    path = REPO / "conditioning" / "cli.py"
    source = path.read_text(encoding="utf-8")
    assert len(source.splitlines()) < 200
    tree = ast.parse(source)
    assigned = {t.id for node in ast.walk(tree) if isinstance(node, ast.Assign)
                for t in node.targets if isinstance(t, ast.Name)}
    assert "ProgressCallback" not in assigned
    modules = {node.module for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)}
    assert not {m for m in modules if m and m.split(".")[1:2] in (["stages"], ["engine"], ["linalg"])}


def test_python_dash_m_runs_the_same_command(tmp_path):
    """``python -m conditioning`` is the entry point too: its version line and the
    exit status 2 with a one-line error for a missing file (no traceback)."""
    import os
    import subprocess
    import sys
    from conditioning import __version__

    env = dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path))
    ok = subprocess.run([sys.executable, "-m", "conditioning", "--version"], capture_output=True,
                        text=True, env=env)
    assert ok.returncode == 0 and ok.stdout.strip() == f"conditioning {__version__}"
    bad = subprocess.run([sys.executable, "-m", "conditioning", "diagnose", str(tmp_path / "none.mtx")],
                         capture_output=True, text=True, env=env)
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1
