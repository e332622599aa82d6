"""Double-double refinement against mpmath reference solutions.

Sources of truth: mpmath ``lu_solve`` at 60 digits (an independent
arbitrary-precision solve); the Hilbert matrix condition numbers of
../shared/REFERENCES.md (recomputed here with mpmath); the convergence
claims of Carson and Higham (2017) for GMRES-based refinement with
factors that are too inaccurate for plain refinement.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.sparse as sp

from conditioning.linalg.doubledouble import U
from conditioning.engine.scipy_engine import factorize
from conditioning.linalg.refinement import refine, scaled_condition_estimate


def hilbert(n: int) -> np.ndarray:
    i = np.arange(n)
    return 1.0 / (i[:, None] + i[None, :] + 1)


def mpmath_solution(A: np.ndarray, f: np.ndarray, dps: int = 60):
    """x = A^-1 f with A's float64 entries taken as exact (mpmath lu_solve)."""
    with mpmath.workdps(dps):
        x = mpmath.lu_solve(mpmath.matrix(A.tolist()), mpmath.matrix(f.tolist()))
        return [x[i] for i in range(len(f))]


def relative_error(x_exact, hi, lo) -> float:
    with mpmath.workdps(60):
        err = max(abs(x_exact[i] - mpmath.mpf(hi[i]) - mpmath.mpf(lo[i])) for i in range(len(hi)))
        return float(err / max(abs(v) for v in x_exact))


@pytest.mark.parametrize("n", range(6, 13))
def test_hilbert_reference_matches_mpmath(n):
    """Hilbert H_6..H_12 (kappa_2 1.5e7 .. 1.7e16, REFERENCES.md): the refined
    solution is within its own error estimate of mpmath's 60-digit solve, and a
    bound, when given, is never below the true error (Demmel et al. 2006)."""
    H = hilbert(n)
    f = np.random.default_rng(n).standard_normal(n)
    fac = factorize(sp.csr_array(H))
    assert not fac.singular
    ref = refine(sp.csr_array(H), fac, f)
    err = relative_error(mpmath_solution(H, f), ref.x_hi, ref.x_lo)
    assert ref.converged, ref.stop_reason
    assert err <= ref.error_estimate
    # far better than float64: the reference resolves the float64 error
    assert err <= 1e-3 * max(U, ref.kappa_normwise * U) * U * 1e16
    if ref.normwise_bound is not None:
        assert err <= ref.normwise_bound
    # the rule for withdrawing: kappa * max(10, sqrt n) * u >= 1 => no bound
    withdrawn = ref.kappa_normwise * max(10.0, math.sqrt(n)) * U >= 1.0
    assert (ref.normwise_bound is None) == withdrawn


def test_hilbert_12_bound_is_withdrawn():
    """H_12: kappa_2 = 1.713229e16 (REFERENCES.md) exceeds 1/(10 u), so the bound
    must be withdrawn (xPORFSX's ill-conditioning threshold, Demmel et al. 2006)."""
    H = sp.csr_array(hilbert(12))
    fac = factorize(H)
    assert scaled_condition_estimate(H, fac) * 10 * U > 1
    ref = refine(H, fac, np.ones(12))
    assert ref.normwise_bound is None and not ref.bound_trusted


def soft_chain(n: int, soft: float, k: float = 1.0e6) -> sp.csr_array:
    """n nodes on a line joined by springs k, held to ground only by a spring soft*k
    (a near rigid-body translation; kappa about 4 n^2 / soft, common practice)."""
    main = np.full(n, 2 * k)
    main[0] = k + soft * k
    main[-1] = k
    return sp.diags_array([np.full(n - 1, -k), main, np.full(n - 1, -k)], offsets=[-1, 0, 1], format="csr")


class _PerturbedFactors:
    """Factors of K + E with E a random relative diagonal perturbation: a
    factorization too inaccurate for plain refinement when kappa |E| > 1
    (the setting of Carson and Higham 2017, with low-precision factors)."""

    def __init__(self, K, rel):
        d = K.diagonal() * rel * np.random.default_rng(0).uniform(-1, 1, K.shape[0])
        self._fac = factorize(sp.csr_array(K + sp.diags_array(d)))
        self.n, self.scale, self.shift, self.singular = self._fac.n, self._fac.scale, 0.0, False

    def solve(self, b):
        return self._fac.solve(b)

    def solve_scaled(self, b):
        return self._fac.solve_scaled(b)


def test_gmres_fallback_when_plain_refinement_cannot_contract():
    """Soft chain, kappa_2 ~ 1e10, factors perturbed by 1e-5: kappa |E| >> 1.
    Plain refinement must report non-convergence; GMRES-based refinement
    (Carson and Higham 2017) converges to mpmath's 60-digit solution."""
    K = soft_chain(60, 1e-6)
    f = np.random.default_rng(2).standard_normal(60)
    fac = _PerturbedFactors(K, 1e-5)
    plain = refine(K, fac, f, allow_gmres=False)
    assert not plain.converged and plain.stop_reason.startswith("not contracting")
    assert math.isinf(plain.error_estimate)
    assert plain.normwise_bound is None
    ref = refine(K, fac, f)
    assert ref.gmres_used and ref.converged, ref.stop_reason
    assert "GMRES" in ref.method
    err = relative_error(mpmath_solution(K.toarray(), f), ref.x_hi, ref.x_lo)
    assert err <= ref.error_estimate and err < 1e-20


def test_history_records_contracting_corrections():
    """bcsstk-like well-conditioned case (tridiag(-1, 2, -1), n = 100, kappa_2 =
    cot^2(pi/202) = 4133.6 closed form): corrections shrink by at least half per step."""
    n = 100
    K = sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1], format="csr")
    fac = factorize(K)
    ref = refine(K, fac, np.random.default_rng(0).standard_normal(n))
    dx = [step.correction_norm for step in ref.history]
    assert ref.converged and len(dx) >= 2
    assert all(b <= 0.5 * a for a, b in zip(dx[:-2], dx[1:-1]))
    assert ref.history[-1].residual_norm < 1e-28
    kappa_2 = 1.0 / math.tan(math.pi / 202) ** 2
    assert ref.kappa_normwise == pytest.approx(kappa_2, rel=0.5)  # kappa_inf vs kappa_2: same order here
