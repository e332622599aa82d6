"""Digits lost to round-off, measured by re-solving in extended precision.

    (K, loads, float64 factors) => trustworthy significant figures per sample and per node

The float64 solution x = K^-1 f is what a production direct solver returns.
Its trustworthy digits are measured against a reference solution:
double-double iterative refinement (:mod:`conditioning.linalg.refinement`),
confirmed for models up to a size limit by an arbitrary-precision dense
re-solve (:mod:`conditioning.linalg.reference_solve`): certified by python-flint's
ball arithmetic when installed, else mpmath.

Definitions (u = 2^-53, unit round-off of float64):

    forward error       e = ||x - x_ref||_inf / ||x_ref||_inf
    trustworthy digits  t = floor_0.1(-log10(e_up)),  e_up an upper bound on
                        the error of x against the exact solution: the
                        measured gap, plus the reference's own error (its
                        certified radius, or its error bound or estimate),
                        divided by a lower bound on ||x_exact||_inf, each
                        step rounded upward; then rounded down to the 0.1
                        digit that is shown. So t never exceeds what the
                        reference can show, and at most floor_0.1(log10(1/u))
                        = 15.9, the digits a float64 number carries
    digits lost         log10(1/u) - t  (log10(2^53) = 15.95)

The figure describes the float64 solution the tool computed
(:attr:`DigitsSample.solution`); another backward-stable float64 solve of
the same system (another BLAS kernel, another solver) differs from it by
rounding, typically by a few hundredths of a digit in this figure.

The rule of thumb "16 - log10(kappa)" is shown next to the measurement for
the raw and the diagonally scaled condition number (van der Sluis 1969;
Demmel 1989: Cholesky's accuracy depends on the scaled condition number).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, replace
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.engine.memory import refactorization_bytes
from conditioning.linalg.doubledouble import U, dd_operator, dd_residual
from conditioning.model import Model
from conditioning.linalg.verified_eigenvalue import (
    VerifiedEigenvalueBound,
    certified_errors,
    power_of_two_scaling,
    verified_smallest_eigenvalue,
)
from conditioning.linalg.refinement import RefinementResult, refine_block, scaled_condition_estimate
from conditioning.linalg.reference_solve import (
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
    SolutionAudit,
    SpectrumResult,
)

logger = logging.getLogger(__name__)

#: Digits of float64: log10(1/u) with u = 2^-53.
FLOAT64_DIGITS = -math.log10(U)
#: How a figure proved by python-flint's ball-arithmetic re-solve is labelled.
CERTIFIED_BALL = "certified (ball arithmetic)"
#: How a figure proved by the verified eigenvalue bound is labelled.
CERTIFIED_EIGENVALUE = "certified (verified eigenvalue bound)"
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
    structure=None,
    rng: Optional[np.random.Generator] = None,
) -> DigitsResult:
    """Measure the digits the float64 solution of K x = f keeps, per load sample.

    Parameters
    ----------
    model : Model
        K (force/length, moment/rotation), and optionally the user's load,
        an audited solution and the DOF map.
    fac : conditioning.engine.scipy_engine.SharedFactorization
        The shared float64 factorization of K.
    condition : ConditionResult, optional
        Raw and scaled condition estimates, for the rule-of-thumb predictions.
    spectrum : SpectrumResult, optional
        Its smallest mode (if it carries a vector) gives the worst-case load;
        otherwise the smallest eigenvector of S is computed here.
    samples : int
        Number of seeded random loads (``random-1``...).
    seed : int
        Seed of the random loads, when no ``rng`` is given.
    confirm : bool
        Run the arbitrary-precision re-solve when the model is small enough.
    structure : StructureResult, optional
        Its placeholder rows (restrained DOFs kept with a bare diagonal) get
        no random load and are left out of the normwise figure; its rows
        without stiffness are free modes for the audit of a singular K.
    rng : numpy.random.Generator, optional
        The run's generator (:func:`conditioning.pipeline.diagnose` threads
        one from its seed): the random loads are drawn first, then the
        1-norm estimator's start; default ``numpy.random.default_rng(seed)``.

    Returns
    -------
    DigitsResult
        One DigitsSample per load (``load``, ``random-k``, ``worst-case``,
        ``solution``); ``skipped`` says why nothing was measured when K is
        singular; ``audit`` says how a supplied solution fits K and f (also
        when K is singular).
    """
    predicted_raw, predicted_scaled = _predictions(condition)
    flops = float(fac.info.flops)
    placeholders = _placeholder_rows(structure)
    if fac.singular or fac.shift != 0.0 or (condition is not None and condition.singular
                                             and not _stored_k_solvable(model, fac, structure)):
        audits = []
        if model.solution is not None:
            audits = _worst_first(audit_singular_solutions(model, spectrum, structure))
        return DigitsResult([], predicted_raw, predicted_scaled, flops,
                            summary="No digits measured: K is singular, so no displacement is defined.",
                            skipped=_why_singular(fac, condition),
                            audit=audits[0] if audits else None, audits=audits)
    K = sp.csr_array(model.K)
    rng = np.random.default_rng(seed if rng is None else rng)
    names, F, cases = _loads(model, fac, spectrum, samples, rng, placeholders)
    X = fac.solve(F)  # every load case and sample in one multi-column solve
    op = dd_operator(K)
    kappa = scaled_condition_estimate(K, fac, rng=rng)
    # The componentwise bound (a few solves per sample) for the sample that
    # matters most: the user's (first) load, else the first random one.
    want = [j == 0 for j in range(len(names))]
    refs = refine_block(K, fac, F, X0=X, kappa=kappa, operator=op, want_componentwise=want)
    confirmation, why_not = _confirm(K, F, kappa) if confirm else (None, "arbitrary-precision re-solve not requested")
    measured = None
    if placeholders.size:
        measured = np.ones(model.n, dtype=bool)
        measured[placeholders] = False
    own_solve = solve_description(fac)
    out = [
        replace(_sample(model, op, name, F[:, j], X[:, j], refs[j], confirmation, j, why_not, measured),
                solve=own_solve)
        for j, name in enumerate(names)
    ]
    headline, why_pivoted = SYMMETRIC, ""
    if _needs_pivoted(fac, spectrum, out) and int(getattr(fac.info, "fill", 0)) > PIVOTED_MAX_FILL:
        why_pivoted = (f"no pivoted LU: the symmetric factor already holds {fac.info.fill:,} entries, above the "
                       f"{PIVOTED_MAX_FILL:,} for which one is factored; the symmetric solve's figures stand")
    elif _needs_pivoted(fac, spectrum, out):
        Xp, why_pivoted = pivoted_solve(K, fac.scale, F)
        if Xp is not None:
            headline = PIVOTED
            out += [replace(_sample(model, op, f"{name} {PIVOTED_SUFFIX}", F[:, j], Xp[:, j], refs[j], confirmation,
                                    j, why_not, measured), solve=PIVOTED_SOLVE, solver_kind=PIVOTED)
                    for j, name in enumerate(names)]
    audits = []
    if model.solution is not None and not cases:
        logger.warning("a solution to audit was given without a nonzero load: the audit needs f to form f - K x")
    elif model.solution is not None:
        U_s = np.asarray(model.solution, dtype=np.float64).reshape(model.n, -1)
        for j, (case, column) in enumerate(cases):
            name = _solution_name(case)
            c = load_scale(np.asarray(model.load, dtype=np.float64).reshape(model.n, -1)[:, column])
            solution = replace(_sample(model, op, name, F[:, j], U_s[:, column] * c, refs[j], confirmation, j,
                                       why_not, measured), audited=True, solve=SUPPLIED_SOLVE)
            out.append(solution)
            audits.append(_audit(op, solution, out[j], case))
    out = _cases_first(out, len(cases))
    audits = _worst_first(audits)
    if condition is not None and condition.singular and not why_pivoted:
        why_pivoted = STORED_K_MEASURED
    return DigitsResult(out, predicted_raw, predicted_scaled, flops,
                        summary=_summary([x for x in out if x.solver_kind == headline], predicted_raw,
                                         predicted_scaled, flops),
                        audit=audits[0] if audits else None, audits=audits,
                        headline_solve=headline, headline_reason=why_pivoted)


#: Said beside the digits of a K the support decision calls singular but that
#: was factored without a zero pivot or a shift (:func:`_stored_k_solvable`).
STORED_K_MEASURED = ("K is singular at working precision along its near-singular modes, yet the stored K is "
                     "proved positive definite above its resolution (192-bit L D L^T) and was factored without "
                     "a zero pivot or a shift: these are the digits of a float64 solve of the stored K as it "
                     "is, where stiffness near round-off level sets the displacement along those modes")


#: The stored K's solve is measured although the support decision calls K
#: singular only when lambda_min(E K E) is proved above STORED_ABOVE times the
#: stored matrix's resolution R (Weyl's inequality: storing K in float64 moves
#: an eigenvalue by at most R, so such an eigenvalue is the stored K's own, not
#: the rounding of a singular one). The proof is the 192-bit L D L^T of
#: E K E - c I at c = STORED_SHIFT * R (project's choice: 1.5 leaves room for the
#: proof's own rounding bound; a mechanism whose eigenvalue is pure rounding
#: stays below R and is not measured).
STORED_ABOVE = 1.0
STORED_SHIFT = 1.5


def _stored_k_solvable(model: Model, fac, structure) -> bool:
    """True when the stored K is proved positive definite above its resolution although
    the spectrum calls it singular at working precision.

    The support decision calls K singular when its smallest eigenvalue is
    within RESOLUTION_ROOM times the stored matrix's resolution of zero (room
    for the assembly's own rounding), or not decided. When the factorization
    met no zero pivot, needed no shift, every row has stiffness, and a
    192-bit L D L^T proves lambda_min(E K E) above the resolution itself, the
    tool's float64 solve is a solve of a positive definite stored K and its
    digits are measured (double-double refinement, GMRES where plain
    refinement stalls, confirmed by the arbitrary-precision re-solve) instead
    of being bounded by 0 (issue 22: a slab held in one direction by a very
    soft spring, scaled condition about 1e15, keeps 1.7 digits).
    """
    empty = 0 if structure is None else int(np.size(structure.empty_rows))
    if fac.singular or fac.shift != 0.0 or empty:
        return False
    from conditioning.linalg.verified_ldl import LDL_MAX_FLOPS, flint_available, proved_lower_bound
    from conditioning.stages.support_proof import storage_resolution

    if float(fac.info.flops) > LDL_MAX_FLOPS or not flint_available():
        return False
    K = sp.csr_array(model.K, dtype=np.float64)
    e = power_of_two_scaling(K)
    if np.any(e == 0):
        return False
    SE = sp.csr_array(sp.diags(e) @ K @ sp.diags(e))
    SE.sum_duplicates()
    if abs(SE - SE.T).max() != 0:
        return False
    R = storage_resolution(SE)
    perm = fac.ordering_permutation() if hasattr(fac, "ordering_permutation") else None
    lower, how = proved_lower_bound(SE, STORED_SHIFT * R, perm)
    logger.info("stored K above its resolution: %s", how)
    return lower is not None and lower > STORED_ABOVE * R


#: ``solver_kind`` of the tool's own symmetric solve, and of the pivoted LU.
SYMMETRIC, PIVOTED = "symmetric", "pivoted"
#: Appended to a sample's name for its pivoted-LU solve.
PIVOTED_SUFFIX = "(pivoted LU)"
#: Whose solve a pivoted-LU sample describes.
PIVOTED_SOLVE = ("a stable pivoted solve: LU with partial pivoting (SuperLU, threshold 1.0, COLAMD ordering) "
                 "of the same diagonally scaled K, as a direct solver of an indefinite K pivots")
#: A symmetric solve whose backward error exceeds this multiple of u has let
#: round-off grow in elimination (pivot growth): a backward-stable solve stays
#: within a small multiple of u (Higham, Accuracy and Stability, ch. 9-10;
#: from memory). The project's choice.
GROWTH_BACKWARD = 1e3
#: Above this many rows no pivoted LU is factored (its fill is not predicted;
#: the project's choice, a few seconds on the benchmark models).
PIVOTED_MAX_N = 60_000
#: Nor when the symmetric factor holds more than this many entries (a pivoted
#: LU's fill is usually a small multiple of it; the project's choice: about
#: 1 GB for the LU at three times this fill).
PIVOTED_MAX_FILL = 30_000_000


#: Appended to a sample's name for the float64 solve of the exported K.
EXPORTED_SUFFIX = "(exported K)"
#: Whose solve an exported-K sample describes.
EXPORTED_SOLVE = ("a float64 LU with partial pivoting (SuperLU, threshold 1.0, COLAMD ordering, diagonally "
                  "scaled) of the exported K as stored, penalty included: what a float64 direct solver of it gets")
#: The condition estimate passed to the reference solve of an exported K that a
#: penalty swallowed: it chooses the working precision (K is singular at
#: float64 precision along the link; the ball arithmetic then proves how many
#: bits were enough). The project's choice: 1e40, beyond the 1e20-1e30
#: penalties seen in exports.
EXPORTED_KAPPA = 1e40


def measure_exported_digits(model: Model, structure=None, rng: Optional[np.random.Generator] = None
                            ) -> tuple[list[DigitsSample], Optional[float], str]:
    """Digits of a float64 solve of the exported K itself, for the engineer's load(s).

    Run when a penalty has swallowed the structure (the rest of the report is
    then of the model with the linked DOFs held): the matrix the engineer
    solves is the exported one, singular at float64 precision along the link.
    Each load (the engineer's cases, else one seeded random load) is solved by
    :func:`pivoted_solve` on the stored K and measured against an
    arbitrary-precision re-solve of the stored K (python-flint's ball
    arithmetic when installed, certified), per DOF and normwise as every
    other sample.

    Returns
    -------
    samples : list of DigitsSample
        ``solver_kind`` ``exported``, names ending in ``(exported K)``; empty
        when no reference solve could run (above its size limit).
    condition_at_least : float or None
        A proved lower bound on kappa_2 of the exported K (see
        :attr:`DigitsResult.exported_condition_at_least`).
    reason : str
        What was measured, or why nothing was.
    """
    K = sp.csr_array(model.K)
    n = K.shape[0]
    names, cols = [], []
    if model.load is not None:
        L = np.asarray(model.load, dtype=np.float64).reshape(n, -1)
        labels = (["load"] if np.ndim(model.load) == 1 else
                  list(model.load_names or (f"load-{k + 1}" for k in range(L.shape[1]))))
        for k, label in enumerate(labels):
            if np.any(L[:, k]):
                names.append(label)
                cols.append(L[:, k])
    if not cols:
        rng = np.random.default_rng(0) if rng is None else rng
        names.append("random-1")
        f = rng.standard_normal(n)
        placeholders = _placeholder_rows(structure)
        f[placeholders] = 0.0
        cols.append(f)
    F = np.column_stack(cols)
    method = choose_reference_method(n)
    if method is None:
        return [], None, (f"the exported K was not measured: n = {n:,} is above the arbitrary-precision re-solve's "
                          f"limits ({FLINT_MAX_N:,} with python-flint, {MPMATH_MAX_N:,} with mpmath)")
    diag = np.abs(K.diagonal())
    scale = np.where(diag > 0, 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0)), 1.0)
    X, why = pivoted_solve(K, scale, F)
    if X is None:
        return [], None, f"the exported K was not measured: {why}"
    try:
        ref = reference_solve(K, F, method=method, kappa=EXPORTED_KAPPA)
    except ValueError as exc:
        return [], None, f"the exported K was not measured: its arbitrary-precision re-solve failed ({exc})"
    op = dd_operator(K)
    out, bounds = [], []
    for j, name in enumerate(names):
        x, f = X[:, j], F[:, j]
        x_hi, x_lo = ref.x_hi[:, j], ref.x_lo[:, j]
        if ref.radius is not None:
            rad = _up(ref.radius[:, j], 1) + 2 * U**2 * np.abs(x_hi)
            how = CERTIFIED_BALL if ref.method == "certified" else ref.method
        else:
            rad = np.full(n, 10.0 ** -_digits_of(ref.engine) * EXPORTED_KAPPA * float(np.max(np.abs(x_hi))))
            how = ref.method
        scale_x = float(np.max(np.abs(x_hi)))
        err_vec = np.abs((x - x_hi) - x_lo)
        err_up = _up(err_vec, 3) + rad
        scale_lo = scale_x - float(np.max(rad))
        upper = _up(float(np.max(err_up)) / scale_lo, 2) if scale_lo > 0 else math.inf
        trust = _digits(upper)
        resolution = float(np.max(rad)) / scale_x if scale_x > 0 else math.inf
        per_dof = _per_dof_digits(model, err_up, x_hi, resolution)
        r_hi, r_lo = dd_residual(op, x, None, f)
        norm_lo = float(np.linalg.norm(x_hi)) - float(np.linalg.norm(rad))
        if norm_lo > 0:
            bounds.append(float(np.max(diag)) * norm_lo / float(np.linalg.norm(f)) * (1 - 8 * U))
        out.append(DigitsSample(
            sample=f"{name} {EXPORTED_SUFFIX}", trustworthy_digits=trust, digits_lost=FLOAT64_DIGITS - trust,
            method=how, converged=True,
            stop_reason=f"measured against {ref.engine}, a re-solve of the stored K",
            history=[], worst_nodes=_worst_nodes(model, per_dof), normwise_bound=resolution,
            componentwise_bound=None, bound_trusted=ref.radius is not None, confirmation=ref.engine,
            per_dof_digits=per_dof, forward_error=float(np.max(err_vec)) / scale_x if scale_x > 0 else math.inf,
            resolution=resolution, at_ceiling=False, backward_error=_backward_error(op, x, f, r_hi + r_lo),
            solution=x, load_vector=f, reference_hi=x_hi, reference_lo=x_lo,
            solve=EXPORTED_SOLVE, solver_kind="exported"))
    return out, (max(bounds) if bounds else None), "measured: " + EXPORTED_SOLVE


def _needs_pivoted(fac, spectrum, samples: list[DigitsSample]) -> bool:
    """True when the kind of solver matters: K is indefinite (negative pivots or eigenvalues),
    or the symmetric solve's backward error shows pivot growth."""
    negative = bool(fac.info.negative_pivots) or bool(spectrum is not None and spectrum.negative_eigenvalues)
    growth = any(s.backward_error is not None and s.backward_error > GROWTH_BACKWARD * U for s in samples)
    return negative or growth


def pivoted_solve(K, scale, F) -> tuple[Optional[NDArray[np.float64]], str]:
    """K^-1 F by LU with partial pivoting of S = diag(s) K diag(s), and why it was run or not.

    Returns
    -------
    X : (n, k) float64 or None
        None when the model is above :data:`PIVOTED_MAX_N` rows or the LU failed.
    reason : str
    """
    n = K.shape[0]
    if n > PIVOTED_MAX_N:
        return None, (f"no pivoted LU: {n:,} rows is above the {PIVOTED_MAX_N:,} for which one is factored; "
                      "the symmetric solve's figures stand")
    S = sp.csc_array(K.multiply(scale[:, None]).multiply(scale[None, :]))
    try:
        lu = spla.splu(S, permc_spec="COLAMD", diag_pivot_thresh=1.0)
        X = scale[:, None] * lu.solve(scale[:, None] * F)
    except (RuntimeError, MemoryError) as exc:
        return None, f"no pivoted LU: {exc}"
    if not np.all(np.isfinite(X)):
        return None, "no pivoted LU: its solve was not finite"
    return X, ("K is indefinite or its symmetric elimination let round-off grow, so a direct solver of "
               "it pivots: the key figure is the pivoted LU's")


#: Whose solve an audited sample describes.
SUPPLIED_SOLVE = "the supplied solution, as read from its file"


def solve_description(fac) -> str:
    """The tool's own solve in words: solver, pivoting, ordering (what its digits describe)."""
    info = getattr(fac, "info", None)
    ordering = getattr(info, "ordering", None)
    where = f"{ordering} ordering" if ordering else "its own ordering"
    if "petsc" in type(fac).__module__:
        return f"the tool's float64 direct solve (MUMPS LDL^T, {where}, diagonally scaled)"
    return (f"the tool's float64 direct solve (SuperLU in symmetric mode: pivots on the diagonal, "
            f"{where}, diagonally scaled)")


def _solution_name(case: Optional[str]) -> str:
    """The sample name of the supplied solution of a load case."""
    return "solution" if case is None else f"solution ({case})"


def _cases_first(samples: list[DigitsSample], n_cases: int) -> list[DigitsSample]:
    """The user's load cases (the first ``n_cases`` samples) fewest digits first, the rest in order."""
    cases = sorted(samples[:n_cases], key=lambda s: s.trustworthy_digits)  # stable: file order on ties
    return cases + samples[n_cases:]


def _worst_first(audits: list[SolutionAudit]) -> list[SolutionAudit]:
    """Audits that do not fit first, then by fewest trustworthy digits."""
    return sorted(audits, key=lambda a: (a.fits, a.trustworthy_digits))


#: Shifts tried first when the smallest eigenvector of S is known, as fractions
#: of its Rayleigh quotient in E K E's coordinates (an upper bound on
#: lambda_min(E K E)); the project's choice, as in the support proof.
RAYLEIGH_SHIFTS = (0.9, 0.5)


def _verify(K, perm, condition, vector=None) -> tuple[Optional[VerifiedEigenvalueBound], str]:
    """The verified eigenvalue bound for K, and what it proved or why not.

    With S's smallest eigenvector ``vector`` (S's coordinates, all rows), the
    shift is first put just below its Rayleigh quotient in the power-of-two
    scaled E K E (sharper than a quarter of the estimate, which allows for the
    two scalings' difference blindly), then the default shifts are tried.
    """
    estimate = None if condition is None else condition.scaled_lambda_min
    if estimate is None or not estimate > 0:
        return None, "not attempted: no positive estimate of the smallest eigenvalue of S"
    if perm is None:
        # Without the shared ordering the proof's factorization could cost far
        # more than the engine's own; and it analyses SuperLU's LU.
        return None, "not attempted: the engine shares no fill-reducing ordering for the proof's factorization"
    try:
        if vector is not None and np.all(K.diagonal() > 0):
            e = power_of_two_scaling(K)
            y = (1.0 / np.sqrt(K.diagonal()) / e) * np.asarray(vector, dtype=np.float64)
            rq = estimate / float(y @ y) if float(y @ y) > 0 else 0.0
            for frac in RAYLEIGH_SHIFTS if rq > 0 else ():
                bound = verified_smallest_eigenvalue(K, estimate, perm=perm, shift=frac * rq)
                if bound.verified:
                    return bound, bound.reason
        bound = verified_smallest_eigenvalue(K, estimate, perm=perm)
    except (MemoryError, RuntimeError, ValueError) as exc:
        return None, f"not attempted: {exc}"
    return bound, bound.reason


def _why_singular(fac, condition=None) -> str:
    """Why no displacement is defined, in the report's words."""
    empty = int(fac.active.size - np.count_nonzero(fac.active))
    if fac.shift == 0.0 and empty:
        return (f"K is singular: {empty:,} row{'s' if empty != 1 else ''} without stiffness; "
                "restrain or remove those DOFs first")
    if fac.shift == 0.0 and not fac.singular:
        # The pivots stayed above the shift test's level, but the spectrum has
        # eigenvalues of S that are zero at working precision.
        why = condition.estimate_method.removeprefix("singular: ")
        return (f"K is singular ({why}; no pivot was small enough to need a shift); restrain the "
                "rigid-body modes or mechanisms first")
    return (f"K is singular: the factorization needed a shift ({fac.shift:.1e}); restrain the rigid-body "
            "modes or mechanisms first")


def _placeholder_rows(structure) -> NDArray[np.intp]:
    """Rows the structure stage recognised as placeholders of restrained DOFs (none without it)."""
    if structure is None:
        return np.zeros(0, dtype=np.intp)
    return np.asarray(structure.placeholder_rows, dtype=np.intp)


# ------------------------------------------------------------------- audit
#: A supplied solution whose backward error exceeds this multiple of what K
#: allows (the tool's own solve, at least u) does not solve K x = f.
FIT_FACTOR = 100.0


#: A supplied solution fits at the precision it was written in when its
#: backward error is at most this multiple of the largest one rounding an
#: exact solution to that precision causes (plus the own solve's). Rounding
#: alone stays below 1 times the bound (it is a rigorous bound); the margin is
#: for a solve done in that precision, whose residual is a few times larger.
#: The project's choice, tuned on: float32 sparse LU solves (scipy, with and
#: without pivoting) of 18 public matrices (bcsstk01-22, nos1, nos3, plat362,
#: LF10, bcsstm07) reached at most 10.1 (bcsstk14); 6-figure solutions of the
#: footbridge's other load cases reached 119 and 2,700, a permuted one 1e7.
WRITTEN_FIT_FACTOR = 16.0
#: Unit round-off of IEEE 754 binary32 (single precision).
U32 = 2.0 ** -24


@dataclass(frozen=True)
class WrittenPrecision:
    """The precision a vector was written in, read from its values."""

    kind: str
    """``float32`` or ``decimal``."""
    digits: float
    """Significant decimal digits of that precision (p, or log10(2^24))."""
    rounding: NDArray[np.float64]
    """(n,) bound on |x_written,i - x_i| for the x that was rounded (units of x)."""


def written_precision(values: NDArray[np.float64], sample: int = 2000) -> Optional[WrittenPrecision]:
    """The precision the values were written in, and the rounding bound of each entry.

    * ``float32``: every entry is a single-precision number (rounding of the
      written value: at most 2^-24 relative, IEEE 754 round to nearest), or
      each of up to ``sample`` sampled entries is the shortest or the
      9-figure decimal form of one (at most 2^-23: the rounding to float32
      and that of its printing, half a float32 unit each);
    * ``decimal``: :func:`digits_written` p significant figures:
      |e_i| <= max(0.5 10^(1-p) |x_i|, 0.5 10^l), l the smallest last written
      decimal place among the sampled entries (a fixed-point format writes
      every entry to that place);
    * None: full float64 precision.

    When the values are integers or short decimals that are also float32
    numbers, the decimal reading (fewer digits, a larger rounding) wins only
    below 8 figures: 8 or 9 figures that are float32 forms read as float32.
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    finite = np.isfinite(v)
    if not finite.all():
        return None
    ax = np.abs(v)
    p = digits_written(v, sample)
    with np.errstate(over="ignore", invalid="ignore"):
        as32 = v.astype(np.float32).astype(np.float64)
    exact32 = bool(np.all(as32 == v)) and bool(np.any(v != 0))
    if p is None:
        if exact32:
            return WrittenPrecision("float32", -math.log10(U32), _up(U32 * ax, 1))
        return None
    if p in (8, 9) and _printed_float32(v, sample):
        return WrittenPrecision("float32", -math.log10(U32), _up(2.0 * U32 * ax, 1))
    last = _smallest_last_place(v, sample)
    rounding = np.maximum(0.5 * 10.0 ** (1 - p) * ax, 0.5 * 10.0 ** last if last is not None else 0.0)
    return WrittenPrecision("decimal", float(p), _up(rounding, 2))


def _sampled(v: NDArray[np.float64], sample: int) -> list[float]:
    """Up to ``sample`` nonzero finite entries, evenly spaced (the same as :func:`digits_written`)."""
    v = v[np.isfinite(v) & (v != 0)]
    if v.size > sample:
        v = v[np.linspace(0, v.size - 1, sample).astype(np.intp)]
    return v.tolist()


def _printed_float32(v: NDArray[np.float64], sample: int) -> bool:
    """True when each sampled entry is a float32 number printed shortest or with 9 figures."""
    values = _sampled(v, sample)
    for value in values:
        if not abs(value) < 3.4e38:
            return False
        f32 = np.float32(value)
        forms = (float(f32), float(np.format_float_scientific(f32, unique=True)), float(f"{float(f32):.8e}"))
        if value not in forms:
            return False
    return bool(values)


def _smallest_last_place(v: NDArray[np.float64], sample: int) -> Optional[int]:
    """The smallest decimal exponent of a last written digit among the sampled entries."""
    places = []
    for value in _sampled(v, sample):
        for d in range(1, 18):
            text = f"{value:.{d - 1}e}"
            if float(text) == value:
                places.append(int(text.split("e")[1]) - (d - 1))
                break
    return min(places) if places else None


def _written_fit(op, x, f, eta: float, allowed: float):
    """(precision, its backward-error bound, fits as written) of a supplied solution."""
    wp = written_precision(x)
    if wp is None:
        return None, None, False
    norm_K = float(np.max(abs(op.K) @ np.ones(op.n)))
    denom = norm_K * float(np.max(np.abs(x))) + float(np.max(np.abs(f)))
    bound = _up(float(np.max(abs(op.K) @ wp.rounding)), 4) / denom if denom > 0 else math.inf
    return wp, bound, bool(eta <= WRITTEN_FIT_FACTOR * (bound + allowed))


def _audit(op, solution: DigitsSample, own: DigitsSample, case: Optional[str] = None) -> SolutionAudit:
    """Compare the supplied solution's backward error with the tool's own solve's (same load
    case), and with what rounding to the precision it was written in allows."""
    eta, allowed = float(solution.backward_error), float(own.backward_error)
    working = bool(eta <= FIT_FACTOR * max(allowed, U))
    wp, bound, as_written = _written_fit(op, solution.solution, solution.load_vector, eta, max(allowed, U))
    return SolutionAudit(
        backward_error=eta, allowed_backward_error=allowed,
        fits=working or as_written,
        digits_written=digits_written(solution.solution),
        free_mode_share=None, load_free_mode_share=None,
        trustworthy_digits=solution.trustworthy_digits, method=solution.method, case=case,
        written_as=None if wp is None else wp.kind, written_digits=None if wp is None else wp.digits,
        written_backward_error=bound, fits_as_written=as_written)


def audit_singular_solutions(model: Model, spectrum: Optional[SpectrumResult], structure) -> list[SolutionAudit]:
    """:func:`audit_singular_solution` for every column of a supplied solution (one per load case).

    Returns
    -------
    list of SolutionAudit
        In column order, each naming its ``case`` (None for a single load).
    """
    X = np.asarray(model.solution, dtype=np.float64)
    if X.ndim == 1:
        return [audit_singular_solution(model, spectrum, structure)]
    n, m = X.shape
    F = np.zeros((n, m)) if model.load is None else np.asarray(model.load, dtype=np.float64).reshape(n, -1)
    names = model.load_names or tuple(f"load-{k + 1}" for k in range(m))
    return [audit_singular_solution(replace(model, solution=X[:, k], load=F[:, k], load_names=()),
                                    spectrum, structure, case=names[k]) for k in range(m)]


def audit_singular_solution(model: Model, spectrum: Optional[SpectrumResult], structure,
                            case: Optional[str] = None) -> SolutionAudit:
    """Audit a supplied solution of a singular K: how much of it K does not determine.

    Any multiple of a free mode (rigid-body mode, mechanism, DOF without
    stiffness) can be added to a solution of K x = f, so the component of
    x_s along the free modes is arbitrary: x_s keeps at most
    -log10(||P x_s||_inf / ||x_s||_inf) digits, P the orthogonal projector onto
    the free modes (an orthonormal basis from QR of the modes' vectors and the
    unit vectors of rows without stiffness). Returns the audit with
    ``allowed_backward_error`` None (there is no own solve to compare with).
    """
    x = np.asarray(model.solution, dtype=np.float64)
    n = x.size
    cols = [np.asarray(m.vector, dtype=np.float64) for m in (spectrum.modes if spectrum is not None else [])
            if m.exact and m.vector is not None]
    empty = np.zeros(0, dtype=np.intp) if structure is None else np.asarray(structure.empty_rows, dtype=np.intp)
    for r in empty:
        e = np.zeros(n)
        e[r] = 1.0
        cols.append(e)
    op = dd_operator(sp.csr_array(model.K))
    f = np.zeros(n) if model.load is None else np.asarray(model.load, dtype=np.float64)
    r_hi, r_lo = dd_residual(op, x, None, f)
    eta = _backward_error(op, x, f, r_hi + r_lo)
    share = load_share = None
    if cols:
        Q, _ = np.linalg.qr(np.column_stack(cols))
        x_max = float(np.max(np.abs(x)))
        share = float(np.max(np.abs(Q @ (Q.T @ x)))) / x_max if x_max > 0 else 0.0
        f_max = float(np.max(np.abs(f)))
        load_share = float(np.max(np.abs(Q @ (Q.T @ f)))) / f_max if f_max > 0 else None
    trust = _digits(share) if share is not None else 0.0
    wp, bound, as_written = _written_fit(op, x, f, eta, U)
    return SolutionAudit(
        written_as=None if wp is None else wp.kind, written_digits=None if wp is None else wp.digits,
        written_backward_error=bound, fits_as_written=as_written,
        backward_error=eta, allowed_backward_error=None,
        fits=bool(eta <= FIT_FACTOR * U) or as_written, digits_written=digits_written(x),
        free_mode_share=share, load_free_mode_share=load_share, trustworthy_digits=trust,
        method="bound: K is singular, so the solution's component along the free modes is arbitrary; "
               "digits = -log10 of that component's share of the solution", case=case)


def digits_written(values: NDArray[np.float64], sample: int = 2000) -> Optional[int]:
    """Significant decimal digits the values were written with, or None when 17 (full float64).

    The most any of up to ``sample`` nonzero entries (evenly spaced) needs to be
    reproduced exactly: a file written with 7 significant figures gives 7.
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v) & (v != 0)]
    if v.size > sample:
        v = v[np.linspace(0, v.size - 1, sample).astype(np.intp)]
    most = 0
    for value in v.tolist():
        for d in range(1, 18):
            if float(f"{value:.{d - 1}e}") == value:
                most = max(most, d)
                break
        else:
            return None
        if most >= 17:
            return None
    return most or None


