"""Rigid-body motions of a set of degrees of freedom: the one basis every stage uses.

    (dof type, position) per row  =>  R, (p, r): columns t_k and w_k x (x - c)

A rigid motion of a body is a translation t plus a small rotation w about a
point c: a node at x moves by t + w x (x - c), and a node with rotational
DOFs turns by w. In 2D (ux, uy, rz) there are 3 such motions, in 3D 6 (the
count of zero-energy modes of an unsupported body; common practice, also the
basis PETSc's MatNullSpaceCreateRigidBody builds).

This module knows no model: it takes arrays (the DOF type and the position of
each row, and optionally the node of each row), so that the spectrum, the
mode stage, the restraint advice and the local fit of a mechanism all build
the same basis.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

import numpy as np
from numpy.typing import ArrayLike, NDArray

from conditioning.model import DOF_NAMES  # the names of the dof codes; no Model is used

# Rotation dof -> the displacements it moves: (displacement dof, lever component, sign).
# u = w x r: e_x: (uy, uz) += (-r_z, r_y); e_y: (ux, uz) += (r_z, -r_x); e_z: (ux, uy) += (-r_y, r_x).
_ROTATION_FIELD = {
    3: ((1, 2, -1.0), (2, 1, +1.0)),  # rx
    4: ((0, 2, +1.0), (2, 0, -1.0)),  # ry
    5: ((0, 1, -1.0), (1, 0, +1.0)),  # rz
}


@dataclass(frozen=True)
class RigidBasis:
    """Unit rigid motions of a set of rows.

    Attributes
    ----------
    motions : tuple of str
        Names of the columns of ``basis``, in canonical order ("ux", "uy",
        "uz", "rx", "ry", "rz"; "uniform" alone when the rows have no DOF
        types).
    basis : (p, r) float64
        Column k is rigid motion k on the rows: translations of unit length,
        rotations of 1/``lever`` radians about ``centroid``. Motions the rows
        cannot show (a translation of a type no row has, a rotation moving
        no row) are left out, so r <= 6.
    centroid : (3,) float64 or None
        Point the rotations turn about (model length unit); None without
        positions (then ``basis`` holds translations only).
    radius : float
        Radius of gyration of the distinct nodes about ``centroid`` (model
        length unit); 0.0 without positions.
    lever : float
        Length a unit rotation coefficient stands for: a coefficient c of a
        rotation column is a rotation of c / lever radians (1.0 when the
        columns are in radians).
    """

    motions: tuple[str, ...]
    basis: NDArray[np.float64]
    centroid: Optional[NDArray[np.float64]]
    radius: float
    lever: float


def rigid_motions(
    dof: Optional[ArrayLike],
    xyz: Optional[ArrayLike] = None,
    node: Optional[ArrayLike] = None,
    *,
    center: Optional[ArrayLike] = None,
    lever: Optional[float] = None,
) -> RigidBasis:
    """Rigid motions of the rows described by ``dof`` and ``xyz``.

    Parameters
    ----------
    dof : (p,) int or None
        DOF type of each row, an index into :data:`conditioning.model.DOF_NAMES`
        (0..2 translations, 3..5 rotations). None: the rows carry no types,
        and the one rigid motion recognisable is a uniform motion of all rows
        (``node`` or ``xyz`` then only gives the number of rows).
    xyz : (p, 3) float or None, optional
        Position of each row's node (model length unit; z = 0 in 2D). None:
        translations only.
    node : (p,) int, optional
        Node of each row, so that the centroid and radius count each node
        once however many DOFs it has. Without it each row counts as a point.
    center : (3,) float, optional
        Point the rotations turn about; by default the centroid of the nodes.
    lever : float, optional
        Length by which the rotation columns are divided (a unit coefficient
        then moves points about ``lever`` away by about one length unit). By
        default the radius of gyration of the nodes about ``center``, so that
        a unit rotation moves the nodes about as much as a unit translation
        and shares of motion are comparable; pass 1.0 for rotations in
        radians.

    Returns
    -------
    RigidBasis
        Columns in canonical order. A rotation is included when its rotation
        DOF is among the rows or both displacements it moves are (a plate in
        the xy-plane with uz, rx, ry has the rotations rx and ry; a plane
        frame with ux, uy, rz has rz only).

    Examples
    --------
    Two nodes of a plane truss, 2 m apart on the x axis, rotations in radians:

    >>> import numpy as np
    >>> rb = rigid_motions([0, 1, 0, 1], np.array([[0., 0, 0]] * 2 + [[2., 0, 0]] * 2),
    ...                    [1, 1, 2, 2], lever=1.0)
    >>> rb.motions
    ('ux', 'uy', 'rz')
    >>> rb.basis[1::2, 2]  # turning about the midpoint: uy of the two nodes
    array([-1.,  1.])
    """
    if dof is None:
        if node is None and xyz is None:
            raise ValueError("rigid motions of untyped rows need `node` or `xyz` to count the rows")
        p = np.asarray(node).size if node is not None else np.asarray(xyz).shape[0]
        return RigidBasis(("uniform",), np.ones((p, 1)), None, 0.0, 1.0)
    dof = np.asarray(dof, dtype=np.intp).ravel()
    present = {int(d) for d in np.unique(dof)}
    cols = [(dof == t).astype(np.float64) for t in (0, 1, 2) if t in present]
    names = [DOF_NAMES[t] for t in (0, 1, 2) if t in present]
    if xyz is None:
        return RigidBasis(tuple(names), _stack(cols, dof.size), None, 0.0, 1.0)
    xyz = np.asarray(xyz, dtype=np.float64).reshape(dof.size, 3)
    centroid, radius = _centroid_and_radius(xyz, node, center)
    scale = float(lever) if lever is not None else (radius if radius > 0 else 1.0)
    r = xyz - centroid
    for rot, field in _ROTATION_FIELD.items():
        moved = {d for d, _, _ in field}
        if not (moved <= present or rot in present):
            continue
        col = np.zeros(dof.size)
        for d, component, sign in field:
            sel = dof == d
            col[sel] = sign * r[sel, component]
        col[dof == rot] = 1.0  # the node turns with the body
        if np.any(col):
            cols.append(col / scale)
            names.append(DOF_NAMES[rot])
    return RigidBasis(tuple(names), _stack(cols, dof.size), centroid, radius, scale)


def _centroid_and_radius(xyz, node, center) -> tuple[NDArray[np.float64], float]:
    """Centroid of the distinct nodes (or ``center``) and their radius of gyration about it."""
    points = xyz if node is None else xyz[np.unique(np.asarray(node).ravel(), return_index=True)[1]]
    c = points.mean(axis=0) if center is None else np.asarray(center, dtype=np.float64).reshape(3)
    radius = float(np.sqrt(np.mean(np.sum((points - c) ** 2, axis=1)))) if points.size else 0.0
    return c, radius


def _stack(cols: list, p: int) -> NDArray[np.float64]:
    return np.column_stack(cols) if cols else np.zeros((p, 0))


def rotation_pivot(t: ArrayLike, theta: ArrayLike, center: ArrayLike, *,
                   axial_tol: Optional[float] = None) -> Optional[NDArray[np.float64]]:
    """The point of the rotation axis nearest ``center`` for u(x) = t + theta x (x - center).

    Parameters
    ----------
    t : (3,) float
        Translation of ``center`` (model length unit).
    theta : (3,) float
        Rotation vector (radians).
    center : (3,) float
    axial_tol : float, optional
        When given, None is returned unless the motion turns about a fixed
        line: its translation along the axis (the pitch of the screw, Chasles'
        theorem) at most ``axial_tol`` times |t|. Without it, the nearest
        point of the axis is returned for any motion that turns.

    Returns
    -------
    (3,) float or None
        p = center + theta x t / |theta|^2 (model length unit): the motion is a
        rotation about the line through p along theta (plus that axial
        translation). None when theta = 0.

    Examples
    --------
    Turning about the origin, seen from the point (2, 0, 0): t = (0, 2, 0), theta = (0, 0, 1).

    >>> rotation_pivot([0, 2, 0], [0, 0, 1], [2, 0, 0]).tolist()
    [0.0, 0.0, 0.0]
    """
    t, theta, center = (np.asarray(a, dtype=np.float64).reshape(3) for a in (t, theta, center))
    q = float(theta @ theta)
    if q == 0.0:
        return None
    if axial_tol is not None and abs(float(t @ theta)) / np.sqrt(q) > axial_tol * float(np.linalg.norm(t)):
        return None
    return center + np.cross(theta, t) / q


__all__ = ["RigidBasis", "rigid_motions", "rotation_pivot"]
