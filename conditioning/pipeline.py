"""The diagnosis as one call, one path: input -> structure -> stiffness jumps
-> factorization -> spectrum -> modes -> condition -> restraints -> diagonal
pivots -> digits -> inertia check -> findings -> report.

Each stage is a module of its own with a typed result; this module only
sequences them, times them and hands progress to the caller. It never prints.

When the factorization cannot run (the factor would not fit in memory) the
same sequence runs without it: the spectrum stage obtains its eigenpairs by
LOBPCG instead, the condition stage gives the scaled figure only, and the
stages that need the factor (pivots, digits, inertia check) are
left as None with why in ``Report.skipped`` (the one convention: a stage
that did not run is None and ``Report.skipped[stage]`` says why; a stage
that ran and found nothing to measure says so in its own result, as
``DigitsResult.skipped`` does for a singular K). When a penalty has
swallowed the structure, the same sequence runs on the rest of K with the
linked rows held (:mod:`conditioning.stages.penalty`).
"""

from __future__ import annotations

import logging
import time
from contextlib import contextmanager
from dataclasses import dataclass, replace
from typing import Callable, Optional, Union

import numpy as np

from conditioning.engine import engine_named
from conditioning.engine.base import Engine, FactorizationTooLarge
from conditioning.engine.memory import memory_limit as default_memory_limit
from conditioning.engine.memory import refactorization_bytes
from conditioning.engine.scaling import scale_stiffness
from conditioning.errors import InputError
from conditioning.io.load import load_model
from conditioning.io.saved_report import read_saved_report
from conditioning.stages.geometry import model_geometry
from conditioning.model import DOF_NAMES, Model, matrix_fingerprint
from conditioning.results import Finding, ModelSummary, Report, Restraint, RowExplanation
from conditioning.stages.condition import condition_numbers
from conditioning.stages.digits import certify_digits, measure_digits
from conditioning.stages.explain import explain_row, explain_saved_row, with_row_shares
from conditioning.stages.element_quality import check_elements
from conditioning.stages.findings import build_findings, verdict, verdict_with_geometry
from conditioning.stages.node_geometry import WHY_NOT_RUN, check_node_geometry
from conditioning.stages.jumps import find_stiffness_jumps
from conditioning.stages.modes import ZERO_ROOM, locate_modes
from conditioning.stages.negative_modes import locate_negative_modes
from conditioning.stages.penalty import hold_swallowed, restore_report, swallowed_rows
from conditioning.stages.pivots import pivot_loss, pivots_unavailable
from conditioning.stages.restraints import merging_first, suggest_restraints
from conditioning.stages.spectrum import (MIN_GAP, confirm_largest, confirm_smallest, inertia_check, smallest_eigenpairs,
                                          spectrum_result, with_inertia, with_low_end_search)
from conditioning.linalg.rigid_motions import rigid_motions
from conditioning.stages.structure import check_structure
from conditioning.stages.support_proof import PROVED, RESOLUTION_ROOM, UNDECIDED, claims_zero, decide_support

logger = logging.getLogger(__name__)

#: progress(stage, fraction or None): called when a stage starts (None) and ends (1.0).
ProgressCallback = Callable[[str, Optional[float]], None]


class _Stages:
    """Times each stage and reports it to the progress callback."""

    def __init__(self, progress: Optional[ProgressCallback]):
        self.progress = progress
        self.timings: dict[str, float] = {}

    @contextmanager
    def __call__(self, name: str):
        if self.progress:
            self.progress(name, None)
        t0 = time.perf_counter()
        try:
            yield
        finally:
            self.timings[name] = time.perf_counter() - t0
            logger.info("stage %s: %.2f s", name, self.timings[name])
            if self.progress:
                self.progress(name, 1.0)


def _row_coordinates(model: Model) -> Optional[np.ndarray]:
    if model.coords is None or model.dofs is None:
        return None
    return model.coords.lookup(model.dofs.node)