# ------------------------------------------------------------------- loads
def _loads(model: Model, fac, spectrum, samples: int, rng: np.random.Generator, placeholders=None):
    """Sample names, the (n, k) load block, and the user's load cases.

    Returns
    -------
    names : list of str
    F : (n, k) float64, force units
    cases : list of (str or None, int)
        For each of the first ``len(cases)`` columns of F, the load case's
        name (None for a single load vector) and its column in the user's
        load (and solution); zero load cases are left out.
    """
    n = model.n
    tool_scale = _tool_load_scale(model.K)   # 1.0 but for K's entries beyond 2**+-LOAD_EXPONENT
    names, cols, cases = [], [], []
    if model.load is not None:
        L = np.asarray(model.load, dtype=np.float64)
        labels = [None] if L.ndim == 1 else list(model.load_names or (f"load-{k + 1}" for k in range(L.shape[1])))
        for k, label in enumerate(labels):
            f = L.reshape(n, -1)[:, k]
            if not np.any(f):
                logger.warning("the load %s is zero: no displacement to measure; it is left out",
                               "vector" if label is None else f"case '{label}'")
                continue
            names.append("load" if label is None else label)
            cols.append(f * load_scale(f))
            cases.append((label, k))
    for k in range(samples):
        names.append(f"random-{k + 1}")
        f = rng.standard_normal(n)
        if placeholders is not None and len(placeholders):
            f[np.asarray(placeholders, dtype=np.intp)] = 0.0
        cols.append(f * tool_scale)
    mode = worst_case_load(model.K, fac, spectrum)
    if mode is not None:
        names.append("worst-case")
        cols.append(mode * tool_scale)
    return names, np.column_stack(cols), cases


