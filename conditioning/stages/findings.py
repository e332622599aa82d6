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
from conditioning.linalg.doubledouble import U
from conditioning.results import (
    Asymmetry, ConditionResult, PivotLoss, DigitsResult, Finding, GeometryChecks, ModeGroup, NearSingularMode,
    OneTriangleExport, Restraint, SolutionAudit, SpectrumResult, StiffnessJump, StructureResult,
)
from conditioning.stages.structure import ASYMMETRY_NOISE, asymmetry_reported, looks_like_placeholder
from conditioning.stages.digits import WRITTEN_FIT_FACTOR

#: Digits of float64, log10(2^53).
FLOAT64_DIGITS = -math.log10(U)

#: Every finding code, with its meaning. Codes are stable across versions.
CODES = {
    "input.no-dof-map": "no DOF-to-node map: findings are by matrix row",
    "input.asymmetric": "the matrix is not symmetric",
    "input.one-triangle-export": "a non-symmetric-labelled matrix holds one triangle plus a few stray entries",
    "structure.placeholder-rows": "rows holding only a diagonal, no coupling (restrained DOFs kept as placeholders)",
    "structure.dof-without-stiffness": "rows with no stiffness at all",
    "structure.negative-diagonal": "negative diagonal entries",
    "structure.zero-diagonal": "zero diagonal entries in rows that have stiffness",
    "structure.constrained-system": "a constrained (saddle-point) system with multiplier or constraint rows, "
                                    "not a stiffness",
    "structure.separate-parts": "the model has parts that share no stiffness",
    "support.rigid-body-mode": "a part can move as a rigid body",
    "support.mechanism": "an internal mechanism",
    "support.dof-without-stiffness": "a direction at a node that nothing resists, though no row is empty",
    "stiffness.indefinite": "negative eigenvalues: the stiffness is not positive semi-definite",
    "stiffness.jump": "a stiffness jump that costs digits",
    "stiffness.stiff-region": "a region much stiffer than its surroundings whose rows balance (not grounded): "
                              "a stiff material or section, or a distorted element",
    "stiffness.spring-to-ground": "a support or spring to ground given by a large number (raises the raw "
                                  "condition number only; a direct solve loses no digits to it)",
    "stiffness.penalty-swallowed": "a penalty so stiff that K no longer holds the structural stiffness of the DOFs it links",
    "stiffness.stiff-link-eigenvalue": "small scaled eigenvalues that stiff links explain",
    "spectrum.inertia-mismatch": "the eigenvalue count and the inertia count disagree",
    "condition.ill-conditioned": "the scaled condition number is large",
    "condition.units-only": "the raw condition number is large only through rows of very different size "
                            "(units, DOF types, stiff next to soft material)",
    "pivot.digits-lost": "many digits lost at a pivot: a DOF nearly unsupported once the others are eliminated",
    "factor.negative-pivot": "a negative pivot: K is indefinite at that DOF",
    "digits.below-minimum": "fewer trustworthy digits than required",
    "digits.refinement-not-converged": "the extended-precision reference did not converge",
    "analysis.factorization-free": "the factor would not fit in memory; a reduced diagnosis ran",
    "analysis.pivots-not-read": "the factor fitted in memory but reading its pivots would not; figures that need them were skipped",
    "solution.does-not-fit": "the supplied solution does not solve this K and f to working precision",
    "solution.free-mode-component": "K is singular: the supplied solution's component along the free modes is arbitrary",
    "solution.lower-precision": "the supplied solution solves K and f to the lower precision it was written in "
                                "(single precision, or a few significant figures), and keeps the digits measured",
    "digits.node-below-minimum": "a node of the engineer's load keeps fewer trustworthy digits than required",
    "geometry.coincident-nodes": "nodes at one place that K does not join (never merged or tied)",
    "geometry.coincident-partly-tied": "coincident nodes K ties in some DOF types only (a hinge or release "
                                       "modelled with duplicate nodes)",
    "geometry.far-node": "a node far from every node it is coupled to (a coordinate in the wrong unit or a typo)",
    "geometry.touching-parts": "parts whose nodes come close to each other's without sharing stiffness "
                               "(meshed separately, resting on each other)",
    "geometry.element-inverted": "elements whose corner Jacobians have both signs: inverted or folded",
    "geometry.element-collapsed": "elements with a corner Jacobian near zero: collapsed onto a line or a plane",
    "geometry.element-shape": "elements with a poor shape (aspect ratio, corner angles, warping, Jacobian ratio)",
}


#: Digits lost at one pivot from which the loss is a finding (the project's choice:
#: half of float64's digits).
PIVOT_LOSS_DIGITS = 8


def _list_nodes(nodes: Sequence[int], limit: int = 8) -> str:
    nodes = list(nodes)
    head = ", ".join(str(v) for v in nodes[:limit])
    return head if len(nodes) <= limit else f"{head} and {len(nodes) - limit:,} more"


def _at(model: Model, rows_word: str, ids: Sequence[int], limit: int = 8) -> str:
    """``"node 1"``, ``"nodes 5, 6, 7, 8"``, ``"all 42 nodes"`` (``rows_word`` is ``"nodes"`` or ``"rows"``)."""
    ids = list(ids)
    total = int(model.dofs.nodes.size) if model.dofs is not None else model.n
    if total > 2 and len(set(ids)) == total:
        return f"all {total:,} {rows_word}"
    return f"{rows_word[:-1] if len(ids) == 1 else rows_word} {_list_nodes(ids, limit)}"


def _motion_text(mode: NearSingularMode) -> str:
    parts = sorted(mode.motion.items(), key=lambda kv: -kv[1])
    return ", ".join(f"{name} {share:.0%}" for name, share in parts)


def _solution_findings(audit: SolutionAudit, rows_word: str) -> list[Finding]:
    """What the audit of a supplied solution found (see :class:`SolutionAudit`)."""
    out = []
    written = ""
    of_case = f" of load case '{audit.case}'" if audit.case is not None else ""
    if audit.digits_written is not None:
        written = (f" Its values carry only {audit.digits_written} significant figures"
                   + (", which alone explains a backward error of this size."
                      if 10.0 ** -audit.digits_written >= 0.1 * audit.backward_error else "."))
    if audit.free_mode_share is not None:
        load = ""
        if audit.load_free_mode_share is not None and audit.load_free_mode_share > 1e-8:
            load = (f" The load itself has a component along the free modes ({audit.load_free_mode_share:.1e} "
                    "of it): no static equilibrium exists for it.")
        out.append(Finding(
            "error", "solution.free-mode-component",
            f"K is singular, so a solution is determined only up to its free modes: the supplied solution{of_case}'s "
            f"component along them is {audit.free_mode_share:.1e} of it, so it keeps "
            f"{audit.trustworthy_digits:.1f} trustworthy digits (bound).{load}",
            [], "Restrain the free modes (see the suggested restraints) and solve again; until then, "
                "no displacement of this model is defined."))
    elif not audit.fits:
        ratio = audit.backward_error / max(audit.allowed_backward_error or 0.0, U**2)
        precision = ""
        if audit.written_text is not None and audit.written_backward_error is not None:
            times = audit.backward_error / max(audit.written_backward_error, U**2)
            values = ("in single precision (about 7 digits)" if audit.written_as == "float32"
                      else audit.written_text)
            precision = (f" Its values are {values}, but rounding an exact solution to that precision allows a "
                         f"backward error of at most {audit.written_backward_error:.1e}, and this one is "
                         f"{times:.0f}" if times < 1e4 else
                         f" Its values are {values}, but rounding an exact solution to that precision allows a "
                         f"backward error of at most {audit.written_backward_error:.1e}, and this one is "
                         f"{times:.0e}")
            precision += " times that: the precision it was written in does not explain it."
        out.append(Finding(
            "error", "solution.does-not-fit",
            f"The supplied solution{of_case} does not solve this K and f at any written precision: its backward "
            f"error {audit.backward_error:.1e} is {ratio:.0e} times that of the tool's own float64 solve "
            f"({audit.allowed_backward_error:.1e}). It keeps {audit.trustworthy_digits:.1f} trustworthy digits, "
            f"and the cause is the vector, not the conditioning of K.{precision}",
            [], "Check that the displacements belong to this load case and this export (same DOF order, "
                "same restraints) and come from a solver that converged (an iterative solver stopped "
                "early leaves a residual)."))
    elif audit.fits_as_written and audit.written_text is not None:
        out.append(Finding(
            "note", "solution.lower-precision",
            f"The supplied solution{of_case} has a lower precision than float64 ({audit.written_text}; "
            f"{_precision_phrase(audit)}): its backward error {audit.backward_error:.1e} is within "
            f"{WRITTEN_FIT_FACTOR:g} times the {audit.written_backward_error:.1e} that rounding an exact solution "
            f"to that precision allows, so it solves this K and f at the precision it was written in. It keeps "
            f"{audit.trustworthy_digits:.1f} trustworthy digits ({audit.method}).",
            [], "Nothing to fix if that many digits are enough; for more, write the displacements with 17 "
                "significant figures (full float64)."))
    return out


def _precision_phrase(audit: SolutionAudit) -> str:
    """``"at most 2^-24 relative per entry"``: the rounding the written precision implies."""
    if audit.written_as == "float32":
        return "rounded to float32: at most 2^-24 of each entry, 2^-23 once printed"
    p = int(audit.written_digits or 0)
    return f"rounded to {p} figures: at most 0.5e-{max(p - 1, 0)} of each entry"


