"""Stiffness jumps: very stiff links and penalty-like diagonal outliers.

A stiffness is compared only with stiffnesses of the same DOF type (ux with
ux, rz with rz). Translations and rotations carry different units
(force/length against moment/rotation), so a rotation diagonal a million
times a translation diagonal is a matter of units, not a jump, and symmetric
diagonal scaling removes it; it is never reported here.

Two kinds are found, both vectorised over the stored entries:

``coupling``
    an off-diagonal K_ij between two DOFs of the same type that is orders of
    magnitude above the typical diagonal stiffness of that type: a penalty
    spring, a "rigid" link or a very stiff element between soft parts.
``diagonal-outlier``
    a diagonal K_ii orders of magnitude above the typical diagonal of its
    type without an equally stiff link, in a row that is grounded: a support
    or a spring to ground given by a large number. It raises the raw
    condition number only: diagonal scaling leaves its row nearly decoupled,
    so a direct solve loses no digits to it (``digits_cost`` 0).
``stiff-region``
    such diagonals in rows that are not grounded: K times a rigid motion is
    round-off in them (their element forces balance), so no spring to ground
    holds them; they are a region much stiffer than its surroundings (a
    stiffer material or section, or a distorted element with a very short
    edge), reported with its nodes, grouped by connection.

A row is grounded when its response to the rigid motions r_k (translations
and rotations, :mod:`conditioning.linalg.rigid_motions`) is a large share of
its entries: max_k |(K r_k)_i| / sum_j |K_ij| |r_kj| >= :data:`GROUNDED_SHARE`.
An element's forces balance under a rigid motion, so only springs to ground,
supports given by a number, and couplings to removed (supported) DOFs make
(K r)_i nonzero; row-local, it needs no part of the model but the row.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, replace
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from scipy.sparse import csgraph

from conditioning.linalg.floating_point import EPS
from conditioning.linalg.rigid_motions import rigid_motions
from conditioning.model import DOF_NAMES, Model
from conditioning.results import StiffnessJump, StructureResult

logger = logging.getLogger(__name__)

#: Modified z-score above which a log-stiffness is an outlier (Iglewicz and
#: Hoaglin's 3.5, applied to log10 of the stiffness; from memory).
OUTLIER_Z = 3.5
#: MAD -> standard deviation for normal data.
MAD_TO_SIGMA = 1.4826
#: Common practice: a penalty 10^3..10^4 times the largest ordinary stiffness
#: of the same DOF type; we advise the upper end.
PENALTY_FACTOR = 1.0e4
#: Digits of float64, log10(2^53): what a swallowing penalty costs its DOFs.
FLOAT64_DIGITS = 53 * np.log10(2.0)
#: A link has swallowed the structure when the structure's share of each
#: linked row is below SWALLOW_FACTOR * n * eps of the row's diagonal: the
#: tied motion's scaled eigenvalue, about k / K_ii, is then at the zero level
#: n eps lambda_max(S) of the spectrum stage, within the factor 10 the mode
#: stage allows for round-off (the project's choice, matched to it).
SWALLOW_FACTOR = 10.0
#: A row is grounded when its response to a rigid motion, |(K r)_i|, is at
#: least this share of sum_j |K_ij| |r_j| (the project's choice: a support or
#: spring given by a large number gives about 1, the rows of elements whose
#: forces balance give round-off, ~1e-15; a row next to removed supports
#: gives the share of its coupling to them, below 1/2 in the invented plates).
GROUNDED_SHARE = 0.5
#: An edge of a stiff region shorter than this share of the model's median
#: edge (the distance between coupled nodes) is named as a distorted element
#: (the project's choice).
SHORT_EDGE_SHARE = 0.05
#: Coupled node pairs sampled for the model's median edge length (bounds the
#: work on large models; the project's choice).
EDGE_SAMPLE = 200_000


@dataclass(frozen=True)
class _TypeStats:
    """Robust statistics of log10 |K_ii| per DOF type (arrays indexed by type)."""

    median: NDArray[np.float64]
    """Median of log10 |K_ii| over the type's rows with stiffness."""
    threshold: NDArray[np.float64]
    """Excess over the median (decades) from which a stiffness is a jump."""
    ordinary_max: NDArray[np.float64]
    """Largest |K_ii| of the type that is not an outlier (K's units)."""
    count: NDArray[np.intp]