def summarize(model: Model) -> ModelSummary:
    """What was read: sizes, map, coordinates, vectors, provenance notes."""
    return ModelSummary(
        source=model.source,
        rows=model.n,
        stored_entries=int(model.K.nnz),
        nodes=None if model.dofs is None else int(model.dofs.nodes.size),
        dim=None if model.coords is None else int(model.coords.dim),
        dof_types=[] if model.dofs is None else [DOF_NAMES[t] for t in model.dofs.dof_types],
        has_load=model.load is not None,
        has_solution=model.solution is not None,
        restrained=model.restrained,
        notes=list(model.notes),
        fingerprint=matrix_fingerprint(model.K),
    )


def diagnose(
    matrix: Union[Model, str, object],
    *,
    dofs=None,
    dofs_per_node: Optional[int] = None,
    coords=None,
    load=None,
    solution=None,
    fix=None,
    elements=None,
    basis=None,
    mesh=None,
    samples: int = 3,
    seed: int = 0,
    min_digits: float = 4.0,
    ordering="auto",
    measure: bool = True,
    memory_limit: Optional[int] = None,
    progress: Optional[ProgressCallback] = None,
    engine: Union[Engine, str, None] = None,
) -> Report:
    """Diagnose a stiffness matrix: supports, modes, condition, jumps, digits.

    Parameters
    ----------
    matrix : Model, path, or sparse/dense matrix
        A :class:`~conditioning.model.Model`, or anything
        :func:`conditioning.load_model` reads (then ``dofs`` ... ``fix`` are
        passed to it).
    samples : int
        Number of seeded random loads for the digits measurement.
    seed : int
        Seed of the run's one random generator (``numpy.random.default_rng``),
        recorded in the report: the digits' random loads are drawn from it,
        and the start vectors of the eigensolvers and of the 1-norm estimator
        from streams spawned from it (``Generator.spawn``), so the same seed
        repeats every figure.
    min_digits : float
        Fewer measured trustworthy digits than this is an error finding.
    ordering : "auto", a SuperLU ordering name, or a callable
        Fill-reducing ordering of the shared factorization (scipy engine).
    measure : bool
        Measure digits in extended precision (the slowest stage after the
        factorization); False skips it.
    memory_limit : int, optional
        Bytes the factorization may use (default: ``CONDITIONING_MEMORY_LIMIT``
        or a share of the available memory). When the factor's predicted size
        exceeds it, the spectrum is computed without a factorization (LOBPCG)
        and the report says what that path could not do.
    progress : callable, optional
        ``progress(stage, fraction)``, for progress bars.
    engine : Engine or "scipy" or "petsc", optional
        The sparse direct solver (:class:`conditioning.engine.base.Engine`),
        or its name (:func:`conditioning.engine.engine_named`); default
        :class:`conditioning.engine.scipy_engine.ScipyEngine` with
        ``ordering``. With "petsc" (MUMPS and SLEPc) run this call on every
        rank of ``mpiexec`` with the same model: the report is the same on
        every rank.

    Returns
    -------
    Report
        Every stage's result; a stage that could not run is None and
        ``Report.skipped`` says why.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp, conditioning
    >>> K = sp.diags([-np.ones(9), 2 * np.ones(10), -np.ones(9)], [-1, 0, 1])
    >>> report = conditioning.diagnose(K, measure=False)
    >>> round(report.condition.estimate, 3)    # cot^2(pi/22), closed form
    48.374
    """
    stage = _Stages(progress)
    if isinstance(matrix, Model):
        model = matrix
    else:
        with stage("reading"):
            model = load_model(matrix, dofs=dofs, dofs_per_node=dofs_per_node, coords=coords,
                               load=load, solution=solution, fix=fix, elements=elements,
                               basis=basis, mesh=mesh)
    run = _Run(
        stage=stage, rng=np.random.default_rng(seed), seed=seed, samples=samples, min_digits=min_digits,
        measure=measure, memory_limit=default_memory_limit() if memory_limit is None else memory_limit,
        engine=_engine(engine, ordering),
    )
    with stage("structure"):
        structure = check_structure(model)
    with stage("stiffness jumps"):
        jumps = find_stiffness_jumps(model, structure)
    held = swallowed_rows(jumps)
    if held.size == 0:
        report = _analyse(model, structure, jumps, run)
    else:
        # A penalty has swallowed the structure: diagnose the rest with the linked
        # rows held (conditioning.stages.penalty says why that is the honest choice).
        rest, keep = hold_swallowed(model, held)
        with stage("structure"):
            rest_structure = check_structure(rest)
        inner = _analyse(rest, rest_structure, find_stiffness_jumps(rest, rest_structure), run)
        report = restore_report(model, structure, summarize(model), jumps, inner, keep, min_digits=min_digits)
    # The rows that carry each mode, in the whole model's numbering, so that a
    # row can be explained later from the saved report (explain_from_report).
    return replace(report, spectrum=with_row_shares(report.spectrum, model.K.diagonal()))


