"""Penalties that have swallowed the structure, and the diagnosis of the rest.

A penalty link of stiffness P between DOFs a and b adds P to K_aa and K_bb
and -P to K_ab. In float64, K_aa = fl(P + k_a): once the structure's own
stiffness k_a is below half a unit in the last place of P, fl(P + k_a) = P
and k_a is gone from the exported matrix. Along the tied motion u_a = u_b the
structure's resistance was k_a + k_b; what K still holds is
K_aa + K_bb + 2 K_ab = 0, so K is singular at working precision along the
link, and no solver, at any precision, can recover the displacements of
those DOFs from this K. Slightly less stiff links (k_a / P below 10 n eps)
leave a few digits of k_a but the same numerical singularity.

What is honest to measure then. The factorization cannot simply be left
unshifted: the pivot of the tied motion is the difference of two equal
penalties, zero or pure round-off. Instead the linked rows are *held* (their
rows and columns removed, as if those DOFs were prescribed at zero) and the
rest of K is diagnosed as usual: its modes, condition number and measured
digits describe everything whose stiffness K still holds. The report says
which DOFs were held and that they keep no digits. Holding is not what the
model means (the DOFs do move): it is the largest part of K that still
carries information. By eigenvalue interlacing, the condition number of a
principal submatrix of a positive definite K is at most that of K, so the
rest's figures are an optimistic bound on what the repaired model will give;
and holding acts as a support at those nodes, so a part held by nothing
else would look supported (see :func:`hold_swallowed`).
"""

from __future__ import annotations

import logging
from dataclasses import replace
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.stages.element_quality import check_elements
from conditioning.stages.findings import build_findings, verdict, verdict_with_geometry
from conditioning.stages.node_geometry import WHY_NOT_RUN, check_node_geometry
from conditioning.stages.restraints import merging_first
from conditioning.stages.digits import measure_exported_digits
from conditioning.stages.geometry import model_geometry
from conditioning.stages.support_proof import RESOLUTION_ROOM, eigenpair_error_bounds, storage_resolution
from conditioning.model import Model
from conditioning.results import (
    PivotEntry, PivotLoss, DigitsResult, Finding, ModelSummary, Report, StiffnessJump, StructureResult,
)

logger = logging.getLogger(__name__)

#: Method prefix for every figure computed on the rest of K.
REST = "on K without the rows a penalty swallowed (held fixed; K itself is singular at working precision along the link): "


def swallowed_rows(jumps: list[StiffnessJump]) -> NDArray[np.intp]:
    """0-based rows of every link that has swallowed the structure (sorted, unique)."""
    rows = [r for j in jumps if j.swallowed for r in j.rows]
    return np.unique(np.asarray(rows, dtype=np.intp))


def hold_swallowed(model: Model, held: NDArray[np.intp]) -> tuple[Model, NDArray[np.intp]]:
    """The model without the held rows and columns, and the kept rows.

    Returns
    -------
    (Model, (m,) intp)
        The rest of the model (K, DOF map, load and solution restricted; the
        same coordinates) and, for each of its rows, the row of ``model`` it
        came from.

    Notes
    -----
    Holding the linked DOFs acts as a support at their nodes: a part of the
    structure that nothing but those DOFs would hold is not reported as free.
    """
    keep = np.setdiff1d(np.arange(model.n), held).astype(np.intp)
    K = sp.csr_array(model.K[keep][:, keep])

    def take(v):
        return None if v is None else np.asarray(v)[keep]

    rest = Model(K, source=model.source, dofs=None if model.dofs is None else model.dofs.take(keep),
                 coords=model.coords, load=take(model.load), solution=take(model.solution),
                 load_names=model.load_names, restrained=model.restrained, notes=model.notes)
    return rest, keep


