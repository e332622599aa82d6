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
"""

from __future__ import annotations

import logging
import math
from typing import Optional

import numpy as np
import scipy.sparse as sp

from conditioning.model import Model
from conditioning.results import ModeShare, Restraint, RowCoupling, RowExplanation, SpectrumResult, StiffnessJump

logger = logging.getLogger(__name__)

#: Couplings listed (the project's choice: a row of a 3D shell has ~50 entries).
COUPLINGS_SHOWN = 5
#: A mode share below this is not worth naming in the advice (the project's
#: choice: the modes stage locates nodes at 1% of the largest node's weight).
SHARE_NAMED = 0.01
#: Digits lost at a pivot worth advice (the project's choice: a quarter of float64's 16).
DIGITS_NAMED = 4.0


def explain_row(model: Model, row: int, *, fac=None, spectrum: Optional[SpectrumResult] = None,
                jumps: Optional[list[StiffnessJump]] = None, restraints: Optional[list[Restraint]] = None,
                row_base: int = 1) -> RowExplanation:
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
    n = model.n
    if not 0 <= row < n:
        raise ValueError(f"row {row} is outside 0..{n - 1}")
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
    kept, digits, least, most, method = _pivot(model, fac, row, d[row])
    shares = _mode_shares(spectrum, d, row)
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
        return None, None, None, None, ("K is singular: no displacement is defined and a DOF in a free mode "
                                        "has a zero pivot in some elimination order; restrain the free modes first")
    kept = digits = None
    if fac.pivots is not None:
        kept = float(np.sign(k_ii) * fac.pivots[row])
        # A pivot a rounding above its diagonal loses no digit, not -1e-16 of one.
        digits = max(0.0, -math.log10(kept)) if kept > 0 else math.inf
    e = np.zeros(model.n)
    e[row] = 1.0
    inv_ii = float(fac.solve(e)[row])  # (K^-1)_ii in 1/(K's units)
    least = float(1.0 / (k_ii * inv_ii)) if k_ii * inv_ii != 0 else None
    most = float(max(0.0, math.log10(k_ii * inv_ii))) if k_ii * inv_ii > 0 else None
    method = (f"pivot of this tool's elimination order ({fac.info.ordering}); the bounds hold for any order "
              "of a positive definite K (one solve for (K^-1)_ii)")
    return kept, digits, least, most, method


def _mode_shares(spectrum: Optional[SpectrumResult], d, row: int) -> list[ModeShare]:
    """The row's share v_i^2 / ||v||^2 of each near-singular mode, v = D^1/2 u."""
    out = []
    for k, mode in enumerate(spectrum.modes if spectrum is not None else []):
        if mode.vector is not None:
            v = np.asarray(mode.vector, dtype=np.float64) * np.sqrt(np.abs(d))
            total = float(v @ v)
            share = float(v[row] ** 2) / total if total > 0 else 0.0
        elif mode.kind == "dof-without-stiffness":
            share = 1.0 if d[row] == 0 else 0.0  # a row without stiffness is its own mode
        else:
            continue
        out.append(ModeShare(mode=k + 1, kind=mode.kind, eigenvalue=float(mode.eigenvalue), share=share))
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
    if not out:
        out.append("Nothing at this row needs changing: the solver's warning is not explained by this DOF.")
    return out