def build_findings(
    model: Model,
    structure: StructureResult,
    condition: Optional[ConditionResult],
    spectrum: Optional[SpectrumResult],
    restraints: list[Restraint],
    jumps: list[StiffnessJump],
    pivots: Optional[PivotLoss],
    digits: Optional[DigitsResult],
    *,
    min_digits: float = 4.0,
    stiff_link_eigenvalues: Sequence[float] = (),
    geometry: Optional[GeometryChecks] = None,
) -> list[Finding]:
    """Findings, most severe first (errors, warnings, notes; within a
    severity in the order of the families below). See :data:`CODES`.
    ``geometry``: the geometry checks (coincident and far nodes, element
    shapes), whose findings come first within their severity."""
    rows_word = "nodes" if model.dofs is not None else "rows"
    audit = digits.audit if digits is not None else None
    out = (
        _input_findings(model, structure)
        + geometry_findings(model, structure, spectrum, jumps, pivots, geometry)
        + _structure_findings(model, structure)
        + _mode_findings(model, structure, spectrum, restraints, rows_word)
        + _spectrum_findings(spectrum, pivots)
        + _stiff_link_findings(stiff_link_eigenvalues, jumps)
        + _jump_findings(model, jumps, digits, min_digits, rows_word)
        + _condition_findings(condition, spectrum, jumps, pivots, digits, rows_word)
        + _pivot_findings(model, pivots, spectrum)
        + (_solution_findings(audit, rows_word) if audit is not None else [])
        + _digits_findings(model, digits, min_digits, rows_word)
    )
    if structure.constraint_rows.size:
        out = _constrained_system_findings(model, structure, spectrum, pivots, out)
    out = _merging_first(out, spectrum, geometry)
    order = {"error": 0, "warning": 1, "note": 2}
    out.sort(key=lambda f: order[f.severity])
    return out


# ------------------------------------------------------------ finding families
def _input_findings(model: Model, structure: StructureResult) -> list[Finding]:
    """input.*: no DOF map, one-triangle export, asymmetry."""
    out = []
    if model.dofs is None:
        out.append(Finding("note", "input.no-dof-map",
                           "No DOF-to-node map was given, so rows are reported by index (1-based).",
                           [], "Give --dofs FILE or --dofs-per-node K for node-level findings."))
    if structure.one_triangle is not None:
        out.append(_one_triangle_finding(model, structure.one_triangle))
    if asymmetry_reported(structure.asymmetry):
        out.append(_asymmetry_finding(model, structure.asymmetry))
    return out


def _structure_findings(model: Model, structure: StructureResult) -> list[Finding]:
    """structure.*: DOFs without stiffness, negative and zero diagonals, parts, placeholders."""
    out = []
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
    return out


#: Modes of one kind on one part listed one finding each up to this count;
#: more make one finding for the group (the project's choice: one screen).
MODES_LISTED = 3
#: Groups of a mechanism named in its finding, and nodes per group.
GROUPS_NAMED, GROUP_NODES_NAMED = 4, 6


def _mode_findings(model: Model, structure: StructureResult, spectrum: Optional[SpectrumResult],
                   restraints: list[Restraint], rows_word: str) -> list[Finding]:
    """support.*: per group of modes (kind, part), one finding per rigid-body
    mode and per mechanism, or one for the group when it has more than
    MODES_LISTED; one per group of DOFs without stiffness found at single
    nodes (empty rows are the structure finding's). All errors: a nearly
    free mode (held by a soft spring) is an error too, since K's scaled
    condition number is then at least 1e8 (the gap rule)."""
    if spectrum is None:
        return []
    out = []
    for group in spectrum.mode_groups:
        modes = [spectrum.modes[i - 1] for i in group.modes]
        if group.kind == "dof-without-stiffness":
            local = [m for m in modes if m.description]
            if local:
                out.append(_node_dof_finding(structure, group, local, rows_word))
        elif group.count > MODES_LISTED:
            out.append(_mode_group_finding(structure, group, rows_word, modes[0], spectrum.support))
        else:
            for mode in modes:
                if mode.kind == "rigid-body":
                    out.append(_rigid_body_finding(model, structure, mode, bool(restraints), rows_word,
                                                   spectrum.support))
                else:
                    out.append(_mechanism_finding(model, structure, mode, rows_word, spectrum.support))
    return out


def _eigenvalue_text(value: float, exact: bool, largest: bool = False) -> str:
    """The scaled eigenvalue in words: zero at working precision (its computed
    digits are round-off) or the figure."""
    if exact:
        return f"{'largest ' if largest else ''}scaled eigenvalue 0 at working precision (round-off)"
    return f"{'largest ' if largest else ''}scaled eigenvalue {value:.2e}"


def _held_text(mode: NearSingularMode, support=None) -> str:
    if mode.exact:
        return ""
    if mode.undecided:
        res = f" {support.resolution:.1e}" if support is not None else ""
        return (f" Not decided whether it is free: the eigenvalue is above the resolution{res} of the stored "
                "K but no proof that K is positive definite succeeded. If it is free, K is singular and the "
                "suggested restraint removes it; if it is held, the eigenvalue is a real but weak stiffness, "
                "no support is missing and the digits measured say what it costs.")
    if support is not None and support.outcome == "proved supported":
        return (" It is held only by a small stiffness: K is proved positive definite "
                f"(lambda_min(S) >= {support.lower_bound_scaled:.2e}), so no support is missing, but it is "
                "badly conditioned.")
    return (" It is held only by a very small stiffness (for example a "
            "soft spring), so K is invertible but badly conditioned.")


def _mode_advice(mode: NearSingularMode, support, default: str) -> str:
    """The advice of a mode finding: none for a support proved, conditional when not decided."""
    if mode.undecided:
        return "If the mode is free: " + default[0].lower() + default[1:]
    if not mode.exact and support is not None and support.outcome == "proved supported":
        return ("No support is missing: check that the part is meant to be this flexible in that motion "
                "(a slender member, a soft spring, a very thin region), or stiffen it.")
    return default


def _where(structure: StructureResult, part: int) -> str:
    return "" if structure.parts <= 1 or part == 0 else f" in part {part}"


def _rigid_body_finding(model: Model, structure: StructureResult, mode: NearSingularMode, restraints_given: bool,
                        rows_word: str, support=None) -> Finding:
    who = "The model" if structure.parts <= 1 else f"Part {mode.part}"
    nearly = "" if mode.exact else "nearly "
    part_nodes = model.nodes_of(np.flatnonzero(structure.part_of_row == mode.part - 1))
    still = sorted(set(part_nodes) - set(mode.nodes))
    stay = (f"; {rows_word if len(still) > 1 else rows_word[:-1]} {_list_nodes(still)} "
            f"{'stay' if len(still) > 1 else 'stays'} in place (on the axis the "
            f"{'model' if structure.parts <= 1 else 'part'} turns about)" if still else "")
    return Finding(
        _mode_severity(mode, support), "support.rigid-body-mode",
        f"{who} can {nearly}move as a rigid body ({mode.description or _motion_text(mode)}); "
        f"{_eigenvalue_text(mode.eigenvalue, mode.exact)}; it moves {_at(model, rows_word, mode.nodes)}{stay}."
        f"{_held_text(mode, support)}",
        mode.nodes,
        _mode_advice(mode, support, "Add supports in the directions that move, or connect the part to the supported "
                     "structure" + ("; the report's suggested restraints are one minimal choice."
                                    if restraints_given else ".")))


#: A rigid group of a mechanism whose largest displacement is below this share
#: of the mode's largest is said to stand still (the project's choice: the
#: modes stage names nodes from 1% of the largest node's weight).
STILL_SHARE = 0.01


def _moving_and_still(model: Model, mode: NearSingularMode) -> tuple[list[list[int]], list[list[int]]]:
    """The mode's rigid groups split into those that move and those that stand
    still (a group of the mechanism can be held while the rest moves)."""
    if mode.vector is None or model.dofs is None:
        return list(mode.groups), []
    u = np.abs(np.asarray(mode.vector, dtype=np.float64))
    top = float(np.max(u, initial=0.0)) or 1.0
    moving, still = [], []
    for g in mode.groups:
        amplitude = float(np.max(u[np.isin(model.dofs.node, g)], initial=0.0))
        (still if amplitude < STILL_SHARE * top else moving).append(g)
    return moving, still


def _mode_severity(mode: NearSingularMode, support) -> str:
    """error, except a warning for a mode not decided or proved held (no support is missing)."""
    if mode.undecided or (not mode.exact and support is not None and support.outcome == "proved supported"):
        return "warning"
    return "error"