#: A load whose largest entry lies beyond 2**±LOAD_EXPONENT (about 1e150) is measured scaled by
#: a power of two to a largest entry of 1 (exact; the digits are relative, so they do not change),
#: so that the displacements stay within float64 (a 1e300 load on a kappa 1e13 model would give
#: 1e313). The project's choice; every other load is measured as given.
LOAD_EXPONENT = 500


def load_scale(f) -> float:
    """The power of two a load (and its audited solution) is multiplied by before measuring: 1.0 usually."""
    big = float(np.max(np.abs(f), initial=0.0))
    if big == 0.0 or not math.isfinite(big) or abs(math.frexp(big)[1]) <= LOAD_EXPONENT:
        return 1.0
    return math.ldexp(1.0, -math.frexp(big)[1])


def _tool_load_scale(K) -> float:
    """A power of two for the tool's own loads (random, worst-case) when K's largest entry 2**e
    lies beyond 2**+-LOAD_EXPONENT: 2**(e -+ LOAD_EXPONENT), so that the loads and K^-1 f both stay
    within about 2**+-530 (K subnormal, about 1e-310: no overflow; K about 1e308: no underflow);
    1.0 for every other K."""
    K = sp.csr_array(K)
    big = float(np.max(np.abs(K.data), initial=0.0))
    e = math.frexp(big)[1] if big and math.isfinite(big) else 0
    if abs(e) <= LOAD_EXPONENT:
        return 1.0
    return math.ldexp(1.0, e - LOAD_EXPONENT if e > 0 else e + LOAD_EXPONENT)


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
        # Not a warning: the report says it in each sample's confirmation, and
        # the digits still rest on refinement (and on the eigenvalue proof).
        logger.info("arbitrary-precision re-solve failed: %s", exc)
        return None, f"arbitrary-precision re-solve failed ({exc})"


