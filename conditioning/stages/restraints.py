"""Suggested restraints: the fewest (node, dof) supports that remove free modes.

Given a basis of the null or near-null space of K (rigid-body modes,
mechanisms, DOFs without stiffness), choose m rows such that the m x m
submatrix of the basis is well conditioned: fixing those DOFs (removing their
rows and columns) then leaves no zero-energy motion, because every motion in
the span is nonzero at one of the fixed DOFs.

The rows are chosen by QR with column pivoting on the (weighted) transposed
basis, the classical subset-selection method of Golub and Van Loan [1]_ (an
approximate maximum-volume choice). Weights steer the choice the way an
engineer would: translations before rotations, and nodes far from the
part's centroid (a long lever arm against rotation) before central ones.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Optional, Sequence, Union

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS
from conditioning.linalg.orthonormal import orthonormal_basis
from conditioning.linalg.rigid_motions import rigid_motions, rotation_pivot
from conditioning.model import DOF_NAMES, ROTATIONS, Model
from conditioning.results import Restraint
from conditioning.stages.modes import pivot_words
from conditioning.stages.structure import check_structure

logger = logging.getLogger(__name__)

#: Weight of a rotation row relative to the largest translation row, so a
#: translation is chosen whenever it can do the job (common practice: supports
#: are usually translational).
ROTATION_WEIGHT = 0.1
#: A motion is called rigid when rigid motions of its part explain it to
#: within this relative residual (2-norm).
RIGID_RESIDUAL = 0.1
#: Relative size below which a component of a motion counts as zero; mode
#: bases from eigensolvers or from a matrix mixing units carry noise of about
#: 1e-8..1e-6 of their largest entry.
MOTION_TOL = 1e-4
#: A motion is a translation when its rotation moves the part's farthest node
#: by at most this share of the translation (the project's choice).
TRANSLATION_DOMINATES = 0.1


@dataclass(frozen=True)
class _Geometry:
    """Per-row position, part and the part's centroid (None when unknown)."""

    part: NDArray[np.intp]
    xyz: Optional[NDArray[np.float64]]
    centroid: Optional[NDArray[np.float64]]
    planar: bool