def find_stiffness_jumps(
    model: Model,
    structure: Optional[StructureResult] = None,
    *,
    min_digits: float = 3.0,
    limit: int = 50,
) -> list[StiffnessJump]:
    """Stiff links and penalty-like diagonals, with the digits they cost.

    Parameters
    ----------
    model : Model
        ``model.K`` in the model's units; ``model.dofs`` gives the DOF type of
        each row. Without a DOF map every row counts as one type, so a model
        mixing rotations and translations may then show unit differences as
        jumps (the reasoning says so).
    structure : StructureResult, optional
        When given and the model has several parts, each jump names its part.
    min_digits : float, optional
        Report a stiffness only when it exceeds the typical stiffness of its
        DOF type by at least this many decades (and is a robust outlier).
    limit : int, optional
        Report at most this many jumps, largest first.

    Returns
    -------
    list of StiffnessJump
        One per node pair (``coupling``) or node (``diagonal-outlier``),
        sorted by ``digits_cost`` descending. ``ratio`` is dimensionless,
        ``advice_value`` in K's units (force/length or moment/rotation of
        that DOF type), or None when the stiffness is already within the
        usual penalty range.

    Notes
    -----
    Typical stiffness of a DOF type t: the median m_t of log10 |K_ii| over
    its rows. A value x (log10 of |K_ij| or of |K_ii|) is a jump when

        x - m_t >= max(min_digits, 3.5 * 1.4826 * MAD_t),

    MAD_t the median absolute deviation of log10 |K_ii| of type t: the
    modified z-score rule of Iglewicz and Hoaglin [1]_ in log space, so a
    model whose stiffnesses legitimately spread over decades needs a larger
    excess. ``ratio = 10^(x - m_t)`` and ``digits_cost = log10(ratio)``.

    Why about log10(ratio) digits: a link of stiffness P between DOFs a and b
    whose other stiffness is about k gives, in the scaled matrix
    S = D^-1/2 K D^-1/2, the block [[1, -1 + e], [-1 + e, 1]] with
    e ~ k/P. Along the motion u_a = u_b (which the rest of the structure
    resists with stiffness ~k) S has an eigenvalue ~ k/P while its ordinary
    eigenvalues stay of order 1, so kappa_2(S) grows by about P/k. Diagonal
    scaling cannot remove it (the block already has a unit diagonal), and a
    Cholesky-type solve loses about log10 kappa(S) digits (Demmel [2]_;
    textbook FE practice, e.g. Cook et al. [3]_ on penalty constraints, from
    memory). A diagonal outlier without a link (a stiff spring to ground)
    raises the raw condition number by the same ratio, but in S its row has
    a unit diagonal and off-diagonal entries whose squares sum to about
    1/ratio or less; the Schur complement of that row lowers the other
    eigenvalues of S by at most about that sum, so a Cholesky-type solve,
    whose accuracy kappa_2(S) governs [2]_, loses nothing to it:
    ``digits_cost`` is 0 and no smaller stiffness is advised (it would only
    make the support softer).

    Advice (common practice, [3]_): a penalty about 10^3..10^4 times the
    largest ordinary stiffness of the same DOF type enforces the constraint
    to a relative error of about 10^-3..10^-4 while costing about 3-4 digits;
    the advice is 10^4 times that stiffness.

    References
    ----------
    .. [1] B. Iglewicz, D. C. Hoaglin (1993), "How to Detect and Handle
           Outliers", ASQC Quality Press (modified z-score > 3.5; from memory).
    .. [2] J. W. Demmel (1989), "On floating point errors in Cholesky", LAPACK
           Working Note 14 (from memory).
    .. [3] R. D. Cook, D. S. Malkus, M. E. Plesha, R. J. Witt (2002),
           "Concepts and Applications of Finite Element Analysis", 4th ed.,
           Wiley (penalty constraints and ill-conditioning; from memory).

    Examples
    --------
    A chain of unit springs with a penalty link of 1e12 between rows 3 and 4:

    >>> import numpy as np, scipy.sparse as sp
    >>> from conditioning.model import Model
    >>> K = sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(20, 20)).tolil()
    >>> K[3, 3] += 1e12; K[4, 4] += 1e12; K[3, 4] -= 1e12; K[4, 3] -= 1e12
    >>> jump = find_stiffness_jumps(Model(sp.csr_array(K)))[0]
    >>> jump.kind, jump.nodes, round(jump.digits_cost, 1)
    ('coupling', [4, 5], 11.7)
    """
    if min_digits < 0 or limit < 0:
        raise ValueError(f"min_digits = {min_digits}, limit = {limit}; both must be >= 0")
    dof_type = _dof_types(model)
    stats = _type_statistics(np.abs(model.K.diagonal()), dof_type, min_digits)
    links = _stiff_links(model, dof_type, stats)
    coupled = np.zeros(model.n, dtype=bool)
    coupled[links[0]] = coupled[links[1]] = True
    jumps = _coupling_jumps(model, stats, links, limit) + _diagonal_jumps(model, dof_type, stats, limit, coupled)
    jumps = sorted(jumps, key=lambda j: -j.digits_cost)[:limit]
    if structure is not None and structure.parts > 1:
        jumps = [_with_part(j, structure) for j in jumps]
    logger.info("stiffness jumps: %d reported, %d rows in stiff links", len(jumps), int(coupled.sum()))
    return jumps