def _sample(model: Model, op, name, f, x, ref: RefinementResult, conf: Optional[ReferenceSolution], j: int,
            why_not: str = "", measured_rows: Optional[NDArray[np.bool_]] = None) -> DigitsSample:
    """Measure one sample: forward error, digits (from an upper bound), per DOF, bounds.

    ``measured_rows`` leaves placeholder rows out of the normwise figure (their
    displacement is not the structure's); None measures every row. The
    refined solution and the load are kept on the sample, so that
    :func:`certify_digits` can prove the figure later, after the shared
    factorization is released.
    """
    rows = np.ones(x.size, dtype=bool) if measured_rows is None else measured_rows
    x_hi, x_lo, method = ref.x_hi, ref.x_lo, "double-double refinement"
    rad = None
    if conf is not None:
        c_hi, c_lo = conf.x_hi[:, j], conf.x_lo[:, j]
        scale = float(np.max(np.abs(c_hi[rows]), initial=0.0))
        gap = float(np.max(np.abs((ref.x_hi - c_hi) + (ref.x_lo - c_lo))[rows], initial=0.0)) / scale
        x_hi, x_lo = c_hi, c_lo
        method = CERTIFIED_BALL if conf.method == "certified" else conf.method
        if conf.radius is not None:
            rad = conf.radius[:, j]
            resolution = float(np.max(rad[rows], initial=0.0)) / scale + 2 * U**2
            # The certified radius plus the double-double rounding of its midpoint.
            ref_abs = _up(rad, 1) + 2 * U**2 * np.abs(c_hi)
        else:
            resolution = max(2 * U**2, ref.kappa_normwise * 10.0 ** -_digits_of(conf.engine))
            ref_abs = np.full(x.size, resolution * scale)
        note = (f"{conf.engine}: double-double refinement agrees to a relative {gap:.1e} "
                f"({'within' if gap <= max(ref.error_estimate, resolution) else 'OUTSIDE'} its estimate "
                f"{ref.error_estimate:.1e})")
        converged = True
    else:
        scale = float(np.max(np.abs(ref.x_hi[rows]), initial=0.0))
        resolution = ref.error_estimate
        ref_abs = np.full(x.size, resolution * scale)
        converged = ref.converged
        note = (f"{why_not}: the figure rests on {ref.method}, {len(ref.history)} residuals, "
                f"last correction {ref.history[-1].correction_norm:.1e}"
                if ref.history else f"{why_not}; no refinement step")
    err_vec = np.abs((x - x_hi) - x_lo)
    forward = float(np.max(err_vec[rows], initial=0.0)) / scale if scale > 0 else math.inf
    # Upper bound on |x - x_exact| per component: the measured gap (three
    # rounded operations) plus the reference's own error.
    err_up = _up(err_vec, 3) + ref_abs
    # Lower bound on ||x_exact||_inf over the measured rows.
    scale_lo = scale - float(np.max(ref_abs[rows], initial=0.0))
    upper = _up(float(np.max(err_up[rows], initial=0.0)) / scale_lo, 2) if scale_lo > 0 else math.inf
    trust = _digits(upper)
    at_ceiling = forward <= resolution
    per_dof = _per_dof_digits(model, err_up, x_hi, resolution)
    r_hi, r_lo = dd_residual(op, x, None, f)
    backward = _backward_error(op, x, f, r_hi + r_lo)
    reason = ref.stop_reason
    if converged and not ref.converged:  # the figure rests on the re-solve, not on the refinement
        reason = f"refinement stopped ({reason}); the figure rests on the {method} re-solve"
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
        resolution=resolution, at_ceiling=at_ceiling, backward_error=backward, solution=x,
        load_vector=f, reference_hi=ref.x_hi, reference_lo=ref.x_lo,
    )


