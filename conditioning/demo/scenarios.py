"""Invented demo scenarios, each with the diagnosis it should get.

INVENTED DATA, NOT A REAL STRUCTURE. Every geometry, section, load and
support below was made up for this demo; none describes an existing bridge,
rack, bracket or mast, and none is fit for design.

Units: newton (N) and millimetre (mm) throughout, so E is in MPa (N/mm^2),
areas in mm^2, second moments of area in mm^4, translational stiffness in
N/mm, rotational stiffness in N mm/rad, forces in N and moments in N mm.

Each scenario is a :class:`DemoCase`: a :class:`~conditioning.model.Model`
with its dof table, node coordinates and load vector (supports already
applied by removing rows and columns), a one-line description, and an
:class:`Expected` record of what a correct diagnosis should find.

Regenerate the exported files with::

    python -m conditioning.demo.scenarios matrices/
"""

from __future__ import annotations

import csv
import logging
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Optional

import numpy as np
import scipy.io

from conditioning.demo.assemble import (
    Assembly,
    NodeDof,
    apply_restraints,
    combine,
    frame2d,
    frame3d,
    ground_spring,
    load_vector,
    plane_stress_quad,
    spring,
    truss2d,
    truss3d,
)
from conditioning.model import DOF_NAMES, Coordinates, Model

logger = logging.getLogger(__name__)

INVENTED = "invented data, not a real structure"
UNITS = "units N and mm (E in MPa, K in N/mm and N mm/rad)"

E_STEEL = 210000.0  # MPa, a typical value for structural steel (common practice)
NU_STEEL = 0.3

#: Penalty factor of the stiff support springs, relative to the axial
#: stiffness of the members they sit next to.
PENALTY_FACTOR = 1.0e12
#: Penalty factor of the spring tie between two coincident nodes (smaller than
#: PENALTY_FACTOR so the tie leaves the matrix ill-conditioned, not singular).
TIE_PENALTY_FACTOR = 1.0e8
#: Stiffness factor of the very soft spring that alone holds the near-mechanism.
SOFT_FACTOR = 1.0e-12


@dataclass(frozen=True)
class Expected:
    """What a correct diagnosis of a demo case should find."""

    rigid_body_modes: int
    """Exact zero-energy modes (rigid-body motions and mechanisms)."""
    near_zero_modes: int = 0
    """Modes held only by a spring many orders of magnitude softer than the members."""
    mode_nodes: tuple[int, ...] = ()
    """Node ids that move in the zero and near-zero energy modes (sorted)."""
    penalty_nodes: tuple[int, ...] = ()
    """Node ids at the ends of penalty springs (sorted)."""
    defect_nodes: tuple[int, ...] = ()
    """Node ids where the modelling defect sits and the fix belongs (sorted): the
    corners of a panel without its diagonal, base plates missing a support,
    coincident nodes that were never merged, the ends of a penalty spring."""
    ill_conditioned: bool = False
    """True when even the diagonally scaled matrix (unit diagonal) is singular
    or has kappa_2 above 1e10, so a float64 solve loses most of its 16 digits."""
    large_raw_condition: bool = False
    """True when the unscaled matrix is singular or has kappa_2 above 1e10 (a
    large raw number that diagonal scaling may or may not cure)."""
    finding: str = ""
    """One sentence: what the engineer should be told."""


@dataclass(frozen=True)
class DemoCase:
    """One invented demo model and its expected diagnosis."""

    name: str
    """Short file-safe name, also the stem of the exported files."""
    description: str
    """One line saying what the model is and what is wrong with it."""
    model: Model
    """The model with supports applied (restrained rows and columns removed)."""
    expected: Expected
    """What a correct diagnosis should find."""
    supports: tuple[NodeDof, ...] = ()
    """Restrained (node, component) pairs that were removed from ``unsupported``."""
    unsupported: Optional[Model] = field(default=None, repr=False)
    """The same model before the supports were applied."""


# ---------------------------------------------------------------- geometry helpers