# ------------------------------------------------------------------ statistics
def _dof_types(model: Model) -> NDArray[np.intp]:
    if model.dofs is None:
        return np.zeros(model.n, dtype=np.intp)
    return np.asarray(model.dofs.dof, dtype=np.intp)


def _type_statistics(d: NDArray[np.float64], dof_type: NDArray[np.intp], min_digits: float) -> _TypeStats:
    """Median and MAD of log10 |K_ii| per type; the jump threshold per type."""
    ntypes = int(dof_type.max()) + 1 if dof_type.size else 1
    median = np.zeros(ntypes)
    threshold = np.full(ntypes, np.inf)
    ordinary_max = np.zeros(ntypes)
    count = np.zeros(ntypes, dtype=np.intp)
    positive = d > 0
    for t in range(ntypes):  # at most six DOF types
        x = np.log10(d[positive & (dof_type == t)])
        if x.size == 0:
            continue
        m = float(np.median(x))
        mad = float(np.median(np.abs(x - m)))
        median[t] = m
        threshold[t] = max(min_digits, OUTLIER_Z * MAD_TO_SIGMA * mad)
        ordinary_max[t] = 10.0 ** float(x[x - m < threshold[t]].max())
        count[t] = x.size
    return _TypeStats(median, threshold, ordinary_max, count)


def _stiff_links(model: Model, dof_type, stats: _TypeStats):
    """(i, j, |K_ij|, type, excess) of stored i < j of equal DOF type whose
    log10 |K_ij| exceeds the type's median diagonal by the threshold."""
    K = model.K
    rows = np.repeat(np.arange(model.n, dtype=np.intp), np.diff(K.indptr))
    cols = np.asarray(K.indices, dtype=np.intp)
    keep = (cols > rows) & (dof_type[rows] == dof_type[cols]) & (K.data != 0)
    i, j, v = rows[keep], cols[keep], np.abs(K.data[keep])
    t = dof_type[i]
    excess = np.log10(v) - stats.median[t]
    hit = excess >= stats.threshold[t]
    return i[hit], j[hit], v[hit], t[hit], excess[hit]


# ------------------------------------------------------------------ couplings
def _node_of_rows(model: Model, rows: NDArray[np.intp]) -> NDArray[np.int64]:
    if model.dofs is None:
        return rows.astype(np.int64) + 1
    return np.asarray(model.dofs.node, dtype=np.int64)[rows]


