"""Per node, for the engineer's load: a node below --min-digits is an error, named.

Outside reference: python-flint ``arb_mat.solve`` (ball arithmetic, a certified
enclosure of the exact solution of the stored K) for the digits of each node
of the tool's own float64 solution (``DigitsSample.solution``, the very vector
measured). Model: the bundled rack_penalty_tie export (invented data,
matrices/README.md): a beam end tied to its upright by penalty springs.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import conditioning
from conditioning.cli import main
from conditioning.render.terminal import render_text
from conditioning.stages.digits import NEGLIGIBLE

try:
    import flint
except ImportError:  # test extra
    flint = None

DEMO = Path(__file__).resolve().parents[1] / "matrices"
ARGS = [str(DEMO / "rack_penalty_tie.mtx"), "--dofs", str(DEMO / "rack_penalty_tie_dofs.csv"),
        "--coords", str(DEMO / "rack_penalty_tie_coords.csv"), "--load", str(DEMO / "rack_penalty_tie_load.mtx")]


def _report(**kw):
    return conditioning.diagnose(ARGS[0], dofs=ARGS[2], coords=ARGS[4], load=ARGS[6], **kw)


def _flint_node_digits(K, f, x, node, dofs) -> float:
    """Digits of the node's worst component, certified: -log10 of the largest
    lower bound on |x_i - x_exact,i| over max(|x_exact,i|, a thousandth of the
    node's (then the model's) largest of its kind), as the report defines them."""
    A = K.toarray()
    n = A.shape[0]
    X = flint.arb_mat(n, n, A.ravel().tolist()).solve(flint.arb_mat(n, 1, f.tolist()), nonstop=False)
    exact = np.array([float(X[i, 0].mid()) for i in range(n)])
    gap = np.array([float(abs(X[i, 0] - flint.arb(float(x[i]))).lower()) for i in range(n)])
    kind = (np.asarray(dofs.dof) >= 3).astype(int)
    rows = np.flatnonzero(np.asarray(dofs.node) == node)
    worst = math.inf
    for i in rows:
        same = rows[kind[rows] == kind[i]]
        node_ref = max(np.abs(exact[same]).max(), NEGLIGIBLE * np.abs(exact[kind == kind[i]]).max())
        scale = max(abs(exact[i]), NEGLIGIBLE * node_ref)
        worst = min(worst, -math.log10(gap[i] / scale) if gap[i] > 0 else 15.95)
    return worst


@pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")
def test_load_nodes_below_minimum_are_an_error_naming_them():
    """The load keeps 5.7 digits normwise, but two of its nodes keep about 3 (python-flint):
    digits.node-below-minimum names them, the verdict says so, the status is errors;
    with --min-digits 3 they pass."""
    report = _report()
    load = next(s for s in report.digits.samples if s.sample == "load")
    assert load.trustworthy_digits >= 4.0                       # normwise it passes
    finding = next(f for f in report.findings if f.code == "digits.node-below-minimum")
    low = [w for w in load.worst_nodes if w.digits < 4.0]
    assert low and sorted(finding.nodes) == sorted(w.node for w in low)
    model = conditioning.load_model(ARGS[0], dofs=ARGS[2], coords=ARGS[4], load=ARGS[6])
    for w in low:
        certified = _flint_node_digits(model.K, np.asarray(model.load), load.solution, w.node, model.dofs)
        assert certified < 4.0
        assert w.digits <= certified + 1e-9 and certified - w.digits <= 0.5
        assert f"{w.node} ({w.digits:.1f})" in finding.message
    assert report.status == "errors"
    assert all(str(w.node) in report.verdict for w in low) and "of the load keep fewer than 4" in report.verdict
    assert "node-below-minimum" not in {f.code for f in _report(min_digits=3.0).findings}


def test_cli_exit_3_and_terminal_shows_the_loads_worst_nodes(capsys):
    """Exit 3 (it was 1), the message under the verdict names the nodes, the worst
    nodes shown are the load's (not an invented sample's), and the invented loads
    and the headline are explained in one line."""
    assert main(["diagnose", *ARGS]) == 3
    out = " ".join(capsys.readouterr().out.split())
    assert "For the load 'load', 2 nodes keep fewer than 4 trustworthy digits" in out
    report = _report()
    text = " ".join(render_text(report, width=80).split())
    load = next(s for s in report.digits.samples if s.sample == "load")
    assert f"Worst nodes of the load 'load'" in text and f"{load.worst_nodes[0].node} (" in text
    assert "random-k: random forces on every DOF" in text and "worst of all 5" in text
    assert "Whose solve: the tool's float64 solve (SuperLU, pivots on the diagonal" in text
    assert "worst of the load and 4 invented loads" in report.verdict
