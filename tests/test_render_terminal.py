"""The terminal view: verdict first, then what to do, the key figures and the
details, how each figure was obtained (methods with verbose), caution last. Figures shown are checked against numpy's LAPACK
(the fixture's source) rather than pasted."""

from __future__ import annotations

import numpy as np
import pytest

from conditioning.render._format import fmt_number, how_obtained, summarise_ids
from conditioning.render.terminal import TerminalReport, render_text
from conditioning.results import CAUTION
from test_report_fixtures import healthy_report, singular_report


def test_verdict_is_the_first_line():
    report, _ = singular_report()
    text = render_text(report)
    assert text.splitlines()[0] == "Verdict: singular: 3 free modes"


def test_sections_in_order_and_caution_last():
    report, _ = healthy_report()
    text = render_text(report, width=120)
    order = ["Verdict:", "What to do", "Key figures", "Model", "Stiffness jumps",
             "Digits of the displacements", "Findings"]
    positions = [text.index(word) for word in order]
    assert positions == sorted(positions)
    flat = " ".join(text.split())
    assert flat.endswith(" ".join(CAUTION.split()))
    # Methods and rules only with verbose; then in their own sections, before the findings.
    assert "Condition number ─" not in text and "Digits lost at pivots ─" not in text
    verbose = render_text(report, width=120, verbose=True)
    order = ["Key figures", "Stiffness jumps", "Condition number", "Digits lost at pivots",
             "Digits of the displacements", "Findings"]
    positions = [verbose.index(word + " ─") for word in order]
    assert positions == sorted(positions)


def test_condition_figure_and_how_obtained():
    """The raw 2-norm figure shown is lambda_max/lambda_min of K (numpy LAPACK
    eigvalsh), tagged 'estimate'; the 1-norm figure is tagged a 'bound'."""
    report, model = healthy_report()
    lam = np.linalg.eigvalsh(model.K.toarray())
    text = render_text(report, width=160)
    line = [ln for ln in text.splitlines() if ln.startswith("condition number, raw K")][0]
    assert fmt_number(lam[-1] / lam[0]) in line and "estimate" in line
    text = render_text(report, width=160, verbose=True)
    line = [ln for ln in text.splitlines() if ln.startswith("1-norm, raw K: ")][0]
    assert "(bound)" in line


def test_digits_show_method_and_withdrawn_bound():
    report, _ = healthy_report(digits=9.0)
    text = render_text(report, width=200)
    load = [ln for ln in text.splitlines() if ln.startswith("load  ")][-1]
    assert "9.0" in load and "refinement, measured" in load
    worst = [ln for ln in text.splitlines() if ln.startswith("worst-case")][0]
    assert "withdrawn" in worst
    # The worst nodes of the engineer's load (not of an invented sample), on one line.
    assert "Worst nodes of the load 'load'" in text and "Worst nodes of sample 'worst-case'" not in text


def test_long_node_lists_are_summarised():
    report, _ = singular_report(many_nodes=1300)
    text = render_text(report, width=200)
    assert "1, 2, 3, 4 and 1,306 more" in text   # the mode table lists fewer ids than the findings
    assert str(1300 + 10) not in text   # the last node id is left to the JSON


def test_singular_condition_rows_say_singular():
    report, _ = singular_report()
    text = render_text(report, width=160)
    for row in ("condition number, raw K", "condition number, scaled"):
        assert "singular" in [ln for ln in text.splitlines() if ln.startswith(row)][0]


def test_restraint_advice_carries_the_caution():
    report, _ = singular_report()
    text = " ".join(render_text(report).split())
    assert "node 1 ux" in text and "node 5 uy" in text
    assert "must exist in the real structure" in text


def test_extra_verdict_line_follows_the_verdict():
    report, _ = healthy_report()
    text = render_text(report, extra_verdict="Fewer trustworthy digits than required")
    assert text.splitlines()[1] == "Fewer trustworthy digits than required"


def test_is_a_rich_renderable():
    from rich.console import Console
    import io

    report, _ = healthy_report()
    console = Console(file=io.StringIO(), width=100, color_system="truecolor")
    console.print(TerminalReport(report))
    assert "\x1b[" in console.file.getvalue()   # coloured on a colour terminal


def test_format_helpers():
    """Common practice: thousands separators for counts, tags from the method."""
    assert summarise_ids(range(12, 1219), limit=3) == "12, 13, 14 and 1,204 more"
    assert how_obtained("certified (python-flint ball arithmetic)") == "certified"
    assert how_obtained("arbitrary precision") == "measured"
    assert how_obtained("Hager-Higham 1-norm estimate (a lower bound)") == "bound"
    assert fmt_number(None) == "-" and fmt_number(float("inf")) == "inf"