def _top_groups(keys: NDArray[np.int64], excess: NDArray[np.float64], limit: int):
    """Group candidates by key rows; return (members per group, max excess), top ``limit``."""
    uniq, inverse = np.unique(keys, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    best = np.full(uniq.shape[0], -np.inf)
    np.maximum.at(best, inverse, excess)
    top = np.argsort(-best, kind="stable")[:limit]
    order = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[order], np.arange(uniq.shape[0] + 1))
    return [(order[bounds[g]:bounds[g + 1]], float(best[g])) for g in top]


def _coupling_jumps(model: Model, stats: _TypeStats, links, limit: int) -> list[StiffnessJump]:
    i, j, v, t, excess = links
    if i.size == 0:
        return []
    ni, nj = _node_of_rows(model, i), _node_of_rows(model, j)
    pairs = np.stack([np.minimum(ni, nj), np.maximum(ni, nj)], axis=1)
    jumps = []
    for members, worst in _top_groups(pairs, excess, limit):  # only the reported groups
        k = members[np.argmax(excess[members])]
        rows = sorted({int(r) for r in np.concatenate([i[members], j[members]])})
        types = sorted({int(x) for x in t[members]})
        jump = _coupling_jump(model, stats, rows, types, pairs[k], float(v[k]), worst, int(t[k]))
        jumps.append(_with_swallowing(model, jump, _structural_share(model, i, j, rows)))
    return jumps


def _unit_class(model: Model) -> NDArray[np.intp]:
    """0 for translations, 1 for rotations (their entries carry other units); all 0 without a map."""
    if model.dofs is None:
        return np.zeros(model.n, dtype=np.intp)
    return (np.asarray(model.dofs.dof) >= 3).astype(np.intp)


def _structural_share(model: Model, link_i, link_j, rows: list[int]) -> NDArray[np.float64]:
    """Per row in ``rows``: the largest |K_rc|, c != r, of the same unit class
    that is not a stiff link (K's units): the structure's share of the row,
    read from its couplings because the diagonal may have lost it."""
    K = model.K
    n = model.n
    stiff = np.concatenate([link_i * n + link_j, link_j * n + link_i])
    cls = _unit_class(model)
    out = np.zeros(len(rows))
    for k, r in enumerate(rows):  # rows of the reported groups only
        lo, hi = K.indptr[r], K.indptr[r + 1]
        cols = np.asarray(K.indices[lo:hi], dtype=np.intp)
        keep = (cols != r) & (cls[cols] == cls[r]) & ~np.isin(r * n + cols, stiff)
        vals = np.abs(K.data[lo:hi][keep])
        out[k] = float(vals.max()) if vals.size else 0.0
    return out


def _with_swallowing(model: Model, jump: StiffnessJump, share: NDArray[np.float64]) -> StiffnessJump:
    """Set how much of the structure's stiffness the link's diagonals still hold.

    fl(P + k) == P once k is below half an ulp of P, so the digits of k kept in
    K_ii are log10(k / ulp(K_ii)); the link has swallowed the structure when
    every linked row with a structural share keeps it below 10 n eps |K_ii|.
    Rows without any share (a node held only by the link) do not count; a
    link whose rows have no share at all is left to the mode stage.
    """
    d = np.abs(model.K.diagonal()[jump.rows])
    kept = np.log10(np.where(share > 0, share, np.nan) / np.spacing(d))
    if not np.any(share > 0):
        return replace(jump, structural_stiffness=0.0)
    digits_kept = float(max(0.0, np.nanmax(kept)))
    lost = bool(np.all((share <= SWALLOW_FACTOR * model.n * EPS * d) | (share == 0)))
    out = replace(jump, structural_stiffness=float(share.max()), structure_digits_kept=digits_kept, swallowed=lost)
    if lost:
        out = replace(out, digits_cost=float(FLOAT64_DIGITS), reasoning=_swallowed_text(model, out) + out.reasoning)
    return out