def _subdivide(nodes, xy, members, parts: int, first_new_id: int):
    """Split every member into ``parts`` equal elements with new numbered nodes.

    Returns the extended node ids, coordinates and element connectivity, all
    as arrays (nodes (m,), xy (m, d), elements (e, 2)).
    """
    nodes = np.asarray(nodes, dtype=np.int64)
    xy = np.asarray(xy, dtype=float)
    members = np.asarray(members, dtype=np.int64)
    order = np.argsort(nodes)
    ends = order[np.searchsorted(nodes[order], members)]                # (e, 2) positions
    a, b = xy[ends[:, 0]], xy[ends[:, 1]]
    frac = np.arange(1, parts) / parts                                  # (parts - 1,)
    new_xy = a[:, None, :] + frac[None, :, None] * (b - a)[:, None, :]  # (e, parts-1, d)
    new_ids = first_new_id + np.arange(members.shape[0] * (parts - 1)).reshape(-1, parts - 1)
    chain = np.concatenate([members[:, :1], new_ids, members[:, 1:]], axis=1)
    elements = np.stack([chain[:, :-1], chain[:, 1:]], axis=-1).reshape(-1, 2)
    return (np.concatenate([nodes, new_ids.ravel()]),
            np.vstack([xy, new_xy.reshape(-1, xy.shape[1])]),
            elements)


def _coordinates(nodes, xy) -> Coordinates:
    nodes = np.asarray(nodes, dtype=np.int64)
    xy = np.asarray(xy, dtype=float)
    order = np.argsort(nodes)
    xyz = np.zeros((nodes.size, 3))
    xyz[:, : xy.shape[1]] = xy[order]
    return Coordinates(nodes[order], xyz, xy.shape[1])


def _case(name: str, description: str, asm: Assembly, coords: Coordinates,
          supports: list[NodeDof], loads: dict[NodeDof, float], expected: Expected) -> DemoCase:
    """Apply supports, build both models (before and after) and wrap them."""
    source = f"demo:{name}"
    free_notes = (f"invented demo model '{name}' ({INVENTED})", UNITS)
    unsupported = Model(K=asm.K, source=source + "_free", dofs=asm.dofs, coords=coords,
                        load=load_vector(asm.dofs, loads), notes=free_notes)
    red = apply_restraints(asm, supports)
    removed = asm.n - red.n
    # A load on a supported dof goes straight into the support.
    kept = {k: v for k, v in loads.items() if k not in set(supports)}
    model = Model(K=red.K, source=source, dofs=red.dofs, coords=coords,
                  load=load_vector(red.dofs, kept), restrained=removed,
                  notes=free_notes + (f"{removed} supported dofs removed (rows and columns)",))
    return DemoCase(name, description, model, expected, tuple(supports), unsupported)


# ---------------------------------------------------------------- footbridge (2D frame)

# An invented 12 m pedestrian bridge side frame: 6 panels of 2000 mm, 1500 mm deep,
# welded (rigid) joints, every member split into 2 beam elements.
_CHORD = dict(A=2400.0, I=3.6e6)      # mm^2, mm^4 (invented, a small hollow section)
_WEB = dict(A=1100.0, I=0.9e6)        # mm^2, mm^4 (invented)
_PANEL, _DEPTH, _NPANEL = 2000.0, 1500.0, 6


def _footbridge() -> tuple[Assembly, Coordinates, dict[NodeDof, float]]:
    bottom = np.arange(1, _NPANEL + 2)               # nodes 1..7 on the deck (y = 0)
    top = bottom + 10                                # nodes 11..17 on the top chord
    nodes = np.concatenate([bottom, top])
    x = np.arange(_NPANEL + 1) * _PANEL
    xy = np.vstack([np.column_stack([x, np.zeros_like(x)]),
                    np.column_stack([x, np.full_like(x, _DEPTH)])])
    chords = np.vstack([np.column_stack([bottom[:-1], bottom[1:]]),
                        np.column_stack([top[:-1], top[1:]])])
    half = _NPANEL // 2
    # Pratt pattern: diagonals slope down towards mid-span.
    diagonals = np.vstack([np.column_stack([top[:half], bottom[1:half + 1]]),
                           np.column_stack([bottom[half:-1], top[half + 1:]])])
    verticals = np.column_stack([bottom, top])
    webs = np.vstack([verticals, diagonals])

    n1, xy1, el_chord = _subdivide(nodes, xy, chords, 2, first_new_id=101)
    n2, xy2, el_web = _subdivide(n1, xy1, webs, 2, first_new_id=201)
    asm = combine(frame2d(n2, xy2, el_chord, E=E_STEEL, **_CHORD),
                  frame2d(n2, xy2, el_web, E=E_STEEL, **_WEB))
    # Deck load: 4 kN/m of pedestrians on 2 m panels (invented), at the deck nodes.
    loads: dict[NodeDof, float] = {(int(n), "uy"): -8000.0 for n in bottom[1:-1]}
    for n in bottom[[0, -1]]:
        loads[(int(n), "uy")] = -4000.0
    return asm, _coordinates(n2, xy2), loads


