"""Digits lost to round-off, measured by re-solving in extended precision.

    (K, loads, float64 factors) => trustworthy significant figures per sample and per node

The float64 solution x = K^-1 f is what a production direct solver returns.
Its trustworthy digits are measured against a reference solution:
double-double iterative refinement (:mod:`conditioning.refinement`),
confirmed for models up to a size limit by an arbitrary-precision dense
re-solve (:mod:`conditioning.reference_solve`): certified by python-flint's
ball arithmetic when installed, else mpmath.

Definitions (u = 2^-53, unit round-off of float64):

    forward error       e = ||x - x_ref||_inf / ||x_ref||_inf
    trustworthy digits  t = -log10(e + rho),  rho the reference's own relative
                        accuracy, so t never exceeds what the reference can show;
                        at most log10(1/u), the digits a float64 number carries
    digits lost         log10(1/u) - t  (log10(2^53) = 15.95)

The rule of thumb "16 - log10(kappa)" is shown next to the measurement for
the raw and the diagonally scaled condition number (van der Sluis 1969;
Demmel 1989: Cholesky's accuracy depends on the scaled condition number).
"""

from __future__ import annotations

import logging
import math
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.doubledouble import U, dd_operator, dd_residual
from conditioning.model import Model
from conditioning.refinement import RefinementResult, refine_block, scaled_condition_estimate
from conditioning.reference_solve import (
    FLINT_MAX_N,
    MPMATH_MAX_N,
    ReferenceSolution,
    choose_reference_method,
    reference_solve,
)
from conditioning.results import (
    ConditionResult,
    DigitsResult,
    DigitsSample,
    NodeDigits,
    SpectrumResult,
)

logger = logging.getLogger(__name__)

#: Digits of float64: log10(1/u) with u = 2^-53.
FLOAT64_DIGITS = -math.log10(U)
#: Nodes listed per sample, worst first.
WORST_NODES = 10


def measure_digits(
    model: Model,
    fac,
    *,
    condition: Optional[ConditionResult] = None,
    spectrum: Optional[SpectrumResult] = None,
    samples: int = 3,
    seed: int = 0,
    confirm: bool = True,
) -> DigitsResult:
    """Measure the digits the float64 solution of K x = f keeps, per load sample.

    Parameters
    ----------
    model : Model
        K (force/length, moment/rotation), and optionally the user's load,
        an audited solution and the DOF map.
    fac : conditioning.factorization.SharedFactorization
        The shared float64 factorization of K.
    condition : ConditionResult, optional
        Raw and scaled condition estimates, for the rule-of-thumb predictions.
    spectrum : SpectrumResult, optional
        Its smallest mode (if it carries a vector) gives the worst-case load;
        otherwise the smallest eigenvector of S is computed here.
    samples : int
        Number of seeded random loads (``random-1``...).
    seed : int
        Seed of the random loads.
    confirm : bool
        Run the arbitrary-precision re-solve when the model is small enough.

    Returns
    -------
    DigitsResult
        One DigitsSample per load (``load``, ``random-k``, ``worst-case``,
        ``solution``); ``skipped`` says why nothing was measured when K is
        singular.
    """
    predicted_raw, predicted_scaled = _predictions(condition)
    flops = float(fac.info.flops)
    if fac.singular or fac.shift != 0.0:
        return DigitsResult([], predicted_raw, predicted_scaled, flops,
                            summary="No digits measured: K is singular, so no displacement is defined.",
                            skipped="K is singular: the factorization needed a shift "
                                    f"({fac.info.shift:.1e}); restrain the rigid-body modes or mechanisms first")
    K = sp.csr_array(model.K)
    names, F = _loads(model, fac, spectrum, samples, seed)
    X = fac.solve(F)
    op = dd_operator(K)
    kappa = scaled_condition_estimate(K, fac)
    # The componentwise bound (a few solves per sample) for the sample that
    # matters most: the user's load, else the first random one.
    want = [j == 0 for j in range(len(names))]
    refs = refine_block(K, fac, F, X0=X, kappa=kappa, operator=op, want_componentwise=want)
    confirmation, why_not = _confirm(K, F, kappa) if confirm else (None, "arbitrary-precision re-solve not requested")
    out = [
        _sample(model, op, name, F[:, j], X[:, j], refs[j], confirmation, j, why_not)
        for j, name in enumerate(names)
    ]
    if model.solution is not None and (not names or names[0] != "load"):
        logger.warning("a solution to audit was given without a nonzero load: the audit needs f to form f - K x")
    elif model.solution is not None:
        out.append(_sample(model, op, "solution", F[:, 0], np.asarray(model.solution, dtype=np.float64),
                           refs[0], confirmation, 0, why_not))
    return DigitsResult(out, predicted_raw, predicted_scaled, flops,
                        summary=_summary(out, predicted_raw, predicted_scaled, flops))