def certify_digits(model: Model, digits: DigitsResult, condition: Optional[ConditionResult],
                   perm: Optional[NDArray[np.intp]], structure=None, *, factor_entries: Optional[int] = None,
                   memory_limit: Optional[int] = None,
                   verified: Optional[VerifiedEigenvalueBound] = None,
                   smallest_vector: Optional[NDArray[np.float64]] = None) -> DigitsResult:
    """Prove the measured figures with the verified eigenvalue bound.

    Run after the shared factorization is released: the proof's own
    factorization of the shifted scaled K (reusing the shared ordering
    ``perm``) is then the only factor in memory; it is not attempted when
    that factor (``factor_entries`` entries, the shared one's fill) and the
    copies of it the proof reads would exceed ``memory_limit`` bytes
    (:func:`conditioning.engine.memory.refactorization_bytes`). Every sample not already
    certified by the ball-arithmetic re-solve is re-derived from the proved
    error bound of its refined solution (:func:`certified_errors`).

    Returns
    -------
    DigitsResult
        ``digits`` with those samples certified (method
        ``certified (verified eigenvalue bound)``) when the bound was proved,
        and ``certification`` saying what was proved or why not. A bound
        already ``verified`` (the support proof's) is reused, not paid twice;
        ``smallest_vector`` (S's smallest eigenvector) sharpens the shift.
    """
    if not digits.samples:
        return digits
    K = sp.csr_array(model.K)
    if verified is not None and verified.verified:
        return _certify_with(model, digits, K, verified, structure, f"{verified.reason} (the support proof's)")
    if factor_entries is not None and memory_limit is not None:
        need = refactorization_bytes(factor_entries, K.nnz)
        if need > memory_limit:
            return replace(digits, certification=(
                f"not attempted: the proof's factorization and the copy of its factors it reads would need "
                f"about {need / 2**30:.1f} GiB, more than the {memory_limit / 2**30:.1f} GiB allowed"))
    verified, reason = _verify(K, perm, condition, smallest_vector)
    if verified is None or not verified.verified:
        return replace(digits, certification=reason)
    return _certify_with(model, digits, K, verified, structure, reason)


