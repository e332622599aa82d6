"""The whole pipeline through conditioning.diagnose.

Outside references: scikit-fem (independent FE library, test-only) for the
free solid (6 rigid-body modes, common practice); the second-difference
closed form kappa_2 = cot^2(pi/(2(n+1))) (classical).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

import conditioning
from conditioning.engine import scipy_engine as factorization
from conditioning.model import Model


def test_docstring_example_second_difference():
    K = sp.diags([-np.ones(9), 2 * np.ones(10), -np.ones(9)], [-1, 0, 1])
    report = conditioning.diagnose(K, measure=False)
    assert report.condition.estimate == pytest.approx(1 / math.tan(math.pi / 22) ** 2, rel=1e-9)
    assert report.status in ("healthy", "warnings")


def test_model_too_big_for_the_memory_limit_takes_the_factorization_free_path(monkeypatch):
    """Under an artificially small memory limit the factor's predicted size does not
    fit: no factorization is attempted, the spectrum comes from LOBPCG, the six
    rigid-body modes of a free scikit-fem block are still found, and the report says
    what this path could not do."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=6, ny=5, nz=5)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)

    def no_factorization(*args, **kwargs):  # must not be reached
        raise AssertionError("factorized although the prediction said it would not fit")

    monkeypatch.setattr(factorization.spla, "splu", no_factorization)
    report = conditioning.diagnose(model, memory_limit=1 << 16)
    assert report.factorization is None and report.digits is None
    codes = [f.code for f in report.findings]
    assert "analysis.factorization-free" in codes
    assert report.spectrum.count == 6
    assert sorted(max(m.motion, key=m.motion.get) for m in report.spectrum.modes) == \
        ["rx", "ry", "rz", "ux", "uy", "uz"]


def test_supported_model_on_the_factorization_free_path(monkeypatch):
    """A supported (non-singular) scikit-fem block clamped on one face, forced onto
    the path without a factorization: no crash, not called singular, and its scaled
    condition number agrees with the factorized run's and with LAPACK's (numpy eigvalsh
    of S = D^-1/2 K D^-1/2) to the LOBPCG tolerance."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=6, ny=3, nz=3)
    clamped = [(int(node), name) for node, x in zip(ref.coords.node, ref.coords.xyz[:, 0])
               if x == ref.coords.xyz[:, 0].min() for name in ("ux", "uy", "uz")]
    ref = fe.restrained(ref, clamped)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    full = conditioning.diagnose(model, measure=False)
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    free_path = conditioning.diagnose(model, memory_limit=1 << 12)
    assert free_path.factorization is None and free_path.digits is None
    assert not free_path.condition.singular and free_path.spectrum.count == 0
    assert "analysis.factorization-free" in [f.code for f in free_path.findings]
    d = 1 / np.sqrt(ref.K.diagonal())
    w = np.linalg.eigvalsh(ref.K.toarray() * d[:, None] * d[None, :])  # LAPACK syevd
    lapack = w[-1] / w[0]
    assert free_path.condition.scaled_estimate == pytest.approx(lapack, rel=1e-3)
    assert full.condition.scaled_estimate == pytest.approx(lapack, rel=1e-3)
    assert full.verdict.startswith("healthy")
    # No defect, but a reduced diagnosis: said, and the digits said to be estimated.
    assert free_path.verdict.startswith("no defect found") and "reduced diagnosis" in free_path.verdict
    assert "not measured" in free_path.verdict


def test_memory_limit_from_the_environment(monkeypatch):
    """CONDITIONING_MEMORY_LIMIT sets the default limit (documented in memory.py)."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.free_plate(nx=40, ny=20)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "1k")
    report = conditioning.diagnose(model, measure=False)
    assert report.factorization is None
    assert report.spectrum.count == 3
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "4G")
    report = conditioning.diagnose(model, measure=False)
    assert report.factorization is not None and report.spectrum.count == 3