# ------------------------------------------------------------------- loads
def _loads(model: Model, fac, spectrum, samples: int, seed: int):
    """Sample names and the (n, k) load block."""
    n = model.n
    names, cols = [], []
    if model.load is not None and np.any(model.load):
        names.append("load")
        cols.append(np.asarray(model.load, dtype=np.float64))
    elif model.load is not None:
        logger.warning("the load vector is zero: no displacement to measure; the load sample is left out")
    rng = np.random.default_rng(seed)
    for k in range(samples):
        names.append(f"random-{k + 1}")
        cols.append(rng.standard_normal(n))
    mode = worst_case_load(model.K, fac, spectrum)
    if mode is not None:
        names.append("worst-case")
        cols.append(mode)
    return names, np.column_stack(cols)


def worst_case_load(K, fac, spectrum: Optional[SpectrumResult] = None) -> Optional[NDArray[np.float64]]:
    """The load along the smallest-eigenvalue mode of S = D^-1/2 K D^-1/2.

    Returns
    -------
    (n,) float64 or None
        f = D^1/2 v for the eigenvector v of S's smallest eigenvalue, so that
        x = K^-1 f = D^-1/2 v / lambda lies along the weakest mode; scaled to
        unit max-norm (load units). None when no eigenvector could be found.
    """
    s = fac.scale
    u = None
    if spectrum is not None and spectrum.smallest_vector is not None:
        v = np.asarray(spectrum.smallest_vector, dtype=np.float64)
    elif spectrum is not None and spectrum.modes and spectrum.modes[0].vector is not None:
        u = np.asarray(spectrum.modes[0].vector, dtype=np.float64)  # u = D^-1/2 v
        v = u / s
    else:
        n = fac.n
        if n < 3:
            w, V = np.linalg.eigh((sp.csr_array(K).toarray() * s[:, None]) * s[None, :])
            v = V[:, 0]
        else:
            S = sp.csr_array(K)
            S = sp.csr_array(S.multiply(s[:, None]).multiply(s[None, :]))
            opinv = spla.LinearOperator((n, n), matvec=lambda b: fac.solve_scaled(np.ravel(b)), dtype=np.float64)
            try:
                _, V = spla.eigsh(S, k=1, sigma=0.0, which="LM", OPinv=opinv, v0=np.ones(n), tol=1e-6,
                                  ncv=min(n - 1, 8))
            except (spla.ArpackNoConvergence, spla.ArpackError) as exc:
                logger.warning("smallest eigenvector not found (%s); no worst-case sample", exc)
                return None
            v = V[:, 0]
    f = v / s
    return f / np.max(np.abs(f))


# --------------------------------------------------------------- reference
def _confirm(K, F, kappa) -> tuple[Optional[ReferenceSolution], str]:
    """The arbitrary-precision re-solve, or None and why not."""
    method = choose_reference_method(K.shape[0])
    if method is None:
        return None, (f"no arbitrary-precision re-solve: n = {K.shape[0]} is above the limits "
                      f"({FLINT_MAX_N} with python-flint, {MPMATH_MAX_N} with mpmath)")
    try:
        return reference_solve(K, F, method=method, kappa=kappa), ""
    except ValueError as exc:
        logger.warning("arbitrary-precision re-solve failed: %s", exc)
        return None, f"arbitrary-precision re-solve failed ({exc})"