def _bearing_supports() -> list[NodeDof]:
    return [(1, "ux"), (1, "uy"), (_NPANEL + 1, "uy")]


def footbridge() -> DemoCase:
    """Healthy 2D frame (ux, uy, rz): 114 dofs after a pinned and a roller bearing."""
    asm, coords, loads = _footbridge()
    return _case(
        "footbridge",
        "Pedestrian bridge side frame, pinned and roller bearings: well supported (healthy).",
        asm, coords, _bearing_supports(), loads,
        Expected(rigid_body_modes=0,
                 finding="Well supported and well conditioned; the solution can be trusted."))


def footbridge_spring_bearings() -> DemoCase:
    """The footbridge with its three bearing restraints replaced by stiff ground springs."""
    asm, coords, loads = _footbridge()
    member = E_STEEL * _CHORD["A"] / (_PANEL / 2)       # axial stiffness of a chord element, N/mm
    k = PENALTY_FACTOR * member
    for a in _bearing_supports():
        asm = ground_spring(asm, a, k)
    return _case(
        "footbridge_spring_bearings",
        "The same bridge with its bearings modelled as penalty springs to ground "
        f"({PENALTY_FACTOR:.0e} x chord stiffness): huge raw condition number that "
        "diagonal scaling removes.",
        asm, coords, [], loads,
        Expected(rigid_body_modes=0, penalty_nodes=(1, _NPANEL + 1),
                 defect_nodes=(1, _NPANEL + 1), large_raw_condition=True,
                 finding="Large raw condition number caused only by the stiff support "
                         "springs at nodes 1 and 7; scaled, the matrix is well conditioned."))


# ---------------------------------------------------------------- storage rack (2D frame)

# An invented pallet rack frame: 2 bays of 2700 mm, 3 beam levels at 1500 mm spacing,
# rigid beam-to-upright joints, uprights and beams split into 3 elements each.
_UPRIGHT = dict(A=750.0, I=1.1e6)
_BEAM = dict(A=620.0, I=1.6e6)
_BAY, _LEVEL, _NBAY, _NLEVEL = 2700.0, 1500.0, 2, 3


def _rack_grid():
    """Joint ids 10*level + line (level 0 = floor), their positions, uprights and beams."""
    lines = np.arange(1, _NBAY + 2)
    levels = np.arange(_NLEVEL + 1)
    node = (10 * levels[:, None] + lines[None, :])
    xy = np.stack([np.broadcast_to((lines - 1) * _BAY, node.shape),
                   np.broadcast_to(levels[:, None] * _LEVEL, node.shape)], axis=-1)
    uprights = np.column_stack([node[:-1].ravel(), node[1:].ravel()])
    beams = np.column_stack([node[1:, :-1].ravel(), node[1:, 1:].ravel()])
    return node, xy.reshape(-1, 2), uprights, beams


def _rack(beams_split_at: Optional[tuple[int, int]] = None):
    node, xy, uprights, beams = _rack_grid()
    nodes = node.ravel()
    n1, xy1, el_up = _subdivide(nodes, xy, uprights, 3, first_new_id=101)
    n2, xy2, el_beam = _subdivide(n1, xy1, beams, 3, first_new_id=201)
    parts = [frame2d(n2, xy2, el_up, E=E_STEEL, **_UPRIGHT)]
    tie_nodes = None
    if beams_split_at is not None:
        # Give the beam end at joint `old` its own coincident node `new`.
        old, new = beams_split_at
        el_beam = el_beam.copy()
        end_pos = np.flatnonzero(el_beam == old)
        assert end_pos.size == 1, "the tied joint must be the end of exactly one beam element"
        el_beam.flat[end_pos[0]] = new
        n2 = np.append(n2, new)
        xy2 = np.vstack([xy2, xy2[np.flatnonzero(n2 == old)[0]]])
        parts[0] = frame2d(n2, xy2, el_up, E=E_STEEL, **_UPRIGHT)
        tie_nodes = (old, new)
    parts.append(frame2d(n2, xy2, el_beam, E=E_STEEL, **_BEAM))
    asm = combine(*parts)
    coords = _coordinates(n2, xy2)
    # Pallet loads: 2 x 8 kN per beam level and bay at the third points (invented),
    # plus a horizontal placement load of 1/200 of the vertical load at each level.
    loads: dict[NodeDof, float] = {}
    third_points = el_beam.reshape(-1, 3, 2)[:, 1:, 0].ravel()
    for n in third_points:
        loads[(int(n), "uy")] = -8000.0
    for level in range(1, _NLEVEL + 1):
        loads[(int(node[level, 0]), "ux")] = _NBAY * 2 * 8000.0 / 200.0
    return asm, coords, loads, node, tie_nodes


