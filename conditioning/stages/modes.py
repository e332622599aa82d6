"""Near-singular modes located in the model: rigid-body, mechanism, or a DOF
without stiffness.

Input is the near-null basis found by :mod:`conditioning.stages.spectrum` (smallest
eigenvectors of the scaled matrix S). Within that basis:

1. Small eigenvalues of S that come from very stiff links (a penalty spring
   between two DOFs makes S nearly singular although K is not) are separated
   out by a second, per-dof-type scaling T (median diagonal of each dof type):
   a true near-null vector has a small Rayleigh quotient u'Ku / u'Tu too.
2. Zero directions of one node's own diagonal block (a rotation about an
   inclined shell normal, a drilling DOF) are DOFs without stiffness with
   an axis; they are taken out of the basis before anything else, so that
   an eigensolver's mixing of a hundred of them is undone.
3. The remaining basis is split by connected part; on each part, the rigid
   motions (translations, rotations about the centroid) that lie in the null
   space are found by a small generalized eigenproblem, and the rest of the
   part's null space is a mechanism, rotated to its sparsest basis
   (column-pivoted QR) so that separate local mechanisms come out separate.
4. A mechanism is located at the nodes that carry it (its weight in the
   scaled coordinates) and cut into groups of nodes that move rigidly together by
   fitting a rigid motion to each node's neighbourhood; nodes whose
   neighbourhood fits no single rigid motion, next to two groups, are where
   the groups meet. A mechanism without translations whose nodes all turn
   about one axis is a rotation about that axis (a member spinning about
   its own axis when its nodes lie on that axis).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from numpy.typing import NDArray
from scipy.sparse import csgraph

from conditioning.linalg.local_null import group_null_directions, sparsest_basis
from conditioning.linalg.orthonormal import orthonormal_basis
from conditioning.linalg.rigid_motions import RigidBasis, rigid_motions, rotation_pivot
from conditioning.model import DOF_NAMES, ROTATIONS, TRANSLATIONS, Model
from conditioning.results import NearSingularMode, StructureResult
from conditioning.stages.spectrum import MODE_THRESHOLD, Eigenpairs

logger = logging.getLogger(__name__)

# Tolerances. Where no source is given the value is this project's choice: not
# fitted to a published figure, but the value the mode tests (tests/test_modes.py:
# scikit-fem free solids and plates, 3-2-1 supports less one, two bodies, a truss
# with a missing brace, a penalty spring, a slender cantilever in mm; and the demo
# scenarios) were written against and pass with.

#: A rigid motion lies in the null space when its relative residual after
#: projection on the null space is below this (1%; project's choice).
RIGID_TOL = 1e-2
#: Above this many moving nodes a mechanism is located by its largest motions
#: only (the per-node fit is a Python loop; project's choice, for run time).
MECHANISM_NODE_LIMIT = 20000
#: Unit vectors kept for at most this many DOFs without stiffness (memory).
VECTORS_KEPT = 100
#: Order in which pure rigid motions are preferred as mode vectors.
TRANSLATION_ORDER = ("ux", "uy", "uz", "uniform", "rx", "ry", "rz")
#: An eigenvalue is exact zero when |lambda| <= ZERO_ROOM * n eps lambda_max(S):
#: the spectrum stage's zero level with room for the Rayleigh quotient's own
#: round-off (project's choice; jumps.SWALLOW_FACTOR is matched to it).
ZERO_ROOM = 10.0
#: A part takes part in the null space when one of its rows has a squared
#: weight above this in the orthonormal basis (round-off of the QR is ~1e-32;
#: project's choice).
PART_WEIGHT_MIN = 1e-12
#: Singular values of a part's rows of the orthonormal null basis: near 1 for
#: the part's own null vectors, near 0 for other parts' (exactly orthogonal in
#: scaled coordinates); 0.5 lies halfway (project's choice).
PART_SHARE_MIN = 0.5
#: Relative singular value below which mode vectors of a part are dependent
#: (eigensolver vectors carry noise of about 1e-8..1e-6; project's choice).
BASIS_RTOL = 1e-6
#: Relative singular value below which rigid motions of a part are dependent
#: (a part of one node, collinear nodes; project's choice).
RIGID_RANK_RTOL = 1e-10
#: A pure rigid motion is taken as a mode vector when its projection on the
#: null space keeps this share of its length, and again this share after the
#: motions already taken are removed (project's choice).
CANONICAL_MIN = 0.3
#: Shares of a rigid mode's motion below this are not reported (round-off).
MOTION_SHARE_MIN = 1e-6
#: Singular value (of an orthonormal basis: dimensionless, at most 1) above
#: which a direction of the part's null space is not rigid: a mechanism
#: (project's choice).
MECHANISM_MIN = 1e-3
#: Nodes named for a mechanism too large for the per-node fit.
MECHANISM_NODES_SHOWN = 10
#: A node moves when its displacement exceeds this share of the largest.
MOVING_MIN = 1e-6
#: A node of a part stays in place in all its free motions (it lies on the
#: axis, or at the point, they turn about) when its rows of the part's scaled
#: null basis have at most this share of the largest node's norm (project's
#: choice: such nodes measure 1e-13..1e-10 in dense and Lanczos bases of an
#: invented tower turning about one leg, the moving ones 0.5 or more).
STILL_NODE = 1e-6
#: A node's neighbourhood moves rigidly, and two neighbouring fits agree, to
#: within this share of the largest displacement (project's choice).
RIGID_FIT_TOL = 1e-3
#: A rotation axis passes through a node when it is this close to it,
#: relative to the part's extent (the project's choice).
AXIS_AT_NODE = 1e-6
#: A rigid-body mode is named as a rotation about a point when its rotation
#: moves the part's farthest node by more than this share of its translation,
#: and its translation along the axis is at most this share (project's choice).
TURNING_MIN = 1e-3
#: A node carries a mechanism when its weight (sum of the scaled mode's
#: squares over its rows) is at least this share of the largest node's
#: (project's choice; the truth in tests is LAPACK's node weights).
CARRIES_MIN = 1e-2
#: A mechanism is a rotation only when its translation rows hold at most
#: this share of its weight in the scaled coordinates (project's choice).
ROTATION_ONLY = 1e-6
#: Rotation vectors of the moving nodes share one axis when the second
#: singular value of their stack is at most this share of the first.
COMMON_AXIS_TOL = 1e-3
#: Nodes lie on a line along the axis when their spread across it is at most
#: this share of their spread along it (or of the model's extent).
ON_AXIS_TOL = 1e-3
#: Entries of a node's zero direction below this share of its largest are
#: the block eigensolver's round-off (~1e-16; project's choice).
NODE_VECTOR_ROUNDOFF = 1e-8
#: Rounding (decimals) of an axis when grouping DOFs without stiffness by axis.
AXIS_DECIMALS = 2


@dataclass(frozen=True)
class LocatedModes:
    """Near-singular modes with their kinds, and what was set aside.

    Attributes
    ----------
    modes : list of NearSingularMode
        DOFs without stiffness first, then per part its rigid-body modes and
        its mechanisms.
    basis : (n, m) float64
        The near-null space of the rows with stiffness, in K's DOFs (columns =
        mode vectors); DOFs without stiffness are not in it (each is its own
        null vector, e_i).
    stiff_link_eigenvalues : list of float
        Small eigenvalues of S explained by very stiff links (not modes).
    """

    modes: list[NearSingularMode]
    basis: NDArray[np.float64]
    stiff_link_eigenvalues: list[float]


@dataclass(frozen=True)
class _Context:
    """What every step of :func:`locate_modes` reads."""

    model: Model
    d: NDArray[np.float64]
    """|diag K| (K's units)."""
    lambda_max: float
    """lambda_max(S)."""
    zero: float
    """Eigenvalues at most this in magnitude are exact zeros."""
    undecided: float = -1.0
    """Eigenvalues above ``zero`` and at most this in magnitude are not decided."""

    def exact(self, lam: float) -> bool:
        return abs(lam) <= self.zero

    def not_decided(self, lam: float) -> bool:
        return self.zero < abs(lam) <= self.undecided


def typical_stiffness(model: Model) -> NDArray[np.float64]:
    """Per row, the median |K_ii| of the row's dof type (over rows with stiffness)."""
    d = np.abs(model.K.diagonal())
    out = np.ones_like(d)
    types = model.dofs.dof if model.dofs is not None else np.zeros(d.size, dtype=np.int8)
    for t in np.unique(types):
        sel = types == t
        pos = d[sel & (d > 0)]
        out[sel] = float(np.median(pos)) if pos.size else 1.0
    return out


def part_rigid_motions(model: Model, rows: NDArray[np.intp], **options) -> RigidBasis:
    """Rigid motions of the part made of ``rows`` (see :func:`rigid_motions`):
    translations only without coordinates, one uniform motion without a DOF map."""
    if model.dofs is None:
        return rigid_motions(None, node=rows)
    return rigid_motions(model.dofs.dof[rows], model.positions_of(rows), model.dofs.node[rows], **options)


def locate_modes(model: Model, structure: StructureResult, scale: NDArray[np.float64],
                 active: NDArray[np.bool_], spectrum: Eigenpairs, *, zero: Optional[float] = None,
                 undecided: float = -1.0) -> LocatedModes:
    """Classify and locate the near-singular modes.

    Parameters
    ----------
    model : Model
    structure : StructureResult
    scale : (n,) float64
        s with S = diag(s) K diag(s) (the shared factorization's).
    active : (n,) bool
        Rows the spectrum was computed on.
    spectrum : Eigenpairs
    zero, undecided : float, optional
        Scaled eigenvalues at most ``zero`` in magnitude are zero at working
        precision (``NearSingularMode.exact``), those above it and at most
        ``undecided`` not decided (:mod:`conditioning.stages.support_proof`
        gives both); by default ``zero`` is ZERO_ROOM n eps lambda_max(S), the
        worst-case rule, and nothing is undecided.

    Returns
    -------
    LocatedModes
        Modes of DOFs without stiffness, then per part rigid-body modes and
        mechanisms; eigenvalues are those of S (dimensionless).
    """
    # Zero at working precision, with a little room for the Rayleigh quotient's own error.
    ctx = _Context(model, np.abs(model.K.diagonal()), spectrum.lambda_max,
                   ZERO_ROOM * spectrum.zero_level if zero is None else zero, undecided)
    modes = _modes_without_stiffness(model, structure)
    W = _near_null_vectors(model.n, scale, active, spectrum)
    if W.shape[1] == 0:
        return LocatedModes(modes, np.zeros((model.n, 0)), [])
    Wg, stiff_links = _without_stiff_links(ctx, W)
    sq = np.sqrt(np.where(ctx.d > 0, ctx.d, 1.0))
    local_modes, local_columns, Wg = _node_local_modes(ctx, structure, sq, Wg)
    modes += local_modes
    columns: list[NDArray] = list(local_columns)
    for p, rows, B in _null_space_by_part(structure.part_of_row, sq, Wg):
        part_modes, part_columns = _part_modes(ctx, int(p), rows, B)
        modes += part_modes
        columns += part_columns
    basis = np.column_stack(columns) if columns else np.zeros((model.n, 0))
    return LocatedModes(modes, basis, stiff_links)


# ------------------------------------------------------------------ the steps
def _modes_without_stiffness(model: Model, structure: StructureResult) -> list[NearSingularMode]:
    """Each DOF without stiffness is its own mode (a unit vector). Their
    vectors are kept for the first VECTORS_KEPT only: there may be very many."""
    modes = []
    for k, row in enumerate(structure.empty_rows):
        e = None
        if k < VECTORS_KEPT:
            e = np.zeros(model.n)
            e[row] = 1.0
        name = model.dofs.dof_name(row) if model.dofs is not None else "uniform"
        modes.append(NearSingularMode(0.0, 0.0, "dof-without-stiffness", {name: 1.0},
                                      model.nodes_of([row]), int(structure.part_of_row[row]) + 1, float("nan"),
                                      [], e))
    return modes


def _near_null_vectors(n: int, scale, active, spectrum: Eigenpairs) -> NDArray[np.float64]:
    """(n, count) near-null eigenvectors of S in K's DOFs, u = diag(s) v."""
    idx = np.flatnonzero(active)
    V = spectrum.vectors[:, spectrum.first:spectrum.first + spectrum.count]
    W = np.zeros((n, V.shape[1]))
    W[idx] = scale[idx, None] * V
    return W


def _without_stiff_links(ctx: _Context, W: NDArray) -> tuple[NDArray, list[float]]:
    """Step (1): the genuine near-null vectors, and the eigenvalues of S that
    very stiff links explain, by the per-type scaling T (u'Ku / u'Tu small)."""
    K = ctx.model.K
    T = typical_stiffness(ctx.model)
    Kw = W.T @ (K @ W)
    Tw = W.T @ (T[:, None] * W)
    q, Y = la.eigh((Kw + Kw.T) / 2, (Tw + Tw.T) / 2)
    genuine = q <= MODE_THRESHOLD * ctx.lambda_max
    stiff_links = [_rayleigh_scaled(K, W @ Y[:, j], ctx.d) for j in np.flatnonzero(~genuine)]
    return W @ Y[:, genuine], stiff_links


def _node_local_modes(ctx: _Context, structure: StructureResult, sq: NDArray, Wg: NDArray):
    """Step (2): the zero directions of single nodes' diagonal blocks that lie
    in span(Wg) (a drilling rotation about an inclined normal), as DOFs
    without stiffness; returns (modes, their vectors, the rest of the basis)."""
    model = ctx.model
    if model.dofs is None or Wg.shape[1] == 0:
        return [], [], Wg
    V = la.qr(sq[:, None] * Wg, mode="economic")[0]
    node_index = np.unique(model.dofs.node, return_inverse=True)[1]
    label = node_index.copy()
    label[structure.empty_rows] = -1  # already modes of their own
    weight = np.bincount(node_index, weights=np.sum(V**2, axis=1))
    candidates = np.flatnonzero(weight > PART_WEIGHT_MIN)
    S = sp.diags_array(1.0 / sq) @ model.K @ sp.diags_array(1.0 / sq)
    found = group_null_directions(S, label, candidates, MODE_THRESHOLD * ctx.lambda_max)
    Z = found.Z
    inside = np.linalg.norm(Z - V @ (V.T @ Z), axis=0) <= RIGID_TOL  # unit columns
    Z = Z[:, inside]
    if Z.shape[1] == 0:
        return [], [], Wg
    Ur, sr, _ = la.svd(V - Z @ (Z.T @ V), full_matrices=False)
    rest = Ur[:, sr > PART_SHARE_MIN] / sq[:, None]
    modes, columns = [], []
    for k, z in enumerate(Z.T):
        u = np.where(np.abs(z) > NODE_VECTOR_ROUNDOFF * np.abs(z).max(), z, 0.0) / sq
        modes.append(_node_mode(ctx, structure, u, keep_vector=k < VECTORS_KEPT))
        columns.append(u)
    logger.info("%d zero direction(s) of single nodes taken out of the near-null basis", Z.shape[1])
    return modes, columns, rest


def _node_mode(ctx: _Context, structure: StructureResult, u: NDArray, keep_vector: bool) -> NearSingularMode:
    """A DOF without stiffness at one node along ``u`` (nonzero on that node's
    rows): its axis when it moves only rotations or only translations."""
    model = ctx.model
    rows = np.flatnonzero(u)
    dof = model.dofs.dof[rows].astype(np.intp)
    axis, description = None, ""
    if np.all(dof >= 3) or np.all(dof < 3):
        vec = np.zeros(3)
        vec[dof % 3] = u[rows]
        axis = _signed_axis(vec)
        types = ROTATIONS if dof[0] >= 3 else TRANSLATIONS
        motion = _axis_shares(axis, types)
        what = "rotation about" if dof[0] >= 3 else "translation along"
        description = f"{what} the axis {_axis_text(axis)}"
    else:
        w = u[rows] ** 2 * ctx.d[rows]
        motion = {DOF_NAMES[t]: float(x / w.sum()) for t, x in zip(dof, w) if x > MOTION_SHARE_MIN * w.sum()}
        description = "a combination of the node's translations and rotations"
    lam = _rayleigh_scaled(model.K, u, ctx.d)
    return NearSingularMode(lam, lam / ctx.lambda_max, "dof-without-stiffness", motion, model.nodes_of(rows),
                            int(structure.part_of_row[rows[0]]) + 1, float("nan"), [],
                            u / np.max(np.abs(u)) if keep_vector else None, exact=ctx.exact(lam), undecided=ctx.not_decided(lam),
                            axis=axis, description=description)


def _null_space_by_part(parts: NDArray[np.intp], sq: NDArray, Wg: NDArray):
    """Step (3): yield (part, its rows, orthonormal basis of its null space in
    K's DOFs). The basis is split in the scaled coordinates v = D^1/2 u, where
    the null spaces of separate parts are exactly orthogonal: a part's share
    of the basis has singular values near 1."""
    Vg = la.qr(sq[:, None] * Wg, mode="economic")[0] if Wg.shape[1] else Wg
    for p in np.unique(parts[np.sum(Vg**2, axis=1) > PART_WEIGHT_MIN]):
        rows = np.flatnonzero(parts == p)
        Uv, sv, _ = la.svd(Vg[rows], full_matrices=False)
        Bv = Uv[:, sv > PART_SHARE_MIN]
        if Bv.shape[1]:
            yield p, rows, orthonormal_basis(Bv / sq[rows, None], BASIS_RTOL)


def _part_modes(ctx: _Context, p: int, rows, B) -> tuple[list[NearSingularMode], list[NDArray]]:
    """Rigid-body modes of one part, then (step 3) its mechanisms in their sparsest basis."""
    rb = part_rigid_motions(ctx.model, rows)
    modes, columns, rigid_vecs = [], [], []
    still = _still_nodes(ctx.model, rows, B, ctx.d)
    node_list = [v for v in ctx.model.nodes_of(rows) if v not in still]
    for c in _rigid_in_null_space(rb, B):
        u_part = rb.basis @ c
        u = _on_all_rows(ctx.model.n, rows, u_part)
        share = c**2 / np.sum(c**2)
        motion = {name: float(v) for name, v in zip(rb.motions, share) if v > MOTION_SHARE_MIN}
        lam = _rayleigh_scaled(ctx.model.K, u, ctx.d)
        mixed = any(k in motion for k in ("rx", "ry", "rz")) and any(k in motion for k in ("ux", "uy", "uz"))
        description = _turning_text(ctx.model, rows, u_part) if mixed else ""
        modes.append(NearSingularMode(lam, lam / ctx.lambda_max, "rigid-body", motion, node_list, p + 1,
                                      1.0, [], u / np.max(np.abs(u)), exact=ctx.exact(lam), undecided=ctx.not_decided(lam),
                                      description=description))
        columns.append(u)
        rigid_vecs.append(u_part)
    sq = np.sqrt(np.where(ctx.d[rows] > 0, ctx.d[rows], 1.0))
    for v_part in sparsest_basis(sq[:, None] * _mechanisms(B, rigid_vecs)).T:
        mode, u = _mechanism_mode(ctx, p, rows, v_part / sq, rb.basis)
        modes.append(mode)
        columns.append(u)
    return modes, columns


def pivot_words(model: Model, rows, pivot: NDArray, planar: bool) -> str:
    """Where a rotation of the part made of ``rows`` turns, in words: ``"node 7"``
    when a node lies at ``pivot`` to within AXIS_AT_NODE of the part's extent
    (a node of the part first; else any node of the coordinates, such as a
    support held out of K), else the point's coordinates rounded to the
    part's scale; ``"an axis through ..."`` in 3D."""
    xyz = model.positions_of(rows)
    span = max(float(np.ptp(xyz, axis=0).max()), np.finfo(float).tiny)
    about = ""
    for node, where in ((model.dofs.node[rows], xyz), (model.coords.node, model.coords.xyz)):
        dist = np.linalg.norm(where - pivot, axis=1)
        if dist.min() <= AXIS_AT_NODE * span:
            about = f"node {int(node[int(np.argmin(dist))])}"
            break
    if not about:
        about = "(" + ", ".join(_coordinate(v, span) for v in pivot[: (2 if planar else 3)]) + ")"
    return about if planar else "an axis through " + about


def _coordinate(v: float, span: float) -> str:
    """A coordinate rounded to the model's scale (3 figures of its span): "6040", "0", never "-3.4e-15"."""
    decimals = max(2 - int(np.floor(np.log10(span))), 0)
    return f"{round(float(v), decimals) + 0.0:.{decimals}f}"  # + 0.0 turns -0.0 into 0.0


def _turning_text(model: Model, rows, u_part) -> str:
    """``"rotation rz about node 7"`` when the rigid motion ``u_part`` of the part
    turns about a fixed point (2D) or line (3D) away from the part's centroid,
    where its shares about the centroid would read as a mix of translation and
    rotation; "" otherwise (a translation, a screw motion, no coordinates)."""
    xyz = model.positions_of(rows)
    if xyz is None:
        return ""
    c = xyz.mean(axis=0)
    rb = rigid_motions(model.dofs.dof[rows], xyz, model.dofs.node[rows], center=c, lever=1.0)
    coef, *_ = np.linalg.lstsq(rb.basis, u_part, rcond=None)
    t, theta = np.zeros(3), np.zeros(3)
    for name, v in zip(rb.motions, coef):
        k = DOF_NAMES.index(name)
        (t if k < 3 else theta)[k % 3] = v
    radius = float(np.max(np.linalg.norm(xyz - c, axis=1)))
    if np.linalg.norm(theta) * radius <= TURNING_MIN * np.linalg.norm(t):
        return ""                                    # a translation
    pivot = rotation_pivot(t, theta, c, axial_tol=TURNING_MIN)
    if pivot is None:
        return ""                                    # turns and slides along its axis
    # In-plane (turning about a point) only for a plane model without uz, rx, ry.
    planar = model.coords.dim == 2 and not np.isin(model.dofs.dof, (2, 3, 4)).any()
    name = DOF_NAMES[3 + int(np.argmax(np.abs(theta)))]
    return f"rotation {name} about {pivot_words(model, rows, pivot, planar)}"


def _node_sums(model: Model, rows, squares: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    """(node ids, sum of ``squares`` over each node's rows, each row's node
    index): the per-node weight the mode rules compare (each row its own node,
    numbered row + 1, without a DOF map)."""
    ids = model.dofs.node[rows] if model.dofs is not None else np.asarray(rows) + 1
    uniq, inv = np.unique(ids, return_inverse=True)
    return uniq, np.bincount(inv, weights=squares, minlength=uniq.size), inv


def _still_nodes(model: Model, rows, B: NDArray, d: NDArray) -> set[int]:
    """Nodes of a part (1-based rows without a map) that every direction of
    the part's null space ``B`` (K's DOFs) leaves in place: a node on the axis
    of a free rotation of a truss, or at the point it turns about. The norm of
    a node's rows is taken in the scaled coordinates v = D^1/2 u, comparable
    across DOF types; a node with rotation DOFs on the axis still turns."""
    v = np.sqrt(np.where(d[rows] > 0, d[rows], 1.0))[:, None] * B
    uniq, squares, _ = _node_sums(model, rows, np.sum(v**2, axis=1))
    norm = np.sqrt(squares)
    return {int(x) for x in uniq[norm <= STILL_NODE * norm.max()]}


def _rigid_in_null_space(rb: RigidBasis, B: NDArray) -> list[NDArray]:
    """Coefficient vectors c (on rb.basis) of the rigid motions R c in span(B):
    small singular values of the projection residual, in an orthonormal basis
    of span(R); pure motions first."""
    R = rb.basis
    if R.shape[1] == 0:
        return []
    Ur, sr, Vrt = la.svd(R, full_matrices=False)
    keep = sr > RIGID_RANK_RTOL * sr[0]
    Ur, sr, Vrt = Ur[:, keep], sr[keep], Vrt[keep]
    E = Ur - B @ (B.T @ Ur)
    _, se, Zt = la.svd(E, full_matrices=False)
    inside_o = Zt[se <= RIGID_TOL].T
    if inside_o.shape[1] == 0:
        return []
    coeff = Vrt.T @ (inside_o / sr[:, None])
    return _canonical_rigid(rb.motions, orthonormal_basis(coeff))


def _canonical_rigid(names: tuple[str, ...], coeff_basis: NDArray) -> list[NDArray]:
    """Coefficient vectors of rigid motions in span(coeff_basis), pure motions first."""
    P = coeff_basis @ coeff_basis.T
    chosen: list[NDArray] = []
    order = sorted(range(len(names)), key=lambda j: TRANSLATION_ORDER.index(names[j]))
    for j in order:
        if len(chosen) == coeff_basis.shape[1]:
            break
        c = P[:, j].copy()
        if np.linalg.norm(c) < CANONICAL_MIN:
            continue
        resid = c.copy()
        for q in chosen:
            resid -= (q @ resid) / (q @ q) * q
        if np.linalg.norm(resid) >= CANONICAL_MIN * np.linalg.norm(c):
            chosen.append(c)
    return chosen


def _mechanisms(B: NDArray, rigid_vecs: list[NDArray]) -> NDArray:
    """Orthonormal directions of span(B) left once its rigid motions are removed."""
    if not rigid_vecs:
        return B
    Q = orthonormal_basis(np.column_stack(rigid_vecs), BASIS_RTOL)
    Ur2, sr2, _ = la.svd(B - Q @ (Q.T @ B), full_matrices=False)
    return Ur2[:, sr2 > MECHANISM_MIN]


def _mechanism_mode(ctx: _Context, p: int, rows, u_part, R) -> tuple[NearSingularMode, NDArray]:
    """A mechanism of part ``p``: the nodes that carry it, its rigid share,
    and either its axis (a rotation only) or its groups and meeting nodes."""
    model = ctx.model
    u = _on_all_rows(model.n, rows, u_part)
    share = 0.0
    if R.shape[1]:
        c, *_ = np.linalg.lstsq(R, u_part, rcond=None)
        share = float(np.linalg.norm(R @ c) ** 2 / np.linalg.norm(u_part) ** 2)
    v = np.sqrt(np.where(ctx.d[rows] > 0, ctx.d[rows], 1.0)) * u_part  # scaled: comparable across DOF types
    carrying = _carrying_rows(model, rows, v)
    axis, description = _common_rotation_axis(model, rows[carrying], u_part[carrying], v, rows)
    # The nodes named are those that carry the mode or that move: a scaled
    # weight favours stiff DOFs (a beam's axial ux), so a column of a sway
    # mechanism, moving as much in length units, could otherwise go unnamed.
    located = carrying | _moving_rows(model, rows, u_part)
    groups, meeting = [], []
    if axis is None and model.coords is not None and model.dofs is not None:
        groups, meeting = _mechanism_groups(model, rows, u_part)
    lam = _rayleigh_scaled(model.K, u, ctx.d)
    motion = {} if axis is None else _axis_shares(axis, ROTATIONS)
    mode = NearSingularMode(lam, lam / ctx.lambda_max, "mechanism", motion, model.nodes_of(rows[located]), p + 1,
                            share if model.coords is not None else float("nan"),
                            groups, u / np.max(np.abs(u)), exact=ctx.exact(lam), undecided=ctx.not_decided(lam),
                            axis=axis, meeting=meeting, description=description)
    return mode, u


def _carrying_rows(model: Model, rows, v) -> NDArray[np.bool_]:
    """Rows of the nodes whose weight sum(v_i^2 over the node's rows) is at
    least CARRIES_MIN of the largest node's (each row alone without a map)."""
    _, w, inv = _node_sums(model, rows, v**2)
    return (w >= CARRIES_MIN * w.max())[inv]


def _moving_rows(model: Model, rows, u) -> NDArray[np.bool_]:
    """Rows of the nodes that move at least CARRIES_MIN of the most moving
    node, in length units: a node's translation, or its rotation times the
    part's size (the displacement that rotation makes across the part). All
    False without a DOF map or coordinates (no length to compare with)."""
    if model.dofs is None or model.coords is None:
        return np.zeros(rows.size, dtype=bool)
    node, dof = model.dofs.node[rows], model.dofs.dof[rows]
    X = model.coords.lookup(np.unique(node))
    size = float(np.ptp(X, axis=0).max()) if X.shape[0] > 1 else 0.0
    length = np.where(np.isin(dof, ROTATIONS), size, 1.0) * u
    _, squares, inv = _node_sums(model, rows, length**2)
    motion = np.sqrt(squares)
    top = float(motion.max(initial=0.0))
    if top == 0.0:
        return np.zeros(rows.size, dtype=bool)
    return (motion >= CARRIES_MIN * top)[inv]


def _common_rotation_axis(model: Model, rows, u_rows, v, part_rows):
    """(axis, words) when the mechanism moves no translation (scaled weight)
    and every moving node turns about one axis; (None, "") otherwise."""
    if model.dofs is None or model.coords is None:
        return None, ""
    dof = model.dofs.dof
    trans = np.isin(dof[part_rows], TRANSLATIONS)
    if not np.any(~trans) or np.sum(v[trans] ** 2) > ROTATION_ONLY * np.sum(v**2):
        return None, ""
    rot = np.isin(dof[rows], ROTATIONS)
    nodes, inv = np.unique(model.dofs.node[rows[rot]], return_inverse=True)
    theta = np.zeros((nodes.size, 3))
    theta[inv, dof[rows[rot]] - 3] = u_rows[rot]
    _, sv, Vt = la.svd(theta, full_matrices=False)
    if sv.size > 1 and sv[1] > COMMON_AXIS_TOL * sv[0]:
        return None, ""
    axis = _signed_axis(Vt[0])
    X = model.coords.lookup(nodes)
    along = (X - X.mean(axis=0)) @ np.array(axis)
    across = np.linalg.norm((X - X.mean(axis=0)) - np.outer(along, axis), axis=1)
    if nodes.size >= 2 and across.max() <= ON_AXIS_TOL * np.ptp(along):
        return axis, f"spin of a member about its own axis {_axis_text(axis)} (torsion released at both ends?)"
    return axis, f"rotation of {nodes.size} node(s) about the axis {_axis_text(axis)}"


def _signed_axis(a) -> tuple[float, float, float]:
    """Unit axis with its largest component positive (an axis has no sign)."""
    a = np.asarray(a, dtype=np.float64)
    a = a / np.linalg.norm(a)
    a = a if a[np.argmax(np.abs(a))] > 0 else -a
    return tuple(float(x) + 0.0 for x in a)


def _axis_text(axis) -> str:
    return "(" + ", ".join(f"{x:.2f}" for x in np.asarray(axis) + 0.0) + ")"


def _axis_shares(axis, types) -> dict[str, float]:
    """Shares of an axis on the DOF names of ``types`` (translations or rotations)."""
    return {DOF_NAMES[t]: float(a**2) for t, a in zip(types, axis) if a**2 > MOTION_SHARE_MIN}


def _on_all_rows(n: int, rows, u_part) -> NDArray[np.float64]:
    u = np.zeros(n)
    u[rows] = u_part
    return u


def _rayleigh_scaled(K, u, d) -> float:
    """u'Ku / u'Du: the eigenvalue of S this vector stands for."""
    den = float(u @ (d * u))
    return float(u @ (K @ u)) / den if den > 0 else 0.0


# ------------------------------------------------------- mechanism groups
def _node_adjacency(model: Model, rows: NDArray[np.intp]):
    """Node ids of the part and their adjacency (sparse, by shared stiffness)."""
    K = model.K[rows][:, rows].tocoo()
    nodes = model.dofs.node[rows]
    uniq, inv = np.unique(nodes, return_inverse=True)
    A = sp.coo_array((np.ones(K.nnz), (inv[K.row], inv[K.col])), shape=(uniq.size, uniq.size)).tocsr()
    A.setdiag(0)
    A.eliminate_zeros()
    return uniq, inv, A


def _mechanism_groups(model: Model, rows: NDArray[np.intp], u: NDArray) -> tuple[list[list[int]], list[int]]:
    """Groups of nodes moving rigidly together, and the nodes where they meet."""
    coords = model.coords
    uniq, inv, A = _node_adjacency(model, rows)
    dim = coords.dim
    X3 = coords.lookup(uniq)
    X = X3[:, :dim]
    dof = model.dofs.dof[rows]
    U = np.zeros((uniq.size, dim))
    for t in range(dim):
        sel = dof == t
        U[inv[sel], t] = u[sel]
    scale = float(np.max(np.abs(U))) or 1.0
    moving = np.linalg.norm(U, axis=1) > MOVING_MIN * scale
    if uniq.size > MECHANISM_NODE_LIMIT:
        top = np.argsort(-np.linalg.norm(U, axis=1))[:MECHANISM_NODES_SHOWN]
        return [], [int(uniq[i]) for i in top]
    params, rigid = _local_rigid_fits(A, X3, U, scale)
    same = _fits_agree(A, X, params, rigid, scale)
    ncomp, lab = csgraph.connected_components(same, directed=False)
    groups = []
    for c in range(ncomp):
        members = np.flatnonzero((lab == c) & rigid)
        if members.size >= 2 or (members.size == 1 and moving[members[0]]):
            groups.append([int(v) for v in uniq[members]])
    groups.sort(key=len, reverse=True)
    return groups, [int(v) for v in uniq[_meeting(A, lab, rigid, groups, uniq)]]


def _meeting(A, lab, rigid, groups, uniq) -> NDArray[np.bool_]:
    """Nodes that fit no rigid motion and, with the other such nodes they
    touch, lie next to at least two of ``groups``: where groups really meet."""
    group_of = np.full(uniq.size, -1)
    for g, members in enumerate(groups):
        group_of[np.searchsorted(uniq, members)] = g
    loose = ~rigid
    if not loose.any() or len(groups) < 2:
        return np.zeros(uniq.size, dtype=bool)
    Al = A[loose][:, loose]
    ncomp, comp = csgraph.connected_components(Al, directed=False)
    coo = A.tocoo()
    out = np.zeros(uniq.size, dtype=bool)
    loose_idx = np.flatnonzero(loose)
    comp_of = np.full(uniq.size, -1)
    comp_of[loose_idx] = comp
    edge = (comp_of[coo.row] >= 0) & (group_of[coo.col] >= 0)
    for c in range(ncomp):
        touched = np.unique(group_of[coo.col[edge & (comp_of[coo.row] == c)]])
        if touched.size >= 2:
            out[loose_idx[comp == c]] = True
    return out


def _local_rigid_fits(A, X3: NDArray, U: NDArray, scale: float) -> tuple[NDArray, NDArray[np.bool_]]:
    """Per node a: the rigid motion (t, w) about a that best fits the motion
    of a and its neighbours (least squares), and whether it fits them to
    RIGID_FIT_TOL. ``params`` rows are (t_x, t_y[, t_z], w) in 2D and
    (t, w_x, w_y, w_z) in 3D."""
    nnodes, dim = U.shape
    names = ("ux", "uy", "rz") if dim == 2 else ("ux", "uy", "uz", "rx", "ry", "rz")
    params = np.zeros((nnodes, len(names)))
    rigid = np.ones(nnodes, dtype=bool)
    components = np.arange(dim)
    indptr, indices = A.indptr, A.indices
    for a in range(nnodes):
        nb = np.concatenate(([a], indices[indptr[a]:indptr[a + 1]]))
        # Rows (node b, component): u_b = t + w x (x_b - x_a), w in radians.
        rb = rigid_motions(np.tile(components, nb.size), np.repeat(X3[nb], dim, axis=0),
                           center=X3[a], lever=1.0)
        y = U[nb].reshape(-1)
        p, *_ = np.linalg.lstsq(rb.basis, y, rcond=None)
        params[a, [names.index(m) for m in rb.motions]] = p
        rigid[a] = np.linalg.norm(rb.basis @ p - y) <= RIGID_FIT_TOL * scale * np.sqrt(nb.size)
    return params, rigid


def _fits_agree(A, X: NDArray, params: NDArray, rigid, scale: float):
    """Graph of neighbouring rigid nodes whose fitted rigid motions agree."""
    dim = X.shape[1]
    coo = sp.triu(A).tocoo()
    a, b = coo.row, coo.col
    keep = rigid[a] & rigid[b]
    a, b = a[keep], b[keep]
    extent = max(np.ptp(X, axis=0).max(), np.finfo(np.float64).tiny)  # guard: a part of one point
    same_w = np.linalg.norm(params[a, dim:] - params[b, dim:], axis=1) <= RIGID_FIT_TOL * scale / extent
    pred_b = params[a, :dim] + (
        np.stack([-params[a, dim] * (X[b, 1] - X[a, 1]), params[a, dim] * (X[b, 0] - X[a, 0])], axis=1)
        if dim == 2 else np.cross(params[a, dim:], X[b] - X[a]))
    same_t = np.linalg.norm(pred_b - params[b, :dim], axis=1) <= RIGID_FIT_TOL * scale
    ok = same_w & same_t
    return sp.coo_array((np.ones(int(ok.sum())), (a[ok], b[ok])), shape=A.shape)