def test_ceiling_and_nearly_free_are_marked():
    """A figure limited by the reference's resolution is shown as a lower
    bound; a mode held by a small stiffness is not called free."""
    import dataclasses

    report, _ = healthy_report(digits=13.6)
    capped = [dataclasses.replace(s, at_ceiling=(s.sample == "load")) for s in
              report.digits.samples]
    report = dataclasses.replace(report, digits=dataclasses.replace(report.digits,
                                                                    samples=capped))
    text = render_text(report, width=200)
    load = [ln for ln in text.splitlines() if ln.startswith("load  ")][-1]
    assert ">= 13.6" in load
    singular, _ = singular_report()
    held = dataclasses.replace(singular.spectrum.modes[0], exact=False)
    singular = dataclasses.replace(singular, spectrum=dataclasses.replace(
        singular.spectrum, modes=[held]))
    assert "rigid-body (nearly free)" in render_text(singular, width=200)


def test_every_view_accepts_a_minimal_report(tmp_path):
    """Stages that did not run (None) are said so, never a crash, in every view."""
    import dataclasses
    import json

    from conditioning.render.html import render_html
    from conditioning.render.json_report import dumps, report_to_dict
    from conditioning.render.modes_export import write_modes_csv

    report, _ = healthy_report()
    bare = dataclasses.replace(report, factorization=None, condition=None, spectrum=None,
                               pivots=None, digits=None, jumps=[], restraints=[], findings=[])
    assert "no findings" in render_text(bare)
    text = render_text(bare, verbose=True)
    assert "not computed" in text and "not measured" in text and "no findings" in text
    assert "<h1>" in render_html(bare)
    data = json.loads(dumps(report_to_dict(bare)))
    assert data["condition"] is None and data["near_singular_modes"] == [] and data["digits"] == []
    assert write_modes_csv(bare, tmp_path / "m.csv") == 0


def test_scaling_sentence_depends_on_the_gain():
    """Common practice (van der Sluis scaling): a raw figure far above the
    scaled one is units mixing; within a digit, it is real conditioning."""
    from conditioning.render._format import scaling_sentence

    assert "Scaling removes 11.9 digits" in scaling_sentence(11.9)
    assert "not an effect of units" in scaling_sentence(0.1)


def test_model_line_without_coordinates_has_no_empty_dimension():
    """A DOF map without coordinates: '(ux, uy, rz)', never '(; ux, uy, rz)'."""
    import dataclasses

    from conditioning.render.terminal import render_text
    from test_report_fixtures import healthy_report

    report, _ = healthy_report()
    report = dataclasses.replace(report, summary=dataclasses.replace(report.summary, dim=None))
    text = render_text(report, width=100)
    assert "(; " not in text and "nodes (ux, uy)" in text


@pytest.mark.parametrize("width", [60, 80, 100])
def test_a_long_last_cell_never_drops_an_earlier_column(width):
    """A long 'how obtained' is cut with an ellipsis; the value column stays
    (rich would otherwise drop a whole column to fit the long cell)."""
    from rich.console import Console

    from conditioning.render.terminal import _table

    t = _table("figure", "value", "how obtained", right=(1,))
    t.add_row("condition number, raw K", "5.69e+03", "bound")
    t.add_row("digits lost at a pivot", "-", "not measured: " + "reason " * 30)
    console = Console(width=width, record=True)
    console.print(t)
    lines = console.export_text().splitlines()
    assert "value" in lines[0] and "5.69e+03" in lines[1]
    assert all(len(line) <= width for line in lines) and lines[2].endswith("…")


def test_lanczos_condition_figure_is_an_estimate_not_a_bound():
    """Above the dense limit the raw 2-norm figure comes from Lanczos runs whose
    method names their 'residual bound' (a stopping test): the view must tag it
    'estimate', not 'bound' (a one-sided figure). The value is checked against
    numpy's LAPACK eigvalsh on an invented 1,300-row spring chain."""
    import re
    import scipy.sparse as sp
    import conditioning

    n = 1300   # above spectrum.DENSE_LIMIT, so the Lanczos path runs
    k = 10.0 ** np.linspace(0.0, 3.0, n + 1)
    main = k[:-1] + k[1:]
    main[-1] = k[-2]
    K = sp.diags_array([main, -k[1:-1], -k[1:-1]], offsets=[0, 1, -1]).tocsr()
    report = conditioning.diagnose(K, samples=1)
    lam = np.linalg.eigvalsh(K.toarray())
    line = [ln for ln in render_text(report, width=160).splitlines()
            if ln.startswith("condition number, raw K")][0]
    shown = float(re.search(r"\d\.\d\de[+-]\d+", line).group())
    assert shown == pytest.approx(lam[-1] / lam[0], rel=0.01)
    assert line.split()[-1] == "estimate"


