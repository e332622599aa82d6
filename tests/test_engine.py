"""The engine interface, the one diagnosis path and the run's one generator.

Outside references: LAPACK through numpy (eigvalsh of the dense scaled
matrix S = D^-1/2 K D^-1/2, dense LU through scipy.linalg.lu_factor), the
textbook count of 3 rigid-body modes of an unsupported plane body, and the
exact 1-norm of an inverse (numpy.linalg.norm(inv(A), 1)) against which the
Higham-Tisseur estimate must be a lower bound.

The models are invented: a plane truss strip of square bays with diagonals
(steel-like E and A, not a real structure).
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import scipy.linalg as la
import scipy.sparse as sp

import conditioning
from conditioning.demo.assemble import apply_restraints, truss2d
from conditioning.engine import scipy_engine
from conditioning.engine.base import Engine, Factorization
from conditioning.engine.scaling import ScaledStiffness, scale_stiffness
from conditioning.linalg.onenormest import one_norm_estimate
from conditioning.model import Coordinates, Model
from conditioning.results import FactorizationInfo

EPS = float(np.finfo(np.float64).eps)


def truss_strip(bays: int, *, supported: bool) -> Model:
    """A plane truss strip of ``bays`` square bays (1 m) with one diagonal each:
    (2 bays + 2) nodes, 2 DOFs per node; free (3 rigid-body modes) or pinned
    at the left end (ux, uy at node 1, ux at node 2 above it)."""
    nodes = np.arange(1, 2 * (bays + 1) + 1)
    xy = np.array([(i, j) for i in range(bays + 1) for j in (0.0, 1.0)], dtype=float)
    bars = []
    for i in range(bays):
        a, b, c, d = 2 * i + 1, 2 * i + 2, 2 * i + 3, 2 * i + 4
        bars += [(a, c), (b, d), (a, d), (c, d)]
    bars.append((1, 2))
    asm = truss2d(nodes, xy, np.array(bars), E=210e3, A=100.0 + 10.0 * (np.arange(len(bars)) % 7))
    if supported:
        asm = apply_restraints(asm, [(1, "ux"), (1, "uy"), (2, "ux")])
    return Model(asm.K, dofs=asm.dofs,
                 coords=Coordinates(nodes.astype(np.int64), np.c_[xy, np.zeros(len(nodes))], 2))


def lapack_scaled(K) -> np.ndarray:
    d = 1 / np.sqrt(np.abs(K.diagonal()))
    return np.linalg.eigvalsh(K.toarray() * d[:, None] * d[None, :])


# --------------------------------------------------------------- a fake engine
class DenseFactorization:
    """Dense LU (LAPACK getrf) of S - sigma*I: a Factorization with no SuperLU."""

    def __init__(self, scaled: ScaledStiffness, sigma: float, singular: bool):
        A = scaled.S.toarray() - sigma * np.eye(scaled.S.shape[0])
        t0 = time.perf_counter()
        self._lu = la.lu_factor(A)
        self._A = scaled.S.toarray()
        _, d, _ = la.ldl(A)
        piv = np.diag(d).copy()
        self.n, self.scale, self.shift, self.active = scaled.n, scaled.scale, sigma, scaled.active
        self.pivots = scaled.on_all_rows(piv)
        self.singular = singular
        negative = int(np.count_nonzero(np.linalg.eigvalsh(d) < 0))
        self.info = FactorizationInfo(ordering="natural (dense test engine)", shift=sigma, negative_pivots=negative,
                                      fill=A.size, flops=A.shape[0] ** 3 / 3, seconds=time.perf_counter() - t0,
                                      symmetric_pivoting=True)
        self.solves = 0

    def solve_active(self, B):
        self.solves += 1
        return la.lu_solve(self._lu, np.asarray(B, dtype=np.float64))

    def solve_scaled(self, B):
        B = np.asarray(B, dtype=np.float64)
        out = np.zeros_like(B)
        out[self.active] = self.solve_active(B[self.active])
        return out

    def solve(self, F):
        if self.singular or self.shift != 0.0:
            raise RuntimeError("K is singular")
        F = np.asarray(F, dtype=np.float64)
        s = self.scale if F.ndim == 1 else self.scale[:, None]
        return s * self.solve_scaled(s * F)

    def count_below(self, c):
        return int(np.count_nonzero(np.linalg.eigvalsh(self._A) < c))

    def release(self):
        self._lu = None

    def ordering_permutation(self):
        return None                      # dense LU: no fill-reducing ordering to share


class DenseEngine:
    """The shift policy of conditioning.engine.base on a dense LU."""

    name = "dense (test)"
    factorization = DenseFactorization

    def __init__(self):
        self.factorizations = []

    def predict_memory(self, scaled, coords=None):
        return None

    def factorize(self, scaled, *, shift=None, coords=None, memory_limit=None):
        S = scaled.S.toarray()
        norm_inf = float(np.abs(S).sum(axis=1).max())
        singular = bool(scaled.S.shape[0] < scaled.n)
        sigma = 0.0 if shift is None else float(shift)
        if shift is None and np.min(np.abs(np.linalg.eigvalsh(S))) <= S.shape[0] * EPS * norm_inf:
            sigma, singular = -np.sqrt(EPS) * norm_inf, True
        fac = self.factorization(scaled, sigma, singular)
        self.factorizations.append(fac)
        return fac


def no_superlu(*args, **kwargs):
    raise AssertionError("a stage went around the engine interface to SuperLU")


def test_fake_engine_satisfies_the_protocol():
    engine = DenseEngine()
    assert isinstance(engine, Engine) and isinstance(scipy_engine.ScipyEngine(), Engine)
    fac = engine.factorize(scale_stiffness(truss_strip(3, supported=True).K))
    assert isinstance(fac, Factorization)


def test_stages_need_only_the_engine_interface(monkeypatch):
    """A supported truss diagnosed through a dense-LU engine, with SuperLU
    disabled: every stage that solves or reads pivots ran through the
    interface, and the figures agree with the scipy engine's and LAPACK's."""
    model = truss_strip(12, supported=True)
    reference = conditioning.diagnose(model, seed=3)
    engine = DenseEngine()
    monkeypatch.setattr(scipy_engine.spla, "splu", no_superlu)
    report = conditioning.diagnose(model, seed=3, engine=engine)
    assert report.factorization.ordering == "natural (dense test engine)"
    assert engine.factorizations[0].solves > 0  # the digits and condition stages solved with it
    w = lapack_scaled(model.K)
    assert report.condition.scaled_estimate == pytest.approx(w[-1] / w[0], rel=1e-9)
    assert report.condition.estimate == pytest.approx(reference.condition.estimate, rel=1e-9)
    assert report.spectrum.count == reference.spectrum.count == 0
    # The digits lost at pivots depend on the elimination order (documented in the pivots stage): only its source is checked.
    assert "natural (dense test engine)" in report.pivots.method
    assert [s.sample for s in report.digits.samples] == [s.sample for s in reference.digits.samples]
    assert report.verdict.split()[0] == reference.verdict.split()[0]


@pytest.mark.parametrize("supported", [False, True])
def test_factorization_free_and_factorized_paths_agree_with_lapack(monkeypatch, supported):
    """The same invented truss (about 610 rows, above the dense limit of the
    path without a factorization) through both paths: the same mode count
    (3 rigid-body modes when free, textbook) and, when supported, the same
    scaled condition number as LAPACK's eigvalsh of S."""
    model = truss_strip(152, supported=supported)
    assert model.n > 600
    full = conditioning.diagnose(model, measure=False)
    monkeypatch.setattr(scipy_engine, "PREDICT_ABOVE", 100)
    free = conditioning.diagnose(model, measure=False, memory_limit=1 << 12)
    assert full.factorization is not None and free.factorization is None
    assert "LOBPCG" in free.spectrum.method
    assert set(free.skipped) == {"factorization", "inertia check", "digits", "pivots"}
    assert free.pivots is None and free.digits is None
    w = lapack_scaled(model.K)
    lapack_modes = int(np.count_nonzero(np.abs(w) <= model.n * EPS * w[-1]))
    assert full.spectrum.count == free.spectrum.count == lapack_modes == (0 if supported else 3)
    if supported:
        # Both LAPACK (syevd with and without vectors): lambda_min is accurate to about
        # eps*lambda_max absolutely, so kappa(S) ~ 5e8 agrees to kappa*eps ~ 1e-7 only.
        assert full.condition.scaled_estimate == pytest.approx(w[-1] / w[0], rel=1e-5)
        # lambda_max(S) by Lanczos to its residual bound 1e-3 (spectrum.largest_eigenvalue).
        assert free.condition.scaled_estimate == pytest.approx(w[-1] / w[0], rel=1e-3)
    else:
        assert full.condition.singular and free.condition.singular
        assert sorted(m.kind for m in free.spectrum.modes) == ["rigid-body"] * 3