def _engine(engine: Union[Engine, str, None], ordering) -> Engine:
    """diagnose's ``engine`` argument as an engine: a name is made, with ``ordering`` for scipy's."""
    if engine is None or engine == "scipy":
        return engine_named("scipy", ordering=ordering)
    return engine_named(engine) if isinstance(engine, str) else engine


@dataclass
class _Run:
    """What every stage of one diagnosis shares: options, timer and the one generator."""

    stage: _Stages
    rng: np.random.Generator
    seed: int
    samples: int
    min_digits: float
    measure: bool
    memory_limit: int
    engine: Engine


def _spawn(rng: np.random.Generator, n: int) -> list[np.random.Generator]:
    """``rng.spawn(n)``: n independent child generators (the same streams on numpy 1.24,
    which the PETSc engine's environment runs and which lacks ``Generator.spawn``)."""
    if hasattr(rng, "spawn"):
        return rng.spawn(n)
    bits = rng.bit_generator
    return [np.random.Generator(type(bits)(seed)) for seed in bits._seed_seq.spawn(n)]


#: What the diagnosis loses without a factorization: stage -> what is missing, and why.
WITHOUT_FACTORIZATION = {
    "inertia check": "no inertia count: the number of near-singular modes rests on the eigenvalue gap alone, "
                     "not confirmed by Sylvester's law of inertia",
    "digits": "no digits measurement: there is no factorization to solve with",
    "pivots": "no figure of the digits lost at pivots: without a factorization there are no pivots",
}


