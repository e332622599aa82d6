"""Digits lost to round-off: the measurement against outside references.

Sources of truth:

* mpmath ``lu_solve`` at 60 digits (independent arbitrary-precision solve);
* python-flint ``arb_mat.solve`` called directly here (ball arithmetic: a
  certified enclosure of the exact solution, Johansson 2017);
* Hilbert condition numbers of ../shared/REFERENCES.md (kappa_2 of H_6..H_12,
  recomputed with mpmath's ``eigsy`` at 60 digits);
* Harwell-Boeing matrices in ../shared/reference-matrices (PROVENANCE.md);
* the rule of thumb "16 - log10(kappa)" (common practice, REFERENCES.md: a
  bound-style estimate that real solves often beat).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.stages.digits import FLOAT64_DIGITS, measure_digits, worst_case_load
from conditioning.engine.scipy_engine import factorize
from conditioning.model import DofTable, Model
from conditioning.results import ConditionResult
from conftest import reference_matrix_path

try:
    import flint
except ImportError:  # optional extra
    flint = None

#: kappa_2 of H_6..H_12 from ../shared/REFERENCES.md (computed there with mpmath at 60 digits).
HILBERT_KAPPA = {6: 1.495106e7, 7: 4.753674e8, 8: 1.525758e10, 9: 4.931549e11,
                 10: 1.602629e13, 11: 5.230677e14, 12: 1.713229e16}


def hilbert(n: int) -> np.ndarray:
    i = np.arange(n)
    return 1.0 / (i[:, None] + i[None, :] + 1)


def mpmath_kappa_2(A) -> float:
    """lambda_max / lambda_min of the symmetric positive definite A at 60 digits."""
    with mpmath.workdps(60):
        ev = mpmath.eigsy(mpmath.matrix(A.tolist() if isinstance(A, np.ndarray) else A), eigvals_only=True)
        ev = sorted(ev)
        return float(ev[-1] / ev[0])


def external_error(A: np.ndarray, f: np.ndarray, x: np.ndarray, algorithm: str = "precond") -> tuple[float, float]:
    """(lower, upper) bounds on ||x - x_exact||_inf / ||x_exact||_inf.

    python-flint enclosure when installed (certified), else mpmath at 60 digits
    (lower = upper)."""
    n = len(f)
    if flint is not None:
        prec = 160
        while True:  # raise the precision until the enclosure is narrow
            with flint.ctx.workprec(prec):
                try:
                    X = flint.arb_mat(n, n, A.ravel().tolist()).solve(flint.arb_mat(n, 1, f.tolist()),
                                                                       algorithm=algorithm)
                except ZeroDivisionError:
                    X = None
                if X is not None:
                    gap = [abs(X[i, 0] - flint.arb(float(x[i]))) for i in range(n)]
                    big = max(abs(X[i, 0]).upper() for i in range(n))
                    small = max(abs(X[i, 0]).lower() for i in range(n))
                    lo = float(max(g.lower() for g in gap) / big)
                    hi = float(max(g.upper() for g in gap) / small) if small > 0 else math.inf
                    if hi <= 1.001 * lo + 1e-30:
                        return lo, hi
            assert prec < 8192, "no narrow enclosure"
            prec *= 2
    if n > 160:
        pytest.skip("python-flint not installed and n too large for mpmath in CI")
    with mpmath.workdps(60):
        xe = mpmath.lu_solve(mpmath.matrix(A.tolist()), mpmath.matrix(f.tolist()))
        err = float(max(abs(xe[i] - mpmath.mpf(x[i])) for i in range(n)) / max(abs(v) for v in xe))
    return err, err


def digits_of(err: float) -> float:
    return 0.0 if err >= 1 else min(53 * math.log10(2), -math.log10(err)) if err > 0 else 53 * math.log10(2)


def condition_for(A: np.ndarray) -> ConditionResult:
    """ConditionResult with kappa_2 raw and scaled recomputed with mpmath."""
    k = mpmath_kappa_2(A)
    s = 1 / np.sqrt(np.diag(A))
    ks = mpmath_kappa_2(A * s[:, None] * s[None, :])
    return ConditionResult(
        singular=False, lambda_max=float("nan"), lambda_min=None, estimate=k, estimate_method="mpmath eigsy",
        scaled_estimate=ks, scaled_lambda_min=None, scaled_lambda_max=float("nan"), scaled_method="mpmath eigsy",
        one_norm_estimate=None, one_norm_method="", scaling_gain_digits=math.log10(k / ks),
    )


# ------------------------------------------------------------------ Hilbert
@pytest.mark.parametrize("n", range(6, 13))
def test_hilbert_digits_lost_match_mpmath(n):
    """H_6..H_12: measured digits lost within 0.5 of the 60-digit mpmath figure,
    with the figure resting on double-double refinement alone (confirm=False);
    the rule-of-thumb prediction within its known looseness."""
    H = hilbert(n)
    with mpmath.workdps(60):  # the exact Hilbert matrix, entries 1/(i + j - 1)
        exact = [[mpmath.mpf(1) / (i + j + 1) for j in range(n)] for i in range(n)]
    assert mpmath_kappa_2(exact) == pytest.approx(HILBERT_KAPPA[n], rel=1e-6)  # REFERENCES.md
    kappa = mpmath_kappa_2(H)  # of the float64 matrix actually solved
    f = np.random.default_rng(100 + n).standard_normal(n)
    fac = factorize(sp.csr_array(H))
    result = measure_digits(Model(K=sp.csr_array(H), load=f), fac, condition=condition_for(H),
                            samples=1, confirm=False)
    load = next(s for s in result.samples if s.sample == "load")
    with mpmath.workdps(60):
        xe = mpmath.lu_solve(mpmath.matrix(H.tolist()), mpmath.matrix(f.tolist()))
        x = load.solution
        err = float(max(abs(xe[i] - mpmath.mpf(x[i])) for i in range(n)) / max(abs(v) for v in xe))
    lost = FLOAT64_DIGITS - digits_of(err)
    assert abs(load.digits_lost - lost) <= 0.5
    assert load.trustworthy_digits <= digits_of(err) + 1e-9  # never more than the reference shows
    # rule of thumb: 16 - log10(kappa) is a pessimistic bound-style estimate: the
    # measurement lies between one digit below it and four above (common practice).
    assert result.predicted_raw == pytest.approx(16 - math.log10(kappa))
    assert result.predicted_raw - 1.0 <= load.trustworthy_digits <= max(result.predicted_raw, 0.0) + 4.0
    assert f"{result.factorization_flops:.1e}" in result.summary


# -------------------------------------------------------- reference matrices
@pytest.mark.parametrize("name", ["bcsstk01", "bcsstk02", "bcsstk03", "bcsstk04", "bcsstk05", "bcsstk06",
                                  "bcsstk20", "nos4", "LF10"])
def test_reference_matrices_trustworthy_digits(name):
    """Harwell-Boeing matrices, seeded random load: trustworthy digits within 0.5 of
    the certified (python-flint) or 60-digit mpmath figure, and never above it."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    n = K.shape[0]
    f = np.random.default_rng(7).standard_normal(n)
    fac = factorize(K)
    result = measure_digits(Model(K=K, load=f), fac, samples=0, confirm=False)
    load = result.samples[0]
    # Certify the very vector the tool measured: another float64 solve (another
    # BLAS kernel, a single- instead of a multi-column solve) differs by rounding.
    lo, hi = external_error(K.toarray(), f, load.solution)
    assert abs(load.trustworthy_digits - digits_of(hi)) <= 0.5
    assert load.trustworthy_digits <= digits_of(lo) + 1e-9
    assert load.method == "double-double refinement" and load.converged