def test_pivot_loss_of_a_singular_model_is_shown_as_a_lower_bound():
    """K singular (a zero eigenvalue from LAPACK eigh via numpy): the pivots are
    those of a shifted factorization, whose losses are lower bounds of the true
    (total) loss; the views say '>=' / 'at least', never a plain or 'at most' figure."""
    import conditioning
    from conditioning.render.html import render_html
    from test_modes_still_nodes import _tower

    model, _ = _tower()
    w = np.linalg.eigvalsh(model.K.toarray())
    assert abs(w[0]) < 1e-12 * w[-1]
    report = conditioning.diagnose(model, samples=1)
    text = render_text(report, width=100, verbose=True)
    line = [ln for ln in text.splitlines() if ln.startswith("digits lost at a pivot")][0]
    assert line.split()[5] == ">=" and "K singular" in line
    assert "at least" in text and "about " + f"{report.pivots.worst[0].digits:.1f}" not in text
    html = render_html(report)
    assert "At most" not in html and "At least" in html


def test_an_eigenvalue_at_round_off_is_shown_as_zero_not_as_digits():
    """The tower's free rotation has a scaled eigenvalue below n eps lambda_max
    (LAPACK eigh via numpy on D^-1/2 K D^-1/2): its computed digits are round-off
    that differ between eigensolvers, so the mode table and the finding show 0,
    not a figure such as 7.89e-20 that another part of the report contradicts."""
    import re
    import conditioning
    from test_modes_still_nodes import _tower

    model, _ = _tower()
    K = model.K.toarray()
    s = 1.0 / np.sqrt(np.diag(K))
    w = np.linalg.eigvalsh(K * s[:, None] * s[None, :])
    assert abs(w[0]) <= K.shape[0] * np.finfo(float).eps * w[-1] < w[1]
    report = conditioning.diagnose(model, samples=1)
    text = render_text(report, width=200)
    row = [ln for ln in text.splitlines() if ln.startswith("1  rigid-body")][0]
    assert "0 (round-off)" in row
    finding = next(f for f in report.findings if f.code == "support.rigid-body-mode")
    assert "0 at working precision" in finding.message
    assert not re.search(r"e-\d\d", row + finding.message)


def test_look_alike_findings_are_one_line_different_ones_are_not():
    """Invented model: two plane-stress blocks tied by penalty springs, 4 of
    them 1e6 and 2 of them 1e9 times a block's largest diagonal entry (numpy
    on the assembled K). Each link is its own finding (the JSON keeps all);
    the terminal shows one line per ratio, counting and naming the others."""
    import conditioning
    from conditioning.demo import assemble

    def block(first, y0):
        ids = np.arange(first, first + 12).reshape(3, 4)
        xy = np.array([(i * 10.0, y0 + j * 10.0) for j in range(3) for i in range(4)])
        quads = np.array([[ids[j, i], ids[j, i + 1], ids[j + 1, i + 1], ids[j + 1, i]]
                          for j in range(2) for i in range(3)])
        return assemble.plane_stress_quad(ids.ravel(), xy, quads, E=70000.0, nu=0.3, t=5.0), ids

    a, ida = block(1, 0.0)
    b, idb = block(13, 20.0)
    m = assemble.combine(a, b)
    big = float(a.K.diagonal().max())
    pairs = [(int(p), int(q)) for p, q in zip(ida[2], idb[0])]     # 4 node pairs on the interface
    for k, (p, q) in enumerate(pairs):
        for c in (("ux", "uy") if k < 2 else ("ux",)):
            m = assemble.spring(m, (p, c), (q, c), (1e6 if c == "ux" else 1e9) * big)
    m = assemble.apply_restraints(m, [(int(v), c) for v in ida[0] for c in ("ux", "uy")])
    report = conditioning.diagnose(m.K, samples=1)
    assert len(report.jumps) == 6
    text = render_text(report, width=300)
    lines = [ln for ln in text.splitlines() if "[stiffness.jump]" in ln]
    ratios = {f"{j.ratio:.1e}" for j in report.jumps}
    assert len(lines) == len(ratios) < len(report.jumps)
    shown = sum(1 + int(ln.split("The same at ")[1].split()[0]) if "The same at " in ln else 1 for ln in lines)
    assert shown == len([f for f in report.findings if f.code == "stiffness.jump"])


def test_diagonal_only_rows_are_named_by_node_and_dof_with_a_map():
    """With a DOF map, the structure line names a diagonal-only row (found here
    with numpy: one stored entry in its row) by its node and DOF, as it names
    rows without stiffness, not by a bare row number."""
    import scipy.sparse as sp
    import conditioning
    from conditioning.model import DofTable, Model

    K = np.diag([4.0, 4.0, 4.0, 4.0, 2.0]) + np.diag([-1.0, -1.0, -1.0, 0.0], 1) + np.diag([-1.0, -1.0, -1.0, 0.0], -1)
    single = [i for i in range(5) if np.count_nonzero(K[i]) == 1]
    assert single == [4]
    model = Model(sp.csr_array(K), dofs=DofTable(np.array([1, 1, 2, 2, 3], np.int64),
                                                   np.array([0, 1, 0, 1, 5], np.int8)))
    text = " ".join(render_text(conditioning.diagnose(model, samples=1), width=200).split())
    assert "1 diagonal-only row (node 3 rz)" in text