def _swallowed_text(model: Model, jump: StiffnessJump) -> str:
    kept = jump.structure_digits_kept
    held = ("nothing of it is left in K" if kept == 0.0 else
            f"K holds only about {kept:.1f} of its digits")
    return (
        f"The structure's own stiffness of these DOFs, about {jump.structural_stiffness:.3g} (the "
        f"largest other stiffness in their rows), is so small beside the link's that {held}: in "
        "float64 the link has swallowed it. A solve therefore loses all digits of the displacements "
        "of these DOFs, and K is singular at working precision along the link. This is not a "
        "mechanism and needs no restraint; the rest of the model is diagnosed with these DOFs held. "
    )


def _type_names(model: Model, types) -> str:
    if model.dofs is None:
        return "all rows (no DOF map)"
    return ", ".join(DOF_NAMES[t] for t in types)


def _advice(stats: _TypeStats, types, current: float):
    """(suggested stiffness or None when ``current`` is already below it, the
    largest ordinary stiffness of the types)."""
    ordinary = float(max(stats.ordinary_max[t] for t in types))
    target = PENALTY_FACTOR * ordinary
    return (target if target < current else None), ordinary


def _coupling_jump(model, stats, rows, types, pair, stiffness, excess, worst_type) -> StiffnessJump:
    ratio = 10.0**excess
    typical = 10.0 ** float(stats.median[worst_type])
    advice, ordinary = _advice(stats, types, stiffness)
    names = _type_names(model, types)
    where = _pair_text(model, pair)
    text = (
        f"The link between {where} ({names}) has stiffness {stiffness:.3g}, {ratio:.3g} times the "
        f"typical diagonal stiffness {typical:.3g} of that DOF type (median over its DOFs). "
        f"Scaling the matrix cannot remove this: along the motion the two ends share, the "
        f"scaled matrix has an eigenvalue about 1/{ratio:.3g} of its others, so the condition "
        f"number grows by about that ratio and the solution can lose about {excess:.1f} digits. "
    )
    text += _advice_text(advice, ordinary)
    if model.dofs is None:
        text += " Without a DOF map all rows are compared as one type; give one so that unit differences are not mistaken for jumps."
    return StiffnessJump(
        kind="coupling", rows=rows, nodes=[int(pair[0]), int(pair[1])], ratio=ratio,
        digits_cost=excess, advice_value=advice, reasoning=text,
    )


def _pair_text(model: Model, pair) -> str:
    if model.dofs is None:
        return f"rows {int(pair[0])} and {int(pair[1])}"
    if pair[0] == pair[1]:
        return f"two DOFs of node {int(pair[0])}"
    return f"node {int(pair[0])} and node {int(pair[1])}"


def _advice_text(advice: Optional[float], ordinary: float) -> str:
    rule = (
        "Common practice: a penalty about 1e3 to 1e4 times the largest ordinary stiffness of "
        f"the same DOF type (here {ordinary:.3g}) keeps the constraint error near 1e-3 to 1e-4 "
        "relative while costing about 3 to 4 digits instead of all of these."
    )
    if advice is None:
        return rule + " This stiffness is already within that range; keep it if the link is meant to be stiff."
    return (
        rule + f" Suggested stiffness: {advice:.3g}. If the link must be exactly rigid, a "
        "multi-point constraint that eliminates the dependent DOF costs no digits at all."
    )


# ------------------------------------------------------------------ diagonals
def grounded_share(model: Model, rows: NDArray[np.intp]) -> Optional[NDArray[np.float64]]:
    """Per row: max_k |(K r_k)_i| / sum_j |K_ij| |r_kj| over the rigid motions r_k (dimensionless, 0..1).

    About 1 for a row held by a spring to ground or a support given by a
    large number, round-off for a row whose element forces balance under a
    rigid motion. None when it cannot be told: without a DOF map (no rigid
    motion is known). A rotation row without coordinates gets NaN (its
    rigid rotation needs positions).
    """
    if model.dofs is None or rows.size == 0:
        return None
    xyz = model.positions_of(np.arange(model.n))
    basis = rigid_motions(model.dofs.dof, xyz, model.dofs.node).basis
    K = model.K
    sub = K[rows]
    response = np.abs(sub @ basis)
    size = abs(sub) @ np.abs(basis)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(size > 0, response / size, 0.0).max(axis=1)
    if xyz is None:
        share = np.where(np.asarray(model.dofs.dof)[rows] >= 3, np.nan, share)
    return share