def rack_no_sway_support() -> DemoCase:
    """2D rack frame whose base plates restrain uy only: one rigid-body mode in ux."""
    asm, coords, loads, node, _ = _rack()
    supports = [(int(n), "uy") for n in node[0]]       # ux forgotten at every base plate
    return _case(
        "rack_no_sway_support",
        "Storage rack frame whose base plates restrain only uy: the whole rack can "
        "slide sideways (one rigid-body mode in ux).",
        asm, coords, supports, loads,
        Expected(rigid_body_modes=1, mode_nodes=tuple(int(n) for n in coords.node),
                 defect_nodes=tuple(int(n) for n in node[0]),
                 ill_conditioned=True, large_raw_condition=True,
                 finding="One rigid-body mode: the whole frame translates in x; add a "
                         "horizontal support at a base plate."))


def rack_penalty_tie() -> DemoCase:
    """2D rack frame with one beam end tied to its upright by penalty springs."""
    # The top-level beam of the first bay ends at joint 31 on the first upright; its
    # end node 301 is a separate coincident node tied to 31 by penalty springs in ux
    # and uy (a pinned beam-end connector modelled with penalties).
    asm, coords, loads, node, (old, new) = _rack(beams_split_at=(31, 301))
    member = E_STEEL * _BEAM["A"] / (_BAY / 3)          # axial stiffness of a beam element
    k = TIE_PENALTY_FACTOR * member
    for d in ("ux", "uy"):
        asm = spring(asm, (old, d), (new, d), k)
    supports = [(int(n), d) for n in node[0] for d in ("ux", "uy")]
    return _case(
        "rack_penalty_tie",
        "Storage rack frame, pinned bases, one beam-end connector modelled as penalty "
        f"springs ({TIE_PENALTY_FACTOR:.0e} x beam stiffness) between coincident nodes 31 "
        "and 301: badly conditioned even after diagonal scaling.",
        asm, coords, supports, loads,
        Expected(rigid_body_modes=0, penalty_nodes=(old, new), defect_nodes=(old, new),
                 ill_conditioned=True,
                 large_raw_condition=True,
                 finding="No rigid-body mode, but the penalty tie between nodes 31 and 301 "
                         "makes K nearly singular in the scaled sense; use a rigid "
                         "constraint or merge the nodes."))


# ---------------------------------------------------------------- machine bracket (plane stress)

# An invented steel bracket plate, 240 x 120 mm, 10 mm thick, clamped along its left
# edge, with a 80 x 40 mm pad on its top edge whose nodes were never merged with the
# plate's nodes (coincident but distinct): the pad floats.
_PLATE = (240.0, 120.0, 12, 6)      # width, height, elements along x, along y
_PAD = (80.0, 40.0, 4, 2, 80.0)     # width, height, elements, elements, x of its left edge
_THICK = 10.0


def _quad_grid(x0, y0, width, height, nx, ny, first_id):
    ids = first_id + np.arange((nx + 1) * (ny + 1)).reshape(ny + 1, nx + 1)
    X, Y = np.meshgrid(x0 + np.linspace(0, width, nx + 1), y0 + np.linspace(0, height, ny + 1))
    quads = np.column_stack([ids[:-1, :-1].ravel(), ids[:-1, 1:].ravel(),
                             ids[1:, 1:].ravel(), ids[1:, :-1].ravel()])
    return ids, np.column_stack([X.ravel(), Y.ravel()]), quads


