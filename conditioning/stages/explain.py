"""What is at one matrix row: the answer to "the solver warned about equation N".

    (K, row, factorization of S, modes, jumps, restraints) => RowExplanation

For row i: its node and DOF; K_ii against the rows it is coupled to and the
rest of its DOF type; its strongest couplings |K_ij| / sqrt(|K_ii K_jj|); the
stiffness jumps it belongs to; the digits of K_ii lost at its pivot; its
share of each near-singular mode; and what would help.

The pivot depends on the elimination order: it is the Schur complement
K_ii - k' A^-1 k of the rows eliminated before i. For a positive definite K
it lies between 1/(K^-1)_ii (i eliminated last: the Schur complement of all
the other rows, whose inverse is (K^-1)_ii by the block inverse formula) and
K_ii (i eliminated first), because Schur complements only shrink as more
rows are condensed out. So the digits lost at the pivot lie between 0 and
log10(K_ii (K^-1)_ii) whatever the order; one solve with the unit load e_i
gives (K^-1)_ii.

From the JSON report of an earlier run (:func:`explain_saved_row`) the row
is explained without any factorization: the report keeps the pivot of every
row in its run's elimination order and the rows that carry each
near-singular mode (:func:`row_shares`); the range over every order needs
(K^-1)_ii, which no report holds (it would take n solves), and is left out.
"""

from __future__ import annotations

import logging
import math
from dataclasses import replace
from typing import TYPE_CHECKING, Optional

import numpy as np
import scipy.sparse as sp

from conditioning.model import Model
from conditioning.results import (ModeShare, Restraint, RowCoupling, RowExplanation, RowShares, SpectrumResult,
                                  StiffnessJump)

if TYPE_CHECKING:
    from conditioning.io.saved_report import SavedReport

logger = logging.getLogger(__name__)

#: Couplings listed (the project's choice: a row of a 3D shell has ~50 entries).
COUPLINGS_SHOWN = 5
#: A mode share below this is not worth naming in the advice (the project's
#: choice: the modes stage locates nodes at 1% of the largest node's weight).
SHARE_NAMED = 0.01
#: Digits lost at a pivot worth advice (the project's choice: a quarter of float64's 16).
DIGITS_NAMED = 4.0
#: Smallest share of a mode a report keeps per row (the project's choice: the
#: output shows shares to 0.1%, so a smaller one prints as 0.0% either way;
#: the shares sum to 1, so a mode keeps at most 2000 rows in the report).
SHARE_STORED = 5e-4
#: Why a singular K has no pivot to explain.
SINGULAR = ("K is singular: no displacement is defined and a DOF in a free mode has a zero pivot in some "
            "elimination order; restrain the free modes first")


def explain_row(model: Model, row: int, *, fac=None, spectrum: Optional[SpectrumResult] = None,
                jumps: Optional[list[StiffnessJump]] = None, restraints: Optional[list[Restraint]] = None,
                row_base: int = 1, geometry=None) -> RowExplanation:
    """Explain 0-based matrix ``row`` of ``model.K``.

    Parameters
    ----------
    model : Model
        K (force/length, moment/rotation) and its DOF map, if any.
    row : int
        0-based row.
    fac : Factorization, optional
        A factorization of S = D^-1/2 K D^-1/2 of this K
        (:func:`conditioning.engine.scipy_engine.factorize`); without one, or
        when it is singular or shifted, no pivot figures.
    spectrum, jumps, restraints : optional
        The diagnosis's near-singular modes, stiffness jumps and suggested supports.
    geometry : GeometryChecks, optional
        The diagnosis's geometry checks: a coincident node K does not join, or
        a node far from its coupled nodes, at or next to the row comes first
        in the advice.
    row_base : int
        The numbering the row was asked in (0 or 1), recorded for the output.

    Returns
    -------
    RowExplanation
        Figures in K's units or dimensionless, as documented per field.

    Raises
    ------
    ValueError
        ``row`` outside 0..n-1.
    """
    _check_row(model, row)
    d = model.K.diagonal()
    out = _explain(model, row, _pivot(model, fac, row, d[row]), _mode_shares(spectrum, d, row), jumps,
                   restraints, row_base)
    first = geometry_advice(model, row, geometry)
    if not first:
        return out
    rest = [a for a in out.advice if not a.startswith("Nothing at this row needs changing")]
    return replace(out, advice=first + rest)