def _analyse(model: Model, structure, jumps, run: _Run) -> Report:
    """The stages after the structure checks, in order, with or without a factorization."""
    stage, K = run.stage, model.K
    skipped: dict[str, str] = {}
    scaled = scale_stiffness(K, structure.empty_rows)
    fac = too_large = None
    try:
        with stage("factorization"):
            fac = run.engine.factorize(scaled, coords=_row_coordinates(model), memory_limit=run.memory_limit)
    except FactorizationTooLarge as exc:
        too_large = exc
        alone = exc.prediction.bytes - exc.prediction.pivot_read_bytes
        skipped["factorization"] = (f"the factor would need about {alone / 2**30:.1f} GiB "
                                    f"({exc.prediction.method}), more than the {exc.limit / 2**30:.1f} GiB allowed")
        skipped.update(WITHOUT_FACTORIZATION)
    # Independent streams for the stages that draw start vectors, so that the
    # random loads (drawn from run.rng itself) do not move when they change.
    spectrum_rng, condition_rng, low_end_rng, negative_rng = _spawn(run.rng, 4)
    with stage("spectrum"):
        eig = smallest_eigenpairs(scaled, fac, model=model, rng=spectrum_rng)
    if fac is not None and not fac.info.pivots_note and (
            refactorization_bytes(fac.info.fill, scaled.S.nnz) * COEXISTING_FACTORS <= run.memory_limit):
        with stage("smallest eigenvalue check"):
            eig = confirm_smallest(eig, scaled, fac, rng=spectrum_rng)
    # lambda_max(S) by the Kuczynski-Wozniakowski stopping test: products with S only, no
    # factorization, so run whatever the memory.
    with stage("largest eigenvalue bound"):
        eig = confirm_largest(eig, scaled, fac, rng=spectrum_rng)
    support, proof, levels = _decide_support(model, structure, scaled, eig, fac, run, skipped)
    if support is not None and support.outcome in (PROVED, UNDECIDED) and (fac.singular or fac.shift != 0.0):
        # Proved positive definite, or resolved by the stored K: the shifted factor
        # (the pivot test's worst-case level) is replaced by S's own, so that the
        # digits are measured.
        fac.release()
        with stage("factorization"):
            try:
                fac = run.engine.factorize(scaled, shift=0.0, coords=_row_coordinates(model),
                                           memory_limit=run.memory_limit)
            except RuntimeError:  # exactly singular after all: the shift policy's factor again
                fac = run.engine.factorize(scaled, coords=_row_coordinates(model), memory_limit=run.memory_limit)
    if support is not None and support.outcome == PROVED and eig.count and (eig.gap is None or eig.gap < MIN_GAP):
        # Proved positive definite and no spectral gap: the eigenvalues that only the
        # n eps rule put near zero are a slender or graded structure's stiffness, not modes.
        eig = replace(eig, count=0, gap=None, split_point=None, below_split=None)
    with stage("modes"):
        located = locate_modes(model, structure, scaled.scale, scaled.active, eig, **levels)
    with stage("condition"):
        # A DOF without stiffness or a free mode (other than such a DOF) makes K singular.
        free = sum(1 for m in located.modes if m.exact and m.kind != "dof-without-stiffness")
        condition = condition_numbers(K, fac, eig, free_modes=free, empty_rows=int(structure.empty_rows.size),
                                      no_factorization=skipped.get("factorization", ""), rng=condition_rng)
    spectrum = replace(spectrum_result(eig, located.modes, located.stiff_link_eigenvalues, scaled.active),
                       support=support)
    with stage("restraints"):
        restraints = _restraints(model, structure, located, proved=proof is not None)
    pivots = digits = None
    if fac is not None:
        if pivots_unavailable(fac):  # an engine without pivots (MUMPS through PETSc)
            skipped["pivots"] = pivots_unavailable(fac)
        else:
            with stage("pivots"):
                pivots = pivot_loss(model, fac)
        if run.measure:
            with stage("digits"):
                digits = measure_digits(model, fac, condition=condition, spectrum=spectrum, samples=run.samples,
                                        structure=structure, rng=run.rng)
        else:
            skipped["digits"] = "not requested (measure=False)"
        perm = fac.ordering_permutation()
        if fac.info.pivots_note:
            skipped["inertia check"] = (
                f"the factorization's pivots were {fac.info.pivots_note}: negative eigenvalues are those "
                "the eigensolver found near zero and those a Lanczos search of the low end of S proves, "
                "not counted by Sylvester's law of inertia")
        elif eig.split_point is not None:
            with stage("inertia check"):
                spectrum = with_inertia(spectrum, inertia_check(fac, eig))
        # The proof factors the shifted S once more: after the shared factor is
        # released, so that the two never coexist in memory.
        fac.release()
    if not spectrum.negative_exact:
        # Without an inertia count a negative eigenvalue far below zero is
        # outside the eigensolver's window: search the low end by products.
        with stage("low-end search"):
            spectrum = with_low_end_search(spectrum, scaled.S, rng=low_end_rng)
    if spectrum.negative_eigenvalues:
        with stage("negative modes"):
            spectrum = replace(spectrum, negative_modes=locate_negative_modes(
                model, scaled.scale, scaled.active, scaled.S, eig, spectrum, rng=negative_rng))
    if fac is not None:
        if digits is not None and digits.samples:
            with stage("certification"):
                digits = certify_digits(model, digits, condition, perm, structure,
                                        factor_entries=fac.info.fill, memory_limit=run.memory_limit,
                                        verified=proof, smallest_vector=spectrum.smallest_vector)
    with stage("geometry checks"):
        geometry_checks = check_elements(model, check_node_geometry(model, structure, spectrum.modes))
    if geometry_checks is None:
        skipped["geometry checks"] = WHY_NOT_RUN
    else:
        restraints = merging_first(restraints, geometry_checks, structure.part_of_row, model)
    findings = build_findings(model, structure, condition, spectrum, restraints, jumps, pivots, digits,
                              min_digits=run.min_digits, stiff_link_eigenvalues=located.stiff_link_eigenvalues,
                              geometry=geometry_checks)
    if too_large is not None:
        findings.append(_factorization_free_finding(too_large, eig.method))
    if fac is not None and fac.info.pivots_note:
        findings.append(_pivots_not_read_finding(fac.info.pivots_note, measured=bool(digits and digits.samples)))
    line, status = verdict(findings, spectrum, structure, digits, condition, min_digits=run.min_digits)
    line, status = verdict_with_geometry(line, status, findings, geometry_checks)
    return Report(
        summary=summarize(model), structure=structure, factorization=None if fac is None else fac.info,
        condition=condition, spectrum=spectrum, restraints=restraints, jumps=jumps, pivots=pivots, digits=digits,
        findings=findings, verdict=line, status=status, timings=stage.timings, seed=run.seed, skipped=skipped,
        geometry=model_geometry(model), geometry_checks=geometry_checks,
    )


