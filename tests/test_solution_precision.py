"""A supplied solution written at a lower precision is judged by its digits.

Outside references:

* python-flint ``arb_mat.solve`` (ball arithmetic: a certified enclosure of
  the exact solution) for the digits each supplied vector keeps;
* IEEE 754 round to nearest: a float32 number is within 2^-24 of the value
  it rounds (numpy's float64 -> float32 conversion), a value printed with p
  significant figures within 0.5 10^(1-p) of it (C printf semantics);
* the rounding bound on the residual of a rounded exact solution,
  |f - K x_w| = |K (x - x_w)| <= |K| |x - x_w| (triangle inequality),
  checked here against the backward error the tool reports;
* scipy's SuperLU on a float32 copy of K for a solve done in single precision.

Models are invented (the truss of tests/test_solution_audit.py) or the
bundled footbridge export (invented data, matrices/README.md).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import conditioning
from conditioning.cli import main
from conditioning.model import Model
from conditioning.stages.digits import U32, WRITTEN_FIT_FACTOR, written_precision
from test_solution_audit import certified_digits, portal_truss

try:
    import flint
except ImportError:  # test extra
    flint = None

DEMO = Path(__file__).resolve().parents[1] / "matrices"
needs_flint = pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")


def _truss_case():
    K, dofs = portal_truss()
    f = np.zeros(K.shape[0])
    f[dofs.dof == 1] = -10.0
    f[dofs.dof == 0] = 3.0
    return K, dofs, f, np.linalg.solve(K.toarray(), f)   # LAPACK dense LU


def _audit_of(report):
    audit = report.digits.audit
    sample = next(s for s in report.digits.samples if s.audited)
    return audit, sample


def test_rounding_bounds_hold_for_float32_and_six_figures():
    """The per-entry rounding bounds of written_precision contain the actual rounding
    (IEEE 754 round to nearest, printf): float32 and its shortest print, 6 figures."""
    rng = np.random.default_rng(3)
    x = rng.standard_normal(3000) * 10.0 ** rng.integers(-9, 4, 3000)
    x32 = x.astype(np.float32).astype(np.float64)
    short = np.array([float(np.format_float_scientific(np.float32(v), unique=True)) for v in x])
    six = np.array([float(f"{v:.5e}") for v in x])
    for written, kind, digits in ((x32, "float32", 7.2), (short, "float32", 7.2), (six, "decimal", 6.0)):
        wp = written_precision(written)
        assert wp is not None and wp.kind == kind and math.floor(wp.digits * 10) / 10 == digits
        assert np.all(np.abs(written - x) <= wp.rounding)
    assert np.all(np.abs(x32 - x) <= U32 * np.abs(x))          # IEEE 754 float32 rounding
    assert written_precision(x) is None                        # full float64


@needs_flint
@pytest.mark.parametrize("how", ["float32 rounding", "float32 solve"])
def test_single_precision_solution_is_accepted_with_its_digits(how):
    """The exact displacements rounded to float32, or a float32 SuperLU solve: the
    audit fits (single precision), the digits are python-flint's to 0.5 (never
    above), the message says 'single precision: about 7 digits', nothing says the
    vector does not fit, and --min-digits decides the status."""
    K, dofs, f, x = _truss_case()
    if how == "float32 rounding":
        xs = x.astype(np.float32).astype(np.float64)
    else:
        K32 = sp.csc_matrix(K).astype(np.float32)
        xs = spla.splu(K32).solve(f.astype(np.float32)).astype(np.float64)
    certified = certified_digits(K.toarray(), f, xs)
    assert 5.0 <= certified <= 8.0   # single precision, less what the conditioning costs
    for min_digits, status in ((4.0, "healthy"), (certified + 1.0, "errors")):
        report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=xs), samples=1,
                                       min_digits=min_digits)
        audit, sample = _audit_of(report)
        assert audit.fits and audit.fits_as_written and audit.written_as == "float32"
        assert audit.written_text == "single precision: about 7 digits"
        assert sample.trustworthy_digits <= certified + 1e-9
        assert abs(sample.trustworthy_digits - certified) <= 0.5
        codes = [c.code for c in report.findings]
        assert "solution.does-not-fit" not in codes and "solution.lower-precision" in codes
        assert "does not fit" not in report.verdict
        assert "single precision: about 7 digits" in report.verdict
        assert report.status == status
        if status == "errors":
            below = next(c for c in report.findings if c.code == "digits.below-minimum")
            assert "supplied solution" in below.message and "single precision" in below.message
            assert report.verdict.startswith("fewer digits than required")


@needs_flint
def test_seven_figure_solution_fits_as_written_and_the_rounding_bound_holds():
    """The exact displacements written with 7 significant figures: their backward
    error is within the rounding bound (|K| |x - x_w|, triangle inequality), the
    audit fits as written, the finding says '7 significant figures'."""
    K, dofs, f, x = _truss_case()
    x7 = np.array([float(f"{a:.6e}") for a in x])
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=x7), samples=1)
    audit, sample = _audit_of(report)
    A = K.toarray()
    denom = np.abs(A).sum(axis=1).max() * np.abs(x7).max() + np.abs(f).max()
    assert audit.backward_error <= np.max(np.abs(A) @ np.abs(x7 - x)) / denom * (1 + 1e-6) + 1e-15
    assert audit.backward_error <= audit.written_backward_error
    assert audit.fits and audit.written_as == "decimal" and audit.written_digits == 7
    finding = next(c for c in report.findings if c.code == "solution.lower-precision")
    assert "written with 7 significant figures" in finding.message
    assert abs(sample.trustworthy_digits - certified_digits(A, f, x7)) <= 0.5


@needs_flint
@pytest.mark.parametrize("wrong", ["permuted DOF order", "another load case", "unconverged"])
def test_a_vector_that_solves_no_written_precision_is_still_refused(wrong):
    """Written with 6 figures but permuted, of another load, or an early-stopped
    conjugate gradient (scipy cg, 5 iterations): its backward error is far above
    what 6 figures allow; 'does not fit' stays, with the advice about load case,
    order and convergence (not about figures)."""
    K, dofs, f, x = _truss_case()
    if wrong == "permuted DOF order":
        v = x[np.random.default_rng(5).permutation(x.size)]
    elif wrong == "another load case":
        g = np.zeros_like(f)
        g[dofs.dof == 0] = -7.0
        v = np.linalg.solve(K.toarray(), g)
    else:
        v, _ = spla.cg(K, f, maxiter=5)
    v6 = np.array([float(f"{a:.5e}") for a in v])
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=v6), samples=1)
    audit, sample = _audit_of(report)
    assert not audit.fits and not audit.fits_as_written
    assert audit.backward_error > WRITTEN_FIT_FACTOR * audit.written_backward_error
    assert sample.trustworthy_digits <= max(certified_digits(K.toarray(), f, v6), 0.0) + 1e-9
    finding = next(c for c in report.findings if c.code == "solution.does-not-fit")
    assert "6 significant figures" in finding.message and "does not explain it" in finding.message
    assert "load case" in finding.advice and "converged" in finding.advice
    assert "significant figures" not in finding.advice
    assert report.verdict.startswith("supplied solution does not fit") and report.status == "errors"


def test_readme_six_figure_example_exits_by_min_digits(tmp_path, capsys):
    """The README's --solution example (footbridge, 6 significant figures, about 5.8
    digits): exit 0 at the default --min-digits 4, exit 3 at --min-digits 6, and
    never 'does not fit'."""
    args = [str(DEMO / "footbridge.mtx"), "--dofs", str(DEMO / "footbridge_dofs.csv"),
            "--load", str(DEMO / "footbridge_load.mtx"), "--solution", str(DEMO / "footbridge_solution.mtx")]
    assert main(["diagnose", *args, "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "does not fit" not in out and "written with 6 significant figures" in out
    assert main(["diagnose", *args, "--quiet", "--min-digits", "6"]) == 3
    out = capsys.readouterr().out
    assert "does not fit" not in out and "fewer digits than required" in out
