"""Findings and the verdict: what the stages found, in the trade's terms.

Each finding has a severity (error, warning, note), a stable code of this
tool's own (dotted, lower-case; listed in :data:`CODES`), a plain message,
the nodes it concerns, and advice. The verdict is one line.
"""

from __future__ import annotations

import math
from typing import Optional, Sequence

import numpy as np

from conditioning.model import Model
from conditioning.results import (
    Asymmetry, ConditionResult, DiagonalDecay, DigitsResult, Finding, NearSingularMode,
    OneTriangleExport, Restraint, SpectrumResult, StiffnessJump, StructureResult,
)
from conditioning.structure import ASYMMETRY_NOISE, asymmetry_reported, looks_like_placeholder

#: Every finding code, with its meaning. Codes are stable across versions.
CODES = {
    "input.no-dof-map": "no DOF-to-node map: findings are by matrix row",
    "input.asymmetric": "the matrix is not symmetric",
    "input.one-triangle-export": "a non-symmetric-labelled matrix holds one triangle plus a few stray entries",
    "structure.placeholder-rows": "rows holding only a diagonal, no coupling (restrained DOFs kept as placeholders)",
    "structure.dof-without-stiffness": "rows with no stiffness at all",
    "structure.negative-diagonal": "negative diagonal entries",
    "structure.zero-diagonal": "zero diagonal entries in rows that have stiffness",
    "structure.separate-parts": "the model has parts that share no stiffness",
    "support.rigid-body-mode": "a part can move as a rigid body",
    "support.mechanism": "an internal mechanism",
    "stiffness.indefinite": "negative eigenvalues: the stiffness is not positive semi-definite",
    "stiffness.jump": "a stiffness jump that costs digits",
    "stiffness.stiff-link-eigenvalue": "small scaled eigenvalues that stiff links explain",
    "spectrum.inertia-mismatch": "the eigenvalue count and the inertia count disagree",
    "condition.ill-conditioned": "the scaled condition number is large",
    "condition.units-only": "the raw condition number is large only through units or DOF-type mixing",
    "factor.diagonal-decay": "large diagonal decay at some pivots",
    "digits.below-minimum": "fewer trustworthy digits than required",
    "digits.refinement-not-converged": "the extended-precision reference did not converge",
    "analysis.factorization-free": "the factor would not fit in memory; a reduced diagnosis ran",
    "digits.audited-solution": "the audited solution has fewer trustworthy digits than the tool's own",
}


def _list_nodes(nodes: Sequence[int], limit: int = 8) -> str:
    nodes = list(nodes)
    head = ", ".join(str(v) for v in nodes[:limit])
    return head if len(nodes) <= limit else f"{head} and {len(nodes) - limit:,} more"


def _motion_text(mode: NearSingularMode) -> str:
    parts = sorted(mode.motion.items(), key=lambda kv: -kv[1])
    return ", ".join(f"{name} {share:.0%}" for name, share in parts)