def _sample(model: Model, op, name, f, x, ref: RefinementResult, conf: Optional[ReferenceSolution], j: int,
            why_not: str = "") -> DigitsSample:
    """Measure one sample: forward error, digits, per node, bounds."""
    x_hi, x_lo, method = ref.x_hi, ref.x_lo, "double-double refinement"
    scale = float(np.max(np.abs(ref.x_hi)))
    rad = None
    note = None
    if conf is not None:
        c_hi, c_lo = conf.x_hi[:, j], conf.x_lo[:, j]
        scale = float(np.max(np.abs(c_hi)))
        gap = float(np.max(np.abs((ref.x_hi - c_hi) + (ref.x_lo - c_lo)))) / scale
        x_hi, x_lo, method = c_hi, c_lo, conf.method
        if conf.radius is not None:
            rad = conf.radius[:, j]
            resolution = float(np.max(rad)) / scale + 2 * U**2
        else:
            resolution = max(2 * U**2, ref.kappa_normwise * 10.0 ** -_digits_of(conf.engine))
        note = (f"{conf.engine}: double-double refinement agrees to a relative {gap:.1e} "
                f"({'within' if gap <= max(ref.error_estimate, resolution) else 'OUTSIDE'} its estimate "
                f"{ref.error_estimate:.1e})")
        converged = True
    else:
        resolution = ref.error_estimate
        converged = ref.converged
        note = (f"{why_not}: the figure rests on {ref.method}, {len(ref.history)} residuals, "
                f"last correction {ref.history[-1].correction_norm:.1e}"
                if ref.history else f"{why_not}; no refinement step")
    err_vec = np.abs((x - x_hi) - x_lo)
    forward = float(np.max(err_vec)) / scale
    trust = _digits(forward + resolution)
    at_ceiling = forward <= resolution
    per_dof = _per_dof_digits(model, err_vec, x_hi, rad if rad is not None else resolution * scale, resolution)
    r_hi, r_lo = dd_residual(op, x, None, f)
    norm_K = float(np.max(abs(op.K) @ np.ones(op.n)))
    backward = float(np.max(np.abs(r_hi + r_lo))) / (norm_K * float(np.max(np.abs(x))) + float(np.max(np.abs(f))))
    reason = ref.stop_reason
    if at_ceiling:
        reason += f"; the error is below the reference's resolution {resolution:.1e}: the digits shown are a ceiling"
    if not math.isfinite(resolution):
        reason += "; the reference did not converge, so no digit can be vouched for"
    nb, cb, trusted = ref.normwise_bound, ref.componentwise_bound, ref.bound_trusted
    if rad is not None:  # a certified enclosure is a rigorous bound
        nb = float(np.max(rad)) / scale
        with np.errstate(divide="ignore", invalid="ignore"):
            cw = rad / np.abs(x_hi)
        cb = float(np.max(cw)) if np.all(x_hi != 0) else None
        trusted = True
    return DigitsSample(
        sample=name, trustworthy_digits=trust, digits_lost=FLOAT64_DIGITS - trust, method=method,
        converged=converged, stop_reason=reason, history=ref.history,
        worst_nodes=_worst_nodes(model, per_dof), normwise_bound=nb, componentwise_bound=cb,
        bound_trusted=trusted, confirmation=note, per_dof_digits=per_dof, forward_error=forward,
        resolution=resolution, at_ceiling=at_ceiling, backward_error=backward,
    )


def _digits(relative_error: float) -> float:
    """-log10 of a relative error, clipped to [0, log10(1/u)]; 0 when unknown (inf/nan).

    A float64 number carries at most log10(2^53) = 15.95 digits: an error
    below u is rounding luck and is not reported as more digits.
    """
    if not math.isfinite(relative_error) or relative_error >= 1.0:
        return 0.0
    if relative_error <= 0.0:
        return FLOAT64_DIGITS
    return float(min(FLOAT64_DIGITS, -math.log10(relative_error)))


