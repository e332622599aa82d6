"""Rigid-body motions of a part of the model, in the model's DOFs.

A rigid motion of a body is a translation t plus a small rotation w about a
point c: node x moves by t + w x (x - c), and a node with rotational DOFs
turns by w. In 2D (ux, uy, rz) there are 3 such motions, in 3D 6 (the count
of zero-energy modes of an unsupported body; common practice, also the basis
PETSc's MatNullSpaceCreateRigidBody builds).

Rotations are scaled by the part's radius of gyration about its centroid so
that a unit rotation moves the nodes about as much as a unit translation;
shares of motion are then comparable between translations and rotations.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from conditioning.model import DOF_NAMES, Model

# Rotation axis -> (dof index of rotation, [(displacement dof, lever component, sign)])
# u = w x r: for w = e_z: (ux, uy) += (-r_y, r_x); e_x: (uy, uz) += (-r_z, r_y); e_y: (ux, uz) += (r_z, -r_x)
_ROTATION_FIELD = {
    5: ((0, 1, -1.0), (1, 0, +1.0)),  # rz
    3: ((1, 2, -1.0), (2, 1, +1.0)),  # rx
    4: ((0, 2, +1.0), (2, 0, -1.0)),  # ry
}


@dataclass(frozen=True)
class RigidBasis:
    """Unit rigid motions of one part.

    Attributes
    ----------
    rows : (p,) intp
        Matrix rows of the part.
    motions : tuple of str
        Names of the columns of ``basis`` ("ux", ..., "rz").
    basis : (p, r) float64
        Column k is rigid motion k on the part's rows: translations of unit
        length, rotations of 1/radius_of_gyration radians about ``centroid``.
    centroid : (3,) float64 or None
    radius : float
        Radius of gyration of the part's nodes about the centroid (length).
    """

    rows: NDArray[np.intp]
    motions: tuple[str, ...]
    basis: NDArray[np.float64]
    centroid: NDArray[np.float64] | None
    radius: float


def rigid_basis(model: Model, rows: NDArray[np.intp]) -> RigidBasis:
    """Rigid motions of the part made of ``rows``.

    Without coordinates only translations are returned (uniform motion of one
    dof type). Without a DOF map, one uniform motion of all rows.
    """
    rows = np.asarray(rows, dtype=np.intp)
    if model.dofs is None:
        return RigidBasis(rows, ("uniform",), np.ones((rows.size, 1)), None, 0.0)
    dof = model.dofs.dof[rows].astype(np.intp)
    present = set(int(d) for d in np.unique(dof))
    cols, names = [], []
    for t in (0, 1, 2):
        if t in present:
            cols.append((dof == t).astype(np.float64))
            names.append(DOF_NAMES[t])
    centroid, radius = None, 0.0
    coords = model.coords
    if coords is not None:
        nodes = model.dofs.node[rows]
        xyz = coords.lookup(nodes)
        unique_nodes, first = np.unique(nodes, return_index=True)
        centroid = xyz[first].mean(axis=0)
        r = xyz - centroid
        radius = float(np.sqrt(np.mean(np.sum((xyz[first] - centroid) ** 2, axis=1))))
        scale = radius if radius > 0 else 1.0
        translations = present & {0, 1, 2}
        for rot, field in _ROTATION_FIELD.items():
            moved = [d for d, _, _ in field]
            # A rotation exists in the model if both displaced dofs do, or its rotation dof does.
            if not (set(moved) <= translations or rot in present):
                continue
            if coords.dim == 2 and rot != 5:
                continue
            col = np.zeros(rows.size)
            for d, comp, sign in field:
                sel = dof == d
                col[sel] = sign * r[sel, comp]
            col[dof == rot] = 1.0  # the node turns with the body
            col /= scale
            if np.any(col):
                cols.append(col)
                names.append(DOF_NAMES[rot])
    basis = np.column_stack(cols) if cols else np.zeros((rows.size, 0))
    return RigidBasis(rows, tuple(names), basis, centroid, radius)
