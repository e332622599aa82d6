"""Comparing two reports of the same model (before and after a fix).

The fixture pair is the invented plane truss without supports (3 rigid-body
modes, a free plane body has 3 rigid motions: common practice) and with a
pin and a roller (no mode). Condition figures are recomputed with numpy's
LAPACK rather than pasted.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np

from conditioning import results
from conditioning.compare import compare_reports
from conditioning.render.json_report import comparison_to_dict, dumps
from conditioning.render.terminal import render_comparison_text
from test_report_fixtures import healthy_report, singular_report


def test_fix_removes_the_three_rigid_body_modes():
    before, _ = singular_report()
    after, model = healthy_report()
    c = compare_reports(before, after)
    assert (c.modes_before, c.modes_after) == (3, 0)
    assert len(c.modes_removed) == 1 and c.modes_removed[0].count == 3
    assert c.modes_removed[0].kind == "rigid-body" and c.modes_removed[0].nodes == list(
        range(1, 11))
    assert c.modes_added == []
    assert [f.code for f in c.findings_resolved] == ["free-modes"]
    assert [f.code for f in c.findings_new] == ["stiff-spring"]
    est = {f.name: f for f in c.condition}
    lam = np.linalg.eigvalsh(model.K.toarray())
    assert est["estimate"].before is None
    assert est["estimate"].after == lam[-1] / lam[0]
    assert est["estimate"].digits_change is None
    assert [d.sample for d in c.digits] == ["load", "random-1", "worst-case"]
    assert all(d.before is None and d.change is None for d in c.digits)


def test_partial_fix_counts_modes_as_a_multiset():
    """6 -> 1 identical-looking rigid-body modes of one part: 5 removed."""
    before, _ = singular_report()
    mode = before.spectrum.modes[0]
    six = dataclasses.replace(before, spectrum=dataclasses.replace(before.spectrum,
                                                                   modes=[mode] * 6, count=6))
    one = dataclasses.replace(before, spectrum=dataclasses.replace(before.spectrum,
                                                                   modes=[mode], count=1))
    c = compare_reports(six, one)
    assert [(m.kind, m.count) for m in c.modes_removed] == [("rigid-body", 5)]
    assert c.findings_kept and not c.findings_resolved and not c.findings_new


def test_condition_and_digits_changes():
    """Improving kappa by 10^3 is +3 orders; digits change is after - before."""
    before, _ = healthy_report(digits=8.0)
    after, _ = healthy_report(digits=11.0)
    cond = dataclasses.replace(after.condition, estimate=before.condition.estimate / 1e3)
    after = dataclasses.replace(after, condition=cond)
    c = compare_reports(before, after)
    est = {f.name: f for f in c.condition}
    assert math.isclose(est["estimate"].digits_change, 3.0, rel_tol=1e-12)
    assert est["scaled_estimate"].digits_change == 0.0
    load = [d for d in c.digits if d.sample == "load"][0]
    assert math.isclose(load.change, 3.0)


def test_different_sizes_are_noted():
    before, _ = singular_report()
    after, _ = healthy_report()
    after = dataclasses.replace(after, summary=dataclasses.replace(after.summary, rows=18))
    assert "different sizes" in compare_reports(before, after).notes[0]


def test_rendered_as_text_and_strict_json():
    before, _ = singular_report()
    after, _ = healthy_report()
    c = compare_reports(before, after)
    text = render_comparison_text(c, width=120)
    assert text.splitlines()[0] == f"Before: {before.verdict}"
    assert text.splitlines()[1] == f"After:  {after.verdict}"
    assert "removed: 3 x rigid-body" in text and "resolved: error [free-modes]" in text

    def refuse(token):
        raise ValueError(token)
    data = json.loads(dumps(comparison_to_dict(c)), parse_constant=refuse)
    assert data["schema"] == "conditioning-compare/1"
    assert data["modes_removed"] == [{"kind": "rigid-body", "nodes": list(range(1, 11)),
                                      "count": 3}]
    assert {"findings_resolved", "findings_new", "condition", "digits"} <= set(data)


def test_finding_message_wording_does_not_matter():
    before, _ = singular_report()
    reworded = [results.Finding(f.severity, f.code, "new wording", f.nodes, f.advice)
                for f in before.findings]
    after = dataclasses.replace(before, findings=reworded)
    c = compare_reports(before, after)
    assert not c.findings_new and not c.findings_resolved and len(c.findings_kept) == 1