def explain_saved_row(model: Model, row: int, saved: "SavedReport", *, row_base: int = 1) -> RowExplanation:
    """Explain 0-based ``row`` of ``model.K`` with the figures of an earlier run's report: no factorization.

    Parameters
    ----------
    model : Model
        K and its DOF map, read again: the row's diagonal, couplings and DOF
        type come from it.
    row : int
        0-based row.
    saved : SavedReport
        The earlier run's pivots, modes, stiffness jumps and supports,
        checked to belong to this K (:func:`conditioning.io.saved_report.read_saved_report`).
    row_base : int
        The numbering the row was asked in (0 or 1), recorded for the output.

    Returns
    -------
    RowExplanation
        As :func:`explain_row`, with ``from_report`` the report's path; the
        pivot is the earlier run's (its order, 4 significant figures) and
        ``least_kept`` / ``most_digits`` are None: they need (K^-1)_ii. A
        mode share below the report's ``smallest`` is given as 0.

    Raises
    ------
    ValueError
        ``row`` outside 0..n-1.
    """
    _check_row(model, row)
    d = model.K.diagonal()
    explanation = _explain(model, row, _saved_pivot(saved, row, d[row]), _saved_shares(saved, d, row),
                           saved.jumps, saved.restraints, row_base)
    first = geometry_advice(model, row, getattr(saved, "geometry", None))
    if first:
        rest = [a for a in explanation.advice if not a.startswith("Nothing at this row needs changing")]
        explanation = replace(explanation, advice=first + rest)
    return replace(explanation, from_report=saved.path)


def row_shares(vector, diagonal) -> RowShares:
    """The rows that carry a mode and their shares v_i^2 / ||v||^2 (v = D^1/2 u), at least SHARE_STORED.

    ``vector`` is the mode u in K's DOFs, ``diagonal`` K's diagonal (n,);
    the shares are dimensionless and those of :func:`explain_row`.
    """
    share = _shares(vector, diagonal)
    rows = np.flatnonzero(share >= SHARE_STORED)
    return RowShares(rows=rows, shares=share[rows], smallest=SHARE_STORED)


def with_row_shares(spectrum: Optional[SpectrumResult], diagonal) -> Optional[SpectrumResult]:
    """``spectrum`` with each mode that has a vector given its :func:`row_shares`, for the report."""
    if spectrum is None:
        return None
    return replace(spectrum, modes=[m if m.vector is None else replace(m, row_shares=row_shares(m.vector, diagonal))
                                    for m in spectrum.modes])


def _check_row(model: Model, row: int) -> None:
    if not 0 <= row < model.n:
        raise ValueError(f"row {row} is outside 0..{model.n - 1}")


def _explain(model: Model, row: int, pivot: tuple, shares: list[ModeShare], jumps, restraints,
             row_base: int) -> RowExplanation:
    """The explanation from the row of K and the pivot and mode figures however obtained."""
    K = sp.csr_array(model.K)
    d = K.diagonal()
    kind = _dof_kind(model)
    lo, hi = K.indptr[row], K.indptr[row + 1]
    cols, vals = K.indices[lo:hi], K.data[lo:hi]
    off = cols != row
    cols, vals = cols[off], vals[off]
    with np.errstate(divide="ignore", invalid="ignore"):
        strength = np.abs(vals) / np.sqrt(np.abs(d[row] * d[cols]))
    strength = np.nan_to_num(strength, nan=math.inf)
    order = np.argsort(-strength, kind="stable")[:COUPLINGS_SHOWN]
    couplings = [RowCoupling(int(cols[k]), model.row_label(int(cols[k])), float(vals[k]), float(strength[k]))
                 for k in order]
    same = cols[kind[cols] == kind[row]]
    neighbour = float(np.median(np.abs(d[same]))) if same.size else None
    typed = np.abs(d[kind == kind[row]])
    own_jumps = [j for j in (jumps or []) if row in j.rows]
    kept, digits, least, most, method = pivot
    node = int(model.dofs.node[row]) if model.dofs is not None else None
    dof = model.dofs.dof_name(row) if model.dofs is not None else None
    advice = _advice(model, row, restraints or [], shares, own_jumps, most)
    return RowExplanation(
        row=row, row_base=row_base, label=model.row_label(row), node=node, dof=dof, diagonal=float(d[row]),
        neighbour_diagonal=neighbour, type_diagonal=float(np.median(typed)) if typed.size else None,
        couplings=couplings, jumps=own_jumps, pivot_kept=kept, pivot_digits=digits, least_kept=least,
        most_digits=most, pivot_method=method, mode_shares=shares, advice=advice)