def _certify_with(model: Model, digits: DigitsResult, K, verified: VerifiedEigenvalueBound, structure,
                  reason: str) -> DigitsResult:
    """``digits`` with every sample not certified by ball arithmetic re-derived from ``verified``."""
    placeholders = _placeholder_rows(structure)
    rows = np.ones(model.n, dtype=bool)
    rows[placeholders] = False
    op = dd_operator(K)
    samples = [s if s.method == CERTIFIED_BALL else _certified(model, op, s, rows, verified)
               for s in digits.samples]
    n_cases = _case_count(model, samples)
    samples = _cases_first(samples, n_cases)
    by_name = {s.sample: s for s in samples if s.audited}
    audits = []
    for audit in digits.audits:
        solution = by_name.get(_solution_name(audit.case))
        if solution is not None:
            audit = replace(audit, trustworthy_digits=solution.trustworthy_digits,
                            method=solution.method)
        audits.append(audit)
    audits = _worst_first(audits)
    return replace(digits, samples=samples, audit=audits[0] if audits else None, audits=audits,
                   certification=reason,
                   summary=_summary([x for x in samples if x.solver_kind == digits.headline_solve],
                                    digits.predicted_raw, digits.predicted_scaled,
                                    digits.factorization_flops))


def _certified(model: Model, op, s: DigitsSample, rows, verified) -> DigitsSample:
    """The sample re-derived from the proved error bound of its refined solution."""
    ref = _Reference(s.reference_hi, s.reference_lo)
    proof = _eigenvalue_proof(op, s.load_vector, s.solution, ref, rows, verified)
    if proof is None:
        return s
    err_up, upper, cert, scale = proof
    trust = _digits(upper)
    resolution = float(np.max(cert[rows], initial=0.0)) / scale
    forward = float(np.max(np.abs((s.solution - ref.x_hi) - ref.x_lo)[rows], initial=0.0)) / scale
    per_dof = _per_dof_digits(model, err_up, ref.x_hi, resolution)
    with np.errstate(divide="ignore", invalid="ignore"):
        cw = cert / np.abs(ref.x_hi)
    return replace(
        s, trustworthy_digits=trust, digits_lost=FLOAT64_DIGITS - trust, method=CERTIFIED_EIGENVALUE,
        converged=True, worst_nodes=_worst_nodes(model, per_dof), normwise_bound=float(np.max(cert)) / scale,
        componentwise_bound=float(np.max(cw)) if np.all(ref.x_hi != 0) else None, bound_trusted=True,
        per_dof_digits=per_dof, forward_error=forward, resolution=resolution, at_ceiling=forward <= resolution)