def build_findings(
    model: Model,
    structure: StructureResult,
    condition: Optional[ConditionResult],
    spectrum: Optional[SpectrumResult],
    restraints: list[Restraint],
    jumps: list[StiffnessJump],
    decay: Optional[DiagonalDecay],
    digits: Optional[DigitsResult],
    *,
    min_digits: float = 4.0,
    stiff_link_eigenvalues: Sequence[float] = (),
) -> list[Finding]:
    """Findings, most severe first. See :data:`CODES`."""
    out: list[Finding] = []
    rows_word = "nodes" if model.dofs is not None else "rows"
    if model.dofs is None:
        out.append(Finding("note", "input.no-dof-map",
                           "No DOF-to-node map was given, so rows are reported by index (1-based).",
                           [], "Give --dofs FILE or --dofs-per-node K for node-level findings."))
    if structure.one_triangle is not None:
        out.append(_one_triangle_finding(model, structure.one_triangle))
    a = structure.asymmetry
    if asymmetry_reported(a):
        out.append(_asymmetry_finding(model, a))
    if structure.empty_rows.size:
        nodes = model.nodes_of(structure.empty_rows)
        labels = ", ".join(model.row_label(r) for r in structure.empty_rows[:6])
        more = structure.empty_rows.size - 6
        out.append(Finding("error", "structure.dof-without-stiffness",
                           f"{structure.empty_rows.size:,} DOF(s) have no stiffness at all: {labels}"
                           + (f" and {more:,} more" if more > 0 else "") + ".",
                           nodes,
                           "Restrain these DOFs or remove them (for example rotations at nodes that only "
                           "solid or truss elements touch, or nodes no element uses)."))
    if structure.negative_diagonal.size:
        out.append(Finding("error", "structure.negative-diagonal",
                           f"{structure.negative_diagonal.size:,} negative diagonal entries "
                           f"(first: {model.row_label(structure.negative_diagonal[0])}).",
                           model.nodes_of(structure.negative_diagonal),
                           "A stiffness diagonal is never negative for a stable linear elastic model: "
                           "check material constants, element orientation and the export."))
    if structure.zero_diagonal.size:
        out.append(Finding("warning", "structure.zero-diagonal",
                           f"{structure.zero_diagonal.size:,} rows have a zero diagonal but coupling "
                           f"terms (first: {model.row_label(structure.zero_diagonal[0])}).",
                           model.nodes_of(structure.zero_diagonal),
                           "Such a row makes the matrix indefinite or singular; check constraint "
                           "equations or Lagrange multipliers in the export."))
    if structure.parts > 1:
        sizes = structure.part_sizes[: structure.parts]
        out.append(Finding("note", "structure.separate-parts",
                           f"The model has {structure.parts} parts that share no stiffness "
                           f"(sizes in rows: {_list_nodes([int(x) for x in sizes], 6)}).",
                           [], "Each part must be supported on its own, or connected to the rest."))
    if structure.placeholder_rows.size:
        out.append(_placeholder_finding(model, structure))

    def who(mode):
        return "The model" if structure.parts <= 1 else f"Part {mode.part}"

    if spectrum is not None:
        for mode in spectrum.modes:
            nearly = "" if mode.exact else "nearly "
            held = "" if mode.exact else (" It is held only by a very small stiffness (for example a "
                                          "soft spring), so K is invertible but badly conditioned.")
            severity = "error" if mode.exact else "warning"
            if mode.kind == "rigid-body":
                out.append(Finding(
                    severity, "support.rigid-body-mode",
                    f"{who(mode)} can {nearly}move as a rigid body ({_motion_text(mode)}); "
                    f"scaled eigenvalue {mode.eigenvalue:.2e}. {rows_word.capitalize()}: "
                    f"{_list_nodes(mode.nodes)}.{held}",
                    mode.nodes,
                    "Add supports in the directions that move, or connect the part to the supported "
                    "structure; the suggested restraints below are one minimal choice."))
            elif mode.kind == "mechanism":
                where = (f"groups of {', '.join(str(len(g)) for g in mode.groups[:5])} nodes moving "
                         "rigidly, meeting at " if mode.groups else "located at ")
                out.append(Finding(
                    severity, "support.mechanism",
                    f"Internal {'near-' if not mode.exact else ''}mechanism"
                    f"{'' if structure.parts <= 1 else f' in part {mode.part}'}: {where}{rows_word} {_list_nodes(mode.nodes)}; "
                    f"scaled eigenvalue {mode.eigenvalue:.2e}.{held}"
                    + ("" if model.coords is not None else
                       " Without coordinates a rotation of a part cannot be told from a mechanism."),
                    mode.nodes,
                    "Look for a missing brace, a released end (hinge) too many, or a member that "
                    "only touches the rest at one node."))
        if spectrum.negative_eigenvalues:
            out.append(Finding("error", "stiffness.indefinite",
                               f"K has {spectrum.negative_eigenvalues:,} negative eigenvalue(s) (counted from "
                               "the pivots' signs, Sylvester's law of inertia).", [],
                               "A linear elastic stiffness is positive semi-definite: look for negative "
                               "springs, stress stiffening under compression or buckling."))
        if spectrum.inertia_agrees is False:
            out.append(Finding("warning", "spectrum.inertia-mismatch",
                               f"{spectrum.count} near-singular mode(s) were computed but the inertia "
                               f"count below the gap is {spectrum.inertia_count}.", [],
                               "The eigen-solve may have missed modes; treat the mode list as incomplete."))
    if stiff_link_eigenvalues:
        out.append(Finding("note", "stiffness.stiff-link-eigenvalue",
                           f"{len(stiff_link_eigenvalues)} small eigenvalue(s) of the scaled matrix "
                           f"(smallest {min(stiff_link_eigenvalues):.1e}) come from very stiff links, not "
                           "from a missing support; see the stiffness jumps.", [], ""))
    for j in jumps:
        # A stiff spring to ground is absorbed by diagonal scaling; a stiff
        # link between DOFs is not.
        sev = "warning" if (j.digits_cost >= 6 and j.kind == "coupling") else "note"
        out.append(Finding(sev, "stiffness.jump",
                           f"{j.kind} stiffness jump at {rows_word} {_list_nodes(j.nodes)}: ratio "
                           f"{j.ratio:.1e}, costs about {j.digits_cost:.1f} digits.",
                           j.nodes, j.reasoning))
    if condition is not None and not condition.singular:
        sk = condition.scaled_estimate
        if sk is not None and sk > 1e8:
            out.append(Finding("warning", "condition.ill-conditioned",
                               f"The scaled condition number is {sk:.2e}: up to {math.log10(sk):.1f} "
                               "digits may be lost (see the measured digits).", [],
                               "Look at the near-singular modes and stiffness jumps for the cause."))
        if condition.scaling_gain_digits is not None and condition.scaling_gain_digits >= 3:
            out.append(Finding("note", "condition.units-only",
                               f"The raw condition number {condition.estimate:.2e} falls to {sk:.2e} after "
                               f"diagonal scaling: {condition.scaling_gain_digits:.1f} digits of it are only "
                               "units or DOF-type mixing (rotations next to translations, mm next to m), "
                               "which a direct solver does not pay.", [], ""))
    if decay is not None and decay.max_digits >= 8 and decay.worst:
        out.append(Finding("warning", "factor.diagonal-decay",
                           f"Diagonal decay of {decay.max_digits:.1f} digits at {decay.worst[0].label}.",
                           model.nodes_of([decay.worst[0].row]),
                           "A pivot far smaller than its diagonal means the DOF is nearly unsupported "
                           "once the others are eliminated."))
    if digits is not None and digits.samples:
        worst = min(digits.samples, key=lambda s: s.trustworthy_digits)
        if worst.trustworthy_digits < min_digits:
            out.append(Finding("error", "digits.below-minimum",
                               f"Only {max(worst.trustworthy_digits, 0):.1f} trustworthy digits for sample "
                               f"'{worst.sample}' (required: {min_digits:g}; measured, {worst.method}).",
                               [w.node for w in worst.worst_nodes],
                               "Remove the cause of the ill-conditioning (modes, stiffness jumps) rather "
                               "than trusting more digits than were measured."))
        for s in digits.samples:
            if not s.converged:
                out.append(Finding("warning", "digits.refinement-not-converged",
                                   f"The extended-precision reference for sample '{s.sample}' did not "
                                   f"converge ({s.stop_reason}); its digits are an upper estimate.",
                                   [], "Treat the displacements of this load case as untrustworthy."))
    order = {"error": 0, "warning": 1, "note": 2}
    out.sort(key=lambda f: order[f.severity])
    return out