def _mechanism_finding(model: Model, structure: StructureResult, mode: NearSingularMode,
                       rows_word: str, support=None) -> Finding:
    head = (f"Internal {'near-' if not mode.exact else ''}mechanism{_where(structure, mode.part)}: "
            f"it moves {_at(model, rows_word, mode.nodes)}")
    if mode.description:
        head += f" ({mode.description})"
    if mode.groups:
        moving, still = _moving_and_still(model, mode)
        for groups, words in ((moving, "moving rigidly"), (still, "standing still")):
            if groups:
                named = "; ".join(f"{{{_list_nodes(g, GROUP_NODES_NAMED)}}}" for g in groups[:GROUPS_NAMED])
                more = len(groups) - GROUPS_NAMED
                head += (f"; {len(groups)} group{'s' if len(groups) != 1 else ''} {words}: {named}"
                         + (f" and {more} more" if more > 0 else ""))
        if mode.meeting:
            word = rows_word if len(mode.meeting) > 1 else rows_word[:-1]
            head += f"; the groups meet at {word} {_list_nodes(mode.meeting)}"
    advice = ("Restrain the member's rotation about its own axis at one end (release torsion at one end "
              "only), or restrain that rotation at one of its nodes." if mode.description.startswith("spin")
              else "Look for a missing brace, a released end (hinge) too many, or a member that "
                   "only touches the rest at one node.")
    return Finding(
        _mode_severity(mode, support), "support.mechanism",
        f"{head}; {_eigenvalue_text(mode.eigenvalue, mode.exact)}.{_held_text(mode, support)}"
        + ("" if model.coords is not None else
           " Without coordinates a rotation of a part cannot be told from a mechanism."),
        mode.nodes, _mode_advice(mode, support, advice))


def _mode_group_finding(structure: StructureResult, group: ModeGroup, rows_word: str,
                        first: Optional[NearSingularMode] = None, support=None) -> Finding:
    """One finding for many rigid-body modes or mechanisms of one part."""
    what = "rigid-body modes" if group.kind == "rigid-body" else "internal mechanisms"
    code = "support.rigid-body-mode" if group.kind == "rigid-body" else "support.mechanism"
    nearly = "" if group.exact else "nearly free "
    motion = f" ({group.motion})" if group.motion else ""
    advice = ("Each mode is listed in the JSON report (and --modes-csv). Look for nodes no element "
              "connects in some direction, missing supports or released ends.")
    return Finding(
        "error" if first is None else _mode_severity(first, support), code,
        f"{group.count:,} {nearly}{what}{_where(structure, group.part)}{motion}; {rows_word}: "
        f"{_list_nodes(group.nodes)}; {_eigenvalue_text(group.eigenvalue_max, group.exact, largest=True)}."
        + ("" if first is None else _held_text(first, support)),
        group.nodes, advice if first is None else _mode_advice(first, support, advice))


def _node_dof_finding(structure: StructureResult, group: ModeGroup, modes: list[NearSingularMode],
                      rows_word: str) -> Finding:
    """DOFs without stiffness found at single nodes (no empty row), one finding per part."""
    nodes = sorted({v for m in modes for v in m.nodes})
    motion = group.motion if len(modes) == group.count else "; ".join(sorted({m.description for m in modes}))
    return Finding(
        "error", "support.dof-without-stiffness",
        f"{len(modes):,} direction(s) at single {rows_word}{_where(structure, group.part)} have no stiffness "
        f"though no row is empty: {motion}. {rows_word.capitalize()}: {_list_nodes(nodes)}.",
        nodes, _node_dof_advice(modes))


def _node_dof_advice(modes: list[NearSingularMode]) -> str:
    """The usual cause named by what the free directions are: rotations (drilling) or translations (bars)."""
    turns = any(m.description.startswith("rotation") for m in modes)
    moves = any(m.description.startswith("translation") for m in modes)
    causes = []
    if turns or not moves:
        causes.append("a rotation about the normal of shell elements without drilling stiffness on an "
                      "inclined wall (use elements with drilling stiffness)")
    if moves:
        causes.append("a translation across a node held only by bars (truss members) along one line, "
                      "which give no stiffness across it (add a member or support across that line)")
    return ("Each is a DOF without stiffness along its axis, not a mechanism: typically "
            + "; or ".join(causes) + ". Restrain it at each node (the suggested restraints) or remove the cause.")


#: Findings a constrained system's own finding replaces: its negative
#: eigenvalues are the constraints' (one each), its zero diagonals are the
#: multiplier rows, and its raw-versus-scaled condition numbers compare rows
#: scaled by the 1 of a convention.
_CONSTRAINED_REPLACES = ("stiffness.indefinite", "factor.negative-pivot", "condition.units-only")


def _constrained_system_findings(model: Model, structure: StructureResult, spectrum: Optional[SpectrumResult],
                                 pivots: Optional[PivotLoss], out: list[Finding]) -> list[Finding]:
    """structure.constrained-system in place of the findings that read it as a stiffness."""
    rows = structure.constraint_rows
    m = int(rows.size)
    others = np.setdiff1d(structure.zero_diagonal, rows)
    kept = [f for f in out if f.code not in _CONSTRAINED_REPLACES
            and not (f.code == "structure.zero-diagonal" and others.size == 0)]
    labels = ", ".join(model.row_label(int(r)) for r in rows[:6]) + (f" and {m - 6:,} more" if m > 6 else "")
    negative = spectrum.negative_eigenvalues if spectrum is not None else None
    exact = spectrum is None or spectrum.negative_exact
    if negative is None:
        count, severity = "", "warning"
    else:
        how = spectrum.negative_method
        has = f"it has {'' if exact else 'at least '}{negative:,} (counted from {how})"
        if negative == m or (not exact and negative < m):
            count, severity = f"; {has}, as the constraints explain." if negative == m else f"; {has}.", "warning"
        elif negative > m:
            count, severity = (f"; {has}: {negative - m:,} more than the constraints explain, so the stiffness "
                               "itself is not positive definite on the motions the constraints allow "
                               "(a negative spring, buckling, or a free mode the constraints do not hold)."), "error"
        else:
            count, severity = (f"; {has}: {m - negative:,} fewer, so some constraints are dependent (the "
                               "same restraint written twice) or hold nothing."), "error"
    if pivots is not None and pivots.negative_count and not pivots.symmetric:
        count += (f" The {pivots.negative_count:,} negative pivots of the factorization are those of a row-pivoted "
                  "LU, whose signs do not count eigenvalues.")
    message = (f"K is a constrained (saddle-point) system, not a stiffness: {m:,} row{'s' if m != 1 else ''} "
               f"({labels}) form a zero diagonal block coupled to the stiffness rows, as Lagrange "
               f"multiplier or constraint-equation rows do. Such a system has one negative eigenvalue per "
               f"independent constraint{count} These rows have no diagonal to scale by, so the scaling "
               "takes 1 for them (a convention): the raw and the scaled condition numbers both depend on the "
               "units the constraint rows are written in and are not the stiffness's. The digits are those of "
               "a solve with row pivoting (threshold partial pivoting).")
    finding = Finding(severity, "structure.constrained-system", message, model.nodes_of(rows),
                      "To check the stiffness itself, export it without the multiplier rows, with the "
                      "supports as removed rows (or the constraints eliminated); to solve this system use a "
                      "symmetric indefinite (LDL^T with pivoting) or an LU solver with pivoting, not Cholesky.")
    order = {"error": 0, "warning": 1, "note": 2}
    return sorted([finding] + kept, key=lambda f: order[f.severity])


def _spectrum_findings(spectrum: Optional[SpectrumResult], pivots: Optional[PivotLoss]) -> list[Finding]:
    """stiffness.indefinite (when no pivot locates it) and spectrum.inertia-mismatch."""
    if spectrum is None:
        return []
    out = []
    if spectrum.negative_eigenvalues and not (pivots is not None and pivots.negative_pivots):
        # With pivots, the negative-pivot finding says it with a location.
        at_least = "" if spectrum.negative_exact else "at least "
        how = spectrum.negative_method or "the pivots' signs, Sylvester's law of inertia"
        out.append(Finding("error", "stiffness.indefinite",
                           f"K has {at_least}{spectrum.negative_eigenvalues:,} negative eigenvalue(s), "
                           f"from {how}.", [],
                           "A linear elastic stiffness is positive semi-definite: look for negative "
                           "springs, stress stiffening under compression or buckling."))
    if spectrum.inertia_agrees is False:
        out.append(Finding("warning", "spectrum.inertia-mismatch",
                           f"{spectrum.count} near-singular mode(s) were computed but the inertia "
                           f"count below the gap is {spectrum.inertia_count}.", [],
                           "The eigen-solve may have missed modes; treat the mode list as incomplete."))
    return out


def _stiff_link_findings(stiff_link_eigenvalues: Sequence[float], jumps: list[StiffnessJump]) -> list[Finding]:
    """stiffness.stiff-link-eigenvalue: small scaled eigenvalues set aside as stiff links."""
    if not stiff_link_eigenvalues:
        return []
    return [Finding("note", "stiffness.stiff-link-eigenvalue",
                    f"{len(stiff_link_eigenvalues)} small eigenvalue(s) of the scaled matrix "
                    f"(smallest {min(stiff_link_eigenvalues):.1e}) come from very stiff links, not "
                    "from a missing support" + ("; see the stiffness jumps." if jumps else "."),
                    [], "")]


def _jump_findings(model: Model, jumps: list[StiffnessJump], digits: Optional[DigitsResult],
                   min_digits: float, rows_word: str) -> list[Finding]:
    """stiffness.jump and stiffness.penalty-swallowed, one per jump."""
    measured_worst = min((s.trustworthy_digits for s in own_samples(digits)), default=None)
    out = []
    for j in jumps:
        if j.swallowed:
            out.append(_swallowed_finding(model, j, rows_word, digits))
        else:
            out.append(_jump_finding(model, j, measured_worst, min_digits, rows_word))
    return out