def _dof_kind(model: Model) -> np.ndarray:
    """The DOF type of each row (its DOF index; 0 for every row without a map)."""
    if model.dofs is None:
        return np.zeros(model.n, dtype=np.intp)
    return np.asarray(model.dofs.dof, dtype=np.intp)


def _pivot(model: Model, fac, row: int, k_ii: float):
    """(kept, digits, least kept, most digits, method) at the row's pivot."""
    if fac is None:
        return None, None, None, None, "no factorization"
    if fac.singular or fac.shift != 0.0 or not fac.active[row]:
        return None, None, None, None, SINGULAR
    kept = digits = None
    if fac.pivots is not None:
        kept = float(np.sign(k_ii) * fac.pivots[row])
        digits = _digits_lost(kept)
    e = np.zeros(model.n)
    e[row] = 1.0
    inv_ii = float(fac.solve(e)[row])  # (K^-1)_ii in 1/(K's units)
    least = float(1.0 / (k_ii * inv_ii)) if k_ii * inv_ii != 0 else None
    most = float(max(0.0, math.log10(k_ii * inv_ii))) if k_ii * inv_ii > 0 else None
    method = (f"pivot of this tool's elimination order ({fac.info.ordering}); the bounds hold for any order "
              "of a positive definite K (one solve for (K^-1)_ii)")
    return kept, digits, least, most, method


def _saved_pivot(saved: "SavedReport", row: int, k_ii: float):
    """(kept, digits, None, None, method) at the row's pivot in the earlier run's order."""
    if saved.kept_by_row is None:
        return None, None, None, None, f"not in the earlier run's report: {saved.no_pivots}"
    kept = float(saved.kept_by_row[row])
    if saved.singular or math.isnan(kept):
        return None, None, None, None, SINGULAR if saved.singular else (
            "the earlier run did not factor this row (a row without stiffness, or one held because a penalty "
            "swallowed it)")
    method = (f"pivot of the earlier run's elimination order ({saved.ordering}), read from its report to 4 "
              "significant figures; the range of digits any order can lose here needs (K^-1)_ii, one solve "
              "with a factorization: explain the row from the matrix alone for it")
    return kept, _digits_lost(kept), None, None, method


def _digits_lost(kept: float) -> float:
    """-log10(kept), inf for a zero or negative pivot; a pivot a rounding above
    its diagonal loses no digit, not -1e-16 of one."""
    return max(0.0, -math.log10(kept)) if kept > 0 else math.inf


def _shares(vector, d) -> np.ndarray:
    """(n,) v_i^2 / ||v||^2 of the mode u = ``vector``, v = D^1/2 u (zeros for a zero vector)."""
    v = np.asarray(vector, dtype=np.float64) * np.sqrt(np.abs(d))
    total = float(v @ v)
    return v * v / total if total > 0 else np.zeros_like(v)


def _saved_shares(saved: "SavedReport", d, row: int) -> list[ModeShare]:
    """As :func:`_mode_shares`, from the rows the report kept for each mode."""
    out = []
    for mode in saved.modes:
        if mode.row_shares is not None:
            at = np.searchsorted(mode.row_shares.rows, row)
            found = at < mode.row_shares.rows.size and mode.row_shares.rows[at] == row
            share = float(mode.row_shares.shares[at]) if found else 0.0
        elif mode.kind == "dof-without-stiffness":
            share = 1.0 if d[row] == 0 else 0.0
        else:
            continue
        out.append(ModeShare(mode=mode.index, kind=mode.kind, eigenvalue=float(mode.eigenvalue), share=share,
                             exact=mode.exact))
    return out


def _mode_shares(spectrum: Optional[SpectrumResult], d, row: int) -> list[ModeShare]:
    """The row's share v_i^2 / ||v||^2 of each near-singular mode, v = D^1/2 u."""
    out = []
    for k, mode in enumerate(spectrum.modes if spectrum is not None else []):
        if mode.vector is not None:
            share = float(_shares(mode.vector, d)[row])
        elif mode.kind == "dof-without-stiffness":
            share = 1.0 if d[row] == 0 else 0.0  # a row without stiffness is its own mode
        else:
            continue
        out.append(ModeShare(mode=k + 1, kind=mode.kind, eigenvalue=float(mode.eigenvalue), share=share,
                             exact=bool(getattr(mode, "exact", False))))
    return out