def _case_count(model: Model, samples: list[DigitsSample]) -> int:
    """How many of the first samples are the user's load cases."""
    names = {"load"} if model.load is None or np.ndim(model.load) == 1 else set(model.load_names)
    count = 0
    for s in samples:
        if s.audited or s.sample not in names:
            break
        count += 1
    return count


@dataclass(frozen=True)
class _Reference:
    """The refined solution x_hi + x_lo of one sample."""

    x_hi: NDArray[np.float64]
    x_lo: NDArray[np.float64]


def _eigenvalue_proof(op, f, x, ref, rows, verified):
    """(err_up, upper, |x_r - x_exact| bound, ||x_r||) from the verified eigenvalue bound, or None.

    err_up bounds |x - x_exact| per component; upper bounds the normwise
    relative error over ``rows`` (see :func:`certified_errors`).
    """
    if verified is None or not verified.verified:
        return None
    r_hi, r_lo = dd_residual(op, ref.x_hi, ref.x_lo, f)
    cert = certified_errors(op.K, verified.scale, verified.lower, f, ref.x_hi, ref.x_lo, r_hi, r_lo)
    err_up = _up(np.abs((x - ref.x_hi) - ref.x_lo), 3) + cert
    scale = float(np.max(np.abs(ref.x_hi[rows]), initial=0.0))
    scale_lo = scale - float(np.max((cert + np.abs(ref.x_lo))[rows], initial=0.0))
    if not scale_lo > 0:
        return None
    upper = _up(float(np.max(err_up[rows], initial=0.0)) / scale_lo, 2)
    return err_up, upper, cert, scale