def _digits_of(engine: str) -> int:
    """Decimal digits of an mpmath engine description ``"... (NN digits)"``."""
    try:
        return int(engine.rsplit("(", 1)[1].split()[0])
    except (IndexError, ValueError):
        return 30


# ----------------------------------------------------------------- per dof
def _per_dof_digits(model: Model, err, x_ref, res_abs, resolution) -> NDArray[np.float64]:
    """Digits of each component relative to the largest |x_ref| of its dof type."""
    n = err.size
    ref_scale = np.full(n, float(np.max(np.abs(x_ref))))
    if model.dofs is not None:
        for t in model.dofs.dof_types:
            rows = model.dofs.dof == t
            ref_scale[rows] = float(np.max(np.abs(x_ref[rows]), initial=0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = (err + res_abs) / ref_scale
    digits = np.where(np.isfinite(rel) & (rel > 0), -np.log10(np.where(rel > 0, rel, 1.0)), FLOAT64_DIGITS)
    digits = np.where(ref_scale > 0, digits, FLOAT64_DIGITS)
    if not math.isfinite(resolution):
        digits = np.zeros(n)
    return np.clip(digits, 0.0, FLOAT64_DIGITS)


def _worst_nodes(model: Model, per_dof) -> list[NodeDigits]:
    """Nodes by their worst component, fewest digits first."""
    if model.dofs is not None:
        nodes = model.dofs.node
    else:
        nodes = np.arange(1, per_dof.size + 1)
    order = np.lexsort((per_dof,))
    out, seen = [], set()
    for row in order:
        node = int(nodes[row])
        if node in seen:
            continue
        seen.add(node)
        out.append(NodeDigits(node=node, digits=float(per_dof[row])))
        if len(out) == WORST_NODES:
            break
    return out


# -------------------------------------------------------------- prediction
def _predictions(condition: Optional[ConditionResult]):
    if condition is None:
        return None, None
    raw = condition.estimate
    scaled = condition.scaled_estimate
    pr = 16.0 - math.log10(raw) if raw and math.isfinite(raw) and raw > 0 else None
    ps = 16.0 - math.log10(scaled) if scaled and math.isfinite(scaled) and scaled > 0 else None
    return pr, ps


def _summary(samples: list[DigitsSample], pr, ps, flops: float) -> str:
    """One sentence: measured against predicted, and why."""
    if not samples:
        return "No load sample could be measured."
    worst = min(samples, key=lambda s: s.trustworthy_digits)
    t = worst.trustworthy_digits
    head = f"The float64 solution keeps at least {t:.1f} trustworthy digits (worst sample '{worst.sample}')"
    ops = (f"; the factorization's {flops:.1e} operations do not set this figure, "
           "the conditioning does")
    if pr is None and ps is None:
        return head + ops + "."
    parts = []
    if pr is not None:
        parts.append(f"16 - log10(kappa raw) predicted {pr:.1f}")
    if ps is not None:
        parts.append(f"16 - log10(kappa scaled) predicted {ps:.1f}")
    cands = [(abs(p - t), label, p) for p, label in ((pr, "raw"), (ps, "scaled")) if p is not None]
    _, best, p_best = min(cands)
    if abs(p_best - t) <= 1.0:
        why = (f"the {best} prediction was right to within a digit"
               + (", because diagonal scaling removes the units and DOF-type mixing that inflate the raw figure "
                  "without costing accuracy" if best == "scaled" and pr is not None and pr < t - 1.0 else ""))
    elif p_best < t:
        why = (f"both predictions were pessimistic (the {best} one closest), because the rule is a worst-case "
               "bound and a backward-stable solve with these loads does not excite the weakest mode that much")
    else:
        why = (f"the measurement is worse than predicted (the {best} prediction closest), because the condition "
               "estimate is a lower bound or round-off grows beyond it for this matrix")
    return f"{head}; {', '.join(parts)}: {why}{ops}."
