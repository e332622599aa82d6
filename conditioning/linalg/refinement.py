"""Iterative refinement with double-double residuals: a reference solution.

    K x = f  =>  x_ref = x_hi + x_lo (double-double), with error bounds

The float64 factors of the shared factorization give corrections; residuals
r = f - K x are computed in double-double (:mod:`conditioning.linalg.doubledouble`)
and the solution is carried as a double-double pair, so the iteration can
go on improving x well below float64's unit round-off u = 2^-53: to about
kappa * u^2 when the factors make it contract (kappa u < 1). When it does
not contract (kappa u near or above 1), the correction equation K d = r is
solved by GMRES on the system left-preconditioned by the float64 factors
(GMRES-based refinement, Carson and Higham [2]_, [3]_), still with
double-double residuals.

Error bounds and their trust flag follow Demmel et al. [1]_ and LAPACK's
extra-precise refinement (xPORFSX): the error of the reference is estimated
from the geometric decay of the corrections, never below what the residual
precision can resolve, and the bound is withdrawn (``None``) when the
condition number is too large for the working precision of the factors.

References
----------
.. [1] J. Demmel, Y. Hida, W. Kahan, X. S. Li, S. Mukherjee and E. J. Riedy
       (2006), "Error bounds from extra-precise iterative refinement",
       ACM Trans. Math. Software 32(2), pp. 325-351. :doi:`10.1145/1141885.1141894`.
.. [2] E. Carson and N. J. Higham (2017), "A new analysis of iterative
       refinement and its application to accurate solution of ill-conditioned
       sparse linear systems", SIAM J. Sci. Comput. 39(6), pp. A2834-A2856.
.. [3] E. Carson and N. J. Higham (2018), "Accelerating the solution of linear
       systems by iterative refinement in three precisions", SIAM J. Sci.
       Comput. 40(2), pp. A817-A847.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Optional, Sequence, Union

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.linalg.doubledouble import U, DDOperator, dd_add, dd_operator, dd_residual
from conditioning.linalg.onenormest import one_norm_estimate
from conditioning.results import RefinementStep

logger = logging.getLogger(__name__)

#: Demmel et al. [1]_ (and xPORFSX's RTHRESH default): a correction that shrinks
#: by less than this factor per step means refinement is not converging.
RATIO_THRESHOLD = 0.5
#: Maximum residuals per right-hand side (xPORFSX's ITHRESH default is 10; more
#: here, because double-double refinement goes twice as deep).
MAX_STEPS = 20
#: Backward error ||r|| / (||K|| ||x|| + ||f||) at which the double-double
#: residual cannot be reduced further (a few units of u^2 = 1.2e-32).
BACKWARD_RESOLUTION = 64 * U**2
#: Maximum outer steps of GMRES-based refinement.
MAX_GMRES_STEPS = 10


@dataclass(frozen=True)
class RefinementResult:
    """A reference solution of K x = f and the evidence for it."""

    x_hi: NDArray[np.float64] = field(repr=False)
    """High part of the reference solution (K's displacement units)."""
    x_lo: NDArray[np.float64] = field(repr=False)
    """Low part: x_ref = x_hi + x_lo as a double-double."""
    converged: bool
    """True when the corrections fell to the resolution of the residual."""
    stop_reason: str
    """Why the iteration stopped, in words."""
    history: list[RefinementStep]
    """One entry per residual computed."""
    method: str
    """``"double-double refinement"`` or ``"GMRES refinement with double-double
    residuals"`` (when the fallback produced the final solution)."""
    gmres_used: bool
    """True when plain refinement did not contract and GMRES took over."""
    normwise_bound: Optional[float]
    """Bound on ||x_ref - x||_inf / ||x_ref||_inf (dimensionless), or None
    when withdrawn (see :func:`refine` Notes)."""
    componentwise_bound: Optional[float]
    """Bound on max_i |x_ref,i - x_i| / |x_ref,i|, or None when withdrawn."""
    bound_trusted: bool
    """True when the normwise bound is given (the componentwise one may still
    be withdrawn, e.g. for a zero displacement component)."""
    error_estimate: float
    """Estimated ||x_ref - x||_inf / ||x_ref||_inf from the last corrections
    and the residual resolution, given even when the bound is withdrawn
    (inf when the iteration did not converge)."""
    kappa_normwise: float
    """Estimated kappa_inf(S), S = D^-1/2 K D^-1/2 (Hager-Higham, a lower bound)."""
    kappa_componentwise: float
    """Estimated max_i (|K^-1| |K| |x|)_i / |x_i| (inf when some x_i = 0)."""


# ----------------------------------------------------------------- condition
def scaled_condition_estimate(K: sp.sparray, fac, *, rng=0) -> float:
    """kappa_inf(S) = ||S||_inf ||S^-1||_inf with S the unit-diagonal scaling of K.

    Parameters
    ----------
    K : (n, n) sparse, symmetric
    fac : SharedFactorization
        The factorization of S whose solves give S^-1.
    rng : int, numpy.random.Generator or None, optional
        Random columns of the block estimator
        (:func:`conditioning.linalg.onenormest.one_norm_estimate`); default 0,
        a fixed seed, so that repeated runs agree.

    Returns
    -------
    float
        Hager-Higham estimate (:func:`conditioning.linalg.onenormest.one_norm_estimate`,
        t = 2, its random start drawn from ``rng``, a seed or a Generator), a
        lower bound usually within a factor 3; S symmetric, so the 1-norm
        equals the inf-norm.
    """
    s = fac.scale
    S_abs_rows = (abs(sp.csr_array(K)) @ s) * s
    norm_S = float(np.max(S_abs_rows, initial=0.0))
    return float(norm_S * one_norm_estimate(fac.solve_scaled, fac.solve_scaled, fac.n, t=2, rng=rng))


def componentwise_condition_estimate(K: sp.sparray, fac, x: NDArray[np.float64]) -> float:
    """cond(K, x) = max_i (|K^-1| |K| |x|)_i / |x_i| (Skeel), estimated.

    Returns
    -------
    float
        ||diag(1/x) K^-1 diag(|K||x|)||_inf by Hager's estimator (the block
        estimator with t = 1 on the transpose, which draws no random numbers;
        a lower bound, dimensionless); inf when x has a zero component.

    Notes
    -----
    The componentwise condition number of xPORFSX, with Z = diag(1/(|K||x|)) K diag(x)
    (Demmel et al. [1]_, section 3).
    """
    x = np.asarray(x, dtype=np.float64)
    if np.any(x == 0.0):
        return math.inf
    g = abs(sp.csr_array(K)) @ np.abs(x)
    n = x.size
    # ||B||_inf = ||B^T||_1, B^T = diag(g) K^-1 diag(1/x) (K symmetric).
    xc, gc = x[:, None], g[:, None]
    # t = 1: Hager's estimator, as LAPACK's xLACN2; it draws no random numbers.
    return float(one_norm_estimate(lambda V: gc * fac.solve(V / xc), lambda V: fac.solve(gc * V) / xc, n, t=1))


# ---------------------------------------------------------------- refinement
def refine(
    K: sp.sparray,
    fac,
    f: NDArray[np.float64],
    *,
    x0: Optional[NDArray[np.float64]] = None,
    kappa: Optional[float] = None,
    operator: Optional[DDOperator] = None,
    max_steps: int = MAX_STEPS,
    allow_gmres: bool = True,
    want_componentwise: bool = True,
) -> RefinementResult:
    """Refine the float64 solution of K x = f to a double-double reference.

    Parameters
    ----------
    K : (n, n) sparse, float64
        Stiffness matrix (force/length, moment/rotation).
    fac : conditioning.engine.scipy_engine.SharedFactorization
        Unshifted float64 factorization of K (``fac.solve`` must work).
    f : (n,) float64
        Load vector (force, moment).
    x0 : (n,) float64, optional
        Starting solution; default ``fac.solve(f)``.
    kappa : float, optional
        kappa_inf(S) if already known; estimated otherwise
        (:func:`scaled_condition_estimate`).
    operator : DDOperator, optional
        ``dd_operator(K)``, to share its set-up across calls.
    max_steps : int
        Residuals allowed in plain refinement.
    allow_gmres : bool
        Fall back to GMRES-based refinement when plain refinement stalls.
    want_componentwise : bool
        Estimate the componentwise condition number and bound (a few solves).

    Returns
    -------
    RefinementResult

    Notes
    -----
    Plain refinement [1]_: r = f - K x in double-double, d = K^-1 r with the
    float64 factors, x <- x + d in double-double. With rho the ratio of
    successive ||d||_inf it stops when

    * ||d||/||x|| <= 4 u^2: converged, below the double-double resolution;
    * rho > 1/2 and either ||d||/||x|| <= gamma kappa u^2 with
      gamma = max(10, sqrt(n)), or the backward error ||r|| / (||K|| ||x|| + ||f||)
      <= 64 u^2: converged, stalled at what double-double residuals can resolve;
    * rho > 1/2 otherwise: not contracting;
    * the step limit: not converged.

    When plain refinement did not converge, GMRES-based refinement [2]_ takes
    over (if allowed), solving (F^-1 K) d = F^-1 r with F the float64 factors
    (scipy ``gmres``, relative tolerance 1e-12), with the same stopping tests.

    Error bound (Demmel et al. [1]_ section 4, xPORFSX): with rho_max the
    largest ratio while the corrections were contracting,

        bound = max(||d_last|| / ||x|| / (1 - rho_max), gamma kappa u^2, gamma u^2),

    and the same with componentwise ratios |d_i| / |x_i|. The rule for
    withdrawing a bound (our statement of xPORFSX's threshold
    1/kappa < n eps_w, with eps_w = u the precision of the factors): a bound is
    given only when the iteration converged and kappa gamma u < 1; the
    componentwise bound also needs x without zero components and a
    componentwise condition with cond(K, x) gamma u < 1. Otherwise it is
    None; a bound is never reported when it could be an overstatement of the
    accuracy. GMRES convergence beyond kappa u ~ 1 is reported as converged
    but its bounds are withdrawn under this rule.
    """
    f = np.asarray(f, dtype=np.float64)
    return refine_block(K, fac, f[:, None], X0=None if x0 is None else np.asarray(x0)[:, None], kappa=kappa,
                        operator=operator, max_steps=max_steps, allow_gmres=allow_gmres,
                        want_componentwise=want_componentwise)[0]


def refine_block(
    K: sp.sparray,
    fac,
    F: NDArray[np.float64],
    *,
    X0: Optional[NDArray[np.float64]] = None,
    kappa: Optional[float] = None,
    operator: Optional[DDOperator] = None,
    max_steps: int = MAX_STEPS,
    allow_gmres: bool = True,
    want_componentwise: Union[bool, Sequence[bool]] = True,
) -> list[RefinementResult]:
    """:func:`refine` for a block of loads at once (one result per column of F).

    The plain refinement of all columns runs in lockstep, so each step is one
    block residual and one block solve; a column leaves the block when it
    stops. GMRES-based refinement, when needed, runs column by column.

    Parameters
    ----------
    F : (n, k) float64
        Loads, one per column; X0 optional (n, k) starting solutions.
    want_componentwise : bool or sequence of k bools
        Per column: estimate the componentwise condition number for the
        componentwise bound (a few solves per column).
    Other parameters as in :func:`refine`.

    Returns
    -------
    list of RefinementResult, one per column of F
    """
    op = dd_operator(operator if operator is not None else K)
    F = np.asarray(F, dtype=np.float64)
    n, k = F.shape
    if fac.shift != 0.0 or fac.singular:
        raise ValueError("refinement needs an unshifted factorization of a nonsingular K")
    if kappa is None or not np.isfinite(kappa):
        kappa = scaled_condition_estimate(op.K, fac)
    gamma = max(10.0, math.sqrt(n))
    X_hi = fac.solve(F) if X0 is None else np.array(X0, dtype=np.float64)
    X_lo = np.zeros_like(X_hi)
    states = [_State(op, F[:, j], kappa, gamma) for j in range(k)]
    for st in states:
        st.begin(plain=True)
    active = list(range(k))
    for _ in range(max_steps):
        if not active:
            break
        R_hi, R_lo = dd_residual(op, X_hi[:, active], X_lo[:, active], F[:, active])
        D = fac.solve(R_hi + R_lo)
        still = []
        for c, j in enumerate(active):
            X_hi[:, j], X_lo[:, j], done = states[j].step(R_hi[:, c], D[:, c], X_hi[:, j], X_lo[:, j])
            if not done:
                still.append(j)
        active = still
    for j in active:
        states[j].stop_for_limit(max_steps)
    want = [bool(want_componentwise)] * k if isinstance(want_componentwise, (bool, np.bool_)) \
        else [bool(w) for w in want_componentwise]
    results = []
    for j, st in enumerate(states):
        x_hi, x_lo = X_hi[:, j].copy(), X_lo[:, j].copy()
        gmres_used = False
        if not st.converged and allow_gmres and "not finite" not in st.reason:
            gmres_used = True
            logger.info("plain refinement %s; switching to GMRES-based refinement", st.reason)
            x_hi, x_lo = st.run(x_hi, x_lo, _gmres_correction(op.K, fac), MAX_GMRES_STEPS, plain=False)
        results.append(_result(st, fac, op, x_hi, x_lo, kappa, gamma, gmres_used, want[j]))
    return results


def _result(st, fac, op, x_hi, x_lo, kappa, gamma, gmres_used, want_componentwise) -> RefinementResult:
    """Bounds, trust flag and the result record of one refined column."""
    trusted_norm = st.converged and kappa * gamma * U < 1.0
    kappa_c = math.inf
    if want_componentwise and trusted_norm:
        kappa_c = componentwise_condition_estimate(op.K, fac, x_hi)
    trusted_comp = trusted_norm and np.isfinite(kappa_c) and kappa_c * gamma * U < 1.0
    norm_bound = st.bound(kappa, componentwise=False) if trusted_norm else None
    comp_bound = st.bound(kappa_c, componentwise=True) if trusted_comp else None
    if not st.converged:
        logger.warning("refinement stopped without converging: %s", st.reason)
    method = "GMRES refinement with double-double residuals" if gmres_used else "double-double refinement"
    return RefinementResult(
        x_hi=x_hi, x_lo=x_lo, converged=st.converged, stop_reason=st.reason,
        history=st.history, method=method, gmres_used=gmres_used,
        normwise_bound=norm_bound, componentwise_bound=comp_bound,
        bound_trusted=norm_bound is not None,
        error_estimate=st.bound(kappa, componentwise=False) if st.converged else math.inf,
        kappa_normwise=float(kappa), kappa_componentwise=float(kappa_c),
    )


def _gmres_correction(K, fac):
    """d ~ K^-1 r by GMRES on F^-1 K d = F^-1 r (Carson and Higham's GMRES-IR)."""
    n = fac.n
    A = spla.LinearOperator((n, n), matvec=lambda v: fac.solve(K @ np.ravel(v)), dtype=np.float64)

    def correction(r):
        scale = float(np.max(np.abs(r), initial=0.0))
        if scale == 0.0:
            return np.zeros_like(r)
        b = fac.solve(r / scale)
        d, info = spla.gmres(A, b, x0=b, rtol=1e-12, atol=0.0, restart=min(n, 50), maxiter=6)
        if info != 0:
            logger.info("GMRES inner solve stopped at its iteration limit (info=%d)", info)
        return d * scale

    return correction


class _State:
    """Iteration record shared by the plain and the GMRES phases."""

    def __init__(self, op: DDOperator, f, kappa: float, gamma: float):
        self.op, self.f, self.kappa, self.gamma = op, f, kappa, gamma
        self.norm_K = float(np.max(abs(op.K) @ np.ones(op.n), initial=0.0))
        self.history: list[RefinementStep] = []
        self.converged = False
        self.reason = "no step taken"
        self.rho_max = 0.0
        self.rho_max_comp = 0.0
        self.last_dx = math.inf
        self.last_dz = math.inf

    def begin(self, *, plain: bool) -> None:
        """Start a phase (plain or GMRES): ratios restart from the next step."""
        self.prev_dx = self.prev_dz = math.inf
        self.label = "" if plain else "GMRES "

    def step(self, r_hi, d, x_hi, x_lo):
        """Record one correction d of the residual r and apply it; (x_hi, x_lo, stop?)."""
        label = self.label
        floor = self.gamma * max(self.kappa, 1.0) * U**2
        x_norm = float(np.max(np.abs(x_hi), initial=0.0))
        if x_norm == 0.0 and not np.any(d) and not np.any(r_hi):
            self._finish(0.0, 0.0, True, f"{label}converged: zero load, x = 0 exactly")
            return x_hi, x_lo, True
        if not np.all(np.isfinite(d)) or x_norm == 0.0:
            self.reason = f"{label}correction is not finite"
            return x_hi, x_lo, True
        dx = float(np.max(np.abs(d))) / x_norm
        with np.errstate(divide="ignore", invalid="ignore"):
            dz = float(np.max(np.abs(d) / np.abs(x_hi), initial=0.0))
        res = float(np.max(np.abs(r_hi))) / (self.norm_K * x_norm + float(np.max(np.abs(self.f))))
        self.history.append(RefinementStep(len(self.history) + 1, dx, res))
        prev_dx, prev_dz = self.prev_dx, self.prev_dz
        rho = dx / prev_dx if prev_dx > 0 else 0.0
        if dx <= 4 * U**2:
            x_hi, x_lo = dd_add(x_hi, x_lo, d, np.zeros_like(d))
            self._finish(dx, dz, True, f"{label}converged: correction {dx:.1e} below the double-double resolution")
            return x_hi, x_lo, True
        if rho > RATIO_THRESHOLD:
            if dx <= floor or res <= BACKWARD_RESOLUTION:
                self._finish(dx, dz, True,
                             f"{label}converged: correction stalled at {dx:.1e} with backward error "
                             f"{res:.1e}, the resolution of double-double residuals")
            else:
                self._finish(prev_dx, prev_dz, False,
                             f"not contracting: correction ratio {rho:.2f} > {RATIO_THRESHOLD} "
                             f"at correction {dx:.1e} ({label.strip() or 'plain'} refinement)")
            return x_hi, x_lo, True
        if np.isfinite(prev_dx):
            self.rho_max = max(self.rho_max, rho)
            rho_c = dz / prev_dz if prev_dz > 0 and np.isfinite(prev_dz) else 0.0
            self.rho_max_comp = max(self.rho_max_comp, min(rho_c, 1.0))
        x_hi, x_lo = dd_add(x_hi, x_lo, d, np.zeros_like(d))
        self.prev_dx, self.prev_dz = dx, dz
        return x_hi, x_lo, False

    def stop_for_limit(self, max_steps: int) -> None:
        self._finish(self.prev_dx, self.prev_dz, False,
                     f"{self.label}step limit {max_steps} reached at correction {self.prev_dx:.1e}")

    def run(self, x_hi, x_lo, correct, max_steps: int, *, plain: bool):
        """A whole phase for one column with the correction solver ``correct``."""
        self.begin(plain=plain)
        for _ in range(max_steps):
            r_hi, r_lo = dd_residual(self.op, x_hi, x_lo, self.f)
            x_hi, x_lo, done = self.step(r_hi, correct(r_hi + r_lo), x_hi, x_lo)
            if done:
                return x_hi, x_lo
        self.stop_for_limit(max_steps)
        return x_hi, x_lo

    def _finish(self, dx, dz, converged, reason):
        self.last_dx, self.last_dz = dx, dz
        self.converged, self.reason = converged, reason

    def bound(self, kappa: float, *, componentwise: bool) -> float:
        """Demmel et al.'s estimate d_last / (1 - rho_max), floored by the resolution."""
        rho = self.rho_max_comp if componentwise else self.rho_max
        last = self.last_dz if componentwise else self.last_dx
        estimate = last / (1.0 - min(rho, RATIO_THRESHOLD)) if np.isfinite(last) else math.inf
        return float(max(estimate, self.gamma * max(kappa, 1.0) * U**2, self.gamma * U**2))