def suggest_restraints(
    model: Model,
    modes_basis: NDArray[np.float64],
    *,
    part_of_row: Optional[NDArray[np.intp]] = None,
) -> list[Restraint]:
    """The smallest set of (node, dof) restraints that removes the given modes.

    Parameters
    ----------
    model : Model
        The model; its DOF map and coordinates name the restraints and steer
        the choice (both optional).
    modes_basis : (n, m) float64
        Columns spanning the null or near-null space, in K's DOFs (any basis:
        it is orthonormalised first). A 1-D array is one mode.
    part_of_row : (n,) int, optional
        Connected-part label of each row (e.g. ``StructureResult.part_of_row``);
        when not given, that of :func:`conditioning.stages.structure.check_structure`,
        so that "part k" in the reasons is the report's part k.

    Returns
    -------
    list of Restraint
        ``r`` restraints, r the rank of ``modes_basis`` (normally m), in the
        order chosen. Each ``reason`` is advice in plain words (what motion
        the restraint stops, and the lever arm against a rotation, in the
        model's length unit). Empty when the basis is empty.

    Notes
    -----
    With Q an orthonormal basis (n x r) and row weights w, the first r
    pivots of the column-pivoted QR of (diag(w) Q)^T are the rows chosen
    (Golub and Van Loan's subset selection, [1]_; the pivoting of
    Businger and Golub, [2]_, as in LAPACK xGEQP3 behind scipy.linalg.qr). Restraining rows R
    removes the span exactly when Q[R] is nonsingular: for a positive
    semidefinite K, a motion u with u_R = 0 and zero energy lies in the span
    and so is 0. This is verified (smallest singular value of Q[R] above
    sqrt(eps)); should the weighted choice fail it, unweighted pivoting is
    used. To say what each restraint stops, the basis is rewritten as
    C = Q Q[R]^-1, whose column k is the motion that moves row R_k by one and
    the other chosen rows not at all; C_k is then fitted by the rigid motions
    of its part (rotations about the part's centroid).

    References
    ----------
    .. [1] G. H. Golub, C. F. Van Loan (2013), "Matrix Computations", 4th ed.,
           Johns Hopkins University Press, chapter 5: QR with column pivoting
           and subset selection (from memory).
    .. [2] P. Businger, G. H. Golub (1965), "Linear least squares solutions
           by Householder transformations", Numer. Math. 7, pp. 269-276
           (QR with column pivoting; from memory).

    Examples
    --------
    A free chain of three unit springs moves as a whole (null vector of ones):

    >>> import numpy as np, scipy.sparse as sp
    >>> from conditioning.model import Model
    >>> K = sp.csr_array(np.array([[1.0, -1, 0], [-1, 2, -1], [0, -1, 1]]))
    >>> [r.row for r in suggest_restraints(Model(K), np.ones(3))]
    [0]
    """
    Q = orthonormal_basis(_as_basis(modes_basis, model.n))
    if Q.shape[1] == 0:
        return []
    geometry = _geometry(model, part_of_row)
    chosen = _choose_rows(Q, _row_weights(model, Q, geometry))
    if chosen is None:
        logger.info("weighted row choice was rank deficient; using unweighted pivoting")
        chosen = _choose_rows(Q, np.ones(model.n))
    if chosen is None:  # cannot happen for an orthonormal Q; kept as a guard
        raise RuntimeError("no well-conditioned set of rows found for the mode basis")
    C = np.linalg.solve(Q[chosen].T, Q.T).T  # C = Q Q[R]^-1, columns are unit motions
    restraints = [_restraint(model, geometry, C[:, k], int(r)) for k, r in enumerate(chosen)]
    logger.info("suggested %d restraints for %d modes", len(restraints), Q.shape[1])
    return restraints


def nonsingular_after_restraints(
    K: sp.sparray, restraints: Sequence[Union[Restraint, int]]
) -> bool:
    """True when K with the restrained rows and columns removed is nonsingular.

    Parameters
    ----------
    K : (n, n) sparse, symmetric
        Stiffness matrix.
    restraints : sequence of Restraint or int
        Restraints (their ``row``) or 0-based rows to fix.

    Returns
    -------
    bool
        ``not fac.singular`` for the shared factorization of the reduced
        matrix: every pivot of the scaled reduced matrix above n*eps*||S||.
    """
    from conditioning.engine.scipy_engine import factorize

    fixed = np.array([r.row if isinstance(r, Restraint) else int(r) for r in restraints], dtype=np.intp)
    keep = np.setdiff1d(np.arange(K.shape[0]), fixed)
    if keep.size == 0:
        return True
    reduced = sp.csr_array(sp.csr_array(K)[keep][:, keep])
    return not factorize(reduced, ordering="MMD_AT_PLUS_A").singular


# ------------------------------------------------------------------ choice
def _as_basis(modes_basis, n: int) -> NDArray[np.float64]:
    B = np.asarray(modes_basis, dtype=np.float64)
    if B.ndim == 1:
        B = B[:, None]
    if B.ndim != 2 or B.shape[0] != n:
        raise ValueError(f"modes basis has shape {B.shape}; expected (n, m) with n = {n} rows of K")
    if not np.all(np.isfinite(B)):
        raise ValueError("modes basis has non-finite entries")
    return B


def _choose_rows(Q: NDArray[np.float64], w: NDArray[np.float64]) -> Optional[NDArray[np.intp]]:
    """First r pivots of QR with column pivoting on (diag(w) Q)^T, if Q[R] is
    well conditioned."""
    r = Q.shape[1]
    _, _, piv = scipy.linalg.qr((w[:, None] * Q).T, mode="economic", pivoting=True)
    chosen = np.asarray(piv[:r], dtype=np.intp)
    sv = np.linalg.svd(Q[chosen], compute_uv=False)
    return chosen if sv[-1] > np.sqrt(EPS) else None


