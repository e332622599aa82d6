"""Every count the terminal shows equals the JSON report's (the same Report, two views).

Outside reference for the indefinite model: LAPACK (numpy.linalg.eigvalsh) counts its
negative eigenvalues, and Sylvester's law of inertia makes the LDL^T's negative pivots the
same count (common practice); the terminal must print that count, not the length of the
capped list of rows it names.
"""
from __future__ import annotations

import re

import numpy as np
import pytest

import conditioning
from conditioning.demo.assemble import apply_restraints, ground_spring, plane_stress_quad
from conditioning.demo.scenarios import _coordinates, _quad_grid, scenarios
from conditioning.model import Model
from conditioning.render.json_report import report_to_dict
from conditioning.render.terminal import render_text


def _slab_with_many_negative_springs(count: int = 30):
    nx, ny = 20, 12
    ids, xy, quads = _quad_grid(0.0, 0.0, 250.0 * nx, 250.0 * ny, nx, ny, 1)
    asm = plane_stress_quad(ids.ravel(), xy, quads, E=30000.0, nu=0.2, t=200.0)
    rng = np.random.default_rng(5)
    nodes = rng.choice(ids[1:, 2:].ravel(), size=count, replace=False)
    for v in nodes:
        (row,) = asm.rows([(int(v), "uy")])
        asm = ground_spring(asm, (int(v), "uy"), -3.0 * float(asm.K[row, row]))
    red = apply_restraints(asm, [(int(i), c) for i in ids[:, 0] for c in ("ux", "uy")])
    return Model(K=red.K, dofs=red.dofs, coords=_coordinates(ids.ravel(), xy), source="many negative springs")


def _key_figures(text: str) -> dict[str, str]:
    block = text.split("Key figures")[1].split("\n", 1)[1]
    block = re.split(r"\n\S[^\n]* ─", block)[0]
    out = {}
    for line in block.splitlines()[1:]:
        parts = re.split(r"\s{2,}", line.strip())
        if len(parts) >= 2:
            out[parts[0]] = parts[1]
    return out


def _count(value: str) -> int:
    return int(value.replace(",", "").replace(">=", "").strip())


def check_counts(report) -> None:
    text = render_text(report, width=200)
    data = report_to_dict(report)
    figures = _key_figures(text)
    sp_ = data["spectrum"]
    if "negative eigenvalues" in figures:
        assert _count(figures["negative eigenvalues"]) == sp_["negative_eigenvalues"]
    else:
        assert sp_ is None or sp_["negative_eigenvalues"] == 0
    pl = data["pivot_loss"]
    if "negative pivots" in figures:
        assert _count(figures["negative pivots"]) == pl["negative_count"]
    for line in re.findall(r"([\d,]+) negative pivot\(s\)", text):
        assert _count(line) == pl["negative_count"]
    for line in re.findall(r"(?:at least )?([\d,]+) negative eigenvalue\(s\) of K", text):
        assert _count(line) == sp_["negative_eigenvalues"]
    kinds = [j["kind"] for j in data["stiffness_jumps"]]
    for label, kind in (("stiffness jumps", "coupling"), ("stiff regions", "stiff-region"),
                        ("springs to ground", "diagonal-outlier")):
        assert _count(figures[label]) == kinds.count(kind) if label in figures else kind not in kinds
    modes = figures.get("near-singular modes")
    if modes is not None:
        shown = 0 if modes == "none" else sum(int(n) for n in re.findall(r"(\d+) [a-z-]+", modes))
        assert shown == sp_["count"] == len(data["near_singular_modes"])
    c = data["condition"]
    for label, key in (("condition number, raw K", "estimate"), ("condition number, scaled", "scaled_estimate")):
        if label in figures and c.get(key) is not None:
            assert float(figures[label]) == pytest.approx(c[key], rel=5e-3)
    if "trustworthy digits" in figures and data["digits"]:
        own = [s for s in data["digits"] if not s.get("audited")] or data["digits"]
        worst = min(s["trustworthy_digits"] for s in own)
        assert float(figures["trustworthy digits"].lstrip(">= ")) == pytest.approx(worst, abs=0.051)
    assert data["verdict"] in " ".join(text.split())


def test_many_negative_pivots_counted_in_full():
    model = _slab_with_many_negative_springs()
    negative = int(np.sum(np.linalg.eigvalsh(model.K.toarray()) < 0))          # LAPACK
    report = conditioning.diagnose(model, seed=4)
    assert report.spectrum.negative_eigenvalues == negative
    assert report.pivots.negative_count == negative > len(report.pivots.negative_pivots)
    figures = _key_figures(render_text(report, width=200))
    assert _count(figures["negative pivots"]) == negative
    assert _count(figures["negative eigenvalues"]) == negative
    check_counts(report)


@pytest.mark.parametrize("name", ["footbridge_spring_bearings", "rack_penalty_tie", "bracket_loose_pad",
                                  "mast_soft_spring"])
def test_demo_counts_agree(name):
    check_counts(conditioning.diagnose(scenarios()[name].model, seed=0))


def test_bcsstm10_negative_counts_agree_with_lapack_in_every_view():
    """bcsstm10 (SuiteSparse, 1,086 rows, indefinite): LAPACK eigvalsh (numpy) on the dense
    matrix counts 54 negative eigenvalues. The tool's elimination pivots on the diagonal, so
    its negative pivots are the signs of an L D L^T and, by Sylvester's law of inertia, the
    same count (common practice). The terminal, the JSON and the HTML give that one count,
    each with how it was obtained (an earlier terminal printed 20, the length of the capped
    list of rows it names)."""
    import scipy.io

    from conditioning.render.html import render_html
    from conftest import reference_matrix_path

    path = reference_matrix_path("bcsstm10")
    lapack = int(np.sum(np.linalg.eigvalsh(scipy.io.mmread(path).toarray()) < 0))   # LAPACK
    assert lapack == 54
    report = conditioning.diagnose(path, samples=0, seed=0)
    data = report_to_dict(report)
    assert data["spectrum"]["negative_eigenvalues"] == lapack
    assert data["pivot_loss"]["negative_count"] == lapack and data["pivot_loss"]["symmetric"]
    assert data["factorization"]["negative_pivots"] == lapack
    text = render_text(report, width=200)
    figures = _key_figures(text)
    assert _count(figures["negative eigenvalues"]) == lapack
    assert _count(figures["negative pivots"]) == lapack
    assert "Sylvester" in text.split("negative pivots", 1)[1].splitlines()[0]
    check_counts(report)
    page = " ".join(render_html(report).split())
    assert f"{lapack} negative pivot(s) (pivot signs (Sylvester): the elimination pivoted on the diagonal" in page
    assert f"negative eigenvalues: {lapack} (all eigenvalues of S (LAPACK))" in page
    assert not re.search(r"\b20 negative", text + page)
