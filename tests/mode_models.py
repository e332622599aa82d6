"""Invented models for the mode tests (issue 11), built with the project's demo
assembler (numpy element matrices), never with its demo scenarios.

- :func:`hopper`: a bin of four sloping walls modelled as a braced grillage of
  beams lying in each wall, with no in-plane bending stiffness (EI about the
  wall normal = 0): like shell elements without drilling stiffness, every
  node inside a wall has a rotation about the wall's (inclined) normal that
  nothing resists, and no empty row shows it.
- :func:`braced_portal` (and :func:`two_braced_portals`): a 3D portal frame with a diagonal brace of four
  elements whose end elements have all three rotations released at the
  post (static condensation of the end rotations): the brace's inner nodes
  can spin about the brace axis.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from conditioning.demo import assemble
from conditioning.model import Coordinates, Model

STEEL = dict(E=210000.0, G=81000.0)


def _merge(points, tol=1e-6):
    """Node ids (1-based) of points, equal points merged."""
    keys = {}
    ids = []
    for p in np.round(np.asarray(points) / tol).astype(np.int64):
        ids.append(keys.setdefault(tuple(p), len(keys) + 1))
    return np.array(ids)


def hopper(cells: int = 6, *, drilling: bool = False):
    """Four trapezoidal walls, top square 4000 mm, bottom 1000 mm, 3000 mm
    high, each meshed with cells x cells quads (grid lines and one diagonal
    per cell), clamped along the bottom rim.

    Returns
    -------
    model : Model
    wall_normal : dict node -> unit normal of its wall (nodes inside one wall only)
    """
    top, bot, H = 2000.0, 500.0, 3000.0
    corners_top = np.array([[-top, -top, H], [top, -top, H], [top, top, H], [-top, top, H]])
    corners_bot = np.array([[-bot, -bot, 0], [bot, -bot, 0], [bot, bot, 0], [-bot, bot, 0]])
    pts, walls = [], []
    s = np.linspace(0.0, 1.0, cells + 1)
    for w in range(4):
        a0, a1 = corners_bot[w], corners_bot[(w + 1) % 4]
        b0, b1 = corners_top[w], corners_top[(w + 1) % 4]
        grid = [(1 - v) * ((1 - u) * a0 + u * a1) + v * ((1 - u) * b0 + u * b1) for v in s for u in s]
        n = np.cross(a1 - a0, b0 - a0)
        walls.append((len(pts), n / np.linalg.norm(n)))
        pts += grid
    pts = np.array(pts)
    ids = _merge(pts)
    m = cells + 1
    members, refs, owner = [], [], {}
    for w, (start, n) in enumerate(walls):
        at = lambda i, j: ids[start + j * m + i]  # noqa: E731  (i along the rim, j up the wall)
        for j in range(m):
            for i in range(m):
                owner.setdefault(int(at(i, j)), set()).add(w)
                if i < cells:
                    members.append((at(i, j), at(i + 1, j)))
                if j < cells:
                    members.append((at(i, j), at(i, j + 1)))
                if i < cells and j < cells:
                    members.append((at(i, j), at(i + 1, j + 1)))
                refs += [n] * (int(i < cells) + int(j < cells) + int(i < cells and j < cells))
    nodes = np.arange(1, ids.max() + 1)
    xyz = np.zeros((nodes.size, 3))
    xyz[ids - 1] = pts
    # 100 x 10 mm plate strips: bending out of the wall (I about the in-plane axis), torsion,
    # and in-plane bending (about the normal) only when the walls have drilling stiffness.
    frame = assemble.frame3d(nodes, xyz, np.array(members), A=1000.0, Iz=100.0 * 10.0**3 / 12,
                             Iy=(10.0 * 100.0**3 / 12) if drilling else 0.0, J=1e4 / 3 * 100,
                             ref=np.array(refs), **STEEL)
    rim = [int(v) for v in nodes if abs(xyz[v - 1, 2]) < 1e-9]
    frame = assemble.apply_restraints(frame, [(v, d) for v in rim for d in assemble.FRAME3D_LAYOUT])
    model = _with_coords(frame, nodes, xyz)
    wall_normal = {v: walls[next(iter(w))][1] for v, w in owner.items() if len(w) == 1 and v not in rim}
    return model, wall_normal


def _with_coords(frame, nodes, xyz) -> Model:
    keep = np.unique(frame.dofs.node)
    return Model(frame.K, dofs=frame.dofs,
                 coords=Coordinates(keep.astype(np.int64), np.asarray(xyz, float)[np.searchsorted(nodes, keep)], 3))


def _condensed_member(xyz_a, xyz_b, release_a: bool, release_b: bool, **section):
    """12 x 12 global stiffness of one space-frame member with the three
    rotations released at the chosen ends (static condensation:
    k_rr - k_rc k_cc^-1 k_cr), rows of released rotations zero."""
    one = assemble.frame3d([1, 2], np.array([xyz_a, xyz_b]), np.array([[1, 2]]), **section)
    k = one.K.toarray()
    cond = ([3, 4, 5] if release_a else []) + ([9, 10, 11] if release_b else [])
    if not cond:
        return k
    keep = np.setdiff1d(np.arange(12), cond)
    kk = k[np.ix_(keep, keep)] - k[np.ix_(keep, cond)] @ np.linalg.solve(k[np.ix_(cond, cond)], k[np.ix_(cond, keep)])
    out = np.zeros((12, 12))
    out[np.ix_(keep, keep)] = kk
    return out


def braced_portal(*, release_both_ends: bool = True, inner: int = 3):
    """Two 3 m posts (clamped at the base) and a 4 m beam, and a diagonal
    brace from the base of post 1 (node 1) to the top of post 2 (node 3)
    cut into inner + 1 elements; its end elements have their rotations
    released at the post ends (both ends, or only the lower one).

    Returns
    -------
    model : Model
    brace_inner : list of int, the brace's inner node ids
    axis : (3,) unit vector along the brace
    """
    model, braces, axes = braced_frame(1, release_both_ends=release_both_ends, inner=inner)
    return model, braces[0], axes[0]


def two_braced_portals(inner: int = 3):
    """Two bays of :func:`braced_portal` sharing the middle post, both braces
    released at both ends. Returns (model, inner nodes of brace 1, of brace 2)."""
    model, braces, _ = braced_frame(2, release_both_ends=True, inner=inner)
    return model, braces[0], braces[1]


def braced_frame(bays: int, *, release_both_ends: bool, inner: int):
    """Plane row of ``bays`` portals in x (posts 3 m, bays 4 m), one brace per
    bay from the base of its left post to the top of its right post."""
    post_x = 4000.0 * np.arange(bays + 1)
    base = np.column_stack([post_x, np.zeros(bays + 1), np.zeros(bays + 1)])
    top = base + [0.0, 0.0, 3000.0]
    xyz = [p for b, t in zip(base, top) for p in (b, t)]      # node 2k+1 base, 2k+2 top
    members = [[2 * k + 1, 2 * k + 2] for k in range(bays + 1)] + [[2 * k + 2, 2 * k + 4] for k in range(bays)]
    braces, axes = [], []
    for k in range(bays):
        a, b = base[k], top[k + 1]
        t = np.linspace(0, 1, inner + 2)[1:-1]
        first = len(xyz) + 1
        xyz += list(a + t[:, None] * (b - a))
        brace = [2 * k + 1] + list(range(first, first + inner)) + [2 * k + 4]
        members += [[brace[j], brace[j + 1]] for j in range(1, inner)]
        braces.append(brace)
        axes.append((b - a) / np.linalg.norm(b - a))
    xyz = np.array(xyz)
    nodes = np.arange(1, len(xyz) + 1)
    section = dict(A=5000.0, Iy=2e7, Iz=3e7, J=1e6, **STEEL)
    frame = assemble.frame3d(nodes, xyz, np.array(members), ref=[0.0, 1.0, 0.0], **section)
    K = frame.K.tolil()
    for brace in braces:
        for k, (p, q) in enumerate([(brace[0], brace[1]), (brace[-2], brace[-1])]):
            ke = _condensed_member(xyz[p - 1], xyz[q - 1], release_a=(k == 0),
                                   release_b=(k == 1 and release_both_ends), **section)
            rows = frame.rows([(p, d) for d in assemble.FRAME3D_LAYOUT] + [(q, d) for d in assemble.FRAME3D_LAYOUT])
            K[np.ix_(rows, rows)] = K[np.ix_(rows, rows)].toarray() + ke
    frame = assemble.Assembly(sp.csr_array(K), frame.dofs)
    frame = assemble.apply_restraints(frame, [(2 * k + 1, d) for k in range(bays + 1) for d in assemble.FRAME3D_LAYOUT])
    return _with_coords(frame, nodes, xyz), [b[1:-1] for b in braces], axes