def restore_report(model: Model, structure: StructureResult, summary: ModelSummary, jumps: list[StiffnessJump],
                   rest: Report, keep: NDArray[np.intp], *, min_digits: float = 4.0) -> Report:
    """The report of the whole model from the diagnosis of its rest.

    Parameters
    ----------
    model, structure, summary, jumps
        Of the whole model (``jumps`` holds the swallowing links).
    rest : Report
        The pipeline's diagnosis of ``hold_swallowed(model, ...)[0]`` (the
        same stages, run on the rest).
    keep : (m,) intp
        Row of ``model`` of each row of the rest.

    Returns
    -------
    Report
        Rows, nodes and vectors in the whole model's numbering; the held
        rows' per-DOF digits are 0 (all lost); condition, spectrum and digits
        methods say they were computed on the rest; findings and verdict
        rebuilt for the whole model.
    """
    back = _Renumber(model, structure, keep)
    spectrum = None
    if rest.spectrum is not None:
        spectrum = replace(rest.spectrum, modes=[back.mode(m) for m in rest.spectrum.modes],
                           smallest_vector=back.vector(rest.spectrum.smallest_vector),
                           method=REST + rest.spectrum.method)
    restraints = [replace(r, row=int(keep[r.row]), node=back.node(r.node)) for r in rest.restraints]
    condition = rest.condition
    if condition is not None:
        condition = replace(condition, estimate_method=REST + condition.estimate_method,
                            scaled_method=REST + condition.scaled_method,
                            one_norm_method=REST + condition.one_norm_method)
    pivots = back.pivots(rest.pivots)
    digits = back.digits(rest.digits, swallowed_rows(jumps))
    digits = with_exported_digits(model, structure, digits, rest.seed)
    # The geometry checks of the whole model, as pipeline._analyse runs them (the rest's
    # would name the rest's rows and miss the held nodes).
    skipped = dict(rest.skipped)
    skipped.pop("geometry checks", None)
    geometry_checks = check_elements(model, check_node_geometry(model, structure,
                                                                spectrum.modes if spectrum is not None else ()))
    if geometry_checks is None:
        skipped["geometry checks"] = WHY_NOT_RUN
    else:
        restraints = merging_first(restraints, geometry_checks, structure.part_of_row, model)
    findings = build_findings(model, structure, condition, spectrum, restraints, jumps, pivots, digits,
                              min_digits=min_digits, geometry=geometry_checks)
    findings += [f for f in rest.findings if f.code == "stiffness.stiff-link-eigenvalue"]
    line, status = verdict(findings, spectrum, structure, digits, condition, min_digits=min_digits)
    line, status = verdict_with_geometry(line, status, findings, geometry_checks)
    return Report(
        summary=summary, structure=structure, factorization=rest.factorization, condition=condition,
        spectrum=spectrum, restraints=restraints, jumps=jumps, pivots=pivots, digits=digits,
        findings=findings, verdict=line, status=status, timings=rest.timings, seed=rest.seed,
        skipped=skipped,
        geometry=model_geometry(model), geometry_checks=geometry_checks,
    )


#: How the figures of the model with the swallowed DOFs held are labelled once
#: the exported K itself was measured.
PREDICTION = "prediction after the suggested change (the model with the swallowed DOFs held): "


def with_exported_digits(model: Model, structure: StructureResult, digits: Optional[DigitsResult],
                         seed: Optional[int]) -> Optional[DigitsResult]:
    """The digits of the exported K first, the held-DOF model's as a labelled prediction.

    The matrix the engineer solves is the exported one: its float64 solve is
    measured for the engineer's load(s) (:func:`measure_exported_digits`) and
    becomes the key figure (``headline_solve`` ``exported``); the held-DOF
    samples stay, their ``solve`` saying they predict the model after the
    suggested change (the penalty lowered). Unchanged when the exported K
    could not be measured (above the re-solve's size), with why in
    ``headline_reason``.
    """
    if digits is None or digits.skipped:
        return digits
    rng = np.random.default_rng(seed)
    exported, kappa, why = measure_exported_digits(model, structure, rng=rng)
    if not exported:
        return replace(digits, headline_reason=why)
    held = [replace(s, solve=PREDICTION + (s.solve or "the tool's float64 solve")) for s in digits.samples]
    zero_modes, zero_how = exported_zero_modes(model)
    return replace(digits, samples=exported + held, headline_solve="exported", exported_condition_at_least=kappa,
                   exported_zero_modes=zero_modes, exported_zero_modes_method=zero_how,
                   headline_reason=("a penalty swallowed the structure, so the key figure is a float64 solve of the "
                                    "exported K as stored; the other samples predict the model after the suggested "
                                    "change"))


#: Largest exported K whose scaled eigenvalues are all computed densely (LAPACK
#: eigh) to count its zero modes: the project's choice, about a second at this size.
EXPORTED_DENSE_MAX_N = 3000


