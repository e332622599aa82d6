"""Saddle-point exports: a stiffness with Lagrange multiplier rows, [[K, C^T], [C, 0]].

Outside truth: the inertia of a saddle-point matrix whose constraint matrix C (m x n) has
full row rank and whose K is positive definite on null(C) is (n positive, m negative, 0 zero)
(M. Benzi, G. H. Golub, J. Liesen, "Numerical solution of saddle point problems", Acta
Numerica 14, 2005, section 3.4, from memory), checked here by LAPACK (numpy.linalg.eigvalsh).
The model is an invented plane-stress slab, free, held along one edge by m multiplier rows
(one per restrained DOF, C = selection rows).
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import conditioning
from conditioning.demo.assemble import plane_stress_quad
from conditioning.demo.scenarios import _quad_grid
from conditioning.model import Model
from conditioning.render.json_report import report_to_dict
from conditioning.render.html import render_html
from conditioning.render.terminal import render_text


def _slab_with_multipliers(nx: int, ny: int, extra_negative: float = 0.0):
    ids, xy, quads = _quad_grid(0.0, 0.0, 250.0 * nx, 250.0 * ny, nx, ny, 1)
    asm = plane_stress_quad(ids.ravel(), xy, quads, E=30000.0, nu=0.2, t=200.0)
    K = asm.K
    n = K.shape[0]
    held = asm.rows([(int(i), c) for i in ids[:, 0] for c in ("ux", "uy")])
    m = len(held)
    C = sp.csr_array((np.ones(m), (np.arange(m), held)), shape=(m, n))
    A = sp.block_array([[K, C.T], [C, None]], format="csr")
    return Model(K=A, source="slab with multipliers"), n, m


@pytest.mark.parametrize("nx, ny", [(6, 4), (30, 20)])    # LAPACK path (80 rows) and factorization path (1,344)
def test_multiplier_rows_reported_as_a_constrained_system(nx, ny):
    model, n, m = _slab_with_multipliers(nx, ny)
    w = np.linalg.eigvalsh(model.K.toarray())
    assert np.count_nonzero(w < 0) == m and np.count_nonzero(w > 0) == n   # the inertia (n, m, 0)
    report = conditioning.diagnose(model, seed=2)
    rows = report.structure.constraint_rows
    np.testing.assert_array_equal(rows, np.arange(n, n + m))
    assert report.verdict.startswith(f"constrained system, not a stiffness: {m} constraint rows (rows {n + 1},")
    sp_ = report.spectrum
    # The negative count: LAPACK's where all eigenvalues are known; otherwise never more than
    # the truth, and never the signs of a row-pivoted LU's pivots (which are not an inertia).
    if sp_.negative_exact:
        assert sp_.negative_eigenvalues == m
    else:
        assert sp_.negative_eigenvalues <= m and "pivoted rows" in sp_.negative_method
    assert f"{'' if sp_.negative_exact else 'at least '}{sp_.negative_eigenvalues} negative eigenvalues" \
        in report.verdict
    codes = [f.code for f in report.findings]
    assert codes[0] == "structure.constrained-system"
    assert "factor.negative-pivot" not in codes and "stiffness.indefinite" not in codes
    first = report.findings[0]
    assert "buckling" not in first.advice and "negative spring" not in first.advice
    assert "scaling takes 1 for them (a convention)" in first.message
    text = render_text(report, width=120)
    figures = text.split("Key figures")[1].split("Model")[0]
    assert "constraint rows unscaled" in figures
    assert "are left unscaled (scale 1, a convention)" in render_html(report)
    data = report_to_dict(report)
    shown = [line for line in figures.splitlines() if line.startswith("negative eigenvalues")]
    assert shown and shown[0].split()[2 if sp_.negative_exact else 3] == str(data["spectrum"]["negative_eigenvalues"])
    assert not any(line.startswith("negative pivots") for line in figures.splitlines())
    # The digits are of a solve with threshold row pivoting, certified.
    assert report.digits.samples and all(s.method.startswith("certified") for s in report.digits.samples)


def test_zero_diagonal_rows_coupled_among_themselves_are_not_multipliers():
    """A zero-diagonal 2x2 block that is not zero (the rows couple to each other) is no constraint block."""
    K = sp.csr_array(np.array([[4.0, -1.0, 1.0, 0.0], [-1.0, 4.0, 0.0, 1.0],
                               [1.0, 0.0, 0.0, 2.0], [0.0, 1.0, 2.0, 0.0]]))
    from conditioning.stages.structure import check_structure
    st = check_structure(Model(K))
    assert st.zero_diagonal.tolist() == [2, 3] and st.constraint_rows.size == 0