def bracket_loose_pad() -> DemoCase:
    """Plane-stress bracket with an unconnected pad: three rigid-body modes in the pad."""
    w, h, nx, ny = _PLATE
    plate_ids, plate_xy, plate_q = _quad_grid(0.0, 0.0, w, h, nx, ny, first_id=1)
    pw, ph, pnx, pny, px = _PAD
    pad_ids, pad_xy, pad_q = _quad_grid(px, h, pw, ph, pnx, pny, first_id=201)
    nodes = np.concatenate([plate_ids.ravel(), pad_ids.ravel()])
    xy = np.vstack([plate_xy, pad_xy])
    asm = plane_stress_quad(nodes, xy, np.vstack([plate_q, pad_q]),
                            E=E_STEEL, nu=NU_STEEL, t=_THICK)
    supports = [(int(n), d) for n in plate_ids[:, 0] for d in ("ux", "uy")]
    # Plate nodes on the top edge under the pad: coincident with the pad's bottom row.
    top_x = np.linspace(0.0, w, nx + 1)
    seam = plate_ids[-1][(top_x >= px) & (top_x <= px + pw)]
    # 6 kN down on the free right edge, 2 kN down on the pad's top (invented).
    loads: dict[NodeDof, float] = {}
    right = plate_ids[:, -1]
    for n in right:
        loads[(int(n), "uy")] = -6000.0 / right.size
    for n in pad_ids[-1]:
        loads[(int(n), "uy")] = -2000.0 / pad_ids.shape[1]
    return _case(
        "bracket_loose_pad",
        "Machine bracket in plane stress whose pad shares no node with the plate "
        "(coincident nodes not merged): the pad floats freely, 3 rigid-body modes.",
        asm, _coordinates(nodes, xy), supports, loads,
        Expected(rigid_body_modes=3, mode_nodes=tuple(int(n) for n in np.sort(pad_ids.ravel())),
                 defect_nodes=tuple(int(n) for n in np.sort(np.concatenate([pad_ids[0], seam]))),
                 ill_conditioned=True, large_raw_condition=True,
                 finding="Three rigid-body modes, all in the pad (nodes 201-215): it is not "
                         "connected to the plate; merge its nodes 201-205 with the "
                         "coincident plate nodes 83-87."))


# ---------------------------------------------------------------- braced mast (2D truss)

# An invented braced lighting mast as a plane pin-jointed truss: two legs 1000 mm
# apart, 4 panels of 1200 mm, a horizontal strut at every level and one diagonal per
# panel. Joint ids: 2*level + 1 (left leg), 2*level + 2 (right leg), level 0..4.
_MAST_WIDTH, _MAST_PANEL, _MAST_LEVELS = 1000.0, 1200.0, 4
_MAST_BAR = dict(A=480.0)
_MISSING_PANEL = 2        # the diagonal of panel 2 (levels 2 to 3) was left out


def _mast(missing_panel: Optional[int]):
    levels = np.arange(_MAST_LEVELS + 1)
    left, right = 2 * levels + 1, 2 * levels + 2
    nodes = np.column_stack([left, right]).ravel()
    xy = np.column_stack([np.tile([0.0, _MAST_WIDTH], levels.size),
                          np.repeat(levels * _MAST_PANEL, 2)])
    legs = np.vstack([np.column_stack([left[:-1], left[1:]]),
                      np.column_stack([right[:-1], right[1:]])])
    struts = np.column_stack([left[1:], right[1:]])
    panels = np.arange(_MAST_LEVELS)
    # Zig-zag bracing: alternate the direction of the diagonal from panel to panel.
    diag = np.where((panels % 2 == 0)[:, None],
                    np.column_stack([left[:-1], right[1:]]),
                    np.column_stack([right[:-1], left[1:]]))
    if missing_panel is not None:
        diag = np.delete(diag, missing_panel, axis=0)
    bars = np.vstack([legs, struts, diag])
    asm = truss2d(nodes, xy, bars, E=E_STEEL, **_MAST_BAR)
    supports = [(int(n), d) for n in (left[0], right[0]) for d in ("ux", "uy")]
    # Wind on the lamp head (invented): 1.5 kN sideways and 3 kN self weight at the top.
    top = _MAST_LEVELS
    loads: dict[NodeDof, float] = {(int(left[top]), "ux"): 1500.0,
                                   (int(left[top]), "uy"): -1500.0,
                                   (int(right[top]), "uy"): -1500.0}
    moving = tuple(int(n) for n in np.sort(np.concatenate([left[missing_panel + 1:],
                                                           right[missing_panel + 1:]])))
    panel_corners = tuple(int(n) for n in np.sort(np.concatenate(
        [left[missing_panel:missing_panel + 2], right[missing_panel:missing_panel + 2]])))
    member = E_STEEL * _MAST_BAR["A"] / _MAST_PANEL
    return (asm, _coordinates(nodes, xy), supports, loads, moving, panel_corners, member,
            int(left[top]))


