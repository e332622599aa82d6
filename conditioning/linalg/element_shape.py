"""Shape measures of finite elements from their corner positions: no model, no K.

For each element the corner Jacobian determinants (the determinant of the
edge vectors leaving each corner, which is the Jacobian of the isoparametric
map at that corner up to a constant factor of the element kind), their
signs and ratio, corner angles, aspect ratio and the warping of
quadrilateral faces. These are the classical measures of mesh quality
(common practice, no single source; the corner-Jacobian forms follow the
usual definitions of the Verdict library's quality metrics, from memory:
C. J. Stimpson, C. D. Ernst, P. Knupp, P. P. Pebay, D. Thompson (2007),
"The Verdict Geometric Quality Library", Sandia report SAND2007-1751).

Corners follow the usual ordering of open mesh formats (VTK, Gmsh):
triangles and quadrilaterals counter-clockwise; a tetrahedron 0-3 with
det(x1-x0, x2-x0, x3-x0) > 0; a hexahedron with the bottom face 0-3 and the
top face 4-7 above it in the same order.

Every function takes ``(e, k, 3)`` corner positions of e elements of one
kind (z = 0 in 2D) and returns per-element arrays.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

#: For each hexahedron corner, the three corners its edges lead to, in a
#: right-handed order (the corner Jacobian of a unit cube is +1 at every corner).
HEX_CORNER_EDGES = ((1, 3, 4), (2, 0, 5), (3, 1, 6), (0, 2, 7), (7, 5, 0), (4, 6, 1), (5, 7, 2), (6, 4, 3))
#: Faces of a hexahedron (corner indices, counter-clockwise seen from outside for a positive element).
HEX_FACES = ((0, 3, 2, 1), (4, 5, 6, 7), (0, 1, 5, 4), (1, 2, 6, 5), (2, 3, 7, 6), (3, 0, 4, 7))
#: For each tetrahedron corner, the three corners its edges lead to, right-handed.
TET_CORNER_EDGES = ((1, 2, 3), (2, 0, 3), (0, 1, 3), (0, 2, 1))
#: Faces of a tetrahedron.
TET_FACES = ((0, 2, 1), (0, 1, 3), (1, 2, 3), (0, 3, 2))
#: Edges (corner pairs) per corner layout.
EDGES = {
    3: ((0, 1), (1, 2), (2, 0)),
    4: ((0, 1), (1, 2), (2, 3), (3, 0)),
    "tet": ((0, 1), (1, 2), (2, 0), (0, 3), (1, 3), (2, 3)),
    "hex": ((0, 1), (1, 2), (2, 3), (3, 0), (4, 5), (5, 6), (6, 7), (7, 4), (0, 4), (1, 5), (2, 6), (3, 7)),
}


def _norm(v: NDArray) -> NDArray:
    return np.linalg.norm(v, axis=-1)


def aspect_ratio(P: NDArray[np.float64], edges) -> NDArray[np.float64]:
    """(e,) longest over shortest edge (inf when an edge has zero length)."""
    lengths = np.stack([_norm(P[:, b] - P[:, a]) for a, b in edges], axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(lengths.min(axis=1) > 0, lengths.max(axis=1) / lengths.min(axis=1), np.inf)


def polygon_normal(P: NDArray[np.float64], planar: bool) -> NDArray[np.float64]:
    """(e, 3) unit normal of each polygon: +z in 2D (so that a clockwise element
    has negative corner Jacobians); in 3D the cross product of the diagonals
    of a quadrilateral, or of two edges of a triangle."""
    if planar:
        n = np.zeros((P.shape[0], 3))
        n[:, 2] = 1.0
        return n
    if P.shape[1] == 4:
        n = np.cross(P[:, 2] - P[:, 0], P[:, 3] - P[:, 1])
    else:
        n = np.cross(P[:, 1] - P[:, 0], P[:, 2] - P[:, 0])
    size = _norm(n)[:, None]
    return np.divide(n, size, out=np.zeros_like(n), where=size > 0)


def polygon_corners(P: NDArray[np.float64], normal: NDArray[np.float64]):
    """Corner Jacobians, scaled Jacobians and angles of triangles or quadrilaterals.

    Returns
    -------
    det : (e, k) float64
        (x_{i+1} - x_i) x (x_{i-1} - x_i) . n at each corner i (length^2):
        twice the area for a triangle; four times the bilinear Jacobian at
        the corner for a quadrilateral. Negative at a corner turning the
        other way (a reflex or folded corner, or a clockwise element).
    scaled : (e, k) float64
        det over the product of the corner's two edge lengths: the sine of
        the corner angle, signed (0 for a zero-length edge).
    angle : (e, k) float64
        Corner angle in degrees, 0..360 (above 180 at a reflex corner).
    """
    k = P.shape[1]
    nxt = P[:, [(i + 1) % k for i in range(k)]] - P
    prv = P[:, [(i - 1) % k for i in range(k)]] - P
    det = np.einsum("eki,ei->ek", np.cross(nxt, prv), normal)
    lengths = _norm(nxt) * _norm(prv)
    with np.errstate(divide="ignore", invalid="ignore"):
        scaled = np.where(lengths > 0, det / lengths, 0.0)
        cos = np.where(lengths > 0, np.einsum("eki,eki->ek", nxt, prv) / lengths, 1.0)
    angle = np.degrees(np.arccos(np.clip(cos, -1.0, 1.0)))
    angle = np.where(det < 0, 360.0 - angle, angle)
    return det, scaled, angle


def quad_warping(P: NDArray[np.float64]) -> NDArray[np.float64]:
    """(e,) warping of quadrilaterals, degrees: the larger of the angles between
    the normals of the two triangles each diagonal splits it into (0 when plane)."""
    out = np.zeros(P.shape[0])
    for a, b, c, d in ((0, 1, 2, 3), (1, 2, 3, 0)):
        n1 = np.cross(P[:, b] - P[:, a], P[:, c] - P[:, a])
        n2 = np.cross(P[:, c] - P[:, a], P[:, d] - P[:, a])
        size = _norm(n1) * _norm(n2)
        with np.errstate(divide="ignore", invalid="ignore"):
            cos = np.where(size > 0, np.einsum("ei,ei->e", n1, n2) / size, 1.0)
        out = np.maximum(out, np.degrees(np.arccos(np.clip(cos, -1.0, 1.0))))
    return out


def solid_corners(P: NDArray[np.float64], corner_edges) -> tuple[NDArray, NDArray]:
    """Corner Jacobians of tetrahedra or hexahedra.

    Returns
    -------
    det : (e, c) float64
        det(x_a - x_i, x_b - x_i, x_c - x_i) at each corner i (length^3): six
        times the volume for a tetrahedron; eight times the trilinear
        Jacobian at the corner for a hexahedron. Negative when inverted.
    scaled : (e, c) float64
        det over the product of the corner's three edge lengths (1 at a
        right-angled corner, 1/sqrt(2) at a corner of a regular tetrahedron,
        0 for a zero-length edge).
    """
    det, scaled = [], []
    for i, (a, b, c) in enumerate(corner_edges):
        A, B, C = P[:, a] - P[:, i], P[:, b] - P[:, i], P[:, c] - P[:, i]
        d = np.einsum("ei,ei->e", np.cross(A, B), C)
        lengths = _norm(A) * _norm(B) * _norm(C)
        with np.errstate(divide="ignore", invalid="ignore"):
            scaled.append(np.where(lengths > 0, d / lengths, 0.0))
        det.append(d)
    return np.stack(det, axis=1), np.stack(scaled, axis=1)


def jacobian_ratio(det: NDArray[np.float64]) -> NDArray[np.float64]:
    """(e,) smallest over largest corner Jacobian, signed (1 for an affine
    element; at most 0 when a corner is inverted or collapsed; -1 when every
    corner is negative, 0 when every corner is zero)."""
    top = det.max(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(top > 0, det.min(axis=1) / top, np.where(det.min(axis=1) < 0, -1.0, 0.0))