def _jump_finding(model: Model, j: StiffnessJump, measured_worst: Optional[float], min_digits: float,
                  rows_word: str) -> Finding:
    if j.kind == "diagonal-outlier":
        # Not a cause of lost digits (jumps.py): said as what it is, never blamed.
        return Finding("note", "stiffness.spring-to-ground",
                       f"Spring to ground at {_at(model, rows_word, j.nodes)}, {j.ratio:.1e} times the typical "
                       "diagonal of its DOF type (a support given by a large number): it raises the raw "
                       "condition number by about that ratio, which diagonal scaling removes; a direct "
                       "solve loses no digits to it.", j.nodes, j.reasoning)
    if j.kind == "stiff-region":
        shown = _at(model, rows_word, j.nodes)
        return Finding("note", "stiffness.stiff-region",
                       f"Stiff region at {shown}: diagonal stiffness up to {j.ratio:.1e} times the typical of its "
                       "DOF type, in rows that are not grounded (their response to a rigid motion is round-off): "
                       "a part much stiffer than its surroundings or a distorted element, not a spring to ground.",
                       j.nodes, j.reasoning)
    # A stiff spring to ground is absorbed by diagonal scaling; a stiff
    # link between DOFs is not. Once digits are measured (the worst-case
    # load excites the weakest mode), the measurement decides.
    sev = "warning" if (j.digits_cost >= 6 and j.kind == "coupling") else "note"
    measured = ""
    if measured_worst is not None:
        lost = FLOAT64_DIGITS - measured_worst
        measured = (f"; the measured solves lost {lost:.1f} digits in all"
                    + ("" if lost + 1.0 >= j.digits_cost else
                       ", so for these loads it did not cost that much"))
        if measured_worst >= min_digits and sev == "warning" and lost + 1.0 < j.digits_cost:
            sev = "note"
    return Finding(sev, "stiffness.jump",
                   f"{j.kind} stiffness jump at {_at(model, rows_word, j.nodes)}: ratio "
                   f"{j.ratio:.1e}, can cost up to {j.digits_cost:.1f} digits (estimated from "
                   f"the ratio){measured}.",
                   j.nodes, j.reasoning)


def _condition_findings(condition: Optional[ConditionResult], spectrum: Optional[SpectrumResult],
                        jumps: list[StiffnessJump], pivots: Optional[PivotLoss],
                        digits: Optional[DigitsResult], rows_word: str = "nodes") -> list[Finding]:
    """condition.ill-conditioned and condition.units-only (K nonsingular only)."""
    if condition is None or condition.singular:
        return []
    out = []
    sk = condition.scaled_estimate
    if sk is not None and sk > ILL_CONDITIONED:
        out.append(Finding("warning", "condition.ill-conditioned",
                           f"The scaled condition number is {sk:.2e}: up to {math.log10(sk):.1f} "
                           "digits may be lost" + (" (see the measured digits)."
                                                   if digits is not None and digits.samples
                                                   else " (digits not measured)."), [],
                           _where_to_look(spectrum, jumps, pivots)))
    if condition.scaling_gain_digits is not None and condition.scaling_gain_digits >= 3:
        out.append(Finding("note", "condition.units-only",
                           f"The raw condition number {condition.estimate:.2e} falls to {sk:.2e} after "
                           f"diagonal scaling: {condition.scaling_gain_digits:.1f} digits of it come only from rows "
                           "of very different size (units or DOF-type mixing: rotations next to "
                           "translations, mm next to m; or stiff material next to soft"
                           + _grounded_clause(jumps, rows_word) + "), which a direct solver does not pay.", [], ""))
    return out


def _pivot_findings(model: Model, pivots: Optional[PivotLoss],
                    spectrum: Optional[SpectrumResult]) -> list[Finding]:
    """factor.negative-pivot and pivot.digits-lost."""
    if pivots is None:
        return []
    out = []
    if pivots.negative_pivots:
        out.append(_negative_pivot_finding(model, pivots, spectrum))
    positive = [e for e in pivots.worst if np.isfinite(e.digits)]
    if positive and positive[0].digits >= PIVOT_LOSS_DIGITS:
        out.append(Finding("warning", "pivot.digits-lost",
                           f"{positive[0].digits:.1f} digits lost at the pivot of {positive[0].label}: "
                           "elimination leaves almost none of its stiffness.",
                           model.nodes_of([positive[0].row]),
                           "A pivot far smaller than its diagonal means the DOF is nearly unsupported "
                           "once the others are eliminated."))
    return out


def load_case_samples(model: Model, digits: Optional[DigitsResult]) -> list:
    """The samples of the tool's own solves of the engineer's load case(s), fewest digits first
    (the invented ``random-k`` and ``worst-case`` loads left out)."""
    if digits is None or model.load is None:
        return []
    names = {"load"} if np.ndim(model.load) == 1 else set(model.load_names or
                                                           (f"load-{k + 1}" for k in range(np.shape(model.load)[1])))
    return [s for s in own_samples(digits)
            if s.sample.removesuffix(" (pivoted LU)").removesuffix(" (exported K)") in names]


def node_digits(model: Model, sample) -> list[tuple[int, float]]:
    """(node, digits of its worst component) of every node, fewest first, from ``per_dof_digits``
    (rows are nodes 1..n without a DOF map); the worst nodes kept on the sample without them."""
    if sample.per_dof_digits is None:
        return [(w.node, w.digits) for w in sample.worst_nodes]
    per = np.asarray(sample.per_dof_digits, dtype=np.float64)
    nodes = np.asarray(model.dofs.node) if model.dofs is not None else np.arange(1, per.size + 1)
    ids, inverse = np.unique(nodes, return_inverse=True)
    worst = np.full(ids.size, np.inf)
    np.minimum.at(worst, inverse, per)
    order = np.lexsort((ids, worst))
    return [(int(ids[k]), float(worst[k])) for k in order]


def _node_list(pairs: list[tuple[int, float]], limit: int = 6) -> str:
    """``"118 (3.0), 101 (3.2) and 4 more"``."""
    head = ", ".join(f"{node} ({d:.1f})" for node, d in pairs[:limit])
    return head if len(pairs) <= limit else f"{head} and {len(pairs) - limit:,} more"


def _digits_findings(model: Model, digits: Optional[DigitsResult], min_digits: float,
                     rows_word: str = "nodes") -> list[Finding]:
    """digits.below-minimum, digits.node-below-minimum and digits.refinement-not-converged.

    The normwise figure judged is the worst of the engineer's load cases when
    one is below ``min_digits``, else the worst of all samples (invented loads
    and a supplied solution that fits included). Per node, only the
    engineer's load cases are judged: a node of theirs below ``min_digits``
    is an error even when the normwise figure (relative to the largest
    displacement) is above it.
    """
    if digits is None or not digits.samples:
        return []
    out = []
    audit = digits.audit
    # A supplied solution that does not fit is the solution's fault, not
    # K's: it has its own finding.

    def audit_of(sample):
        match = [a for a in digits.audits if sample.sample == ("solution" if a.case is None
                                                               else f"solution ({a.case})")]
        return match[0] if match else audit

    def fits(sample) -> bool:
        a = audit_of(sample)
        return a is None or a.fits

    cases = load_case_samples(model, digits)
    judged = own_samples(digits) + [s for s in digits.samples if s.audited and fits(s)]
    below_cases = [s for s in cases if s.trustworthy_digits < min_digits]
    worst = below_cases[0] if below_cases else min(judged, key=lambda s: s.trustworthy_digits)
    if worst.trustworthy_digits < min_digits:
        what = f"sample '{worst.sample}'"
        if worst.audited:
            a = audit_of(worst)
            what = f"the supplied solution '{worst.sample}'" + (
                f" ({a.written_text})" if a is not None and a.written_text else "")
        elif worst not in cases:
            what += (" (an invented load: " + ("random forces on every DOF" if worst.sample.startswith("random-")
                                               else "a load along the weakest mode of the scaled K") + ")")
        out.append(Finding("error", "digits.below-minimum",
                           f"Only {max(worst.trustworthy_digits, 0):.1f} trustworthy digits for {what} "
                           f"(required: {min_digits:g}; "
                           f"{worst.method if worst.method.startswith('certified') else 'measured, ' + worst.method}).",
                           [w.node for w in worst.worst_nodes],
                           "Remove the cause of the ill-conditioning (modes, stiffness jumps) rather "
                           "than trusting more digits than were measured."
                           if not worst.audited else
                           "Write the displacements with more significant figures (17 for full float64), "
                           "or solve in double precision."))
    for s in cases:
        if s in below_cases or not s.converged:
            continue  # the normwise finding (or the unconverged reference) says it already
        low = [(node, d) for node, d in node_digits(model, s) if d < min_digits]
        if low:
            word = rows_word[:-1] if len(low) == 1 else rows_word
            out.append(Finding(
                "error", "digits.node-below-minimum",
                f"For {'the load' if s.sample == 'load' else 'load case'} '{s.sample}', {len(low):,} {word} keep{'s' if len(low) == 1 else ''} fewer than "
                f"{min_digits:g} trustworthy digits: {_node_list(low)} (each {rows_word[:-1]}'s worst component "
                f"against its own size; "
                f"{s.method if s.method.startswith('certified') else 'measured, ' + s.method}), although the "
                f"load keeps {s.trustworthy_digits:.1f} digits relative to its largest displacement.",
                [node for node, _ in low],
                "The displacements of these nodes are small beside the largest ones and lose more digits; "
                "remove the cause of the ill-conditioning (see the stiffness jumps and pivots), or do not "
                "rely on their figures beyond the digits shown."))
    for s in digits.samples:
        if not s.converged:
            out.append(Finding("warning", "digits.refinement-not-converged",
                               f"The extended-precision reference for sample '{s.sample}' did not "
                               f"converge ({s.stop_reason}); its digits are an upper estimate.",
                               [], "Treat the displacements of this load case as untrustworthy."))
    return out