def _row_weights(model: Model, Q, geometry: _Geometry) -> NDArray[np.float64]:
    """1 + distance from the part's centroid / the part's radius (1..2), times
    ROTATION_WEIGHT on rotation rows scaled against the translation rows."""
    w = np.ones(model.n)
    if geometry.xyz is not None:
        dist = np.linalg.norm(geometry.xyz - geometry.centroid[geometry.part], axis=1)
        radius = np.zeros(int(geometry.part.max()) + 1)
        np.maximum.at(radius, geometry.part, dist)
        w += np.divide(dist, radius[geometry.part], out=np.zeros_like(dist), where=radius[geometry.part] > 0)
    if model.dofs is not None:
        rot = np.isin(model.dofs.dof, ROTATIONS)
        norms = np.linalg.norm(Q, axis=1) * w
        if rot.any() and (~rot).any():
            t_max, r_max = norms[~rot].max(), norms[rot].max()
            if t_max > 0 and r_max > 0:
                w[rot] *= ROTATION_WEIGHT * t_max / r_max
    return w


# ---------------------------------------------------------------- geometry
def _geometry(model: Model, part_of_row) -> _Geometry:
    if part_of_row is None:
        part = check_structure(model).part_of_row
    else:
        part = np.asarray(part_of_row, dtype=np.intp)
        if part.shape != (model.n,):
            raise ValueError(f"part_of_row has shape {part.shape}; expected ({model.n},)")
    part = np.asarray(part, dtype=np.intp)
    if model.dofs is None or model.coords is None or not np.all(model.coords.has(model.dofs.node)):
        return _Geometry(part, None, None, True)
    xyz = model.coords.lookup(model.dofs.node)
    count = np.bincount(part, minlength=int(part.max()) + 1).astype(float)
    centroid = np.stack([np.bincount(part, xyz[:, c], minlength=count.size) for c in range(3)], axis=1)
    centroid /= np.maximum(count, 1.0)[:, None]
    planar = model.coords.dim == 2 and not np.isin(model.dofs.dof, (2, 3, 4)).any()
    return _Geometry(part, xyz, centroid, planar)


def _restraint(model: Model, geometry: _Geometry, motion, row: int) -> Restraint:
    if model.dofs is None:
        node, dof = row + 1, "-"
    else:
        node, dof = int(model.dofs.node[row]), DOF_NAMES[int(model.dofs.dof[row])]
    return Restraint(node=node, dof=dof, row=row, reason=_reason(model, geometry, motion, row, dof))


def _reason(model: Model, geometry: _Geometry, motion, row: int, dof: str) -> str:
    """Plain words for what restraining ``row`` stops (``motion``: the unit
    motion C_k that only this restraint holds)."""
    where = "this DOF" if dof == "-" else f"{dof} here"
    support = np.flatnonzero(np.abs(motion) > MOTION_TOL * np.abs(motion).max())
    if support.size == 1:
        return f"restrain {where}: the DOF has no stiffness of its own (or connect it to the structure)"
    label = int(np.bincount(geometry.part[support], weights=motion[support] ** 2).argmax())
    part = "the structure" if np.unique(geometry.part).size == 1 else f"part {label + 1}"
    rows = np.flatnonzero(geometry.part == label)
    if geometry.xyz is None:
        return f"restrain {where}: stops {_motion_without_coords(model, motion, rows)} of {part}"
    # Rigid motions of the part about its centroid, rotations in radians.
    rb = rigid_motions(model.dofs.dof[rows], geometry.xyz[rows], model.dofs.node[rows],
                       center=geometry.centroid[label], lever=1.0)
    names, G = rb.motions, rb.basis
    coef, *_ = np.linalg.lstsq(G, motion[rows], rcond=None)
    residual = np.linalg.norm(G @ coef - motion[rows]) / np.linalg.norm(motion[rows])
    if residual > RIGID_RESIDUAL:
        return f"restrain {where}: stops a mechanism of {part} (a motion that is not rigid)"
    t, theta = np.zeros(3), np.zeros(3)
    for name, c in zip(names, coef):
        k = DOF_NAMES.index(name)
        (t if k < 3 else theta)[k % 3] = c
    radius = float(np.max(np.linalg.norm(geometry.xyz[rows] - geometry.centroid[label], axis=1)))
    if np.linalg.norm(theta) * radius <= TRANSLATION_DOMINATES * np.linalg.norm(t):
        return f"restrain {where}: stops the translation {DOF_NAMES[int(np.argmax(np.abs(t)))]} of {part}"
    return _rotation_text(model, geometry, row, where, part, t, theta, rows)