@pytest.mark.skipif(flint is None, reason="python-flint (optional extra) not installed")
def test_larger_reference_matrix_bcsstk08():
    """bcsstk08 (n = 1074, kappa_2 2.6e7, PROVENANCE.md), seeded random load: the
    double-double figure is within 0.5 of python-flint's certified one and never
    above it. About 10 s: the ball solve of a 1074 x 1074 dense matrix."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk08")))
    f = np.random.default_rng(8).standard_normal(K.shape[0])
    fac = factorize(K)
    load = measure_digits(Model(K=K, load=f), fac, samples=0, confirm=False).samples[0]
    lo, hi = external_error(K.toarray(), f, load.solution, algorithm="lu")
    assert abs(load.trustworthy_digits - digits_of(hi)) <= 0.5
    assert load.trustworthy_digits <= digits_of(lo) + 1e-9


@pytest.mark.skipif(flint is None, reason="python-flint (optional extra) not installed")
def test_certified_method_and_worst_case_sample_bcsstk05():
    """bcsstk05 (n = 153) with the flint confirmation: method "certified", every
    sample within 0.5 of the direct flint figure and never above it."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk05")))
    fac = factorize(K)
    result = measure_digits(Model(K=K), fac, samples=2, seed=3)
    names = [s.sample for s in result.samples]
    assert names == ["random-1", "random-2", "worst-case"]
    rng = np.random.default_rng(3)
    loads = [rng.standard_normal(153), rng.standard_normal(153), worst_case_load(K, fac)]
    for sample, f in zip(result.samples, loads):
        assert sample.method == "certified (ball arithmetic)" and "agrees" in sample.confirmation
        lo, hi = external_error(K.toarray(), f, sample.solution)
        assert abs(sample.trustworthy_digits - digits_of(hi)) <= 0.5
        assert sample.trustworthy_digits <= digits_of(lo) + 1e-9