def mast_missing_brace() -> DemoCase:
    """2D braced truss mast with one diagonal missing: one mechanism."""
    asm, coords, supports, loads, moving, corners, _, _ = _mast(_MISSING_PANEL)
    return _case(
        "mast_missing_brace",
        "Braced mast (pin-jointed truss) with the diagonal of its third panel left "
        "out: a mechanism, the upper part sways sideways.",
        asm, coords, supports, loads,
        Expected(rigid_body_modes=1, mode_nodes=moving, defect_nodes=corners,
                 ill_conditioned=True, large_raw_condition=True,
                 finding="One mechanism: the panel between levels 2 and 3 has no diagonal, "
                         f"so nodes {', '.join(map(str, moving))} sway freely in x."))


def mast_soft_spring() -> DemoCase:
    """The mechanism of :func:`mast_missing_brace` held only by a very soft spring."""
    asm, coords, supports, loads, moving, corners, member, top_left = _mast(_MISSING_PANEL)
    k = SOFT_FACTOR * member
    asm = ground_spring(asm, (top_left, "ux"), k)
    return _case(
        "mast_soft_spring",
        "The same mast held sideways only by a very soft guy spring at the top "
        f"({SOFT_FACTOR:.0e} x bar stiffness): a near-mechanism that loses nearly all digits.",
        asm, coords, supports, loads,
        Expected(rigid_body_modes=0, near_zero_modes=1, mode_nodes=moving,
                 defect_nodes=corners, ill_conditioned=True, large_raw_condition=True,
                 finding="No exact mechanism, but the sway of nodes "
                         f"{', '.join(map(str, moving))} is held only by the soft spring at "
                         f"node {top_left}: the float64 solution keeps only a few digits."))


# ---------------------------------------------------------------- lattice tower (3D truss)

# An invented square lattice tower as a space truss: 1500 mm square, 3 panels of
# 2000 mm, corners ids 10*level + corner (1..4), one diagonal on each face of each
# panel and one plan diagonal at each level above the base.
def lattice_tower_3d() -> DemoCase:
    """Healthy 3D space truss (ux, uy, uz) on four pinned feet."""
    side, panel, nlev = 1500.0, 2000.0, 3
    square = np.array([[0.0, 0.0], [side, 0.0], [side, side], [0.0, side]])
    levels = np.arange(nlev + 1)
    ids = 10 * levels[:, None] + np.arange(1, 5)[None, :]
    xyz = np.concatenate([np.broadcast_to(square, (levels.size, 4, 2)),
                          np.broadcast_to((levels * panel)[:, None, None], (levels.size, 4, 1))],
                         axis=-1).reshape(-1, 3)
    nxt = np.roll(np.arange(4), -1)
    legs = np.column_stack([ids[:-1].ravel(), ids[1:].ravel()])
    rings = np.column_stack([ids[1:].ravel(), ids[1:, nxt].ravel()])
    faces = np.column_stack([ids[:-1].ravel(), ids[1:, nxt].ravel()])
    plan = np.column_stack([ids[1:, 0], ids[1:, 2]])
    bars = np.vstack([legs, rings, faces, plan])
    asm = truss3d(ids.ravel(), xyz, bars, E=E_STEEL, A=690.0)
    supports = [(int(n), d) for n in ids[0] for d in ("ux", "uy", "uz")]
    loads: dict[NodeDof, float] = {(int(n), "ux"): 900.0 for n in ids[-1]}
    loads.update({(int(n), "uz"): -2500.0 for n in ids[-1]})
    return _case(
        "lattice_tower_3d",
        "Square lattice tower as a braced space truss on four pinned feet: "
        "well supported 3D model (healthy).",
        asm, _coordinates(ids.ravel(), xyz), supports, loads,
        Expected(rigid_body_modes=0,
                 finding="Well supported and well conditioned; the solution can be trusted."))


# ---------------------------------------------------------------- monorail beam (3D frame)

# An invented hoist monorail: a straight steel beam along X, 12 m long in 24
# beam-column elements, on three pinned hangers (translations restrained, no
# rotation). Nothing stops the beam from spinning about its own axis.
_RAIL = dict(A=5380.0, Iy=6.04e6, Iz=8.36e7, J=2.0e5)   # mm^2, mm^4; Iz about the strong axis
_G_STEEL = E_STEEL / (2.0 * (1.0 + NU_STEEL))