def _swallowed_finding(model: Model, j: StiffnessJump, rows_word: str,
                       digits: Optional[DigitsResult] = None) -> Finding:
    """A penalty that swallowed the structure: all digits of the linked DOFs, never a mechanism.

    What the rest of the report describes is said so that it cannot be read as
    the exported K's: the condition number, the near-singular modes and the
    held-DOF digits are of the model with the linked DOFs held (a prediction
    after the suggested change when the exported K itself was measured)."""
    exported = digits is not None and digits.headline_solve == "exported"
    zero = None if digits is None else digits.exported_zero_modes
    if exported:
        held = ("The exported K itself is singular at working precision along the link"
                + (f" ({zero} scaled eigenvalue{'s' if zero != 1 else ''} zero at working precision)"
                   if zero else "")
                + "; the condition number, the near-singular modes and the digits marked 'after the change' "
                  "are of the model with these DOFs held: a prediction for the model once the penalty is lowered, "
                  "not figures of the exported K.")
    else:
        held = ("The condition number, the near-singular modes and the digits shown are of the model with these "
                "DOFs held (as if prescribed), not of the exported K, which is singular at working precision "
                "along the link.")
    dofs = ", ".join(model.row_label(r) for r in j.rows[:6]) + (f" and {len(j.rows) - 6} more" if len(j.rows) > 6 else "")
    kept = ("nothing" if not j.structure_digits_kept
            else f"only about {j.structure_digits_kept:.1f} digits")
    return Finding(
        "error", "stiffness.penalty-swallowed",
        f"A penalty link at {_at(model, rows_word, j.nodes)} ({j.ratio:.1e} times the typical stiffness) "
        f"has swallowed the structure: K keeps {kept} of the structural stiffness of {dofs} (about "
        f"{j.structural_stiffness:.2g}), so the displacements of these DOFs have no trustworthy digits. "
        "This is a stiffness jump, not a mechanism: no restraint is needed. " + held,
        j.nodes,
        "Lower the penalty to about 1e4 times the stiffness of the members it ties"
        + (f" ({j.advice_value:.3g})" if j.advice_value is not None else "")
        + ", or tie the DOFs with a constraint that eliminates one of them.")


def _negative_pivot_finding(model: Model, pivots: PivotLoss, spectrum: Optional[SpectrumResult]) -> Finding:
    """Negative eigenvalues where their eigenvectors live, then where the elimination met them,
    how many there are and how they were counted, and what usually causes one."""
    neg = pivots.negative_pivots
    total = max(pivots.negative_count, len(neg))
    where = ", ".join(e.label for e in neg[:6]) + (f" and {total - 6:,} more" if total > 6 else "")
    count = spectrum.negative_eigenvalues if spectrum is not None else 0
    at_least = "" if spectrum is None or spectrum.negative_exact else "at least "
    how = (spectrum.negative_method if spectrum is not None and spectrum.negative_method
           else "the pivots' signs, Sylvester's law of inertia")
    counted = (f"K has {at_least}{count:,} negative eigenvalue{'' if count == 1 else 's'} (counted from "
               f"{how}). " if count else "")
    located = negative_mode_words(model, spectrum)
    met = ("The elimination met it at " if located else "Negative pivot at ") + (
        f"{where} ({total:,} negative pivot{'' if total == 1 else 's'}): once the DOFs eliminated before it "
        "are condensed out, the stiffness left at this DOF is negative, so K is not positive definite: a "
        "Cholesky solver stops here, and one that carries on returns displacements of a structure that is "
        "not stable. Which DOF shows it depends on the elimination order"
        + ("; the eigenvector says where the cause is." if located else "; the cause is nearby."))
    if not pivots.symmetric:
        met += (" The factorization pivoted rows, so these pivots are not an LDL^T's: their signs do not "
                "count the negative eigenvalues.")
    # Located: the eigenvector's nodes are where to look; the pivot's node is
    # named in the message only, as where the elimination met it.
    nodes = _eigenvector_nodes(spectrum) or model.nodes_of([e.row for e in neg])
    return Finding(
        "error", "factor.negative-pivot", f"{counted}{located}{met}", nodes,
        (f"Look here first: the negative eigenvector lives at these {'nodes' if model.dofs is not None else 'rows'} "
         "(the negative pivot's DOF is only where the elimination met it). " if located else "")
        + "Usual causes: compressive geometric (stress) stiffness at or beyond a buckling load, a "
        "spring or element entered with a negative stiffness, or a sign error in an element or "
        "in the export. Check the loads of a geometric-stiffness step against the buckling load.")


#: Nodes of a negative eigenvector named in a finding's message (project's choice).
NEGATIVE_NODES_WORDS = 4


def _eigenvector_nodes(spectrum: Optional[SpectrumResult]) -> list[int]:
    """The nodes the negative eigenvectors live on, largest share of the most negative first."""
    out: list[int] = []
    for m in spectrum.negative_modes if spectrum is not None else []:
        out += [v for v in m.nodes[:NEGATIVE_NODES_WORDS] if v not in out]
    return out


def negative_mode_words(model: Model, spectrum: Optional[SpectrumResult]) -> str:
    """``"Its eigenvector lives at node 74 (9%), ...: look there. "``; empty without located ones."""
    modes = spectrum.negative_modes if spectrum is not None else []
    if not modes:
        return ""
    word = "node" if model.dofs is not None else "row"

    def at(m) -> str:
        items = [f"{v} ({100 * s:.0f}%)" for v, s in zip(m.nodes[:NEGATIVE_NODES_WORDS], m.shares)]
        return f"{word}{'s' if len(items) > 1 else ''} " + ", ".join(items)

    if len(modes) == 1:
        head = f"Its eigenvector lives at {at(modes[0])} (share of the scaled eigenvector)"
    else:
        head = (f"The eigenvector of the most negative (scaled eigenvalue {modes[0].eigenvalue:.2g}) lives at "
                f"{at(modes[0])}, of the next ({modes[1].eigenvalue:.2g}) at {at(modes[1])} (shares of the "
                "scaled eigenvectors)")
    return head + ": the negative stiffness is there. "


#: A scaled condition number above this is "ill-conditioned": more than half
#: of float64's 16 digits may be lost (common practice).
ILL_CONDITIONED = 1e8

#: The causes a verdict names, in the order :func:`verdict` tries them: the
#: input first (every later figure rests on it), then what makes K unusable,
#: then the supplied solution, then what costs digits.
CAUSES = ("suspect input", "singular", "constrained system", "indefinite", "supplied solution does not fit",
          "not decided", "near-singular", "stiffness jump", "ill-conditioned", "fewer digits than required",
          "suspect geometry", "healthy", "no defect found")


def _significant(digits: float) -> str:
    """``"13 significant digits"``: whole digits, rounded down, never below 0."""
    n = int(math.floor(max(digits, 0.0) + 1e-9))
    return f"{n} significant digit{'' if n == 1 else 's'}"


def status_of(findings: Sequence[Finding]) -> str:
    """``errors``, ``warnings`` or ``healthy``: the most severe finding decides.

    The one rule for the report's status, which the command's exit status
    maps one to one (3, 1, 0).
    """
    severities = {f.severity for f in findings}
    return "errors" if "error" in severities else "warnings" if "warning" in severities else "healthy"


def samples_phrase(own: Sequence) -> str:
    """``"the load and 4 invented loads"``, ``"3 load cases and 4 invented loads"``, ``"4 invented loads"``:
    what a worst-of figure is the worst over (``own`` the tool's own samples)."""
    invented = sum(1 for s in own if s.sample.startswith("random-") or s.sample.startswith("worst-case"))
    cases = len(own) - invented
    head = "the load" if cases == 1 else f"{cases} load cases" if cases else ""
    tail = f"{invented} invented load{'' if invented == 1 else 's'}" if invented else ""
    return " and ".join(t for t in (head, tail) if t) or "no load"


def words_of(findings: Sequence[Finding]) -> str:
    """``"rows"`` without a DOF map, else ``"nodes"``."""
    return "rows" if "input.no-dof-map" in {f.code for f in findings} else "nodes"


def own_samples(digits: Optional[DigitsResult]) -> list:
    """The samples of the tool's own solves of the kind the key figure describes
    (:attr:`DigitsResult.headline_solve`; a supplied solution is audited apart)."""
    if digits is None:
        return []
    kind = getattr(digits, "headline_solve", "symmetric")
    return [s for s in digits.samples if not s.audited and getattr(s, "solver_kind", "symmetric") == kind]


def _grounded_clause(jumps: list[StiffnessJump], rows_word: str) -> str:
    """'; here also ... springs to ground' when diagonal outliers explain part of the raw figure."""
    grounded = sorted({v for j in jumps if j.kind == "diagonal-outlier" for v in j.nodes})
    if not grounded:
        return ""
    return f"; here also the springs to ground given by large numbers at {rows_word} {_list_nodes(grounded)}"


