"""Digits lost at a pivot: how much of each DOF's own stiffness survives elimination.

Definition::

    kept_i = D_ii / K_ii,   digits lost at the pivot of DOF i = -log10(kept_i)

where D_ii is the pivot of row i in the LDL^T factorization of K: the
stiffness left at DOF i once the DOFs eliminated before it are condensed out.
When that condensation removes almost all of K_ii (the pivot is the small
difference of large numbers), the digits of K_ii below the share kept are
lost by cancellation at that pivot, and the DOF is nearly unsupported by the
rest of the structure.

The pivots are read from the shared factorization of the scaled matrix
S = D^-1/2 K D^-1/2 (unit diagonal). Symmetric diagonal scaling multiplies
each pivot by 1/|K_ii| and nothing else (same ordering, exact arithmetic), so
D_ii(K) / K_ii = D_ii(S): the share kept needs no separate factorization and
does not depend on the model's units.
"""

from __future__ import annotations

import logging
import math
from typing import Optional

import numpy as np

from conditioning.engine.base import Factorization
from conditioning.model import Model
from conditioning.results import PivotEntry, PivotLoss

logger = logging.getLogger(__name__)



def pivots_unavailable(fac: Factorization) -> Optional[str]:
    """Why the digits lost at the pivots cannot be measured on ``fac``, in words
    for the report (``Report.skipped["pivots"]``); None when its pivots are there."""
    if fac.pivots is not None:
        return None
    if getattr(fac.info, "pivots_note", ""):
        return f"the pivots were {fac.info.pivots_note}"
    return (f"not available on this engine: its factorization ({fac.info.ordering}) does not hand back "
            f"its pivots, which the share of stiffness kept at each pivot is read from")


def pivot_loss(model: Model, fac: Factorization, *, worst: int = 20) -> PivotLoss:
    """Share of each DOF's diagonal stiffness left at its pivot, and the worst DOFs.

    Parameters
    ----------
    model : Model
        The model; only ``model.K`` (for the sign of K_ii) and the DOF map
        (for naming rows) are read.
    fac : Factorization
        The shared factorization of the scaled stiffness S (or of S - sigma*I
        when S is singular).
    worst : int, optional
        Number of rows to list, worst first.

    Returns
    -------
    PivotLoss
        ``worst``: entries with ``kept = D_ii / K_ii`` (dimensionless) and
        ``digits = -log10(kept)`` (decimal digits lost at that pivot),
        worst first; a zero or negative pivot has ``digits = inf`` and is
        listed before all others (its ``kept`` keeps its sign, 0 for a zero
        pivot). ``max_digits`` is the largest ``digits`` (inf when a pivot is
        zero or negative). ``negative_pivots`` lists the rows whose pivot is
        negative (K indefinite), by row, at most ``worst``. Rows without any
        stiffness are not factored and not listed; ``method`` says how many
        there are. ``kept_by_row`` holds ``kept`` of every row in row order
        (NaN for the rows not factored), for explaining a row later from
        the saved report.

    Notes
    -----
    With S = diag(s) K diag(s), s_i = 1/sqrt(|K_ii|), the LDL^T of S in the
    same ordering has pivots D_ii(S) = D_ii(K) / |K_ii|, so

        D_ii(K) / K_ii = sign(K_ii) D_ii(S).

    The loss depends on the elimination order (a pivot is the Schur
    complement of the DOFs eliminated before it); the ordering used is
    named in ``method``.

    When S is singular the shared factorization is of S - sigma*I with
    sigma < 0. For a positive semidefinite S, every Schur complement of
    S - sigma*I is at least the corresponding one of S plus |sigma|, so each
    shifted pivot is larger than the true one and the reported loss is a
    lower bound (the true loss at a null-space DOF is infinite).

    References
    ----------
    .. [1] R. D. Cook, D. S. Malkus, M. E. Plesha, R. J. Witt (2002),
           "Concepts and Applications of Finite Element Analysis", 4th ed.,
           Wiley (section on ill-conditioning; from memory).

    Examples
    --------
    The fixed-fixed chain of unit springs, tridiag(-1, 2, -1), eliminated in
    natural order has pivots (k+1)/k, so the share kept is (k+1)/(2k):

    >>> import scipy.sparse as sp
    >>> from conditioning.model import Model
    >>> from conditioning.engine.scipy_engine import factorize
    >>> K = sp.csr_array(sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(4, 4)))
    >>> result = pivot_loss(Model(K), factorize(K, ordering="NATURAL"))
    >>> round(result.worst[0].kept, 12), result.worst[0].label
    (0.625, 'row 4')
    """
    if worst < 0:
        raise ValueError(f"worst = {worst}; expected a count >= 0")
    if pivots_unavailable(fac):
        raise ValueError(f"digits lost at the pivots: {pivots_unavailable(fac)}")
    kept, active = _kept_shares(model, fac)
    digits = _digits(fac.pivots, active)
    rows = np.flatnonzero(active)
    order = rows[np.lexsort((np.abs(kept[rows]), -digits[rows]))][:worst]
    entries = [
        PivotEntry(row=int(r), label=model.row_label(int(r)), kept=float(kept[r]), digits=float(digits[r]))
        for r in order
    ]
    max_digits = float(np.max(digits[rows])) if rows.size else 0.0
    method = _method_text(fac, digits[rows], int(model.n - rows.size))
    logger.info("pivots: worst %.2f digits lost over %d pivots", max_digits, rows.size)
    # Negative pivots are listed by row: the inertia, not digits, is their story.
    negative = [
        PivotEntry(row=int(r), label=model.row_label(int(r)), kept=float(kept[r]), digits=math.inf)
        for r in np.flatnonzero(active & (np.asarray(fac.pivots) < 0))[:worst]
    ]
    negative_count = int(np.count_nonzero(active & (np.asarray(fac.pivots) < 0)))
    return PivotLoss(worst=entries, max_digits=max_digits, method=method, negative_pivots=negative,
                     kept_by_row=kept, negative_count=negative_count,
                     symmetric=bool(fac.info.symmetric_pivoting))