def _percent(x: float) -> str:
    return f"{x:.1%}" if x >= 1e-3 else f"{x:.1e}"


def _entry_label(model: Model, i: int, j: int) -> str:
    """``"row 3, column 17"`` or, with a DOF map, ``"node 2 uy / node 5 ux"`` (0-based i, j)."""
    if model.dofs is None:
        return f"row {i + 1}, column {j + 1}"
    return f"{model.row_label(i)} / {model.row_label(j)}"


def _asymmetry_finding(model: Model, a: Asymmetry) -> Finding:
    # A pair that differs by more than 0.01% of its own size is not round-off
    # of an export, even when the entry is small next to the largest one.
    sev = "warning" if (a.relative > 1e-6 or (a.relative > ASYMMETRY_NOISE and a.pair_relative > 1e-4)) else "note"
    kij, kji = a.pair_values
    others = a.pairs - 1
    return Finding(
        sev, "input.asymmetric",
        f"The matrix is not symmetric: at {_entry_label(model, a.row, a.col)} it holds {kij:.6g}, "
        f"at the mirror position {kji:.6g}, a difference of {_percent(a.pair_relative)} of the entry "
        f"({a.relative:.1e} of the largest entry of K)"
        + (f"; {others:,} other pair(s) differ too" if others > 0 else "; no other pair differs")
        + ". The diagnosis uses the matrix as given.",
        model.nodes_of([a.row, a.col]),
        "A linear elastic stiffness is symmetric. A single pair that differs points at the export "
        "(an entry edited or written from another source); many point at the elements (follower "
        "loads, friction and some contact elements are not symmetric). A solver that reads one "
        "triangle uses one of the two values without noticing.")


def _one_triangle_finding(model: Model, t: OneTriangleExport) -> Finding:
    other = "upper" if t.triangle == "lower" else "lower"
    m = int(t.stray_rows.size)
    shown = "; ".join(_entry_label(model, int(i), int(j))
                      for i, j in zip(t.stray_rows[:4], t.stray_cols[:4]))
    more = f" and {m - 4:,} more" if m > 4 else ""
    K = model.K
    paired = np.flatnonzero(t.stray_paired)
    differ = sum(1 for k in paired if K[t.stray_rows[k], t.stray_cols[k]] != K[t.stray_cols[k], t.stray_rows[k]])
    what = [f"the {t.triangle} triangle mirrored"]
    if m - paired.size:
        what.append(f"{m - paired.size:,} stray entr{'y' if m - paired.size == 1 else 'ies'} with no "
                    "partner mirrored as well")
    if paired.size:
        what.append(f"{paired.size:,} stray entr{'y' if paired.size == 1 else 'ies'} repeating a stored "
                    "pair kept as stored"
                    + (f" ({differ:,} differ from the {t.triangle} value: see the asymmetry finding)"
                       if differ else " (equal to the mirrored value)"))
    return Finding(
        "warning", "input.one-triangle-export",
        f"The matrix is not labelled symmetric, yet it stores only its {t.triangle} triangle "
        f"({t.triangle_entries:,} off-diagonal entries) plus {m:,} entr{'y' if m == 1 else 'ies'} in the "
        f"{other} triangle ({shown}{more}): it looks like a one-triangle export with stray entries. "
        f"Diagnosed: {'; '.join(what)}. Read as stored, it would be a non-symmetric matrix, "
        "which no linear elastic stiffness is.",
        model.nodes_of(np.concatenate([t.stray_rows, t.stray_cols])),
        "Re-export K labelled 'symmetric' (one triangle) or with both triangles in full, or mirror "
        "the triangle yourself; find where the stray entries come from. If K is meant to be "
        "non-symmetric, this diagnosis does not apply.")