def _where_to_look(spectrum: Optional[SpectrumResult], jumps: list[StiffnessJump],
                   pivots: Optional[PivotLoss]) -> str:
    """Advice that points only at sections of the report that hold something."""
    shown = []
    if spectrum is not None and spectrum.modes:
        shown.append("near-singular modes")
    if any(j.kind != "diagonal-outlier" for j in jumps):  # springs to ground cost no digits
        shown.append("stiffness jumps")
    if pivots is not None and pivots.worst and pivots.max_digits >= PIVOT_LOSS_DIGITS:
        shown.append("digits lost at pivots")
    if shown:
        return f"Look at the {', '.join(shown[:-1]) + ' and ' if len(shown) > 1 else ''}{shown[-1]} for the cause."
    return ("No near-singular mode or stiffness jump was found to explain it: look for elements "
            "of very different stiffness or size meeting at a node.")


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
            digits: Optional[DigitsResult], condition: Optional[ConditionResult],
            *, min_digits: float = 4.0) -> tuple[str, str]:
    """(verdict line, status): the first word is the cause, from :data:`CAUSES`.

    The first cause whose evidence is present wins: an input finding of
    warning or error severity (``input.*``); a free mode or a DOF without
    stiffness; negative eigenvalues or pivots; a penalty that swallowed the
    structure; a supplied solution that does not solve K x = f; a nearly
    free mode; a stiffness jump when K is
    ill-conditioned or digits fall below ``min_digits``; an ill-conditioned
    scaled matrix (kappa_2(S) > 1e8); fewer measured digits than
    ``min_digits`` although kappa_2(S) is moderate; else ``healthy``
    (no warning or error) or ``no defect found`` (warnings about the
    analysis itself, e.g. a reduced diagnosis). The status is
    :func:`status_of` the findings.
    """
    status = status_of(findings)
    codes = {f.code for f in findings if f.severity in ("error", "warning")}
    modes = spectrum.modes if spectrum is not None else []
    exact = [m for m in modes if m.exact]
    near = [m for m in modes if not m.exact]

    def kinds(ms):
        counts: dict[str, int] = {}
        for m in ms:
            counts[m.kind] = counts.get(m.kind, 0) + 1
        return ", ".join(f"{v} {k}" for k, v in counts.items())

    own = own_samples(digits)
    worst = min((s.trustworthy_digits for s in own), default=None)
    if worst is not None:
        how = "certified" if all(s.method.startswith("certified") for s in own) else "measured"
        figure = f"trustworthy to {_significant(worst)} ({how}; worst of {samples_phrase(own)})"
        if digits.headline_solve == "pivoted":
            symmetric = [s for s in digits.samples if not s.audited and s.solver_kind == "symmetric"]
            sym_worst = min((s.trustworthy_digits for s in symmetric), default=None)
            figure += (" with a pivoted LU, as a direct solver of this K pivots"
                       + (f"; a symmetric solve without pivoting keeps {_significant(sym_worst)}"
                          if sym_worst is not None else ""))
    elif condition is not None and condition.scaled_estimate and not condition.singular:
        figure = (f"about {_significant(16 - math.log10(condition.scaled_estimate))} "
                  "(estimated from the scaled condition number, not measured)")
    else:
        figure = ""
    audit = digits.audit if digits is not None else None
    # What the figure leaves out: nodes of the engineer's load below the
    # minimum, and a supplied solution that fits at a lower precision.
    node_findings = [f for f in findings if f.code == "digits.node-below-minimum"]
    low_nodes = sorted({v for f in node_findings for v in f.nodes})
    if figure and low_nodes:
        case = node_findings[0].message.split("'")[1] if len(node_findings) == 1 else ""
        of = "of the load" if case == "load" else f"of load case '{case}'" if case else "of the load cases"
        figure += (f", but {words_of(findings)[:-1] if len(low_nodes) == 1 else words_of(findings)} "
                   f"{_list_nodes(low_nodes, 4)} {of} keep{'s' if len(low_nodes) == 1 else ''} fewer than "
                   f"{min_digits:g}")
    supplied_low = False
    if audit is not None and audit.fits and audit.free_mode_share is None and (
            audit.written_text is not None or audit.trustworthy_digits < min_digits):
        supplied_low = audit.trustworthy_digits < min_digits
        figure = ("the tool's own solve is " + figure + "; " if figure else "") + (
            f"the supplied solution{' (' + audit.written_text + ')' if audit.written_text else ''} keeps "
            f"{_significant(audit.trustworthy_digits)}")
    tail = f"; {figure}" if figure else ""

    input_codes = sorted(c for c in codes if c.startswith("input."))
    if input_codes:
        what = "; ".join(CODES.get(c, c) for c in input_codes)
        return f"suspect input: {what}{tail}", status
    n_empty = int(structure.empty_rows.size)
    if exact or n_empty:
        total = len(exact) if modes else n_empty
        detail = kinds(exact) if exact else f"{n_empty} dof-without-stiffness"
        return f"singular: {total} free mode{'' if total == 1 else 's'} ({detail})", status
    words = "rows" if "input.no-dof-map" in {f.code for f in findings} else "nodes"
    negative = spectrum.negative_eigenvalues if spectrum is not None else 0
    if structure.constraint_rows.size:
        rows = structure.constraint_rows
        m = int(rows.size)
        shown = ", ".join(str(int(r) + 1) for r in rows[:4]) + (f" and {m - 4:,} more" if m > 4 else "")
        at_least = "" if spectrum is None or spectrum.negative_exact else "at least "
        exact = spectrum is None or spectrum.negative_exact
        per = ("one per constraint" if negative == m else
               f"{m:,} expected, one per constraint (the count is a lower bound)" if not exact and negative < m else
               f"{negative - m:,} beyond the constraints: the stiffness is not positive definite" if negative > m
               else f"{m - negative:,} fewer than the constraints: some are dependent")
        count = f"; {at_least}{negative:,} negative eigenvalue{'' if negative == 1 else 's'}, {per}" \
            if spectrum is not None else ""
        return (f"constrained system, not a stiffness: {m:,} constraint row{'' if m == 1 else 's'} "
                f"(rows {shown}) with a zero diagonal block{count}{tail}"), status
    pivots = [f for f in findings if f.code == "factor.negative-pivot"]
    if negative or pivots or "stiffness.indefinite" in codes:
        at_least = "" if spectrum is None or spectrum.negative_exact else "at least "
        count = f"{at_least}{negative} negative eigenvalue{'' if negative == 1 else 's'}" if negative else ""
        carrying = _eigenvector_nodes(spectrum)[:NEGATIVE_NODES_WORDS]
        if carrying:
            at = f"{words[:-1]} {carrying[0]}" if len(carrying) == 1 else f"{words} {_list_nodes(carrying, 4)}"
            whose = "its" if negative == 1 else "the most negative one's"
            head = f"{count or 'negative eigenvalues'}, {whose} eigenvector at {at}"
        elif pivots:
            nodes = pivots[0].nodes
            at = f"{words[:-1]} {nodes[0]}" if len(nodes) == 1 else f"{words} {_list_nodes(nodes, 4)}"
            head = f"negative pivot at {at}" + (f" ({count})" if count else "")
        else:
            head = count or "negative eigenvalues"
        return f"indefinite: {head}; K is not the stiffness of a stable structure{tail}", status
    swallowed = [f for f in findings if f.code == "stiffness.penalty-swallowed"]
    if swallowed and digits is not None and digits.headline_solve == "exported" and worst is not None:
        nodes = sorted({v for f in swallowed for v in f.nodes})
        held = [s for s in digits.samples if not s.audited and s.solver_kind != "exported"]
        kind = "pivoted" if any(s.solver_kind == "pivoted" for s in held) else "symmetric"
        predicted = min((s.trustworthy_digits for s in held if s.solver_kind == kind), default=None)
        kappa = digits.exported_condition_at_least
        beyond = (f"; its condition number is beyond float64: at least {kappa:.1e}" if kappa is not None
                  and kappa * U >= 1.0 else f"; its condition number is at least {kappa:.1e}" if kappa else "")
        after = (f"; after the suggested change, about {_significant(predicted)} (prediction: the model with "
                 "those DOFs held)" if predicted is not None else "")
        return (f"stiffness jump: a penalty swallowed the structure at {words} {_list_nodes(nodes)}: a float64 "
                f"solve of the exported K keeps {_significant(worst)} ({how}){beyond}{after}"), status
    if swallowed:
        nodes = sorted({v for f in swallowed for v in f.nodes})
        rest = f"; elsewhere {figure}" if figure else ""
        return (f"stiffness jump: a penalty swallowed the structure at {words} {_list_nodes(nodes)}, "
                f"whose displacements keep no digits{rest}"), status
    if audit is not None and not audit.fits:
        own_figure = f"; the tool's own solve is {figure}" if figure else ""
        return (f"supplied solution does not fit: its backward error {audit.backward_error:.1e} is far "
                f"above the {audit.allowed_backward_error:.1e} of the tool's own solve; it keeps "
                f"{_significant(audit.trustworthy_digits)}{own_figure}"), status
    undecided = [m for m in near if m.undecided]
    if undecided:
        support = spectrum.support
        res = f", resolution of the stored K {support.resolution:.1e}" if support is not None else ""
        low = (min(abs(v) for v in support.eigenvalues) if support is not None and support.eigenvalues
               else min(abs(m.eigenvalue) for m in undecided))
        return (f"not decided: {len(undecided)} mode{'' if len(undecided) == 1 else 's'} "
                f"({kinds(undecided)}) free or held by a small stiffness (smallest scaled eigenvalue {low:.1e}{res}; "
                f"no proof of positive definiteness){tail}"), status
    if near:
        return f"near-singular: {len(near)} nearly free mode{'' if len(near) == 1 else 's'} ({kinds(near)}){tail}", status
    sk = condition.scaled_estimate if condition is not None and not condition.singular else None
    ill = sk is not None and sk > ILL_CONDITIONED
    below = (worst is not None and worst < min_digits) or bool(low_nodes) or supplied_low
    troubled = ill or below
    def blames(c: str) -> bool:
        return c.startswith("stiffness.") and c not in ("stiffness.indefinite", "stiffness.spring-to-ground")

    stiff_evidence = any(blames(c) for c in {f.code for f in findings})
    if (troubled and stiff_evidence) or any(blames(c) for c in codes):
        return f"stiffness jump: stiff links next to soft parts cost digits{tail}", status
    if ill or (below and sk is None):
        return f"ill-conditioned{': ' + figure if figure else ''}", status
    if below:
        return f"fewer digits than required (--min-digits {min_digits:g}){tail}", status
    if status == "healthy":
        return f"healthy{': ' + figure if figure else ''}", status
    limits = sorted(c for c in codes)
    return (f"no defect found ({', '.join(CODES.get(c, c) for c in limits)})"
            f"{tail}"), status


