"""The diagnosis as one call: input -> structure -> factorization -> spectrum
and condition -> modes located in the model -> digits -> findings -> report.

Each stage is a module of its own with a typed result; this module only
sequences them, times them and hands progress to the caller. It never prints.
"""

from __future__ import annotations

import logging
import time
from contextlib import contextmanager
from typing import Callable, Optional, Union

import numpy as np

from conditioning.condition import condition_numbers
from conditioning.factorization import factorize
from conditioning.findings import build_findings, verdict
from conditioning.model import DOF_NAMES, Model
from conditioning.modes import locate_modes
from conditioning.results import ModelSummary, Report, SpectrumResult
from conditioning.spectrum import GAP_RULE, scaled_spectrum
from conditioning.structure import check_structure

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
        from conditioning.inputs import load_model

        with stage("reading"):
            model = load_model(matrix, dofs=dofs, dofs_per_node=dofs_per_node, coords=coords,
                               load=load, solution=solution, fix=fix)
    K = model.K
    with stage("structure"):
        structure = check_structure(model)
    with stage("factorization"):
        fac = factorize(K, ordering=ordering, coords=_row_coordinates(model),
                        active=np.diff(K.indptr) > 0)
    with stage("spectrum"):
        spec = scaled_spectrum(K, fac)
    with stage("modes"):
        located = locate_modes(model, structure, fac.scale, fac.active, spec)
    with stage("condition"):
        free = sum(1 for m in located.modes if m.exact and m.kind != "dof-without-stiffness")
        condition = condition_numbers(K, fac, spec, free_modes=free)
    inertia_agrees = None
    if spec.inertia_count is not None and spec.inertia_expected is not None:
        inertia_agrees = spec.inertia_count == spec.inertia_expected
    spectrum = SpectrumResult(
        smallest=spec.values[: max(12, spec.first + spec.count + 1)],
        count=len(located.modes),
        gap=spec.gap,
        gap_rule=GAP_RULE,
        inertia_count=spec.inertia_count,
        inertia_agrees=inertia_agrees,
        negative_eigenvalues=int(spec.negative),
        modes=located.modes,
        method=spec.method,
    )
    restraints = []
    if located.basis.shape[1]:
        from conditioning.restraints import suggest_restraints

        with stage("restraints"):
            restraints = suggest_restraints(model, located.basis, part_of_row=structure.part_of_row)
    from conditioning.jumps import find_stiffness_jumps
    from conditioning.decay import diagonal_decay

    with stage("stiffness jumps"):
        jumps = find_stiffness_jumps(model, structure)
    with stage("diagonal decay"):
        decay = diagonal_decay(model, fac)
    digits = None
    if measure:
        from conditioning.digits import measure_digits

        with stage("digits"):
            digits = measure_digits(model, fac, condition=condition, spectrum=spectrum,
                                    samples=samples, seed=seed)
    findings = build_findings(model, structure, condition, spectrum, restraints, jumps, decay, digits,
                              min_digits=min_digits, stiff_link_eigenvalues=located.stiff_link_eigenvalues)
    line, status = verdict(findings, spectrum, structure, digits, condition)
    return Report(
        summary=summarize(model), structure=structure, factorization=fac.info, condition=condition,
        spectrum=spectrum, restraints=restraints, jumps=jumps, decay=decay, digits=digits,
        findings=findings, verdict=line, status=status, timings=stage.timings,
    )