def _factorization_free_finding(too_large: FactorizationTooLarge, method: str) -> Finding:
    pred = too_large.prediction
    return Finding(
        "warning", "analysis.factorization-free",
        f"The factorization would need about {(pred.bytes - pred.pivot_read_bytes) / 2**30:.1f} GiB "
        f"({pred.method}), more than the "
        f"{too_large.limit / 2**30:.1f} GiB allowed, so the spectrum was computed without one "
        f"({method}). Not available on this path: {'; '.join(WITHOUT_FACTORIZATION.values())}.",
        [], "Run on a machine with more memory (or raise CONDITIONING_MEMORY_LIMIT) for the full diagnosis.")


def _pivots_not_read_finding(note: str, *, measured: bool) -> Finding:
    return Finding(
        "note", "analysis.pivots-not-read",
        f"The factorization ran, but its pivots were {note}. Not available therefore: the digits lost at "
        "pivots; the inertia count, so that positive definiteness rests on the eigenvalues found nearest "
        "zero and a Lanczos search of the low end of the spectrum rather than on Sylvester's law; and the "
        "verified eigenvalue bound"
        + (", so the digits are measured, not certified." if measured else "."),
        [], "Raise CONDITIONING_MEMORY_LIMIT or run on a machine with more memory for these figures.")


def _restraints(model: Model, structure, located, *, proved: bool = False) -> list[Restraint]:
    """A DOF without stiffness is restrained by itself; the rest by the restraints stage.

    None for modes when K is proved positive definite (no support is missing);
    when no mode is zero at working precision but some are not decided, each
    restraint says it holds only if the mode is free.
    """
    out = [Restraint(node=model.nodes_of([r])[0],
                     dof=model.dofs.dof_name(r) if model.dofs is not None else "-",
                     row=int(r), reason="the DOF has no stiffness of its own")
           for r in structure.empty_rows]
    if located.basis.shape[1] and not proved:
        found = suggest_restraints(model, located.basis, part_of_row=structure.part_of_row)
        modes = [m for m in located.modes if m.kind != "dof-without-stiffness"]
        if modes and not any(m.exact for m in modes) and any(m.undecided for m in modes):
            found = [replace(r, reason="only if the mode is free (not decided: see the support proof): "
                                       + r.reason) for r in found]
        out += found
    return out


#: A check that factors again while the shared factor is kept (the inertia
#: confirmation of lambda_min, the support proof; lambda_max needs none) runs when
#: this many refactorizations' worth of memory fit: the shared factor and the
#: new one, each counted as one read-back refactorization (project's choice).
COEXISTING_FACTORS = 2