# ------------------------------------------------------- inertia and ordering
def test_inertia_check_reuses_the_shared_ordering(monkeypatch):
    """count_below refactors S - c*I with the permutation of the shared
    factorization (issue 16: it used to fall back to MMD): the ordering is
    computed once, and the count equals LAPACK's eigenvalue count below c."""
    model = truss_strip(20, supported=False)
    scaled = scale_stiffness(model.K)
    calls = []

    def reversed_order(pattern, coords):
        calls.append(1)
        return np.arange(pattern.shape[0])[::-1]

    fac = scipy_engine.ScipyEngine(reversed_order).factorize(scaled)
    monkeypatch.setattr(scipy_engine, "choose_ordering", no_superlu)
    w = np.linalg.eigvalsh(scaled.S.toarray())
    c = float(np.sqrt(max(w[2], 1e-30) * w[3]))
    fac.release()
    assert fac.count_below(c) == int(np.count_nonzero(w < c)) == 3
    assert calls == [1]


# ------------------------------------------------------------------ randomness
def test_one_seed_repeats_every_figure_and_leaves_numpy_alone():
    """diagnose(seed=) records the seed; the same seed gives the same figures
    (the 1-norm estimate and the random loads included), and NumPy's global
    generator is neither reset nor advanced."""
    model = truss_strip(40, supported=True)
    model = Model(model.K, dofs=model.dofs, coords=model.coords)
    np.random.seed(12345)
    before = np.random.get_state()
    a = conditioning.diagnose(model, seed=7)
    after = np.random.get_state()
    assert np.array_equal(after[1], before[1]) and after[2] == before[2]
    b = conditioning.diagnose(model, seed=7)
    assert a.seed == b.seed == 7
    assert a.condition.one_norm_estimate == b.condition.one_norm_estimate
    assert [s.trustworthy_digits for s in a.digits.samples] == [s.trustworthy_digits for s in b.digits.samples]
    from conditioning.render.json_report import report_to_dict

    data = report_to_dict(a)
    assert data["seed"] == 7 and data["skipped"] == {}


