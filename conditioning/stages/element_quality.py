"""Element shapes, when the engineer gives the connectivity (``--elements``).

    (Model with elements, node checks) => GeometryChecks with flagged elements

Badly shaped elements give worse results (common practice, no single
source): long thin elements, very sharp or very blunt corners, warped
quadrilaterals, and above all elements whose Jacobian changes sign
(inverted or folded) or vanishes (collapsed onto a line or a plane), whose
stiffness is wrong rather than merely inaccurate. The measures come from
:mod:`conditioning.linalg.element_shape` and use the corner nodes only (the
midside nodes of second-order elements are not checked).

Signs are taken relative to the element itself (the sign of the sum of its
corner Jacobians is its orientation): an element is inverted or folded when
its corner Jacobians have both signs (a non-convex or bow-tie quadrilateral,
a folded hexahedron). Reversing the node order of a whole element changes
every sign at once and, for an assembler that integrates with |det J|,
leaves its stiffness unchanged, so it is not called inverted; nor is a
triangle or tetrahedron ever, whose one Jacobian has one sign (scikit-fem's
triangle meshes mix both orders). A corner Jacobian near zero is a
collapsed element, whatever the kind.
"""

from __future__ import annotations

import logging
from dataclasses import replace
from typing import Optional

import numpy as np

from conditioning.linalg import element_shape as shape
from conditioning.model import Model
from conditioning.results import ELEMENT_KINDS, ElementQuality, GeometryChecks

logger = logging.getLogger(__name__)

#: Longest over shortest edge above which an element is long and thin
#: (common practice: limits of 5 to 20 are usual; 10 is in the middle).
ASPECT_RATIO_MAX = 10.0
#: Corner angles of triangles (and the faces of tetrahedra) outside these
#: limits, degrees (common practice: 15-30 and 120-150 are usual).
TRIANGLE_ANGLES = (15.0, 150.0)
#: Corner angles of quadrilaterals (and the faces of hexahedra), degrees
#: (common practice: 30-45 and 135-150 are usual).
QUAD_ANGLES = (30.0, 150.0)
#: Warping of a quadrilateral face above this, degrees (common practice: 5-15).
WARPING_MAX = 10.0
#: Smallest signed corner Jacobian over the product of its edge lengths below
#: this: a corner close to flat (common practice: 0.2 to 0.3 is the usual minimum).
SCALED_JACOBIAN_MIN = 0.2
#: Smallest over largest corner Jacobian below this (common practice: a ratio
#: of 1/30 to 1/40, written as largest over smallest above 30 to 40).
JACOBIAN_RATIO_MIN = 1.0 / 30.0
#: |scaled corner Jacobian| at or below this is a collapsed corner (sin of
#: about 0.6 degrees; the project's choice: far below any shape limit above,
#: far above round-off).
COLLAPSED = 0.01
#: Elements listed in the report, worst first (all are counted).
MAX_LISTED = 50

THRESHOLDS = {"aspect_ratio_max": ASPECT_RATIO_MAX, "triangle_angle_min": TRIANGLE_ANGLES[0],
              "triangle_angle_max": TRIANGLE_ANGLES[1], "quad_angle_min": QUAD_ANGLES[0],
              "quad_angle_max": QUAD_ANGLES[1], "warping_max": WARPING_MAX,
              "scaled_jacobian_min": SCALED_JACOBIAN_MIN, "jacobian_ratio_min": JACOBIAN_RATIO_MIN,
              "collapsed": COLLAPSED}

#: How each problem is said of an element, for the findings.
PROBLEM_TEXT = {
    "inverted": lambda e: f"scaled corner Jacobian {e.scaled_jacobian:.2f}, Jacobian ratio {e.jacobian_ratio:.2f}",
    "collapsed": lambda e: f"scaled corner Jacobian {e.scaled_jacobian:.1e}",
    "aspect ratio": lambda e: f"{e.aspect_ratio:.3g}" if np.isfinite(e.aspect_ratio) else "a zero-length edge",
    "angle": lambda e: f"corner angles {e.min_angle:.0f} to {e.max_angle:.0f} degrees",
    "warping": lambda e: f"{e.warping:.1f} degrees",
    "scaled Jacobian": lambda e: f"{e.scaled_jacobian:.2f}",
    "jacobian ratio": lambda e: f"{e.jacobian_ratio:.3f}",
}

_CORNERS = {"line2": 2, "tri3": 3, "tri6": 3, "quad4": 4, "quad8": 4, "quad9": 4,
            "tet4": 4, "tet10": 4, "hex8": 8, "hex20": 8}
_WORD = {"line2": "line", "tri3": "triangle", "tri6": "triangle", "quad4": "quadrilateral",
         "quad8": "quadrilateral", "quad9": "quadrilateral", "tet4": "tetrahedron", "tet10": "tetrahedron",
         "hex8": "hexahedron", "hex20": "hexahedron"}