def _backward_error(op, x, f, r) -> float:
    """Normwise backward error ||r||_inf / (||K||_inf ||x||_inf + ||f||_inf) (dimensionless)."""
    norm_K = float(np.max(abs(op.K) @ np.ones(op.n)))
    denom = norm_K * float(np.max(np.abs(x))) + float(np.max(np.abs(f)))
    return float(np.max(np.abs(r))) / denom if denom > 0 else math.inf


def _digits(relative_error: float) -> float:
    """-log10 of an upper bound on a relative error, rounded down to 0.1 digit.

    Returns
    -------
    float
        Significant digits in [0, 15.9], a multiple of 0.1; 0 when the error
        is unknown (inf/nan) or not below 1. A float64 number carries at most
        log10(2^53) = 15.95 digits: an error below u is rounding luck and is
        not reported as more digits, and 15.95 shows as 15.9.
    """
    if not math.isfinite(relative_error) or relative_error >= 1.0:
        return 0.0
    t = FLOAT64_DIGITS if relative_error <= 0.0 else -math.log10(relative_error)
    return floor_tenth(min(t, FLOAT64_DIGITS))


def floor_tenth(digits: float) -> float:
    """``digits`` rounded down to a multiple of 0.1, robust to log10's own rounding.

    log10 is accurate to a few ulps, so a value a few ulps above a tenth
    (13.6000000000000002) is taken as that tenth only after a margin of
    1e-12 digit is subtracted: the figure can only move down.
    """
    return math.floor(digits * 10.0 - 1e-11) / 10.0 if digits > 0 else 0.0


def _up(value: float, ops: int = 4) -> float:
    """``value`` enlarged by ``ops`` roundings of float64 (an upper bound on a
    quantity computed with that many rounded operations)."""
    return value * (1.0 + 2.0 * ops * U) + 4.9e-324


def _digits_of(engine: str) -> int:
    """Decimal digits of an mpmath engine description ``"... (NN digits)"``."""
    try:
        return int(engine.rsplit("(", 1)[1].split()[0])
    except (IndexError, ValueError):
        return 30


# ----------------------------------------------------------------- per dof
#: A component below this fraction of its reference magnitude is negligible:
#: its digits are measured against that reference instead (a thousandth: the
#: third significant figure of the larger quantity, common practice).
NEGLIGIBLE = 1e-3


def component_scale(model: Model, x: NDArray[np.float64]) -> NDArray[np.float64]:
    """The magnitude each component's digits are measured against (units of x).

    For row i of DOF kind k (translations and rotations are separate kinds:
    their units differ) at node p:

        node_i  = max(max |x_j| over p's DOFs of kind k, NEGLIGIBLE * max |x_j| over all DOFs of kind k)
        scale_i = max(|x_i|, NEGLIGIBLE * node_i)

    So a component is measured against its own magnitude unless it is
    negligible (below a thousandth) against its node's displacement, and a
    node's displacement never counts as less than a thousandth of the largest
    one of its kind in the model. Without a DOF map each row is its own node
    and all rows are one kind. Zero where the whole kind is zero.
    """
    ax = np.abs(np.asarray(x, dtype=np.float64))
    if model.dofs is None:
        kind = np.zeros(ax.size, dtype=np.intp)
        node = np.arange(ax.size)
    else:
        kind = (np.asarray(model.dofs.dof) >= 3).astype(np.intp)  # 0-2 translations, 3-5 rotations
        _, node = np.unique(model.dofs.node, return_inverse=True)
    kind_max = np.zeros(2)
    np.maximum.at(kind_max, kind, ax)
    key = node * 2 + kind
    node_max = np.zeros(2 * (int(node.max(initial=0)) + 1))
    np.maximum.at(node_max, key, ax)
    node_ref = np.maximum(node_max[key], NEGLIGIBLE * kind_max[kind])
    return np.maximum(ax, NEGLIGIBLE * node_ref)


def _per_dof_digits(model: Model, err_up, x_ref, resolution) -> NDArray[np.float64]:
    """Digits of each component (rounded down to 0.1), from an upper bound
    ``err_up`` on its absolute error, against :func:`component_scale`."""
    n = err_up.size
    if not math.isfinite(resolution):
        return np.zeros(n)
    ref_scale = component_scale(model, x_ref)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = _up(err_up / ref_scale, 1)
        digits = np.where(rel > 0, -np.log10(np.where(rel > 0, rel, 1.0)), FLOAT64_DIGITS)
    digits = np.where(ref_scale > 0, digits, FLOAT64_DIGITS)
    digits = np.clip(np.nan_to_num(digits, nan=0.0, posinf=FLOAT64_DIGITS), 0.0, FLOAT64_DIGITS)
    return np.floor(digits * 10.0 - 1e-11).clip(min=0.0) / 10.0


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
    own = [s for s in samples if not s.audited]  # a supplied solution is audited on its own
    if not own:
        return "No load sample could be measured."
    worst = min(own, key=lambda s: s.trustworthy_digits)
    t = worst.trustworthy_digits
    head = (f"The float64 solution ({'pivoted LU' if worst.solver_kind == PIVOTED else 'symmetric solve'}) keeps at least {t:.1f} trustworthy digits, normwise (relative to the "
            f"largest displacement; worst sample '{worst.sample}')")
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