def test_random_loads_come_from_the_seed():
    """The digits' random loads are the first draws of numpy.random.default_rng(seed):
    the stages that draw start vectors use streams spawned from it, which do
    not advance it."""
    rng = np.random.default_rng(5)
    rng.spawn(2)
    assert np.array_equal(rng.standard_normal(4), np.random.default_rng(5).standard_normal(4))


@pytest.mark.parametrize("t", [1, 2])
def test_one_norm_estimate_is_a_lower_bound_within_a_factor_3(t):
    """Higham and Tisseur (2000), Algorithm 2.4: est <= ||A||_1, and in their
    experiments within a factor 3; checked on 100 random inverses against the
    exact norm (numpy.linalg.norm(inv(A), 1), LAPACK)."""
    rng = np.random.default_rng(0)
    ratios = []
    for trial in range(100):
        n = int(rng.integers(6, 40))
        A = rng.standard_normal((n, n))
        if trial % 2:
            A = A @ A.T + 0.1 * np.eye(n)
        B = np.linalg.inv(A)
        exact = np.linalg.norm(B, 1)
        est = one_norm_estimate(lambda X: B @ X, lambda X: B.T @ X, n, t=t, rng=trial)
        assert est <= exact * (1 + 1e-12)
        ratios.append(est / exact)
    assert min(ratios) >= 1 / 3


def test_one_norm_estimate_second_difference_inverse():
    """tridiag(-1, 2, -1), n = 50: ||T^-1||_1 = (n+1)^2/8 rounded per the closed
    form of the inverse's middle column, max_j sum_i (min(i,j)(n+1-max(i,j)))/(n+1);
    the estimator finds it exactly (the maximum column is reached by the
    first iteration's unit vector)."""
    n = 50
    T = sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1]).toarray()
    i = np.arange(1, n + 1)
    Tinv = np.minimum.outer(i, i) * (n + 1 - np.maximum.outer(i, i)) / (n + 1)
    exact = float(np.abs(Tinv).sum(axis=0).max())
    np.testing.assert_allclose(Tinv @ T, np.eye(n), atol=1e-10)
    assert one_norm_estimate(lambda X: Tinv @ X, lambda X: Tinv.T @ X, n, t=2, rng=1) == pytest.approx(exact)


