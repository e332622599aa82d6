"""The diagnosis as one call: input -> structure -> factorization -> spectrum
and condition -> modes located in the model -> digits -> findings -> report.

Each stage is a module of its own with a typed result; this module only
sequences them, times them and hands progress to the caller. It never prints.
"""

from __future__ import annotations

import logging
import time
from contextlib import contextmanager
from dataclasses import replace
from typing import Callable, Optional, Union

import numpy as np
import scipy.sparse as sp

from conditioning.stages.condition import condition_numbers
from conditioning.engine.scipy_engine import FactorizationTooLarge, factorize
from conditioning.stages.findings import build_findings, verdict
from conditioning.stages.geometry import model_geometry
from conditioning.model import DOF_NAMES, Model
from conditioning.stages.modes import locate_modes
from conditioning.results import (
    ConditionResult, Finding, ModelSummary, Report, Restraint, SpectrumResult,
)
from conditioning.stages.spectrum import GAP_RULE, ScaledSpectrum, largest_eigenvalue, count_below, scaled_spectrum
from conditioning.stages.structure import check_structure, rows_with_stiffness

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
    samples: int = 3,
    seed: int = 0,
    min_digits: float = 4.0,
    ordering="auto",
    measure: bool = True,
    memory_limit: Optional[int] = None,
    progress: Optional[ProgressCallback] = None,
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
        Seed of the random loads (recorded in the report).
    min_digits : float
        Fewer measured trustworthy digits than this is an error finding.
    ordering : "auto", a SuperLU ordering name, or a callable
        Fill-reducing ordering of the shared factorization.
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

    Returns
    -------
    Report

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
        from conditioning.io.load import load_model

        with stage("reading"):
            model = load_model(matrix, dofs=dofs, dofs_per_node=dofs_per_node, coords=coords,
                               load=load, solution=solution, fix=fix)
    K = model.K
    with stage("structure"):
        structure = check_structure(model)
    swallowed = _diagnose_rest_if_swallowed(model, structure, stage, samples=samples, seed=seed,
                                            min_digits=min_digits, ordering=ordering, measure=measure,
                                            memory_limit=memory_limit, progress=progress)
    if swallowed is not None:
        return swallowed
    if memory_limit is None:
        from conditioning.engine.memory import memory_limit as default_limit

        memory_limit = default_limit()
    try:
        with stage("factorization"):
            fac = factorize(K, ordering=ordering, coords=_row_coordinates(model),
                            active=rows_with_stiffness(K), memory_limit=memory_limit)
    except FactorizationTooLarge as too_large:
        return _without_factorization(model, structure, stage, too_large)
    with stage("spectrum"):
        spec = scaled_spectrum(K, fac, check_inertia=False)
    with stage("modes"):
        located = locate_modes(model, structure, fac.scale, fac.active, spec)
    with stage("condition"):
        free = sum(1 for m in located.modes if m.exact and m.kind != "dof-without-stiffness")
        condition = condition_numbers(K, fac, spec, free_modes=free)
    spectrum = SpectrumResult(
        smallest=spec.values[: max(12, spec.first + spec.count + 1)],
        count=len(located.modes),
        gap=spec.gap,
        gap_rule=GAP_RULE,
        inertia_count=None,
        inertia_agrees=None,
        negative_eigenvalues=int(spec.negative),
        modes=located.modes,
        method=spec.method,
        smallest_vector=_smallest_vector(spec, fac.active),
        below_split=spec.inertia_expected,
        stiff_link_eigenvalues=list(located.stiff_link_eigenvalues),
    )
    with stage("restraints"):
        restraints = _restraints(model, structure, located)
    from conditioning.stages.jumps import find_stiffness_jumps
    from conditioning.stages.pivots import diagonal_decay

    with stage("stiffness jumps"):
        jumps = find_stiffness_jumps(model, structure)
    with stage("diagonal decay"):
        decay = diagonal_decay(model, fac)
    digits = None
    if measure:
        from conditioning.stages.digits import measure_digits

        with stage("digits"):
            digits = measure_digits(model, fac, condition=condition, spectrum=spectrum,
                                    samples=samples, seed=seed, structure=structure)
    if spec.split_point is not None:
        # Sylvester's cross-check of the mode count needs one more factorization;
        # it runs last, after the shared factor is released, so the two never
        # coexist in memory.
        info = fac.info
        fac.release()
        with stage("inertia check"):
            count = count_below(K, fac, spec.split_point)
        spectrum = replace(spectrum, inertia_count=count,
                           inertia_agrees=None if count is None else count == spec.inertia_expected)
    else:
        info = fac.info
    findings = build_findings(model, structure, condition, spectrum, restraints, jumps, decay, digits,
                              min_digits=min_digits, stiff_link_eigenvalues=located.stiff_link_eigenvalues)
    line, status = verdict(findings, spectrum, structure, digits, condition, min_digits=min_digits)
    return Report(
        summary=summarize(model), structure=structure, factorization=info, condition=condition,
        spectrum=spectrum, restraints=restraints, jumps=jumps, decay=decay, digits=digits,
        findings=findings, verdict=line, status=status, timings=stage.timings,
        geometry=model_geometry(model),
    )


