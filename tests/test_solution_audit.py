"""Auditing a supplied solution: the verdict blames the vector when the vector is wrong.

Outside references:

* python-flint ``arb_mat.solve`` (ball arithmetic, certified enclosure of the
  exact solution) for the digits of the supplied vector;
* the normwise backward error eta(x) = ||f - K x|| / (||K|| ||x|| + ||f||)
  (Rigal and Gaches 1967; Higham, *Accuracy and Stability of Numerical
  Algorithms*, Thm 7.1; from memory): a backward-stable solve has eta of a few
  u = 2^-53, a vector scaled by 1.01 has eta of about 0.01 / 2 (closed form
  below);
* for a singular K, the orthogonal projection onto the null space computed by
  numpy/LAPACK (``np.linalg.svd``).

Models are invented for the tests.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

import conditioning
from conditioning.stages.digits import digits_written
from conditioning.model import DofTable, Model

try:
    import flint
except ImportError:  # test extra
    flint = None


def portal_truss() -> tuple[sp.csr_array, DofTable]:
    """An invented 2D truss: 6 panels of a Pratt girder, 14 nodes, pinned at the
    left bottom node and on a roller at the right one (axial stiffness EA/L of
    every bar, EA = 2e5 kN, panel 2 m by 1.5 m). Returns K (kN/m) and its map."""
    nodes = [(2.0 * i, 0.0) for i in range(7)] + [(2.0 * i, 1.5) for i in range(7)]
    bars = [(i, i + 1) for i in range(6)] + [(7 + i, 8 + i) for i in range(6)]
    bars += [(i, 7 + i) for i in range(7)] + [(i, 8 + i) for i in range(6)]
    n = 2 * len(nodes)
    K = np.zeros((n, n))
    for a, b in bars:
        d = np.subtract(nodes[b], nodes[a])
        L = float(np.hypot(*d))
        c = d / L
        k = 2e5 / L * np.outer(c, c)
        idx = [2 * a, 2 * a + 1, 2 * b, 2 * b + 1]
        K[np.ix_(idx, idx)] += np.block([[k, -k], [-k, k]])
    keep = [r for r in range(n) if r not in (0, 1, 13)]  # pin at node 1, roller (uy) at node 7
    node = np.repeat(np.arange(1, len(nodes) + 1), 2)[keep]
    dof = np.tile([0, 1], len(nodes))[keep]
    return sp.csr_array(K[np.ix_(keep, keep)]), DofTable(node.astype(np.int64), dof.astype(np.int8))


def certified_digits(K: np.ndarray, f: np.ndarray, x: np.ndarray) -> float:
    """-log10 of a certified lower bound on ||x - x_exact||_inf / ||x_exact||_inf (python-flint)."""
    n = len(f)
    X = flint.arb_mat(n, n, K.ravel().tolist()).solve(flint.arb_mat(n, 1, f.tolist()))
    gap = max(abs(X[i, 0] - flint.arb(float(x[i]))).lower() for i in range(n))
    big = max(abs(X[i, 0]).upper() for i in range(n))
    err = float(gap / big)
    return min(53 * math.log10(2), -math.log10(err)) if err > 0 else 53 * math.log10(2)


@pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")
def test_correct_solution_scaled_by_one_percent_is_blamed_not_K():
    """The right displacements of a healthy truss, scaled by 1.01: about 2 digits
    (certified by python-flint, never exceeded), the finding names the solution,
    the verdict blames it, and nothing calls K ill-conditioned."""
    K, dofs = portal_truss()
    f = np.zeros(K.shape[0])
    f[dofs.dof == 1] = -10.0                                   # 10 kN down at every node
    x = np.linalg.solve(K.toarray(), f) * 1.01
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=x))
    audit = report.digits.audit
    assert audit is not None and not audit.fits
    # eta of (1+d) x_exact with d = 0.01: ||d K x|| / ((1+d) ||K|| ||x|| + ||f||) <= d / (1+d);
    # it is at least d ||f|| / ((1+d) ||K|| ||x|| + ||f||) (closed form).
    norm_K = np.abs(K.toarray()).sum(axis=1).max()
    lower = 0.01 * np.abs(f).max() / (1.01 * norm_K * np.abs(x).max() + np.abs(f).max())
    assert lower <= audit.backward_error <= 0.01 / 1.01
    assert audit.allowed_backward_error < 1e-14
    solution = next(s for s in report.digits.samples if s.sample == "solution")
    certified = certified_digits(K.toarray(), f, x)
    assert solution.trustworthy_digits <= certified + 1e-9
    assert abs(solution.trustworthy_digits - certified) <= 0.5
    codes = [c.code for c in report.findings]
    assert "solution.does-not-fit" in codes
    assert "condition.ill-conditioned" not in codes and "digits.below-minimum" not in codes
    assert report.verdict.startswith("supplied solution does not fit")
    assert report.status == "errors"
    # The summary (which credits the conditioning) speaks of the tool's own solves only.
    own = min(s.trustworthy_digits for s in report.digits.samples if s.sample != "solution")
    assert own > 10 and f"{own:.1f}" in report.digits.summary and "'solution'" not in report.digits.summary
    assert all("ill-conditioning" not in c.advice for c in report.findings)


def test_digits_written_counts_significant_figures():
    """Values printed with '%.6e' carry 7 significant figures (C printf semantics);
    full float64 values carry 17 (None: nothing lost)."""
    rng = np.random.default_rng(11)
    v = rng.standard_normal(500) * 10.0 ** rng.integers(-8, 3, 500)
    assert digits_written(np.array([float(f"{a:.6e}") for a in v])) == 7
    assert digits_written(np.array([float(f"{a:.3e}") for a in v])) == 4
    assert digits_written(v) is None


def test_solution_written_with_seven_figures_is_said_so():
    """The exact displacements written with 7 significant figures fit at the precision
    they were written in (tests/test_solution_precision.py checks the bound): the
    finding says how many figures were written."""
    K, dofs = portal_truss()
    f = np.zeros(K.shape[0])
    f[dofs.dof == 0] = 3.0
    x = np.linalg.solve(K.toarray(), f)
    x7 = np.array([float(f"{a:.6e}") for a in x])
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=x7), samples=1)
    assert report.digits.audit.digits_written == 7 and report.digits.audit.fits
    finding = next(c for c in report.findings if c.code == "solution.lower-precision")
    assert "7 significant figures" in finding.message


def test_solution_of_a_healthy_model_from_another_solver_fits():
    """A backward-stable solve by LAPACK (numpy.linalg.solve, dense LU) fits: no
    solution finding, the verdict is about K."""
    K, dofs = portal_truss()
    f = np.zeros(K.shape[0])
    f[dofs.dof == 1] = -10.0
    x = np.linalg.solve(K.toarray(), f)
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=x), samples=1)
    assert report.digits.audit.fits
    assert not any(c.code.startswith("solution.") for c in report.findings)
    assert report.verdict.startswith("healthy")


def test_audit_on_a_singular_K_reports_the_free_mode_component():
    """A free 1D chain of 12 unit springs (invented; singular: rigid translation,
    textbook fact) with a self-equilibrated load. The supplied solution is a
    particular solution plus 4 times the rigid translation: its free-mode share
    is ||P x||_inf / ||x||_inf with P the projector onto the null space from
    numpy's SVD (LAPACK), and it keeps about 0 digits. A second load with a
    resultant has no static solution: its share along the free mode is reported."""
    n = 12
    K = sp.diags_array([-np.ones(n - 1), np.r_[1.0, 2.0 * np.ones(n - 2), 1.0], -np.ones(n - 1)],
                       offsets=[-1, 0, 1]).tocsr()
    f = np.zeros(n)
    f[0], f[-1] = -1.0, 1.0                                  # pulled apart at both ends
    x_particular = np.linalg.lstsq(K.toarray(), f, rcond=None)[0]
    x = x_particular + 4.0 * np.ones(n)
    report = conditioning.diagnose(Model(K, load=f, solution=x))
    audit = report.digits.audit
    _, sv, Vt = np.linalg.svd(K.toarray())
    null = Vt[sv < 1e-12 * sv[0]].T
    expected = np.abs(null @ (null.T @ x)).max() / np.abs(x).max()
    assert audit.free_mode_share == pytest.approx(expected, rel=1e-9)
    assert audit.trustworthy_digits == pytest.approx(max(0.0, math.floor(-10 * math.log10(expected)) / 10))
    assert audit.trustworthy_digits < 1.0
    assert audit.load_free_mode_share == pytest.approx(0.0, abs=1e-12)
    assert "solution.free-mode-component" in [c.code for c in report.findings]
    assert report.verdict.startswith("singular")

    g = np.ones(n)                                           # a net pull: no equilibrium
    report = conditioning.diagnose(Model(K, load=g, solution=x))
    assert report.digits.audit.load_free_mode_share == pytest.approx(1.0, rel=1e-9)
    finding = next(c for c in report.findings if c.code == "solution.free-mode-component")
    assert "no static equilibrium" in finding.message


@pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")
def test_key_figures_keep_the_supplied_solution_apart():
    """A wrong supplied vector (scaled by 1.01: about 2 digits, python-flint) must not become the
    key figure of the tool's own solves (their worst keeps > 10 digits); it has its own row, and
    the audit's method is said once, not nested."""
    from conditioning.render.terminal import render_text

    K, dofs = portal_truss()
    f = np.zeros(K.shape[0])
    f[dofs.dof == 1] = -10.0
    x = np.linalg.solve(K.toarray(), f) * 1.01
    report = conditioning.diagnose(Model(K, dofs=dofs, load=f, solution=x))
    own = min(s.trustworthy_digits for s in report.digits.samples if not s.audited)
    supplied = next(s for s in report.digits.samples if s.audited)
    assert own > 10 and supplied.trustworthy_digits <= certified_digits(K.toarray(), f, x) + 1e-9
    text = render_text(report, width=80)
    key = text[text.index("Key figures"):text.index("Model")]
    digits_row = next(line for line in key.splitlines() if line.startswith("trustworthy digits"))
    assert f"{own:.1f}" in digits_row
    supplied_row = next(line for line in key.splitlines() if line.startswith("supplied solution"))
    assert f"{supplied.trustworthy_digits:.1f}" in supplied_row and "1 of 1 not fitting K" in supplied_row
    assert "measured (certified" not in text and "measured (measured" not in text
    assert report.digits.audit.method == supplied.method