def _rotation_text(model, geometry, row, where, part, t, theta, rows) -> str:
    """u = t + theta x (x - c): name the main axis, the point the motion turns
    about (where the other restraints hold) and the lever arm of this one."""
    name = DOF_NAMES[3 + int(np.argmax(np.abs(theta)))]
    pivot = rotation_pivot(t, theta, geometry.centroid[geometry.part[row]])  # the axis' point nearest c
    about = pivot_words(model, rows, pivot, geometry.planar)
    dof = int(model.dofs.dof[row])
    if dof >= 3:
        return f"restrain {where}: stops the rotation {name} of {part} about {about} directly"
    e = np.zeros(3)
    e[dof] = 1.0
    lever = float(abs(np.cross(geometry.xyz[row] - pivot, e) @ (theta / np.linalg.norm(theta))))
    return (f"restrain {where}: stops the rotation {name} of {part} about {about}, "
            f"with a lever arm of {lever:.3g} (model length units)")


def _motion_without_coords(model: Model, motion, rows) -> str:
    """Without coordinates only a uniform translation of one DOF type is recognisable."""
    m = motion[rows]
    moving = np.abs(m) > MOTION_TOL * np.abs(m).max()
    if model.dofs is not None:
        dof = model.dofs.dof[rows]
        types = np.unique(dof[moving])
        if types.size == 1 and types[0] < 3:
            of_type = dof == types[0]
            if np.all(moving[of_type]) and np.allclose(m[of_type], m[of_type][0], rtol=MOTION_TOL, atol=0):
                return f"the translation {DOF_NAMES[int(types[0])]}"
    elif np.all(moving) and np.allclose(m, m[0], rtol=MOTION_TOL, atol=0):
        return "a uniform motion of all its rows"
    return "a free motion (rotation or mechanism; coordinates would say which)"


def merging_first(restraints: list[Restraint], geometry, part_of_row, model: Model) -> list[Restraint]:
    """The restraints with "second choice" in the reason of each one on a part
    that coincident nodes K does not join leave free (``geometry``: the
    :class:`~conditioning.results.GeometryChecks`): merging or tying those nodes
    is the first fix, a support only if the part is meant to stand apart."""
    from conditioning.stages.findings import coincident_phrase

    groups = [c for c in geometry.coincident if c.joined == "no" and c.moved_apart_by]
    resting = [t for t in geometry.touching if t.moved_apart_by]
    if not (groups or resting) or not restraints or model.dofs is None:
        return restraints
    part_of_row = np.asarray(part_of_row)
    fix: dict[int, str] = {t.part - 1: f"tying part {t.part} to part {t.other_part}" for t in resting}
    if groups:
        moving = np.isin(model.dofs.node, [c.nodes[0] for c in groups])
        for p in set(int(p) for p in part_of_row[moving]):
            fix[p] = f"merging {coincident_phrase(groups)}"
    out = []
    for r in restraints:
        p = int(part_of_row[r.row])
        if p in fix and not r.reason.startswith("second choice"):
            r = Restraint(node=r.node, dof=r.dof, row=r.row, reason=f"second choice to {fix[p]}: {r.reason}")
        out.append(r)
    return out


__all__ = ["suggest_restraints", "nonsingular_after_restraints", "merging_first"]