def check_elements(model: Model, checks: Optional[GeometryChecks]) -> Optional[GeometryChecks]:
    """``checks`` with the element-shape results added (unchanged without an element table).

    Parameters
    ----------
    model : Model
        Its ``elements`` and ``coords``.
    checks : GeometryChecks or None
        The node checks (:func:`conditioning.stages.node_geometry.check_node_geometry`).

    Returns
    -------
    GeometryChecks or None
        With ``elements`` (count), ``element_kinds``, ``flagged_elements``
        (worst first, at most :data:`MAX_LISTED`), ``flagged_count`` and the
        shape limits in ``thresholds``; None when ``checks`` is.
    """
    if checks is None or model.elements is None or model.coords is None:
        return checks
    table = model.elements
    measures = element_measures(model)
    flagged = [q for q in measures if q.problems]
    counts: dict[str, int] = {}
    for q in flagged:
        for p in q.problems:
            counts[p] = counts.get(p, 0) + 1
    flagged.sort(key=lambda q: ("inverted" not in q.problems, "collapsed" not in q.problems, q.scaled_jacobian))
    kinds = {ELEMENT_KINDS[k]: int(c) for k, c in zip(*np.unique(table.kind, return_counts=True))}
    logger.info("elements: %d, %d flagged", len(table), len(flagged))
    return replace(checks, elements=len(table), element_kinds=kinds, flagged_elements=flagged[:MAX_LISTED],
                   flagged_count=counts, thresholds={**checks.thresholds, **THRESHOLDS},
                   method=checks.method + "; element shapes from the corner nodes (corner Jacobians, angles, "
                          "aspect ratio, warping), limits of common practice")


def element_measures(model: Model) -> list[ElementQuality]:
    """Every element's shape measures (lines: aspect ratio 1, nothing else), in table order."""
    table, coords = model.elements, model.coords
    planar = coords.dim == 2
    out: list[Optional[ElementQuality]] = [None] * len(table)
    computed = {}
    for k in np.unique(table.kind):
        kind = ELEMENT_KINDS[int(k)]
        idx = np.flatnonzero(table.kind == k)
        corners = _CORNERS[kind]
        nodes = np.stack([table.nodes_of(int(i))[:corners] for i in idx])
        P = coords.lookup(nodes.ravel()).reshape(idx.size, corners, 3)
        computed[kind] = (idx, nodes, _measure(kind, P, planar))
    for kind, (idx, nodes, m) in computed.items():
        own = np.where(m["det"].sum(axis=1) < 0, -1.0, 1.0)  # each element's own orientation
        for j, i in enumerate(idx):
            out[i] = _quality(int(table.ids[i]), kind, table.nodes_of(int(i)), m, j, float(own[j]))
    return out


def _measure(kind: str, P, planar: bool) -> dict:
    if kind == "line2":
        return {"det": np.ones((P.shape[0], 1)), "scaled": np.ones((P.shape[0], 1)),
                "aspect": np.ones(P.shape[0]), "angle": None, "warping": None}
    if kind.startswith(("tri", "quad")):
        normal = shape.polygon_normal(P, planar)
        det, scaled, angle = shape.polygon_corners(P, normal)
        warping = shape.quad_warping(P) if kind.startswith("quad") and not planar else None
        edges = shape.EDGES[P.shape[1]]
        return {"det": det, "scaled": scaled, "aspect": shape.aspect_ratio(P, edges), "angle": angle,
                "warping": warping, "limits": TRIANGLE_ANGLES if kind.startswith("tri") else QUAD_ANGLES}
    solid = "tet" if kind.startswith("tet") else "hex"
    det, scaled = shape.solid_corners(P, shape.TET_CORNER_EDGES if solid == "tet" else shape.HEX_CORNER_EDGES)
    faces = shape.TET_FACES if solid == "tet" else shape.HEX_FACES
    angles, warping = [], []
    for face in faces:
        F = P[:, list(face)]
        _, _, a = shape.polygon_corners(F, shape.polygon_normal(F, False))
        angles.append(a)
        if solid == "hex":
            warping.append(shape.quad_warping(F))
    return {"det": det, "scaled": scaled, "aspect": shape.aspect_ratio(P, shape.EDGES[solid]),
            "angle": np.concatenate(angles, axis=1), "warping": np.max(warping, axis=0) if warping else None,
            "limits": TRIANGLE_ANGLES if solid == "tet" else QUAD_ANGLES}


def _quality(eid: int, kind: str, nodes, m: dict, j: int, sign: float) -> ElementQuality:
    det, scaled = sign * m["det"][j], sign * m["scaled"][j]
    problems = []
    if kind != "line2":
        top = float(np.max(det))
        ratio = float(np.min(det) / top) if top > 0 else (-1.0 if np.min(det) < 0 else 0.0)
        if np.min(scaled) < -COLLAPSED:
            problems.append("inverted")
        elif np.min(np.abs(scaled)) <= COLLAPSED:
            problems.append("collapsed")
    else:
        ratio = 1.0
    angle = None if m["angle"] is None else m["angle"][j]
    if angle is not None and sign < 0 and kind.startswith(("tri", "quad")):
        angle = 360.0 - angle
    aspect = float(m["aspect"][j])
    warping = None if m["warping"] is None else float(m["warping"][j])
    if kind != "line2":
        if not aspect <= ASPECT_RATIO_MAX:
            problems.append("aspect ratio")
        lo, hi = m["limits"]
        broken = bool({"inverted", "collapsed"} & set(problems))
        if angle is not None and (np.min(angle) < lo or np.max(angle) > hi) and not broken:
            problems.append("angle")
        if warping is not None and warping > WARPING_MAX:
            problems.append("warping")
        if not {"inverted", "collapsed"} & set(problems):
            if np.min(scaled) < SCALED_JACOBIAN_MIN and "angle" not in problems:
                problems.append("scaled Jacobian")
            if ratio < JACOBIAN_RATIO_MIN:
                problems.append("jacobian ratio")
    return ElementQuality(
        element=eid, kind=kind, nodes=[int(v) for v in nodes], aspect_ratio=aspect,
        min_angle=None if angle is None else float(np.min(angle)),
        max_angle=None if angle is None else float(np.max(angle)), warping=warping,
        scaled_jacobian=float(np.min(scaled)), jacobian_ratio=ratio, problems=problems)


def kind_word(kind: str) -> str:
    """``"quadrilateral"`` for ``quad8``."""
    return _WORD[kind]