def _diagonal_jumps(model: Model, dof_type, stats: _TypeStats, limit: int, coupled) -> list[StiffnessJump]:
    d = np.abs(model.K.diagonal())
    rows = np.flatnonzero((d > 0) & ~coupled)
    t = dof_type[rows]
    excess = np.log10(d[rows]) - stats.median[t]
    hit = excess >= stats.threshold[t]
    if not np.any(hit):
        return []
    rows, t, excess = rows[hit], t[hit], excess[hit]
    share = grounded_share(model, rows)
    regions: list[StiffnessJump] = []
    if share is not None:
        balanced = share < GROUNDED_SHARE          # NaN (cannot tell) stays a spring to ground
        regions = _stiff_regions(model, rows[balanced], excess[balanced], share[balanced], d, limit)
        rows, t, excess = rows[~balanced], t[~balanced], excess[~balanced]
        if rows.size == 0:
            return regions
    nodes = _node_of_rows(model, rows)
    jumps = []
    for members, worst in _top_groups(nodes[:, None], excess, limit):
        k = members[np.argmax(excess[members])]
        where = model.row_label(int(rows[k]))
        leak = _scaled_coupling_squared(model, rows[members], d)
        text = (
            f"The diagonal stiffness at {where} is {d[rows[k]]:.3g}, {10.0**worst:.3g} times the "
            f"typical diagonal of its DOF type, with no equally stiff link to another DOF: a support "
            f"or spring to ground given by a large number. It raises the raw condition number by "
            f"about that ratio, but a direct (Cholesky- or LU-type) solve does not pay it: after "
            f"diagonal scaling its couplings to the rest square to {leak:.1e} "
            f"(sum of K_ij^2 / (K_ii K_jj)), and a grounded row can lower a small scaled eigenvalue "
            f"by at most about that much, so it costs no digits unless the rest of the model is "
            f"itself that close to singular (the near-singular modes would say so). Keep it large "
            f"if it stands for a support: a smaller value only makes the support softer (it then "
            f"moves by the reaction divided by this stiffness). Only an iterative solver without a "
            f"diagonal preconditioner sees the raw ratio; prescribing the DOF (removing its row and "
            f"column) removes it from the raw figure too."
        )
        jumps.append(StiffnessJump(
            kind="diagonal-outlier", rows=sorted(int(r) for r in rows[members]), nodes=[int(nodes[k])],
            ratio=10.0**worst, digits_cost=0.0, advice_value=None, reasoning=text,
        ))
    return jumps + regions


def _stiff_regions(model: Model, rows, excess, share, d, limit: int) -> list[StiffnessJump]:
    """Ungrounded diagonal outliers grouped into connected regions (nodes coupled in K), largest ratio first."""
    if rows.size == 0:
        return []
    nodes = _node_of_rows(model, rows)
    uniq, inv = np.unique(nodes, return_inverse=True)
    sub = sp.coo_array(model.K[rows][:, rows])
    G = sp.coo_array((np.ones(sub.nnz), (inv[sub.row], inv[sub.col])), shape=(uniq.size, uniq.size))
    count, label = csgraph.connected_components(G, directed=False)
    best = np.full(count, -np.inf)
    np.maximum.at(best, label[inv], excess)
    typical_edge = _median_edge(model)
    out = []
    for g in np.argsort(-best, kind="stable")[:limit]:
        members = np.flatnonzero(label[inv] == g)
        region_nodes = sorted(int(v) for v in np.unique(nodes[members]))
        ratio = 10.0 ** float(best[g])
        short = _shortest_edge(model, region_nodes)
        where = ", ".join(str(v) for v in region_nodes[:8]) + (
            f" and {len(region_nodes) - 8} more" if len(region_nodes) > 8 else "")
        text = (
            f"The diagonal stiffness of {len(region_nodes)} node{'s' if len(region_nodes) != 1 else ''} "
            f"({where}) is up to {ratio:.3g} times the typical diagonal of its DOF type, and these rows are not "
            f"grounded: K times a rigid translation or rotation is round-off in them (at most "
            f"{float(np.max(share[members])):.1e} of their entries; a spring to ground would give about 1), "
            f"so their element forces balance. This is not a support or a spring to ground but a region much "
            f"stiffer than its surroundings: a stiffer material or thicker section, or a distorted element "
            f"(a very short edge or a bad aspect ratio makes large entries)."
        )
        if short is not None and typical_edge and short[2] < SHORT_EDGE_SHARE * typical_edge:
            text += (f" Nodes {short[0]} and {short[1]} are {short[2]:.3g} apart, {short[2] / typical_edge:.1e} of "
                     f"the model's median element edge ({typical_edge:.3g}): check that element's shape.")
        text += (" What it costs a solve shows in the scaled condition number and the measured digits; "
                 "if the stiffness is meant, nothing needs changing.")
        out.append(StiffnessJump(
            kind="stiff-region", rows=sorted(int(r) for r in rows[members]), nodes=region_nodes,
            ratio=ratio, digits_cost=0.0, advice_value=None, reasoning=text,
        ))
    return out