def _decide_support(model: Model, structure, scaled, eig, fac, run: _Run, skipped: dict):
    """(SupportDecision or None, proof or None, the modes stage's levels) for the spectrum's near-zero modes."""
    if fac is None or structure.empty_rows.size or not claims_zero(eig):
        return None, None, {}
    try:
        perm = fac.ordering_permutation()
    except (NotImplementedError, AttributeError):
        perm = None
    need = refactorization_bytes(fac.info.fill, scaled.S.nnz) * COEXISTING_FACTORS
    why = ""
    if need > run.memory_limit:
        why = (f"the proof's factorization beside the shared one would need about {need / 2**30:.1f} GiB, "
               f"more than the {run.memory_limit / 2**30:.1f} GiB allowed")
    elif perm is None:
        why = "the engine shares no fill-reducing ordering for the proof's factorization"
    with run.stage("support proof"):
        decision, proof = decide_support(model.K, scaled.S, scaled.scale[scaled.active], eig, perm=perm,
                                         flops=float(fac.info.flops), not_attempted=why,
                                         rigid=_part_rigid_motions(model, structure))
    if decision.outcome == PROVED:
        return decision, proof, {"zero": -1.0, "undecided": -1.0}
    zero = RESOLUTION_ROOM * decision.resolution + max(decision.error_bounds, default=0.0)
    return decision, None, {"zero": zero, "undecided": max(zero, ZERO_ROOM * eig.zero_level)}


#: Rigid motions are tested part by part up to this many parts (project's choice: beyond it the
#: support decision rests on the eigenvalues alone).
RIGID_PARTS_MAX = 64


def _part_rigid_motions(model: Model, structure) -> Optional[np.ndarray]:
    """(n, m) rigid motions of each connected part (rotations in radians), zero outside its part;
    None without a DOF map or with more than RIGID_PARTS_MAX parts."""
    if model.dofs is None or structure.part_sizes.size > RIGID_PARTS_MAX:
        return None
    xyz = _row_coordinates(model)
    cols = []
    for p in range(structure.part_sizes.size):
        rows = np.flatnonzero(structure.part_of_row == p)
        basis = rigid_motions(model.dofs.dof[rows], None if xyz is None else xyz[rows],
                              model.dofs.node[rows], lever=1.0).basis
        block = np.zeros((model.n, basis.shape[1]))
        block[rows] = basis
        cols.append(block)
    return np.hstack(cols) if cols else None


def explain(model: Model, row: int, *, row_base: int = 1, seed: int = 0,
            engine: Union[Engine, str, None] = None) -> tuple[Report, RowExplanation]:
    """Diagnose ``model`` (without the digits measurement) and explain 0-based ``row``.

    The diagnosis gives the near-singular modes, the stiffness jumps and the
    suggested supports; a second factorization of S (released before
    returning) gives the row's pivot and (K^-1)_ii. Returns the report and
    the :class:`RowExplanation` (units per field). Raises InputError for a
    row outside the matrix.
    """
    _check_row(model, row, row_base)
    report = diagnose(model, seed=seed, measure=False, engine=engine)
    scaled = scale_stiffness(model.K, report.structure.empty_rows)
    fac = _engine(engine, "auto").factorize(scaled, coords=_row_coordinates(model))
    try:
        explanation = explain_row(model, row, fac=fac, spectrum=report.spectrum, jumps=report.jumps,
                                  restraints=report.restraints, row_base=row_base,
                                  geometry=report.geometry_checks)
    finally:
        fac.release()
    return report, explanation


def explain_from_report(model: Model, row: int, report_path, *, row_base: int = 1) -> RowExplanation:
    """Explain 0-based ``row`` with the figures of an earlier run's JSON report: no factorization.

    ``report_path`` is a file written by ``diagnose --json`` (or
    :func:`conditioning.render.json_report.write_json`) for this very K and
    DOF map; the row's diagonal and couplings are read from ``model``, its
    pivot (in the earlier run's order), mode shares, stiffness jumps and the
    suggested supports from the report. Returns the :class:`RowExplanation`
    (``from_report`` set; no range over elimination orders, which needs a
    factorization). Raises InputError for a row outside the matrix, or a
    report that is not one, is older than the per-row figures, or belongs to
    another matrix or DOF map.
    """
    _check_row(model, row, row_base)
    return explain_saved_row(model, row, read_saved_report(report_path, model), row_base=row_base)


def _check_row(model: Model, row: int, row_base: int) -> None:
    if not 0 <= row < model.n:
        raise InputError(model.source, f"row {row + row_base} is outside {row_base}..{model.n - 1 + row_base} "
                                       f"(rows numbered from {row_base})")