def _placeholder_finding(model: Model, structure: StructureResult) -> Finding:
    rows = structure.placeholder_rows
    diag = model.K.diagonal()
    coupled = np.ones(model.n, dtype=bool)
    coupled[rows] = False
    coupled &= diag > 0
    typical = float(np.median(diag[coupled])) if coupled.any() else None
    look = looks_like_placeholder(diag[rows], typical)
    sentences, advice = [], []

    def listed(r):
        if model.dofs is None:
            return ("row " if r.size == 1 else "rows ") + _list_nodes([int(x) + 1 for x in r], 6)
        head = ", ".join(model.row_label(int(x)) for x in r[:6])
        return head + (f" and {r.size - 6:,} more" if r.size > 6 else "")

    def rows_word(k):
        return f"{k:,} rows" if k != 1 else "1 row"

    if look.any():
        r = rows[look]
        values = np.unique(diag[r])
        value = f"{values[0]:g}" if values.size == 1 else "a power of ten"
        sentences.append(f"{rows_word(r.size)} look{'s' if r.size == 1 else ''} like restrained DOFs "
                         f"kept as placeholders: a diagonal of {value} and no coupling ({listed(r)}).")
        advice.append("Nothing to do if these DOFs are restrained on purpose: put no load on them and "
                      "ignore their displacements.")
    if (~look).any():
        r = rows[~look]
        lo, hi = float(diag[r].min()), float(diag[r].max())
        span = f"{lo:.3g}" if lo == hi else f"{lo:.3g} to {hi:.3g}"
        sentences.append(f"{rows_word(r.size)} hold{'s' if r.size == 1 else ''} only a diagonal ({span}) "
                         f"and no coupling, as a DOF attached to nothing but a spring to ground ({listed(r)}).")
        advice.append("If elements were meant to connect these DOFs, they are missing from the export.")
    sentences.append("Such rows are not counted as parts and get no restraint advice; the displacement "
                     "of each is its load divided by its diagonal.")
    return Finding("note", "structure.placeholder-rows", " ".join(sentences),
                   model.nodes_of(rows), " ".join(advice))


def verdict(findings: list[Finding], spectrum: Optional[SpectrumResult], structure: StructureResult,
            digits: Optional[DigitsResult], condition: Optional[ConditionResult]) -> tuple[str, str]:
    """(verdict line, status) with status one of healthy, warnings, errors."""
    status = "healthy"
    if any(f.severity == "warning" for f in findings):
        status = "warnings"
    if any(f.severity == "error" for f in findings):
        status = "errors"
    modes = spectrum.modes if spectrum is not None else []
    exact = [m for m in modes if m.exact]
    near = [m for m in modes if not m.exact]

    def detail(ms):
        kinds: dict[str, int] = {}
        for m in ms:
            kinds[m.kind] = kinds.get(m.kind, 0) + 1
        return ", ".join(f"{v} {k}" for k, v in kinds.items())

    if exact or structure.empty_rows.size:
        total = len(exact) if modes else structure.empty_rows.size
        return f"singular: {total} free mode(s) ({detail(exact)})", status
    prefix = f"{len(near)} near-singular mode(s) ({detail(near)}); " if near else ""
    if digits is not None and digits.samples:
        worst = min(s.trustworthy_digits for s in digits.samples)
        n = int(np.floor(max(worst, 0.0)))
        if status == "healthy":
            return f"healthy: trustworthy to {n} significant digits (measured)", status
        return f"ill-conditioned: {prefix}trustworthy to {n} significant digits (measured)", status
    if condition is not None and condition.scaled_estimate:
        n = int(np.floor(max(16 - math.log10(condition.scaled_estimate), 0)))
        word = "healthy" if status == "healthy" else "ill-conditioned"
        return f"{word}: {prefix}about {n} significant digits (estimated from the scaled condition number, not measured)", status
    return ("healthy" if status == "healthy" else "warnings found"), status
