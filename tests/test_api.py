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
    # The key figures say why the pivots and digits are missing, never as if none were lost.
    from conditioning.render.terminal import render_text
    text = render_text(report, width=100)
    key = text[text.index("Key figures"):text.index("Model")]
    assert key.count("not measured: no factorization (memory)") == 2
    assert "no digits lost" not in key


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


def _between_factor_and_pivot_read(model):
    """A memory limit the shared factor fits under but not the copy of it that reading its pivots makes."""
    from conditioning.engine.memory import predict_factor_memory
    from conditioning.engine.scaling import scale_stiffness

    eng = factorization.ScipyEngine()
    scaled = scale_stiffness(model.K)
    coords = model.coords.lookup(model.dofs.node)
    pred = eng.predict_memory(scaled, coords)
    assert pred.pivot_read_bytes > 0
    assert predict_factor_memory(scaled.S, None).pivot_read_bytes > 0
    return pred.bytes - pred.pivot_read_bytes // 2


def test_factor_that_fits_without_its_pivot_read(monkeypatch):
    """When the factor fits the memory limit but the copy that reading its pivots makes
    does not, the model is still factored and diagnosed: the solves, condition and
    measured digits equal the full run's; what needs the pivots (digits lost at pivots,
    inertia count) and the proof (which reads its factors) are skipped with why.
    Reference: LAPACK (numpy eigvalsh of S = D^-1/2 K D^-1/2) for the condition number,
    scikit-fem for the model (a clamped solid block)."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=6, ny=3, nz=3)
    clamped = [(int(node), name) for node, x in zip(ref.coords.node, ref.coords.xyz[:, 0])
               if x == ref.coords.xyz[:, 0].min() for name in ("ux", "uy", "uz")]
    ref = fe.restrained(ref, clamped)
    rng = np.random.default_rng(3)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords, load=rng.standard_normal(ref.K.shape[0]))
    full = conditioning.diagnose(model)
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    limit = _between_factor_and_pivot_read(model)
    tight = conditioning.diagnose(model, memory_limit=limit)
    assert tight.factorization is not None and tight.factorization.negative_pivots is None
    assert "copy" in tight.factorization.pivots_note
    assert tight.pivots is None and "copy" in tight.skipped["pivots"]
    assert "Sylvester" in tight.skipped["inertia check"]
    assert tight.digits.certification.startswith("not attempted") and "GiB" in tight.digits.certification
    assert full.digits.certification.startswith("proved")
    d = 1 / np.sqrt(ref.K.diagonal())
    w = np.linalg.eigvalsh(ref.K.toarray() * d[:, None] * d[None, :])  # LAPACK syevd
    assert tight.condition.scaled_estimate == pytest.approx(w[-1] / w[0], rel=1e-3)
    assert not tight.condition.singular and tight.spectrum.count == 0
    # The same factor, the same solves: the measured figures of the load case agree.
    load_full = next(s for s in full.digits.samples if s.sample == "load")
    load_tight = next(s for s in tight.digits.samples if s.sample == "load")
    assert load_tight.method != "certified (verified eigenvalue bound)"  # small: ball arithmetic may certify
    assert load_tight.trustworthy_digits <= load_full.trustworthy_digits + 0.05
    assert load_tight.trustworthy_digits == pytest.approx(load_full.trustworthy_digits, abs=0.3)


def test_singular_model_found_without_reading_pivots(monkeypatch):
    """Without the pivots, the shift policy's test (one solve) still finds a free
    scikit-fem block singular: S - sigma*I is factored and the six rigid-body modes
    are found (common practice: a free solid has six)."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=6, ny=3, nz=3)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    report = conditioning.diagnose(model, memory_limit=_between_factor_and_pivot_read(model))
    assert report.factorization.negative_pivots is None and report.factorization.shift < 0
    assert report.condition.singular and report.spectrum.count == 6
    assert "inertia check" in report.skipped