# ------------------------------------------ what an engine may lack, and what it may add
class NoPivotsEngine(DenseEngine):
    """The dense engine with its pivots withheld, as MUMPS through PETSc withholds them."""

    name = "dense without pivots (test)"

    def factorize(self, scaled, **kwargs):
        fac = super().factorize(scaled, **kwargs)
        fac.pivots = None
        return fac


class DenseEigensolverFactorization(DenseFactorization):
    """The dense factorization with its own eigensolver (LAPACK syevd on S), as the
    PETSc engine's has SLEPc: the optional OwnEigensolver capability."""

    eigensolver = "LAPACK syevd of the dense S (test eigensolver)"

    def smallest_eigenpairs(self, k, rng):
        self.eigensolves = getattr(self, "eigensolves", 0) + 1
        w, V = np.linalg.eigh(self._A)
        nearest = np.sort(np.argsort(np.abs(w - self.shift))[:k])
        return w[nearest], V[:, nearest]

    def largest_eigenvalue(self, rng):
        return float(np.linalg.eigvalsh(self._A)[-1])


class DenseEigensolverEngine(DenseEngine):
    name = "dense with an eigensolver (test)"
    factorization = DenseEigensolverFactorization


def test_engine_without_pivots_reports_the_pivot_loss_as_not_available():
    """pivots None (an engine that does not expose them): the pivot stage is not run,
    Report.skipped says why, the terminal shows it; every other figure as the scipy engine's."""
    from conditioning.render.terminal import render_text

    model = truss_strip(12, supported=True)
    reference = conditioning.diagnose(model, seed=3)
    report = conditioning.diagnose(model, seed=3, engine=NoPivotsEngine())
    assert report.pivots is None
    assert report.skipped["pivots"].startswith("not available on this engine")
    assert "not measured: not available on this engine" in render_text(report, width=300)
    assert report.condition.estimate == pytest.approx(reference.condition.estimate, rel=1e-9)
    assert report.status == reference.status


def test_engine_eigensolver_plugs_into_the_spectrum_stage():
    """A factorization with the OwnEigensolver capability is asked for the eigenpairs
    above the dense limit (1204 rows here) instead of ARPACK; the free strip's 3
    rigid-body modes (textbook count for an unsupported plane body) and the scaled
    condition figures agree with the scipy engine's."""
    from conditioning.engine.base import OwnEigensolver

    model = truss_strip(300, supported=False)
    engine = DenseEigensolverEngine()
    report = conditioning.diagnose(model, measure=False, engine=engine)
    reference = conditioning.diagnose(model, measure=False)
    fac = engine.factorizations[0]
    assert isinstance(fac, OwnEigensolver) and not isinstance(scipy_engine.factorize(model.K), OwnEigensolver)
    assert fac.eigensolves >= 1
    assert report.spectrum.method.startswith("LAPACK syevd of the dense S (test eigensolver)")
    assert report.spectrum.count == reference.spectrum.count == 3
    # Both are accurate to a few eps*||S|| absolutely (||S|| <= 2 with a unit diagonal).
    np.testing.assert_allclose(report.spectrum.smallest[3:5], reference.spectrum.smallest[3:5], rtol=0, atol=1e-13)


def test_petsc_engine_refused_where_petsc4py_is_missing(capsys):
    """--engine petsc without petsc4py: one line saying how to get it, exit status 2."""
    import importlib.util

    if importlib.util.find_spec("petsc4py") is not None:
        pytest.skip("petsc4py is importable here (tests/test_distributed.py runs the engine)")
    from pathlib import Path

    from conditioning.cli import main

    path = Path(__file__).resolve().parents[1] / "matrices" / "footbridge.mtx"
    assert main(["diagnose", str(path), "--engine", "petsc"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("conditioning: error: --engine petsc needs petsc4py") and len(err.splitlines()) == 1