def _diagnose_rest_if_swallowed(model: Model, structure, stage: _Stages, **options) -> Optional[Report]:
    """When a penalty has swallowed the structure (K singular at working
    precision only along the link), the report of the whole model from the
    diagnosis of the rest with the linked rows held; None otherwise
    (conditioning.stages.penalty says why holding is the honest choice)."""
    from conditioning.stages.jumps import find_stiffness_jumps
    from conditioning.stages.penalty import hold_swallowed, restore_report, swallowed_rows

    with stage("penalty check"):
        jumps = find_stiffness_jumps(model, structure)
        held = swallowed_rows(jumps)
    if held.size == 0:
        return None
    rest, keep = hold_swallowed(model, held)
    inner = diagnose(rest, **options)
    report = restore_report(model, structure, summarize(model), jumps, inner, keep,
                            min_digits=options["min_digits"])
    return replace(report, timings={**stage.timings, **report.timings})


def _smallest_vector(spec: ScaledSpectrum, active) -> Optional[np.ndarray]:
    """The eigenvector of S's smallest eigenvalue (beyond true negative ones), on all rows."""
    j = spec.first
    if spec.vectors.shape[1] <= j:
        return None
    v = np.zeros(active.size)
    v[active] = spec.vectors[:, j]
    return v


def _restraints(model: Model, structure, located) -> list[Restraint]:
    """A DOF without stiffness is restrained by itself; the rest by the restraints stage."""
    out = [Restraint(node=model.nodes_of([r])[0],
                     dof=model.dofs.dof_name(r) if model.dofs is not None else "-",
                     row=int(r), reason="the DOF has no stiffness of its own")
           for r in structure.empty_rows]
    if located.basis.shape[1]:
        from conditioning.stages.restraints import suggest_restraints

        out += suggest_restraints(model, located.basis, part_of_row=structure.part_of_row)
    return out


def _without_factorization(model: Model, structure, stage: _Stages, too_large: FactorizationTooLarge) -> Report:
    """The diagnosis when the factor would not fit: spectrum by LOBPCG, no digits."""
    from conditioning.engine.scipy_engine import diagonal_scaling
    from conditioning.stages.spectrum_iterative import as_scaled_spectrum, iterative_spectrum

    K = model.K
    with stage("spectrum (factorization-free)"):
        it = iterative_spectrum(model)
    spec = as_scaled_spectrum(it, model)
    active = rows_with_stiffness(K)
    s = diagonal_scaling(K)
    lam_max = spec.lambda_max
    values = spec.values
    gap = spec.gap
    first = spec.first
    with stage("modes"):
        located = locate_modes(model, structure, s, active, spec)
    # The same rule as the factorized path: a DOF without stiffness or a free
    # mode (other than such a DOF) makes K singular.
    free = sum(1 for m in located.modes if m.exact and m.kind != "dof-without-stiffness")
    s_min = float(np.min(np.abs(values))) if values.size else None
    singular = bool(free or structure.empty_rows.size)
    s_kappa = None if singular or not s_min else lam_max / s_min
    condition = ConditionResult(
        singular=singular, lambda_max=largest_eigenvalue(sp.csr_array(K)), lambda_min=None, estimate=None,
        estimate_method="not computed: no factorization (the factor would not fit in memory)",
        scaled_estimate=s_kappa, scaled_lambda_min=s_min, scaled_lambda_max=lam_max,
        scaled_method=f"2-norm of S from LOBPCG's smallest and Lanczos' largest eigenvalue ({it.method})"
        + ("" if it.converged else "; LOBPCG did not converge: the smallest eigenvalue is an upper bound"),
        one_norm_estimate=None, one_norm_method="not computed: no factorization",
        scaling_gain_digits=None,
    )
    spectrum = SpectrumResult(
        smallest=values[:12], count=len(located.modes), gap=gap, gap_rule=GAP_RULE, inertia_count=None,
        inertia_agrees=None, negative_eigenvalues=int(first), modes=located.modes, method=it.method,
        stiff_link_eigenvalues=list(located.stiff_link_eigenvalues),
    )
    restraints = _restraints(model, structure, located)
    from conditioning.stages.jumps import find_stiffness_jumps

    jumps = find_stiffness_jumps(model, structure)
    findings = build_findings(model, structure, condition, spectrum, restraints, jumps, None, None,
                              stiff_link_eigenvalues=located.stiff_link_eigenvalues)
    pred = too_large.prediction
    findings.append(Finding(
        "warning", "analysis.factorization-free",
        f"The factorization would need about {pred.bytes / 2**30:.1f} GiB ({pred.method}), more than the "
        f"{too_large.limit / 2**30:.1f} GiB allowed, so the spectrum was computed without one "
        f"({it.method}). Not available on this path: {'; '.join(it.cannot)}.",
        [], "Run on a machine with more memory (or raise CONDITIONING_MEMORY_LIMIT) for the full diagnosis."))
    line, status = verdict(findings, spectrum, structure, None, condition)
    return Report(
        summary=summarize(model), structure=structure, factorization=None, condition=condition,
        spectrum=spectrum, restraints=restraints, jumps=jumps, decay=None, digits=None,
        findings=findings, verdict=line, status=status, timings=stage.timings,
        geometry=model_geometry(model),
    )