# ------------------------------------------------------------------ geometry
#: Pairs of nodes named in a coincident-nodes finding before "and N more".
PAIRS_NAMED = 6
#: Elements named per element finding before "and N more".
ELEMENTS_NAMED = 8


def _run(ids: Sequence[int]) -> Optional[str]:
    """``"201-205"`` for three or more consecutive ids, else None."""
    ids = list(ids)
    if len(ids) >= 3 and all(b == a + 1 for a, b in zip(ids, ids[1:])):
        return f"{ids[0]}-{ids[-1]}"
    return None


def coincident_phrase(groups, onto: bool = True) -> str:
    """``"nodes 201-205 onto nodes 83-87"`` (the nodes a mode moves first), or
    ``"node pairs 201/83, 202/84"``, or ``"nodes 5, 17, 30"`` for one larger group."""
    if all(len(c.nodes) == 2 for c in groups):
        pairs = sorted((c.nodes[0], c.nodes[1]) for c in groups)
        left, right = [a for a, _ in pairs], [b for _, b in pairs]
        if _run(left) and _run(right):
            return f"nodes {_run(left)} {'onto' if onto else 'and'} nodes {_run(right)}"
        if len(pairs) == 1:
            return f"node {left[0]} {'onto' if onto else 'and'} node {right[0]}"
        named = ", ".join(f"{a}/{b}" for a, b in pairs[:PAIRS_NAMED])
        more = len(pairs) - PAIRS_NAMED
        return f"node pairs {named}" + (f" and {more:,} more" if more > 0 else "")
    named = "; ".join(_list_nodes(c.nodes, 6) for c in groups[:PAIRS_NAMED])
    more = len(groups) - PAIRS_NAMED
    return f"node groups {named}" + (f" and {more:,} more" if more > 0 else "")


def _parts_words(parts: Sequence[int]) -> str:
    return f"part {parts[0]}" if len(parts) == 1 else "parts " + ", ".join(str(p) for p in parts[:-1]) + \
        f" and {parts[-1]}"


def geometry_findings(model: Model, structure: StructureResult, spectrum: Optional[SpectrumResult],
                      jumps: list[StiffnessJump], pivots: Optional[PivotLoss],
                      geometry: Optional[GeometryChecks]) -> list[Finding]:
    """geometry.*: coincident nodes K does not join (an error when a near-singular
    mode moves them apart: the first fix is to merge them), coincident nodes tied
    in some DOF types only (a note), far nodes (a warning, tied to the weak rows,
    springs to ground, modes and pivots they cause), element shapes."""
    if geometry is None:
        return []
    out = _coincident_findings(structure, spectrum, geometry)
    out += [_touching_finding(t) for t in geometry.touching]
    out += [_far_node_finding(far, spectrum, jumps, pivots) for far in geometry.far]
    out += _element_findings(geometry)
    return out


def _coincident_findings(structure: StructureResult, spectrum: Optional[SpectrumResult],
                         geometry: GeometryChecks) -> list[Finding]:
    from conditioning.stages.node_geometry import COINCIDENT_SHARE
    out = []
    loose: dict = {}
    for c in geometry.coincident:
        if c.joined == "no":
            loose.setdefault((tuple(c.parts), bool(c.moved_apart_by)), []).append(c)
    for (parts, frees), groups in loose.items():
        nodes = sorted({v for c in groups for v in c.nodes})
        sep = max(c.separation for c in groups)
        tol = min(c.tolerance for c in groups)
        where = ("at exactly one place" if sep == 0.0 else f"at most {sep:.3g} apart") + \
            f" (tolerance {tol:.3g}: {COINCIDENT_SHARE:g} x the shortest member there)"
        count = f"{len(groups):,} {'pair' if all(len(c.nodes) == 2 for c in groups) else 'group'}" + \
            ("s" if len(groups) != 1 else "")
        phrase = coincident_phrase(groups, onto=frees)
        head = f"{count} of coincident nodes that K does not join: {phrase}, {where}"
        if frees:
            modes = sorted({k for c in groups for k in c.moved_apart_by})
            part_of = _moving_part(structure, spectrum, modes)
            who = f"part {part_of}" if part_of is not None and structure.parts > 1 else "the part they belong to"
            listed = _list_nodes(modes, 6)
            out.append(Finding(
                "error", "geometry.coincident-nodes",
                f"{head}. Near-singular mode{'s' if len(modes) > 1 else ''} {listed} move{'' if len(modes) > 1 else 's'} "
                f"them apart: {who} is free of the rest because these nodes were never merged, "
                "not for want of a support.",
                nodes,
                f"Merge {phrase} (or tie them with constraint equations) and export K again. Supports on "
                f"{who} are the second choice, only if it is meant to stand apart from the rest."))
        elif len(parts) > 1:
            out.append(Finding(
                "warning", "geometry.coincident-nodes",
                f"{head}: {_parts_words(list(parts))} touch there but share no stiffness, and each is held "
                "on its own.", nodes,
                f"If the parts are meant to act together, merge {phrase} (or tie them); if they are meant to "
                "be separate (a gap or a contact modelled apart), nothing to change."))
        else:
            out.append(Finding(
                "note", "geometry.coincident-nodes",
                f"{head}, within one connected part: a crack, slit or contact face modelled with duplicate "
                "nodes, or a seam left open.", nodes,
                f"If no crack or gap is meant here, merge {phrase}: an open seam makes the model softer "
                "than the structure."))
    partly: dict = {}
    for c in geometry.coincident:
        if c.joined == "partly":
            partly.setdefault((tuple(c.tied), tuple(c.free)), []).append(c)
    for (tied, free), groups in partly.items():
        rotations_only = all(d[0] == "r" for d in free) and all(d[0] == "u" for d in tied)
        what = (f"a hinge (rotation{'s' if len(free) > 1 else ''} {', '.join(free)} released)" if rotations_only
                else f"a release of {', '.join(free)} (free to slide or turn apart in {'these' if len(free) > 1 else 'that'})")
        out.append(Finding(
            "note", "geometry.coincident-partly-tied",
            f"{coincident_phrase(groups, onto=False)[0].upper()}{coincident_phrase(groups, onto=False)[1:]} "
            f"coincide and K ties {', '.join(tied)} between them but not {', '.join(free)}: {what} "
            "modelled with duplicate nodes.",
            sorted({v for c in groups for v in c.nodes}),
            "Nothing to change if the release is meant; if the nodes should be one, merge them."))
    return out


def _touching_finding(t) -> Finding:
    from conditioning.stages.node_geometry import TOUCH_SHARE
    at = (f"Part {t.part} comes within {t.gap:.3g} of part {t.other_part} ({t.share:.2f} of the shortest member "
          f"there; parts closer than {TOUCH_SHARE:g} of it are taken to touch) at nodes {_list_nodes(t.nodes, 6)}, "
          f"near nodes {_list_nodes(t.other_nodes, 6)} of part {t.other_part}, but the two share no stiffness")
    nodes = sorted(set(t.nodes) | set(t.other_nodes))
    if t.moved_apart_by:
        listed = _list_nodes(t.moved_apart_by, 6)
        return Finding(
            "error", "geometry.touching-parts",
            f"{at}: near-singular mode{'s' if len(t.moved_apart_by) > 1 else ''} {listed} move part {t.part} "
            f"freely. If it rests on part {t.other_part}, the parts were meshed separately and never tied "
            "(its nodes lie near those of the other part, not on them); else the gap leaves it unsupported.", nodes,
            f"Tie part {t.part} to part {t.other_part} where they touch (constraint equations or a bonded "
            f"contact), or mesh both with common nodes there and merge them, and export K again. Supports on "
            f"part {t.part} are the second choice, only if it is meant to stand apart from the rest.")
    return Finding(
        "note", "geometry.touching-parts", f"{at}; each is held on its own.", nodes,
        f"If parts {t.part} and {t.other_part} are meant to act together, tie them where they touch; if a gap "
        "or a contact is modelled apart on purpose, nothing to change.")