def _indefinite_block():
    """A clamped scikit-fem block (1,800 rows) with one symmetric coupling stronger than the two
    coupled DOFs' own stiffness: every diagonal stays positive, but K gets one eigenvalue far
    below zero (its scaled value near -1, where the positive ones start near 2e-3)."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=14, ny=5, nz=5)
    clamped = [(int(node), name) for node, x in zip(ref.coords.node, ref.coords.xyz[:, 0])
               if x == ref.coords.xyz[:, 0].min() for name in ("ux", "uy", "uz")]
    ref = fe.restrained(ref, clamped)
    K = sp.lil_array(ref.K)
    a, b = 100, 700
    K[a, b] = K[b, a] = 2.0 * math.sqrt(K[a, a] * K[b, b])
    K = sp.csr_array(K)
    rng = np.random.default_rng(3)
    return Model(K, dofs=ref.dofs, coords=ref.coords, load=rng.standard_normal(K.shape[0]))


def test_far_negative_eigenvalue_found_on_every_path(monkeypatch):
    """An indefinite K whose negative eigenvalue is far outside the shift-and-invert window
    near zero: with the pivots its inertia counts it; without them (factor without the pivot
    read) and without any factorization, the Lanczos search of the low end proves it, and the
    report says "at least" and how it was found, never "counted from the pivots".
    Reference: LAPACK (numpy eigvalsh) for the number of negative eigenvalues."""
    model = _indefinite_block()
    w = np.linalg.eigvalsh(model.K.toarray())  # LAPACK syevd
    assert np.count_nonzero(w < 0) == 1 and np.all(model.K.diagonal() > 0)

    full = conditioning.diagnose(model, measure=False)  # the digits are not in question here
    assert full.spectrum.negative_eigenvalues == 1 and full.spectrum.negative_exact
    assert full.status == "errors" and full.verdict.startswith("indefinite")

    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    for limit in (_between_factor_and_pivot_read(model), 1 << 12):
        report = conditioning.diagnose(model, memory_limit=limit, measure=False)
        sp_ = report.spectrum
        assert sp_.negative_eigenvalues == 1 and not sp_.negative_exact
        assert "Lanczos search" in sp_.negative_method and "proved 1" in sp_.negative_method
        assert report.status == "errors"
        assert report.verdict.startswith("indefinite: at least 1 negative eigenvalue")
        indefinite = next(f for f in report.findings if f.code == "stiffness.indefinite")
        assert "at least 1" in indefinite.message and "pivots' signs" not in indefinite.message
        assert "low-end search" in report.timings


def test_positive_definite_on_the_path_without_pivots_searches_and_says_so(monkeypatch):
    """Positive definite (the same block without the coupling): the low-end search finds
    nothing and the count stays 0, with the search said to be no proof (reference: LAPACK
    eigvalsh, all eigenvalues positive)."""
    fe = pytest.importorskip("fe_reference", reason="scikit-fem (test-only) is not installed")
    ref = fe.solid_block(nx=14, ny=5, nz=5)  # above the dense eigensolver's limit
    clamped = [(int(node), name) for node, x in zip(ref.coords.node, ref.coords.xyz[:, 0])
               if x == ref.coords.xyz[:, 0].min() for name in ("ux", "uy", "uz")]
    ref = fe.restrained(ref, clamped)
    model = Model(ref.K, dofs=ref.dofs, coords=ref.coords)
    assert np.linalg.eigvalsh(ref.K.toarray())[0] > 0  # LAPACK syevd
    monkeypatch.setattr(factorization, "PREDICT_ABOVE", 100)
    report = conditioning.diagnose(model, memory_limit=_between_factor_and_pivot_read(model), measure=False)
    assert report.spectrum.negative_eigenvalues == 0 and not report.spectrum.negative_exact
    assert "not a proof" in report.spectrum.negative_method
    assert report.status != "errors"
