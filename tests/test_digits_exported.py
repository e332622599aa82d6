"""A penalty that swallowed the structure: the exported K's own figures come first.

Outside references: python-flint ``arb_mat.solve`` at 400 bits (ball
arithmetic, a certified enclosure of the exact solution of the stored K) for
the digits of the float64 solve the tool measured (``DigitsSample.solution``),
per node and normwise; mpmath ``eigsy`` at 60 digits for the 2-norm condition
number of the stored K, against which the proved lower bound is checked.

Model (invented, tests/test_penalty.py): a portal frame whose beam end is tied
to the column top by springs of 1e20 x the beam's EA/L, so that the structural
stiffness is below half an ulp of the stored diagonal.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

import conditioning
from conditioning.render.terminal import render_text
from conditioning.stages.digits import NEGLIGIBLE
from test_penalty import tied_portal

try:
    import flint
except ImportError:  # test extra
    flint = None


def flint_solution(K: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(midpoints, radii) of the exact solution at 400 bits."""
    old = flint.ctx.prec
    flint.ctx.prec = 400
    try:
        n = len(f)
        X = flint.arb_mat(n, n, K.ravel().tolist()).solve(flint.arb_mat(n, 1, f.tolist()))
        mid = np.array([float(X[i, 0].mid()) for i in range(n)])
        rad = np.array([float(X[i, 0].rad()) for i in range(n)])
    finally:
        flint.ctx.prec = old
    return mid, rad


@pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")
def test_exported_K_digits_are_the_headline_and_match_flint():
    model = tied_portal(1e20)
    report = conditioning.diagnose(model, samples=1)
    dg = report.digits
    assert dg.headline_solve == "exported"
    (exported,) = [s for s in dg.samples if s.solver_kind == "exported"]
    assert exported.sample == "load (exported K)" and "exported K as stored" in exported.solve
    K, f, x = model.K.toarray(), np.asarray(model.load, float), exported.solution
    exact, rad = flint_solution(K, f)
    assert rad.max() < 1e-30 * np.abs(exact).max()            # the enclosure resolves far below float64
    normwise = -math.log10(np.abs(x - exact).max() / np.abs(exact).max())
    assert exported.trustworthy_digits <= normwise + 1e-9 and normwise - exported.trustworthy_digits <= 0.5
    assert normwise < 3.0                                      # a float64 solve keeps about 1 digit
    # Per node: each node's worst DOF against its own size (a thousandth of its node's, of the model's).
    nodes, kind = np.asarray(model.dofs.node), (np.asarray(model.dofs.dof) >= 3).astype(int)
    for node in np.unique(nodes):
        rows = np.flatnonzero(nodes == node)
        worst = math.inf
        for i in rows:
            same = rows[kind[rows] == kind[i]]
            ref = max(np.abs(exact[same]).max(), NEGLIGIBLE * np.abs(exact[kind == kind[i]]).max())
            scale = max(abs(exact[i]), NEGLIGIBLE * ref)
            gap = abs(x[i] - exact[i])
            worst = min(worst, -math.log10(gap / scale) if gap > 0 else 15.95)
        tool = float(np.min(exported.per_dof_digits[rows]))
        assert tool <= max(worst, 0.0) + 1e-9 and max(worst, 0.0) - tool <= 0.5, (node, tool, worst)
    # The condition bound is a lower bound of mpmath's 2-norm condition number, beyond 1/eps.
    with mpmath.workdps(60):
        lam = mpmath.eigsy(mpmath.matrix(K.tolist()), eigvals_only=True)
        kappa = float(max(abs(v) for v in lam) / min(abs(v) for v in lam))
    assert dg.exported_condition_at_least is not None
    assert 1 / np.finfo(float).eps < dg.exported_condition_at_least <= kappa
    # The verdict and the key figures: the exported K first, the held model as a prediction.
    assert f"exported K keeps {int(exported.trustworthy_digits)} significant digit" in report.verdict
    assert "beyond float64: at least" in report.verdict and "after the suggested change" in report.verdict
    text = render_text(report, width=80)
    key = text[text.index("Key figures"):text.index("Model")]
    assert "condition, exported K" in key and f"{exported.trustworthy_digits:.1f}" in key
    assert "after the change" in key and "prediction" in key


def test_swallowed_penalty_names_the_exported_K_modes_and_keeps_the_geometry_checks():
    """The mode figures of the exported K are given, the held model's are labelled a
    prediction, the swallowed-penalty finding says which matrix the rest describes,
    and the geometry checks survive the held-DOF path (issue 24 item 2, issue 25).

    Outside references: LAPACK eigvalsh (numpy) on the exported K's scaled matrix
    (D^-1/2 K D^-1/2) has two eigenvalues below 1e-12 and the next above 1e-3 (the
    two tied motions ux, uy of the link); the tied nodes share their coordinates by
    construction (tests/test_penalty.py), so they coincide (a closed form)."""
    model = tied_portal(1e20)
    K = model.K.toarray()
    s = 1.0 / np.sqrt(np.diag(K))
    w = np.abs(np.linalg.eigvalsh(K * s[:, None] * s[None, :]))               # LAPACK
    zero = int(np.sum(w < 1e-12))
    assert zero == 2 and np.sort(w)[zero] > 1e-3
    report = conditioning.diagnose(model, samples=1)
    dg = report.digits
    assert dg.headline_solve == "exported"
    assert dg.exported_zero_modes == zero and "LAPACK" in dg.exported_zero_modes_method
    text = render_text(report, width=100)
    figures = {line.split("  ")[0]: line for line in text.split("Key figures")[1].splitlines()}
    assert f"{zero} zero" in figures["modes, exported K"]
    assert "prediction" in figures["near-singular modes, after"]
    assert "near-singular modes" not in figures            # the held model's count is never unlabelled
    assert "prediction" in figures["digits lost at a pivot, after"]
    (swallowed,) = [f for f in report.findings if f.code == "stiffness.penalty-swallowed"]
    assert "checked with these DOFs held" not in swallowed.message
    assert "not figures of the exported K" in swallowed.message
    assert f"{zero} scaled eigenvalues zero at working precision" in swallowed.message
    # Geometry checks of the whole model: the tied nodes coincide (same coordinates).
    assert report.geometry_checks is not None
    pairs = {tuple(sorted(g.nodes)): g.joined for g in report.geometry_checks.coincident}
    assert pairs.get((15, 99)) == "partly"
    from conditioning.render.html import render_html
    page = " ".join(render_html(report).split())
    assert "These modes are of the model with the swallowed DOFs held: a prediction after the suggested change" in page
