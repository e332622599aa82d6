"""The JSON report: pinned keys, strict JSON, non-finite numbers mapped on purpose.

The key lists pinned here are those the diagnosis issue (#3) and the digits
issue (#4) require of ``--json``; docs/report-format.md must document each.
Strictness is checked with Python's json parser told to refuse the
non-standard tokens NaN/Infinity, which RFC 8259 (the JSON standard) does
not allow.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from conditioning.render.json_report import SCHEMA, dumps, report_to_dict, write_json
from test_report_fixtures import healthy_report, singular_report

DOCS = Path(__file__).resolve().parents[1] / "docs" / "report-format.md"

# Issue #3 "Machine-readable result" and issue #4 "Result".
REQUIRED = {
    "top": {"schema", "rows", "condition", "near_singular_modes", "stiffness_jumps",
            "suggested_restraints", "findings", "digits"},
    "condition": {"estimate", "scaled_estimate", "one_norm_estimate", "singular",
                  "estimate_method", "scaled_method", "one_norm_method"},
    "near_singular_modes": {"eigenvalue", "relative_eigenvalue", "kind", "motion", "nodes",
                            "part"},
    "stiffness_jumps": {"nodes", "ratio", "digits_cost"},
    "suggested_restraints": {"node", "dof"},
    "findings": {"severity", "code", "message", "nodes", "advice"},
    "digits": {"sample", "trustworthy_digits", "digits_lost", "method", "converged",
               "worst_nodes"},
}


def _strict_loads(text: str):
    """json.loads that refuses NaN/Infinity tokens (RFC 8259 has none)."""
    def refuse(token):
        raise ValueError(f"non-standard JSON token {token}")
    return json.loads(text, parse_constant=refuse)


@pytest.mark.parametrize("make", [healthy_report, singular_report])
def test_required_keys_present(make):
    report, _ = make()
    data = _strict_loads(dumps(report_to_dict(report)))
    assert REQUIRED["top"] <= set(data)
    assert data["schema"] == SCHEMA == "conditioning-report/2"
    assert REQUIRED["condition"] <= set(data["condition"])
    for key in ("near_singular_modes", "stiffness_jumps", "suggested_restraints", "findings",
                "digits"):
        for item in data[key]:
            assert REQUIRED[key] <= set(item), key


def test_singular_report_values():
    """Unsupported plane truss: 3 rigid-body modes (a free plane body has 3
    rigid motions, common practice); the 2-norm estimate is null."""
    report, model = singular_report()
    data = _strict_loads(dumps(report_to_dict(report)))
    assert data["rows"] == model.n == 20
    assert data["condition"]["singular"] is True
    assert data["condition"]["estimate"] is None
    assert "estimate_nonfinite" not in data["condition"]   # absent figure, not a non-finite one
    modes = data["near_singular_modes"]
    assert [m["kind"] for m in modes] == ["rigid-body"] * 3
    for m in modes:
        assert math.isclose(sum(m["motion"].values()), 1.0, rel_tol=1e-12)
        assert "vector" not in m and m["has_vector"] is True
    assert [(r["node"], r["dof"]) for r in data["suggested_restraints"]] == [
        (1, "ux"), (1, "uy"), (5, "uy")]


def test_condition_matches_lapack():
    """The exported condition number is the figure of the report, which the
    fixture took from numpy's LAPACK eigensolver: recompute and compare."""
    report, model = healthy_report()
    data = _strict_loads(dumps(report_to_dict(report)))
    lam = np.linalg.eigvalsh(model.K.toarray())
    assert data["condition"]["estimate"] == pytest.approx(lam[-1] / lam[0], rel=1e-12)
    assert data["condition"]["one_norm_estimate"] == pytest.approx(
        np.linalg.cond(model.K.toarray(), 1), rel=1e-12)


def test_nonfinite_numbers_become_null_with_reason():
    report, _ = healthy_report()
    text = dumps(report_to_dict(report))
    assert "NaN" not in text and "Infinity" not in text
    data = _strict_loads(text)
    worst = [d for d in data["digits"] if d["sample"] == "worst-case"][0]
    assert worst["componentwise_bound"] is None
    assert worst["componentwise_bound_nonfinite"] == "inf"
    load = [d for d in data["digits"] if d["sample"] == "load"][0]
    assert load["per_dof_digits"][8] is None
    assert load["per_dof_digits_nonfinite"] == [{"index": 8, "value": "nan"}]
    assert len(load["per_dof_digits"]) == report.summary.rows


def test_numpy_types_converted():
    report, _ = singular_report()
    data = report_to_dict(report)

    def walk(x):
        if isinstance(x, dict):
            for v in x.values():
                walk(v)
        elif isinstance(x, list):
            for v in x:
                walk(v)
        else:
            assert x is None or type(x) in (str, int, float, bool), type(x)
    walk(data)
    assert "part_of_row" not in data["structure"]


def test_write_to_file_and_stdout(tmp_path, capsys):
    report, _ = healthy_report()
    out = tmp_path / "r.json"
    write_json(report, out)
    assert _strict_loads(out.read_text())["status"] == "warnings"
    write_json(report, "-")
    assert _strict_loads(capsys.readouterr().out)["verdict"] == report.verdict


def test_every_key_is_documented():
    """docs/report-format.md names every key the report writes."""
    documented = set(re.findall(r"`([a-z_0-9]+)`", DOCS.read_text()))
    report, _ = healthy_report()
    singular, _ = singular_report()
    keys: set[str] = set()

    def collect(x):
        if isinstance(x, dict):
            for k, v in x.items():
                if not k.endswith("_nonfinite") and k not in ("motion", "timings"):
                    keys.add(k)
                collect(v)
        elif isinstance(x, list):
            for v in x:
                collect(v)
    collect(report_to_dict(report))
    collect(report_to_dict(singular))
    missing = sorted(keys - documented)
    assert not missing, f"undocumented keys: {missing}"


def test_report_fields_are_all_written():
    """Every Report field reaches the JSON, under the layout's name for it or
    its own (so a stage added later is not silently dropped), except the
    fields docs/report-format.md lists under "Not in the JSON"."""
    import dataclasses

    from conditioning.results import Report

    renamed = {"restraints": "suggested_restraints", "jumps": "stiffness_jumps",
               "pivots": "pivot_loss"}
    not_written = {"geometry"}
    report, _ = healthy_report()
    assert report.geometry is not None
    data = report_to_dict(report)
    for f in dataclasses.fields(Report):
        if f.name in not_written:
            assert f.name not in data, f.name
            continue
        assert renamed.get(f.name, f.name) in data, f.name
    left_out = DOCS.read_text().split("## Not in the JSON", 1)[1].split("\n## ", 1)[0]
    assert all(f"`Report.{name}`" in left_out for name in not_written)


def test_timings_keys_and_symmetric_asymmetry_have_no_sentinels():
    """Stage timings under snake_case keys; a symmetric K (the fixture truss,
    symmetric by construction: numpy says K == K.T) writes null positions,
    never -1."""
    from conditioning import diagnose
    from test_report_fixtures import truss_model

    model = truss_model(supported=True)
    K = model.K.toarray()
    assert np.array_equal(K, K.T)
    data = _strict_loads(dumps(report_to_dict(diagnose(model))))
    assert data["timings"] and all(re.fullmatch(r"[a-z]+(_[a-z]+)*", k) for k in data["timings"])
    assert "stiffness_jumps" in data["timings"]
    a = data["structure"]["asymmetry"]
    assert a["row"] is None and a["col"] is None and a["pair_values"] is None
    assert a["relative"] == 0 and a["pairs"] == 0