def test_worst_case_load_follows_smallest_eigenvector():
    """bcsstk01: the worst-case load is D^1/2 v_min with v_min the eigenvector of the
    smallest eigenvalue of S = D^-1/2 K D^-1/2 (numpy/LAPACK eigh)."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    fac = factorize(K)
    f = worst_case_load(K, fac)
    d = np.sqrt(K.diagonal())
    w, V = np.linalg.eigh(K.toarray() / d[:, None] / d[None, :])
    g = d * V[:, 0]
    cos = abs(f @ g) / (np.linalg.norm(f) * np.linalg.norm(g))
    assert cos == pytest.approx(1.0, abs=1e-6)


# -------------------------------------------------------- near-mechanism
def soft_chain(n: int, soft: float, k: float = 1.0e6) -> sp.csr_array:
    """n nodes on a line joined by springs k, held only by a ground spring soft*k
    at node 1: a near rigid-body translation (kappa_2 about 4 n^2 / soft, common practice)."""
    main = np.full(n, 2 * k)
    main[0] = k + soft * k
    main[-1] = k
    return sp.diags_array([np.full(n - 1, -k), main, np.full(n - 1, -k)], offsets=[-1, 0, 1], format="csr")


def test_near_mechanism_loses_nearly_all_digits():
    """A chain held by a spring 3e-14 times softer than its links loses nearly all
    digits; the bound is withdrawn and the figure never exceeds the certified one."""
    K = soft_chain(30, 3e-14)
    f = np.random.default_rng(1).standard_normal(30)
    fac = factorize(K)
    assert not fac.singular
    result = measure_digits(Model(K=K, load=f), fac, samples=1, confirm=False)
    for sample, g in zip(result.samples, [f, None, None]):
        assert sample.digits_lost >= 12.0, sample
        assert sample.normwise_bound is None and not sample.bound_trusted
        if g is not None:
            lo, hi = external_error(K.toarray(), g, fac.solve(g))
            assert sample.trustworthy_digits <= digits_of(lo) + 1e-9
            assert abs(sample.trustworthy_digits - digits_of(hi)) <= 0.5


class _InaccurateFactors:
    """Factors of K + E, E a relative diagonal perturbation: a factorization too
    inaccurate for plain refinement (Carson and Higham 2017's setting)."""

    def __init__(self, K, rel):
        d = K.diagonal() * rel * np.random.default_rng(0).uniform(-1, 1, K.shape[0])
        inner = factorize(sp.csr_array(K + sp.diags_array(d)))
        self.n, self.scale, self.shift, self.singular, self.info = inner.n, inner.scale, 0.0, False, inner.info
        self.solve, self.solve_scaled = inner.solve, inner.solve_scaled


def test_inaccurate_factors_show_gmres_fallback():
    """Soft chain (kappa ~ 1e10) solved with factors perturbed by 1e-5: plain
    refinement does not contract, the GMRES fallback is shown, the float64
    solution is reported with no trustworthy digit, matching the certified figure."""
    K = soft_chain(60, 1e-6)
    f = np.random.default_rng(2).standard_normal(60)
    fac = _InaccurateFactors(K, 1e-5)
    result = measure_digits(Model(K=K, load=f), fac, samples=0, confirm=False)
    load = result.samples[0]
    assert "GMRES" in load.stop_reason and load.converged
    assert load.trustworthy_digits < 1.0
    lo, hi = external_error(K.toarray(), f, load.solution)
    assert load.trustworthy_digits <= digits_of(lo) + 1e-9


# ---------------------------------------------------------------- audit
def test_solution_audit_of_a_perturbed_solution():
    """bcsstk02 (n = 66): a solution perturbed by 1e-9 relative keeps about 9 digits;
    the audit figure is within 0.5 of the external figure, its backward error shows it."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk02")))
    n = K.shape[0]
    rng = np.random.default_rng(4)
    f = rng.standard_normal(n)
    fac = factorize(K)
    x_other = fac.solve(f) * (1 + 1e-9 * rng.uniform(-1, 1, n))
    result = measure_digits(Model(K=K, load=f, solution=x_other), fac, samples=0, confirm=False)
    audit = result.samples[-1]
    assert audit.sample == "solution"
    lo, hi = external_error(K.toarray(), f, x_other)
    assert abs(audit.trustworthy_digits - digits_of(hi)) <= 0.5
    assert audit.backward_error > 1e-12 > result.samples[0].backward_error


def test_per_dof_digits_against_own_magnitude_unless_negligible():
    """Each component's digits are measured against its own magnitude unless it is
    below a thousandth of its node's displacement (then against that thousandth),
    as component_scale documents. Model (invented): two chains on the same nodes,
    ux soft (|ux| ~ 1e-2) and uy 1e6 times stiffer (|uy| ~ 1e-8, negligible next
    to ux); plus a third chain in ux at a stiffness 1e2 higher so that some nodes
    have a small but not negligible ux. The exact error of every component comes
    from mpmath's 60-digit LU solve (outside reference); the tool's figure is an
    upper bound on the error rounded down to 0.1, so it may never exceed the exact
    digits, and stays within 0.5 of them."""
    n_nodes = 20
    K0 = soft_chain(n_nodes, 1e-3)
    K = sp.csr_array(sp.block_diag([K0, K0 * 1e6]))
    perm = np.arange(2 * n_nodes).reshape(2, n_nodes).T.ravel()  # interleave ux, uy
    K = sp.csr_array(K[perm][:, perm])
    dofs = DofTable(node=np.repeat(np.arange(1, n_nodes + 1), 2).astype(np.int64),
                    dof=np.tile([0, 1], n_nodes).astype(np.int8))
    f = np.random.default_rng(5).standard_normal(2 * n_nodes)
    fac = factorize(K)
    result = measure_digits(Model(K=K, load=f, dofs=dofs), fac, samples=0, confirm=False)
    sample = result.samples[0]
    per = sample.per_dof_digits
    x = sample.solution
    with mpmath.workdps(60):
        sol = mpmath.lu_solve(mpmath.matrix(K.toarray().tolist()), mpmath.matrix(f.tolist()))
        err = np.array([float(abs(sol[i] - mpmath.mpf(x[i]))) for i in range(2 * n_nodes)])
        xe = np.array([float(sol[i]) for i in range(2 * n_nodes)])
    # The documented definition, written out independently of the tool.
    node_disp = np.maximum(np.abs(xe[0::2]), np.abs(xe[1::2])).repeat(2)
    node_disp = np.maximum(node_disp, 1e-3 * np.max(np.abs(xe)))
    scale = np.maximum(np.abs(xe), 1e-3 * node_disp)
    exact = np.minimum(-np.log10(np.maximum(err / scale, 1e-300)), 53 * math.log10(2))
    assert np.all(per <= exact + 1e-9)
    assert np.all(per >= exact - 0.5)
    assert np.all(np.abs(xe[1::2]) < 1e-3 * np.abs(xe[0::2]))  # uy negligible, as built
    worst = sample.worst_nodes
    assert worst[0].digits == pytest.approx(float(np.min(per)))
    assert worst[0].node in dofs.node[per == np.min(per)]


def test_digits_never_shown_above_what_float64_holds():
    """A diagonal K solved exactly (x_i = f_i / k_i, one correctly rounded division,
    IEEE 754): the error is at most half an ulp, so the figure is the float64
    ceiling log10(2^53) = 15.95 rounded down to 15.9, never 16.0."""
    K = sp.diags_array([1.0, 3.0, 7.0, 11.0]).tocsr()
    f = np.array([1.0, 1.0, 1.0, 1.0])
    result = measure_digits(Model(K=K, load=f), factorize(K), samples=0, confirm=False)
    assert result.samples[0].trustworthy_digits == 15.9
    assert np.all(result.samples[0].per_dof_digits <= 15.9)


def test_singular_stiffness_is_skipped():
    """A chain with no ground spring is singular (rigid-body translation): the
    stage is skipped and says why (textbook fact: an unsupported body has a zero-energy mode)."""
    K = soft_chain(10, 0.0)
    fac = factorize(K)
    result = measure_digits(Model(K=K), fac)
    assert result.skipped is not None and result.skipped.startswith("K is singular")
    assert result.samples == []


def test_summary_names_the_scaled_prediction_for_bcsstk20():
    """bcsstk20: kappa_2 raw 3.89e12 (computed_stats.csv, LAPACK; SuiteSparse site
    3.89e12) predicts 3.4 digits, yet the measured figure (python-flint or
    double-double) is about 8 or more; kappa_2 of the scaled matrix (numpy
    eigvalsh) predicts within a digit, and the summary must say so."""
    from conftest import computed_stats

    row = next(r for r in computed_stats() if r["file"].startswith("bcsstk20"))
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk20")))
    kappa_raw = float(row["cond2_computed"])
    s = 1 / np.sqrt(K.diagonal())
    w = np.linalg.eigvalsh(K.toarray() * s[:, None] * s[None, :])
    kappa_scaled = w[-1] / w[0]
    cond = ConditionResult(
        singular=False, lambda_max=float("nan"), lambda_min=None, estimate=kappa_raw, estimate_method="LAPACK",
        scaled_estimate=kappa_scaled, scaled_lambda_min=None, scaled_lambda_max=float("nan"),
        scaled_method="LAPACK", one_norm_estimate=None, one_norm_method="",
        scaling_gain_digits=math.log10(kappa_raw / kappa_scaled),
    )
    fac = factorize(K)
    result = measure_digits(Model(K=K, load=np.ones(K.shape[0])), fac, condition=cond, samples=1, confirm=False)
    worst = min(x.trustworthy_digits for x in result.samples)
    assert result.predicted_raw == pytest.approx(16 - math.log10(kappa_raw))
    assert worst > result.predicted_raw + 3
    assert abs(worst - result.predicted_scaled) <= 1.0
    assert "scaled prediction was right" in result.summary