def geometry_advice(model: Model, row: int, geometry) -> list[str]:
    """What the geometry checks say about the row's node, first in the advice:
    a coincident node K does not join (merge it), a node far from every node it is
    coupled to (its coordinates), or a neighbour of such a node."""
    if geometry is None or model.dofs is None:
        return []
    node = int(model.dofs.node[row])
    out = []
    for c in geometry.coincident:
        if node in c.nodes and c.joined == "no":
            others = ", ".join(str(v) for v in c.nodes if v != node)
            out.append(f"Merge node {node} with node{'s' if len(c.nodes) > 2 else ''} {others} (or tie them): "
                       "they are at one place but K joins none of their DOFs"
                       + (f"; near-singular mode{'s' if len(c.moved_apart_by) > 1 else ''} "
                          f"{', '.join(map(str, c.moved_apart_by))} move{'' if len(c.moved_apart_by) > 1 else 's'} "
                          "them apart, and merging removes "
                          f"{'them' if len(c.moved_apart_by) > 1 else 'it'}; supports are the second choice."
                          if c.moved_apart_by else "."))
        elif node in c.nodes:
            out.append(f"Node {node} coincides with node {', '.join(str(v) for v in c.nodes if v != node)}; K ties "
                       f"{', '.join(c.tied)} between them but not {', '.join(c.free)} (a release modelled with "
                       "duplicate nodes): nothing to change if that is meant.")
    for t in getattr(geometry, "touching", []):
        if node in t.nodes and t.moved_apart_by:
            out.append(f"Tie part {t.part} to part {t.other_part} where it rests on it (this node is {t.share:.2f} "
                       f"of a member length from part {t.other_part}, which shares no stiffness with it): that "
                       "removes its free modes; supports are the second choice.")
    for f in geometry.far:
        xyz = ", ".join(f"{v:.6g}" for v in (f.position if any(f.position[2:]) else f.position[:2]))
        if node == f.node:
            softer = (f"; its rows are {f.softer:.1e} times softer than its neighbours'"
                      if f.softer is not None and f.softer >= 10 else "")
            out.append(f"Check the coordinates of node {node}, ({xyz}): it is {f.nearest:.3g} from the nearest "
                       f"node it is coupled to, {f.ratio:,.0f} times the usual member length there "
                       f"({f.usual_length:.3g}){softer}. A length in the wrong unit or a typo distorts its "
                       "elements; correct it and export K again.")
        elif node in f.neighbours:
            out.append(f"It is coupled to node {f.node} at ({xyz}), {f.ratio:,.0f} times the usual member length "
                       "away: that node's coordinates distort the elements it shares with this row (the "
                       "stiffness here and any spring to ground or jump reported at it); check them first.")
    return out


def _advice(model: Model, row: int, restraints: list[Restraint], shares: list[ModeShare],
            jumps: list[StiffnessJump], most: Optional[float]) -> list[str]:
    out = []
    here = [r for r in restraints if r.row == row]
    if here:
        out.append(f"Restrain {model.row_label(row)}: it is one of the suggested supports ({here[0].reason}).")
    moving = [s for s in shares if s.share >= SHARE_NAMED]
    if moving and not here:
        named = ", ".join(f"node {r.node} {r.dof}" if r.dof != "-" else f"row {r.row + 1}" for r in restraints)
        out.append(f"The row moves in near-singular mode{'s' if len(moving) > 1 else ''} "
                   f"{', '.join(str(s.mode) for s in moving)}"
                   + (f"; the suggested supports that stop it: {named}." if named else "."))
    for j in jumps:
        out.append(j.reasoning)
    if most is not None and most >= DIGITS_NAMED and not moving:
        out.append(f"Up to {most:.1f} digits of its stiffness can be lost at its pivot: the rest of the structure "
                   "barely holds this DOF; stiffen or support it, or check the elements that connect it.")
    little = [s for s in shares if SHARE_STORED <= s.share < SHARE_NAMED]
    if not out and little:
        # It does move in a mode, only little in the scaled weighting: the
        # mode, not this DOF alone, is what to fix.
        out.append(f"Nothing at this row needs changing by itself: it carries {little[0].share:.1%} of "
                   f"near-singular mode {little[0].mode}: remove that mode (the diagnosis names supports "
                   "that do).")
    if not out:
        out.append("Nothing at this row needs changing: the solver's warning is not explained by this DOF.")
    return out