def _moving_part(structure: StructureResult, spectrum: Optional[SpectrumResult], modes: list[int]) -> Optional[int]:
    """The 1-based part of the first of ``modes`` (1-based), when the spectrum has it."""
    if spectrum is None or not modes or modes[0] > len(spectrum.modes):
        return None
    return int(spectrum.modes[modes[0] - 1].part)


def _far_node_finding(far, spectrum: Optional[SpectrumResult], jumps: list[StiffnessJump],
                      pivots: Optional[PivotLoss]) -> Finding:
    xyz = ", ".join(f"{c:.6g}" for c in (far.position if any(far.position[2:]) else far.position[:2]))
    msg = (f"Node {far.node} at ({xyz}) is {far.nearest:.3g} from the nearest node it is coupled to (node "
           f"{far.nearest_node}), {far.ratio:,.0f} times the usual member length where it attaches "
           f"({far.usual_length:.3g}): a coordinate in the wrong unit or with a typo, or a reference node "
           "coupled on purpose.")
    if far.softer is not None and far.softer >= 10:
        msg += f" Its rows are {far.softer:.1e} times softer than those of the nodes it is coupled to."
    elif far.softer is not None and far.softer <= 0.1:
        msg += f" Its rows are {1 / far.softer:.1e} times stiffer than those of the nodes it is coupled to."
    near = {far.node, *far.neighbours}
    caused = []
    grounded = sorted({v for j in jumps if j.kind == "diagonal-outlier" for v in j.nodes if v in near})
    if grounded:
        caused.append(f"the springs to ground reported at nodes {_list_nodes(grounded, 6)} are the rows of "
                      "its distorted elements, not supports")
    region = sorted({v for j in jumps if j.kind == "stiff-region" for v in j.nodes if v in near})
    if region:
        caused.append(f"the stiff region reported at nodes {_list_nodes(region, 6)} is the rows of its "
                      "distorted elements, not a stiffer material")
    linked = sorted({v for j in jumps if j.kind == "coupling" for v in j.nodes if v in near})
    if linked:
        caused.append(f"the stiffness jumps at nodes {_list_nodes(linked, 6)} come from its distorted elements")
    if spectrum is not None:
        carried = [k + 1 for k, m in enumerate(spectrum.modes) if far.node in m.nodes]
        if carried:
            caused.append(f"near-singular mode{'s' if len(carried) > 1 else ''} {_list_nodes(carried, 6)} "
                          f"{'are' if len(carried) > 1 else 'is'} carried by it")
    if pivots is not None:
        lost = [p for p in pivots.worst[:1] if p.digits >= 1 and p.label.split(" ")[1].isdigit()
                and int(p.label.split(" ")[1]) in near]
        if lost:
            caused.append(f"{lost[0].digits:.1f} digits are lost at the pivot of {lost[0].label}")
    if caused:
        msg += " Tied to it: " + "; ".join(caused) + "."
    return Finding(
        "warning", "geometry.far-node", msg, [far.node],
        "Check its coordinates where the model was built (a length in the wrong unit, a "
        "misplaced decimal point) and export K again: K was assembled with them, so the elements at it are "
        "distorted. If it is a reference node coupled on purpose, nothing to change.")


def _element_findings(geometry: GeometryChecks) -> list[Finding]:
    from conditioning.stages.element_quality import PROBLEM_TEXT
    out = []
    if not geometry.flagged_elements:
        return out
    for problem, code, severity in (("inverted", "geometry.element-inverted", "error"),
                                    ("collapsed", "geometry.element-collapsed", "error"),
                                    (None, "geometry.element-shape", "warning")):
        if problem is None:
            hit = [e for e in geometry.flagged_elements
                   if not {"inverted", "collapsed"} & set(e.problems)]
            total = sum(v for k, v in geometry.flagged_count.items() if k not in ("inverted", "collapsed"))
        else:
            hit = [e for e in geometry.flagged_elements if problem in e.problems]
            total = geometry.flagged_count.get(problem, len(hit))
        if not hit:
            continue
        ids = sorted(e.element for e in hit)
        shown = ", ".join(str(i) for i in ids[:ELEMENTS_NAMED])
        more = max(len(hit), 0) - ELEMENTS_NAMED
        worst = hit[0]
        what = "; ".join(f"{p}: {PROBLEM_TEXT[p](worst)}" for p in worst.problems)
        counts = (", ".join(f"{geometry.flagged_count[k]:,} {k}" for k in sorted(geometry.flagged_count)
                            if k not in ("inverted", "collapsed")) if problem is None else "")
        out.append(Finding(
            severity, code,
            f"{total:,} element{'s' if total != 1 else ''} "
            + {"inverted": "inverted or folded (corner Jacobians of both signs)",
               "collapsed": "collapsed (a corner Jacobian near zero)",
               None: f"of poor shape ({counts})"}[problem]
            + f": element{'s' if len(ids) > 1 else ''} {shown}" + (f" and {more:,} more" if more > 0 else "")
            + f". Worst, element {worst.element} ({worst.kind}; nodes {_list_nodes(worst.nodes, 8)}): {what}.",
            sorted({v for e in hit[:ELEMENTS_NAMED] for v in e.nodes}),
            {"inverted": "Check the element's node order (corners in turn around it, not across it) or "
                         "move the node that folds it; K from an inverted element is wrong, not just inaccurate.",
             "collapsed": "Move or merge the nodes that collapse it, or remove the element: it adds "
                          "almost no stiffness in one direction and degrades K.",
             None: "Remesh the region with better-shaped elements (common practice: aspect ratio, corner "
                   "angles and warping within the limits shown); poor shapes give stresses of lower accuracy."
             }[problem]))
    return out


def verdict_with_geometry(line: str, status: str, findings: list[Finding],
                          geometry: Optional[GeometryChecks]) -> tuple[str, str]:
    """The verdict of :func:`verdict` with what the geometry checks found.

    Coincident nodes that a near-singular mode moves apart are named after a
    singular or near-singular verdict (merging them is the first fix); a far
    node or a bad element is named after a verdict whose digits it explains,
    and becomes the cause (``suspect geometry``) when the verdict would
    otherwise be ``healthy`` or ``no defect found`` with geometry warnings only.
    """
    if geometry is None:
        return line, status
    freed = [f for f in findings if f.code == "geometry.coincident-nodes" and f.severity == "error"]
    clause = []
    if freed:
        groups = [c for c in geometry.coincident if c.joined == "no" and c.moved_apart_by]
        clause.append(f"{coincident_phrase(groups, onto=False)} coincide but K does not join them: merge them first")
    for t in geometry.touching:
        if t.moved_apart_by:
            clause.append(f"part {t.part} rests within {t.gap:.3g} of part {t.other_part} without sharing stiffness: "
                          "tie them first")
    far = [f for f in findings if f.code == "geometry.far-node"]
    if far:
        first = geometry.far[0]
        extra = f" (and {len(geometry.far) - 1} more)" if len(geometry.far) > 1 else ""
        clause.append(f"node {first.node}{extra} lies {first.ratio:,.0f} times the usual member length from "
                      "every node it is coupled to: check its coordinates")
    bad = [f for f in findings if f.code in ("geometry.element-inverted", "geometry.element-collapsed")]
    if bad:
        clause.append("; ".join(f.message.split(":")[0] for f in bad))
    shape = [f for f in findings if f.code == "geometry.element-shape"]
    if shape and not bad:
        clause.append(shape[0].message.split(":")[0])
    if not clause:
        return line, status
    text = "; ".join(clause)
    serious = {f.code for f in findings if f.severity in ("error", "warning")}
    others = {c for c in serious if not c.startswith("geometry.")}
    if line.startswith(("healthy", "no defect found")) and not others:
        at = max(line.rfind("; trustworthy to "), line.rfind("; about "), line.rfind(": trustworthy to "),
                 line.rfind(": about "))
        tail = line[at + 2:] if at >= 0 else ""
        return f"suspect geometry: {text}" + (f"; {tail}" if tail else ""), status
    return f"{line}; {text}", status


def _merging_first(findings: list[Finding], spectrum: Optional[SpectrumResult],
                   geometry: Optional[GeometryChecks]) -> list[Finding]:
    """The advice of a free-mode finding whose mode moves coincident nodes apart
    that K does not join starts with merging them (supports second)."""
    if geometry is None or spectrum is None:
        return findings
    from dataclasses import replace as _replace

    out = []
    for f in findings:
        if f.code in ("support.rigid-body-mode", "support.mechanism"):
            modes = {k + 1 for k, m in enumerate(spectrum.modes) if list(m.nodes) == list(f.nodes)}
            groups = [c for c in geometry.coincident if c.joined == "no" and modes & set(c.moved_apart_by)]
            resting = [t for t in geometry.touching if modes & set(t.moved_apart_by)]
            if resting and not groups:
                t = resting[0]
                f = _replace(f, advice=f"First tie part {t.part} to part {t.other_part} where it rests on it (nodes "
                                       f"{_list_nodes(t.nodes, 4)}); only if it is meant to stand apart: "
                                       f"{f.advice[0].lower()}{f.advice[1:]}")
            if groups:
                f = _replace(f, advice=f"First merge {coincident_phrase(groups)} (or tie them): K does not join "
                                       f"them; only if the part is meant to stand apart: {f.advice[0].lower()}"
                                       f"{f.advice[1:]}")
        out.append(f)
    return out