def _median_edge(model: Model) -> Optional[float]:
    """Median distance between coupled nodes (model length unit); None without coordinates."""
    if model.dofs is None or model.coords is None:
        return None
    coo = sp.coo_array(model.K)
    step = max(1, coo.nnz // EDGE_SAMPLE)
    a, b = model.dofs.node[coo.row[::step]], model.dofs.node[coo.col[::step]]
    keep = (a < b) & model.coords.has(a) & model.coords.has(b)
    if not np.any(keep):
        return None
    return float(np.median(np.linalg.norm(model.coords.lookup(a[keep]) - model.coords.lookup(b[keep]), axis=1)))


def _shortest_edge(model: Model, region_nodes: list[int]):
    """(node, node, distance) of the closest coupled pair with a node in the region; None without coordinates."""
    if model.dofs is None or model.coords is None:
        return None
    rows = np.flatnonzero(np.isin(model.dofs.node, region_nodes))
    coo = sp.coo_array(model.K[rows])
    a, b = model.dofs.node[rows[coo.row]], model.dofs.node[coo.col]
    keep = (a != b) & model.coords.has(a) & model.coords.has(b)
    if not np.any(keep):
        return None
    a, b = a[keep], b[keep]
    dist = np.linalg.norm(model.coords.lookup(a) - model.coords.lookup(b), axis=1)
    k = int(np.argmin(dist))
    return int(min(a[k], b[k])), int(max(a[k], b[k])), float(dist[k])


def _scaled_coupling_squared(model: Model, rows: NDArray[np.intp], d: NDArray[np.float64]) -> float:
    """max over ``rows`` of sum_{j != i} K_ij^2 / (K_ii K_jj) (dimensionless): the
    squared norm of a row's off-diagonal part in S = D^-1/2 K D^-1/2. By the
    Schur complement of that row in S (unit diagonal), the smallest eigenvalue
    lambda' of S without the row drops by at most about this over (1 - lambda')."""
    K = model.K
    out = 0.0
    for r in rows:  # rows of the reported groups only
        lo, hi = K.indptr[r], K.indptr[r + 1]
        cols = np.asarray(K.indices[lo:hi], dtype=np.intp)
        keep = (cols != r) & (d[cols] > 0)
        vals = K.data[lo:hi][keep]
        out = max(out, float(np.sum(vals**2 / (d[r] * d[cols[keep]]))))
    return out


def _with_part(jump: StiffnessJump, structure: StructureResult) -> StiffnessJump:
    parts = sorted({int(structure.part_of_row[r]) + 1 for r in jump.rows})  # 1-based, as in the report
    names = ", ".join(str(p) for p in parts)
    label = f"Part {names}" if len(parts) == 1 else f"Parts {names}"
    return replace(jump, reasoning=f"{label}. " + jump.reasoning)


__all__ = ["find_stiffness_jumps"]