def exported_zero_modes(model: Model) -> tuple[Optional[int], str]:
    """How many eigenvalues of the exported K's scaled matrix are zero at working precision.

    All eigenpairs of S = D^-1/2 K D^-1/2 of the stored K (LAPACK eigh through
    numpy); a computed eigenvalue theta lies within its residual bound r of
    an eigenvalue of S (:func:`eigenpair_error_bounds`), and an eigenvalue
    within RESOLUTION_ROOM times the stored K's resolution R of zero cannot be
    told from zero (:mod:`conditioning.stages.support_proof`, Weyl's
    inequality). Counted: |theta| <= RESOLUTION_ROOM * R + r.

    Returns
    -------
    (count or None, how it was obtained or why not)
    """
    n = model.n
    if n > EXPORTED_DENSE_MAX_N:
        return None, (f"not counted: {n:,} rows, above the {EXPORTED_DENSE_MAX_N:,} for which all eigenvalues "
                      "of the exported K are computed")
    K = sp.csr_array(model.K, dtype=np.float64)
    d = np.abs(K.diagonal())
    s = np.where(d > 0, 1.0 / np.sqrt(np.where(d > 0, d, 1.0)), 1.0)
    S = sp.csr_array(sp.diags(s) @ K @ sp.diags(s))
    values, vectors = np.linalg.eigh(S.toarray())
    R = storage_resolution(S)
    r = eigenpair_error_bounds(S, values, vectors)
    count = int(np.count_nonzero(np.abs(values) <= RESOLUTION_ROOM * R + r))
    return count, (f"all eigenvalues of the exported K's scaled matrix (LAPACK); zero within "
                   f"{RESOLUTION_ROOM:g} x its resolution {R:.1e} plus each one's error bound")


class _Renumber:
    """Maps rows, nodes and vectors of the rest back to the whole model."""

    def __init__(self, model: Model, structure: StructureResult, keep: NDArray[np.intp]):
        self.model, self.structure, self.keep = model, structure, keep

    def node(self, v: int) -> int:
        # Without a DOF map a "node" is a 1-based row.
        return int(v) if self.model.dofs is not None else int(self.keep[int(v) - 1]) + 1

    def vector(self, v: Optional[NDArray], fill: float = 0.0) -> Optional[NDArray]:
        if v is None:
            return None
        out = np.full(self.model.n, fill)
        out[self.keep] = v
        return out

    def mode(self, m):
        nodes = [self.node(v) for v in m.nodes]
        if m.vector is not None:
            row = int(self.keep[int(np.argmax(np.abs(m.vector)))])
        else:
            row = int(np.flatnonzero(self._node_of_rows() == nodes[0])[0]) if nodes else 0
        return replace(m, nodes=nodes, groups=[[self.node(v) for v in g] for g in m.groups],
                       vector=self.vector(m.vector), part=int(self.structure.part_of_row[row]) + 1)

    def _node_of_rows(self) -> NDArray[np.int64]:
        if self.model.dofs is None:
            return np.arange(1, self.model.n + 1)
        return np.asarray(self.model.dofs.node)

    def _entry(self, e: PivotEntry) -> PivotEntry:
        row = int(self.keep[e.row])
        return replace(e, row=row, label=self.model.row_label(row))

    def pivots(self, d: Optional[PivotLoss]) -> Optional[PivotLoss]:
        if d is None:
            return None
        return replace(d, worst=[self._entry(e) for e in d.worst],
                       negative_pivots=[self._entry(e) for e in d.negative_pivots],
                       kept_by_row=self.vector(d.kept_by_row, fill=np.nan), method=REST + d.method)

    def digits(self, dg: Optional[DigitsResult], held: NDArray[np.intp]) -> Optional[DigitsResult]:
        if dg is None or dg.skipped:
            return dg
        labels = ", ".join(self.model.row_label(int(r)) for r in held[:6]) + (
            f" and {held.size - 6} more" if held.size > 6 else "")
        samples = [replace(s, worst_nodes=[replace(w, node=self.node(w.node)) for w in s.worst_nodes],
                           per_dof_digits=self.vector(s.per_dof_digits))  # held DOFs: 0 digits
                   for s in dg.samples]
        note = (f"Measured on the rest of K with {labels} held: a penalty swallowed their stiffness, so "
                "their displacements keep no digits (shown as 0) and are not in these figures.")
        return replace(dg, samples=samples, summary=note + " " + dg.summary)


__all__ = ["hold_swallowed", "restore_report", "swallowed_rows"]
