"""An indefinite K: the symmetric solve and a pivoted LU are both measured, and named.

Outside reference: mpmath ``lu_solve`` at 60 significant digits (dense LU with
partial pivoting in arbitrary precision) of the stored matrix, against which
the digits of each float64 vector the tool measured (``DigitsSample.solution``)
are computed here: -log10(||x - x_ref||_inf / ||x_ref||_inf).

Model (invented): the 6-panel truss of tests/test_solution_audit.py with three
ties by Lagrange multipliers (rows [C, -delta I] below K: a saddle-point
matrix, indefinite with exactly 3 negative eigenvalues, one per multiplier, by
Sylvester's law of inertia on the Schur complement; common practice). A
multiplier row has a tiny diagonal, so eliminating it first, as a symmetric
solve without pivoting may, lets round-off grow; partial pivoting does not.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.sparse as sp

import conditioning
from conditioning.model import Model
from conditioning.render.terminal import render_text
from test_solution_audit import portal_truss


def saddle_point(delta: float = 1e-6) -> sp.csr_array:
    K, _ = portal_truss()
    A = K.toarray()
    n = A.shape[0]
    pairs = [(0, 3), (5, 9), (12, 20)]
    C = np.zeros((len(pairs), n))
    for k, (i, j) in enumerate(pairs):
        C[k, i], C[k, j] = 1e5, -1e5
    return sp.csr_array(np.block([[A, C.T], [C, -delta * np.eye(len(pairs))]]))


def mpmath_digits(M: np.ndarray, f: np.ndarray, x: np.ndarray) -> float:
    with mpmath.workdps(60):
        ref = mpmath.lu_solve(mpmath.matrix(M.tolist()), mpmath.matrix(f.tolist()))
        gap = max(abs(ref[i] - mpmath.mpf(float(x[i]))) for i in range(len(f)))
        big = max(abs(ref[i]) for i in range(len(f)))
        return float(min(-mpmath.log10(gap / big), 53 * math.log10(2))) if gap > 0 else 53 * math.log10(2)


def test_indefinite_K_measures_both_solves_against_mpmath():
    M = saddle_point()
    assert int(np.sum(np.linalg.eigvalsh(M.toarray()) < 0)) == 3     # LAPACK: 3 negative eigenvalues
    report = conditioning.diagnose(Model(M), samples=2)
    dg = report.digits
    symmetric = [s for s in dg.samples if s.solver_kind == "symmetric" and not s.audited]
    pivoted = [s for s in dg.samples if s.solver_kind == "pivoted"]
    assert symmetric and len(pivoted) == len(symmetric)
    assert all(s.sample.endswith("(pivoted LU)") and "partial pivoting" in s.solve for s in pivoted)
    assert all("symmetric mode" in s.solve for s in symmetric)
    for s in symmetric + pivoted:
        ref = mpmath_digits(M.toarray(), s.load_vector, s.solution)
        assert s.trustworthy_digits <= ref + 1e-9, s.sample
        assert abs(s.trustworthy_digits - ref) <= 0.5, (s.sample, s.trustworthy_digits, ref)
    worst_sym = min(s.trustworthy_digits for s in symmetric)
    worst_piv = min(s.trustworthy_digits for s in pivoted)
    assert worst_piv >= worst_sym + 5.0                    # the kind of solver matters here
    # The verdict and the key figure use the pivoted LU, and say which; the symmetric one is shown.
    assert dg.headline_solve == "pivoted"
    assert f"trustworthy to {int(worst_piv)} significant digits" in report.verdict
    assert "pivoted LU" in report.verdict and f"keeps {int(worst_sym)} significant digits" in report.verdict
    text = render_text(report, width=80)
    key = text[text.index("Key figures"):text.index("Model")]
    assert f"{worst_piv:.1f}" in key and "pivoted LU" in key and f"{worst_sym:.1f}" in key
    assert "'(pivoted LU)': LU with partial pivoting" in " ".join(text.split())
    from conditioning.render.html import render_html
    html = render_html(report)
    assert "Whose solve (random-1, random-2, worst-case)" in html and "partial pivoting" in html


def test_positive_definite_K_measures_only_the_symmetric_solve():
    """The truss alone (positive definite): no pivoted LU, the headline is the symmetric solve."""
    K, dofs = portal_truss()
    report = conditioning.diagnose(Model(K, dofs=dofs), samples=1)
    assert report.digits.headline_solve == "symmetric"
    assert all(s.solver_kind == "symmetric" for s in report.digits.samples)
