"""The renderers read the Report alone (issue 10; STYLE.md item 13).

Two checks: (1) the source of every view (``conditioning/render/*.py``) and
of ``conditioning/compare.py`` imports nothing from the package but the
results, the error types and the views themselves; (2) a diagnosed report,
pickled, is read back and rendered in every format by a fresh interpreter in
which the model, the stages, the pipeline, the kernels, the readers and
scipy cannot be imported, and every output equals the one rendered here.
"""

from __future__ import annotations

import ast
import pickle
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
VIEWS = sorted((REPO / "conditioning" / "render").glob("*.py")) + [REPO / "conditioning" / "compare.py"]

#: What a view may import from the package: the report's types, the error
#: types (a mode file the report cannot support is an ExportError, exit 2),
#: the other views, and the version for the JSON's ``tool`` key.
ALLOWED = {"conditioning.results", "conditioning.errors", "conditioning.__version__"}

#: Blocked in the interpreter that renders the pickled report.
BLOCKED = ("conditioning.model", "conditioning.stages", "conditioning.pipeline",
           "conditioning.engine", "conditioning.linalg", "conditioning.io", "conditioning.demo",
           "conditioning.api", "scipy")


def _package_imports(path: Path) -> set[str]:
    """Every ``conditioning...`` name the module imports, at any depth."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names |= {f"{node.module}.{a.name}" for a in node.names}
    return {n for n in names if n.split(".")[0] == "conditioning"}


@pytest.mark.parametrize("path", VIEWS, ids=lambda p: p.name)
def test_views_import_only_results_errors_and_views(path):
    imported = _package_imports(path)
    stray = {n for n in imported
             if not any(n == a or n.startswith(a + ".") for a in ALLOWED | {"conditioning.render"})}
    assert not stray, f"{path.name} imports {sorted(stray)}"


_RENDER_EVERYTHING = textwrap.dedent("""
    import importlib.abc, pickle, sys
    from pathlib import Path

    BLOCKED = {blocked!r}

    class Refuse(importlib.abc.MetaPathFinder):
        def find_spec(self, name, path=None, target=None):
            if any(name == b or name.startswith(b + ".") for b in BLOCKED):
                raise ImportError(f"blocked for this test: {{name}}")
            return None

    sys.meta_path.insert(0, Refuse())
    out = Path(sys.argv[1])
    report = pickle.loads((out / "report.pickle").read_bytes())
    from conditioning.compare import compare_reports
    from conditioning.render.html import write_html
    from conditioning.render.json_report import write_comparison_json, write_json
    from conditioning.render.modes_export import write_modes_csv, write_modes_vtu
    from conditioning.render.terminal import render_comparison_text, render_text

    (out / "sub.txt").write_text(render_text(report, width=120), encoding="utf-8")
    (out / "sub_compare.txt").write_text(
        render_comparison_text(compare_reports(report, report)), encoding="utf-8")
    write_json(report, out / "sub.json")
    write_comparison_json(compare_reports(report, report), out / "sub_compare.json")
    write_html(report, out / "sub.html")
    write_modes_vtu(report, out / "sub.vtu")
    write_modes_csv(report, out / "sub.csv")
    leaked = sorted(m for m in sys.modules
                    if any(m == b or m.startswith(b + ".") for b in BLOCKED))
    assert not leaked, leaked
""")


def test_a_pickled_report_renders_without_model_or_stages(tmp_path):
    """Mechanism of the invented 2D mast (4 nodes missing a brace): every
    output, including the HTML figures and both mode files, comes from the
    report alone, identical to the output of the process that diagnosed it."""
    from conditioning.compare import compare_reports
    from conditioning.demo.scenarios import scenarios
    from conditioning.pipeline import diagnose
    from conditioning.render.html import write_html
    from conditioning.render.json_report import write_comparison_json, write_json
    from conditioning.render.modes_export import write_modes_csv, write_modes_vtu
    from conditioning.render.terminal import render_comparison_text, render_text

    report = diagnose(scenarios()["mast_missing_brace"].model, samples=1)
    assert report.spectrum.modes and report.geometry.edges is not None
    (tmp_path / "report.pickle").write_bytes(pickle.dumps(report))
    (tmp_path / "here.txt").write_text(render_text(report, width=120), encoding="utf-8")
    (tmp_path / "here_compare.txt").write_text(
        render_comparison_text(compare_reports(report, report)), encoding="utf-8")
    write_json(report, tmp_path / "here.json")
    write_comparison_json(compare_reports(report, report), tmp_path / "here_compare.json")
    write_html(report, tmp_path / "here.html")
    write_modes_vtu(report, tmp_path / "here.vtu")
    write_modes_csv(report, tmp_path / "here.csv")

    script = _RENDER_EVERYTHING.format(blocked=BLOCKED)
    run = subprocess.run([sys.executable, "-c", script, str(tmp_path)], capture_output=True,
                         text=True, cwd=REPO, env={**_env(), "PYTHONPATH": str(REPO)})
    assert run.returncode == 0, run.stderr[-3000:]
    for suffix in (".txt", "_compare.txt", ".json", "_compare.json", ".html", ".vtu", ".csv"):
        here, there = tmp_path / f"here{suffix}", tmp_path / f"sub{suffix}"
        assert here.read_bytes() == there.read_bytes(), suffix
    if _has_matplotlib():
        # spectrum, diagonal histogram, the mechanism's shape (K is singular:
        # no digits measured, so no digits figure)
        assert (tmp_path / "sub.html").read_text().count("data:image/png;base64,") == 3


def _env() -> dict[str, str]:
    import os

    return {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}


def _has_matplotlib() -> bool:
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return False
    return True