def _kept_shares(model: Model, fac: Factorization):
    """D_ii(K) / K_ii = sign(K_ii) D_ii(S) on the factored rows; (kept, active)."""
    if fac.n != model.n:
        raise ValueError(f"factorization has {fac.n} rows, the model {model.n}; factor this model's K")
    active = np.asarray(fac.active, dtype=bool)
    pivots = np.asarray(fac.pivots, dtype=np.float64)
    sign = np.where(model.K.diagonal() < 0, -1.0, 1.0)
    kept = np.full(model.n, np.nan)
    kept[active] = sign[active] * pivots[active]
    return kept, active


def _digits(pivots, active):
    """-log10(D_ii(K) / |K_ii|) = -log10(D_ii(S)) for a positive pivot; inf for a
    zero or negative one; -inf for rows not factored (never ranked)."""
    pivots = np.asarray(pivots, dtype=np.float64)
    digits = np.full(pivots.shape, -np.inf)
    digits[active] = np.inf
    ok = active & (pivots > 0)
    digits[ok] = -np.log10(pivots[ok])
    return digits


def _method_text(fac: Factorization, digits, inactive: int) -> str:
    parts = [
        f"digits lost = -log10(D_ii / K_ii), the share of each DOF's diagonal stiffness left at its "
        f"pivot D_ii in the shared LDL^T of the scaled matrix (ordering {fac.info.ordering}; "
        f"which DOF shows the loss depends on the elimination order)"
    ]
    bad = int(np.count_nonzero(np.isinf(digits)))
    if fac.shift != 0.0:
        parts.append(
            f"the matrix is singular, so the pivots are of the shifted matrix S - sigma*I "
            f"(sigma = {fac.shift:.3g}): each listed loss is a lower bound of the true one, "
            f"which is infinite along the null space"
        )
    if bad:
        parts.append(
            f"{bad} pivot(s) zero or negative: the factored matrix is not positive definite "
            f"there, which is a sign of K, not digits lost (digits = inf in the data)"
        )
    if inactive:
        parts.append(f"{inactive} row(s) without stiffness were not factored and are not listed")
    if not fac.info.symmetric_pivoting:
        parts.append("the factorization used unsymmetric row pivoting: the pivots are not those of an LDL^T")
    return "; ".join(parts) + "."


__all__ = ["pivot_loss", "pivots_unavailable"]