def monorail_no_torsion_support() -> DemoCase:
    """3D frame (6 dofs per node) free to spin about its own straight axis."""
    n_el, length = 24, 12000.0
    nodes = np.arange(1, n_el + 2)
    xyz = np.column_stack([np.linspace(0.0, length, n_el + 1), np.zeros(n_el + 1),
                           np.full(n_el + 1, 4000.0)])
    asm = frame3d(nodes, xyz, np.column_stack([nodes[:-1], nodes[1:]]),
                  E=E_STEEL, G=_G_STEEL, **_RAIL)       # local y = global Z (vertical)
    hangers = (int(nodes[0]), int(nodes[n_el // 2]), int(nodes[-1]))
    supports = [(hangers[0], "ux")] + [(n, d) for n in hangers for d in ("uy", "uz")]
    # Hoist at a quarter point: 10 kN down, 0.5 kN sideways, 50 mm eccentric (invented).
    hoist = int(nodes[n_el // 4])
    loads: dict[NodeDof, float] = {(hoist, "uz"): -10000.0, (hoist, "uy"): 500.0,
                                   (hoist, "rx"): 10000.0 * 50.0}
    return _case(
        "monorail_no_torsion_support",
        "Hoist monorail as a 3D frame on three pinned hangers: nothing restrains the "
        "rotation about its own axis (one rigid-body mode in rx).",
        asm, _coordinates(nodes, xyz), supports, loads,
        Expected(rigid_body_modes=1, mode_nodes=tuple(int(n) for n in nodes),
                 defect_nodes=hangers, ill_conditioned=True, large_raw_condition=True,
                 finding="One rigid-body mode: the beam spins about its axis (rx at every "
                         "node); restrain rx at a hanger (nodes 1, 13, 25)."))


# ---------------------------------------------------------------- catalogue and export


def scenarios() -> dict[str, DemoCase]:
    """All demo cases by name (invented data, not real structures).

    Returns
    -------
    dict of str to DemoCase
        In a fixed order: footbridge (healthy), footbridge_spring_bearings,
        rack_no_sway_support, bracket_loose_pad, rack_penalty_tie,
        mast_missing_brace, mast_soft_spring, lattice_tower_3d (healthy),
        monorail_no_torsion_support. Iterate ``.values()`` for the cases.
    """
    cases = [footbridge(), footbridge_spring_bearings(), rack_no_sway_support(),
             bracket_loose_pad(), rack_penalty_tie(), mast_missing_brace(),
             mast_soft_spring(), lattice_tower_3d(), monorail_no_torsion_support()]
    return {c.name: c for c in cases}


#: The case exported a second time before its supports are applied, with a fix file.
FIX_VARIANT = "footbridge"
#: The case also exported with several load cases as the columns of one CSV file.
LOAD_CASES_VARIANT = "footbridge"


def export(case: DemoCase, directory, *, with_fix_variant: bool = False) -> list[Path]:
    """Write a demo case as Matrix Market and CSV files.

    Files: ``<name>.mtx`` (symmetric coordinate), ``<name>_dofs.csv``
    (``node,dof``), ``<name>_coords.csv`` (``node,x,y`` or ``node,x,y,z``),
    ``<name>_load.mtx`` (Matrix Market array). With ``with_fix_variant`` also
    the unsupported model as ``<name>_free*`` plus ``<name>_free_fix.csv``
    (``node,dof``: the supports to apply).

    Returns
    -------
    list of Path
        The files written.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    written = _write_model(case.model, directory, case.name, case.description)
    if with_fix_variant:
        if case.unsupported is None:
            raise ValueError(f"case {case.name} has no unsupported model to export")
        stem = f"{case.name}_free"
        written += _write_model(case.unsupported, directory, stem,
                                case.description + " Exported before supports are applied.")
        path = directory / f"{stem}_fix.csv"
        with path.open("w", newline="") as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(["node", "dof"])
            w.writerows([node, name] for node, name in case.supports)
        written.append(path)
    if case.name == LOAD_CASES_VARIANT:
        written.append(_write_load_cases(case.model, directory / f"{case.name}_load_cases.csv"))
    logger.info("wrote %d files for %s", len(written), case.name)
    return written


def _write_model(model: Model, directory: Path, stem: str, description: str) -> list[Path]:
    comment = f" {stem}: {description} ({INVENTED}; {UNITS})"
    paths = [directory / f"{stem}.mtx", directory / f"{stem}_dofs.csv",
             directory / f"{stem}_coords.csv", directory / f"{stem}_load.mtx"]
    scipy.io.mmwrite(paths[0], model.K, comment=comment, field="real", symmetry="symmetric")
    with paths[1].open("w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["node", "dof"])
        w.writerows([int(n), DOF_NAMES[int(d)]] for n, d in zip(model.dofs.node, model.dofs.dof))
    with paths[2].open("w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        dim = model.coords.dim
        w.writerow(["node", "x", "y", "z"][: dim + 1])
        w.writerows([int(n), *(repr(float(v)) for v in xyz[:dim])]
                    for n, xyz in zip(model.coords.node, model.coords.xyz))
    scipy.io.mmwrite(paths[3], np.asarray(model.load, dtype=float).reshape(-1, 1),
                     comment=f" {stem}: load vector (N, N mm); {INVENTED}")
    return paths


def _write_load_cases(model: Model, path: Path) -> Path:
    """Three load cases (N, N mm) as the columns of a CSV file with a header:
    ``deck`` (the model's load), ``left_half`` (that load on the nodes left of
    midspan) and ``braking`` (a horizontal pull of a tenth of the deck load's
    total, shared by the ux rows of the nodes at the lowest level)."""
    deck = np.asarray(model.load, dtype=float)
    x = model.coords.lookup(model.dofs.node)
    left = np.where(x[:, 0] < 0.5 * (x[:, 0].min() + x[:, 0].max()), deck, 0.0)
    rows = (np.asarray(model.dofs.dof) == 0) & (x[:, 1] == x[:, 1].min())
    braking = np.where(rows, 0.1 * abs(deck.sum()) / max(int(rows.sum()), 1), 0.0)
    with path.open("w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["deck", "left_half", "braking"])
        w.writerows([repr(float(a)), repr(float(b)), repr(float(c))] for a, b, c in zip(deck, left, braking))
    return path


#: The case shipped with displacements "from another solver", for the README's
#: ``--solution`` example.
SOLUTION_VARIANT = "footbridge"

#: Components below this fraction of the largest displacement are round-off of
#: a zero (this project's choice: far below the six digits written).
ZERO_BY_SYMMETRY = 1e-12

#: Significant digits of the shipped displacements: an invented solver that
#: prints 6, as many text exports do (this project's choice for the example).
SOLUTION_DIGITS = 6


def export_solution(case: DemoCase, directory) -> Path:
    """Write ``<name>_solution.mtx``: invented displacements from "another solver".

    K u = f solved by scipy's sparse LU and rounded to
    :data:`SOLUTION_DIGITS` significant digits, as a solver that prints six
    digits would export it; ``conditioning diagnose --solution`` then reports
    about that many trustworthy digits.

    Returns
    -------
    Path
        The file written (Matrix Market array, n x 1; mm and rad).
    """
    import scipy.sparse.linalg as spla

    u = spla.spsolve(case.model.K.tocsc(), np.asarray(case.model.load, dtype=float))
    # Components that are zero by symmetry come out as round-off (1e-17 of the
    # largest), different on every BLAS kernel: written as 0, so the shipped file
    # is reproducible on any machine.
    u[np.abs(u) < ZERO_BY_SYMMETRY * np.max(np.abs(u))] = 0.0
    # rounding in decimal text is what a six-digit export does to the values
    u = np.array([float(f"{v:.{SOLUTION_DIGITS - 1}e}") for v in u])
    path = Path(directory) / f"{case.name}_solution.mtx"
    scipy.io.mmwrite(path, u.reshape(-1, 1),
                     comment=f" {case.name}: displacements (mm, rad) printed to {SOLUTION_DIGITS} "
                             f"significant digits by an invented solver; {INVENTED}")
    return path


def export_all(directory) -> list[Path]:
    """Export every case (the fix variant for :data:`FIX_VARIANT`, the solution
    of :data:`SOLUTION_VARIANT`); returns the files."""
    written: list[Path] = []
    for name, case in scenarios().items():
        written += export(case, directory, with_fix_variant=(name == FIX_VARIANT))
        if name == SOLUTION_VARIANT:
            written.append(export_solution(case, directory))
    return written


def _main(argv: list[str]) -> int:
    if len(argv) != 1:
        sys.stderr.write("usage: python -m conditioning.demo.scenarios DIRECTORY\n")
        return 2
    files = export_all(argv[0])
    sys.stdout.write(f"wrote {len(files)} files to {argv[0]} ({INVENTED})\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(_main(sys.argv[1:]))
