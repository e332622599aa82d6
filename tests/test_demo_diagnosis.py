"""The diagnosis of every bundled demo model against what the model was built
to contain (conditioning.demo.scenarios.Expected, each count cross-checked
there against LAPACK's eigenvalues in tests/test_demo.py)."""

from __future__ import annotations

import pytest

from conditioning.pipeline import diagnose
from conditioning.demo.scenarios import scenarios

CASES = scenarios()


@pytest.mark.parametrize("name", sorted(CASES))
def test_demo_case_diagnosis_matches_its_construction(name):
    case = CASES[name]
    exp = case.expected
    report = diagnose(case.model, measure=False)
    exact = [m for m in report.spectrum.modes if m.exact]
    near = [m for m in report.spectrum.modes if not m.exact]
    assert len(exact) == exp.rigid_body_modes
    assert len(near) == exp.near_zero_modes
    assert report.condition.singular == (exp.rigid_body_modes > 0)
    if exp.penalty_nodes:
        found = {n for j in report.jumps for n in j.nodes}
        assert set(exp.penalty_nodes) <= found
    if exp.defect_nodes and report.spectrum.modes:
        located = {n for m in report.spectrum.modes for n in m.nodes}
        restrained = {r.node for r in report.restraints}
        # The mode is located at (or the restraint suggested at) the defect.
        assert located & set(exp.defect_nodes) or restrained & set(exp.defect_nodes)
    if exp.rigid_body_modes == 0 and exp.near_zero_modes == 0:
        assert report.condition.estimate is not None
