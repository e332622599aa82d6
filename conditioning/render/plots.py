"""Figures for the HTML report, as PNG bytes (matplotlib, an optional extra).

Each function draws what the report holds: the stages' results, and the
model's input data restated in :class:`~conditioning.results.ModelGeometry`
(the diagonal of K, node positions, K's node graph); none computes a
diagnosis.
matplotlib is imported lazily through :func:`require_matplotlib`, which
raises ImportError when the ``report`` extra is not installed; the HTML page
then says which plots need it. The object-oriented API (``Figure`` with the
Agg canvas) is used so no global pyplot state or GUI backend is touched.
"""

from __future__ import annotations

import io
import math
from typing import Optional

import numpy as np
from numpy.typing import NDArray

from conditioning import results
from conditioning.render.modes_export import nodal_field

_FLOOR = 1e-20


def require_matplotlib():
    """The ``matplotlib.figure.Figure`` class; ImportError without the extra."""
    from matplotlib.figure import Figure  # noqa: PLC0415 - optional extra

    return Figure


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    return buf.getvalue()


def spectrum_png(spectrum: results.SpectrumResult) -> bytes:
    """Smallest eigenvalues of the scaled matrix on a log scale, gap marked.

    Eigenvalues at or below zero are drawn at the floor 1e-20 with their own
    marker (a log scale cannot show them).
    """
    Figure = require_matplotlib()
    lam = np.asarray(spectrum.smallest, dtype=float)
    idx = np.arange(1, lam.size + 1)
    fig = Figure(figsize=(6.5, 3.6))
    ax = fig.subplots()
    pos = lam > 0
    shown = np.where(pos, lam, _FLOOR)
    is_mode = idx <= spectrum.count
    # A legend entry only for what is drawn: no "near-singular mode" on a healthy model.
    if (is_mode & pos).any():
        ax.semilogy(idx[is_mode & pos], shown[is_mode & pos], "o", color="#c0392b",
                    label="near-singular mode")
    if (~is_mode & pos).any():
        ax.semilogy(idx[~is_mode & pos], shown[~is_mode & pos], "o", color="#2c5d8a",
                    label="rest of the spectrum")
    if (~pos).any():
        ax.semilogy(idx[~pos], shown[~pos], "v", color="#7d3c98",
                    label="zero or negative (drawn at 1e-20)")
    if spectrum.gap is not None and spectrum.count and spectrum.count < lam.size:
        lo, hi = shown[spectrum.count - 1], shown[spectrum.count]
        line = math.sqrt(max(lo, _FLOOR) * max(hi, _FLOOR))
        ax.axhline(line, ls="--", color="#555555", lw=1)
        gap = "" if spectrum.gap is None else f" (ratio {spectrum.gap:.2g})"
        ax.text(0.5 + 0.02 * lam.size, line * 1.5, f"gap{gap}", color="#555555", fontsize=8)
    ax.set_xlabel("eigenvalue index (ascending)")
    ax.set_ylabel("eigenvalue of D^-1/2 K D^-1/2")
    ax.set_xticks(idx if idx.size <= 20 else idx[:: max(1, idx.size // 10)])
    ax.grid(True, which="major", alpha=0.3)
    ax.set_yscale("log")
    ax.set_ylim(*_log_limits(shown))
    ax.legend(fontsize=8, loc="lower right")
    return _png(fig)


def _log_limits(values: NDArray[np.float64]) -> tuple[float, float]:
    """Whole decades around the data (half a decade of margin), not matplotlib's default span."""
    v = values[values > 0]
    lo, hi = (float(v.min()), float(v.max())) if v.size else (_FLOOR, 1.0)
    return 10.0 ** math.floor(math.log10(lo) - 0.5), 10.0 ** math.ceil(math.log10(hi) + 0.5)


def diagonal_histogram_png(geometry: results.ModelGeometry,
                           jumps: list[results.StiffnessJump]) -> bytes:
    """Histogram of log10 |K_ii| by dof type; penalty outliers marked."""
    Figure = require_matplotlib()
    diag = np.abs(geometry.diagonal)
    nonzero = diag > 0
    fig = Figure(figsize=(6.5, 3.6))
    ax = fig.subplots()
    logd = np.log10(np.where(nonzero, diag, 1.0))
    lo, hi = (logd[nonzero].min(), logd[nonzero].max()) if nonzero.any() else (0.0, 1.0)
    bins = np.linspace(math.floor(lo) - 0.5, math.ceil(hi) + 0.5, 41)
    if geometry.row_dof is None:
        groups = [("all rows", nonzero)]
    else:
        groups = [(results.DOF_NAMES[d], nonzero & (geometry.row_dof == d))
                  for d in np.unique(geometry.row_dof)]
    largest = 0
    for name, mask in groups:
        if mask.any():
            counts, _, _ = ax.hist(logd[mask], bins=bins, histtype="step", lw=1.5, label=name)
            largest = max(largest, int(np.max(counts)))
    for j in jumps:
        if j.kind == "diagonal-outlier":
            for row in j.rows:
                ax.axvline(logd[row], color="#c0392b", ls=":", lw=1)
    if largest > 50:  # a log count axis keeps a single outlier row visible
        ax.set_yscale("log")
    ax.set_xlabel("log10 |K_ii| (model units)")
    ax.set_ylabel("rows")
    zero = int((~nonzero).sum())
    title = "diagonal magnitudes by dof type"
    if zero:
        title += f" ({zero} zero diagonal entries not shown)"
    ax.set_title(title, fontsize=9)
    ax.legend(fontsize=8)
    return _png(fig)


def node_digits(geometry: Optional[results.ModelGeometry],
                per_dof: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
    """``(nodes, digits)``: the worst (lowest) finite per-DOF figure of each
    node (digits); 1-based rows and the figures as given without a map."""
    per_dof = np.asarray(per_dof, dtype=float)
    if geometry is None or geometry.nodes is None:
        return np.arange(1, per_dof.size + 1), per_dof
    nodes = geometry.nodes
    where = geometry.node_index()
    worst = np.full(nodes.size, np.inf)
    finite = np.isfinite(per_dof)
    np.minimum.at(worst, where[finite], per_dof[finite])
    worst[np.isinf(worst)] = np.nan
    return nodes, worst


def digits_png(geometry: results.ModelGeometry, sample: results.DigitsSample) -> bytes:
    """Trustworthy digits per node, over the node positions when known."""
    Figure = require_matplotlib()
    nodes, digits = node_digits(geometry, sample.per_dof_digits)
    fig = Figure(figsize=(6.5, 4.2))
    ax = fig.subplots()
    mapped = geometry.nodes is not None
    if mapped and geometry.xyz is not None and geometry.has_position().all():
        xy = _project(geometry.xyz, geometry.dim)
        if geometry.edges is not None and geometry.edges.size:
            from matplotlib.collections import LineCollection

            # the members under the dots, so a digit can be found on the structure
            ax.add_collection(LineCollection(xy[geometry.edges], colors="#cccccc", lw=0.6, zorder=0))
        # An absolute scale, 0 to 16 digits (float64 carries about 15.95), so a
        # healthy model is green everywhere rather than stretched to its own range.
        sc = ax.scatter(xy[:, 0], xy[:, 1], c=digits, cmap="RdYlGn", vmin=0.0, vmax=16.0,
                        s=_marker(nodes.size), edgecolors="#555555", linewidths=0.3)
        fig.colorbar(sc, ax=ax, label="trustworthy digits")
        ax.set_aspect("equal", adjustable="datalim")
        if geometry.dim == 2:
            ax.set_xlabel("x")
            ax.set_ylabel("y")
        else:
            ax.set_xlabel(f"3D view (azimuth {VIEW_AZIMUTH:g}, elevation {VIEW_ELEVATION:g} deg)")
    else:
        ax.plot(nodes, digits, ".", color="#2c5d8a")
        ax.set_xlabel("node" if mapped else "row")
        ax.set_ylabel("trustworthy digits")
    ax.set_title(f"trustworthy digits per node, sample '{sample.sample}' ({sample.method})",
                 fontsize=9)
    return _png(fig)


def mode_shape_png(geometry: results.ModelGeometry, mode: results.NearSingularMode,
                   k: int, restraints: Optional[list[results.Restraint]] = None) -> Optional[bytes]:
    """Mode ``k`` drawn as a displaced shape over the node positions (PNG bytes).

    The node graph of K (``geometry.edges``: nodes coupled by a stored entry)
    is drawn undeformed in grey and displaced in colour; without edges (a
    large model) only the nodes. The nodes that locate the mode are numbered
    (at most :data:`MAX_NODE_LABELS`) and the suggested ``restraints`` are
    marked with their node and DOF. A 3D model gets four panels: an
    axonometric view (:data:`VIEW_AZIMUTH`, :data:`VIEW_ELEVATION`) whose
    lines fade and thin with distance from the viewer (the depth cue), and
    the plan (x-y), front (x-z) and side (y-z) views, since one projection
    can hide a motion along the line of sight. Returns None when the model
    has no map, a node without a position, or the mode no vector.
    """
    Figure = require_matplotlib()
    if geometry.nodes is None or geometry.xyz is None or mode.vector is None:
        return None
    if not geometry.has_position().all():
        return None
    nodes, trans = nodal_field(geometry, mode.vector, (0, 1, 2))
    xyz = geometry.xyz
    extent = float(np.ptp(xyz, axis=0).max()) or 1.0
    amp = float(np.abs(trans).max())
    scale = 0.15 * extent / amp if amp > 0 else 0.0
    how = f"{mode.kind}"
    if mode.motion:
        how += ": " + ", ".join(f"{n} {s:.0%}" for n, s in
                                sorted(mode.motion.items(), key=lambda t: -t[1]) if s >= 0.01)
    note = "" if amp > 0 else " (no translation: rotations only)"
    title = f"mode {k}, {how}{note}"
    if geometry.dim != 3:
        fig = Figure(figsize=(6.5, 4.2))
        ax = fig.subplots()
        _mode_panel(ax, geometry, nodes, xyz[:, :2], (xyz + scale * trans)[:, :2], trans, amp, mode,
                    restraints, legend=True, fixed=_fixed_xyz(geometry)[:, :2])
        ax.set_title(title, fontsize=9)
        return _png(fig)
    fig = Figure(figsize=(8.0, 6.4))
    axes = fig.subplots(2, 2)
    moved_xyz = xyz + scale * trans
    fixed = _fixed_xyz(geometry)
    _mode_panel(axes[0, 0], geometry, nodes, _project(xyz, 3), _project(moved_xyz, 3), trans, amp,
                mode, restraints, legend=True, depth=_depth(xyz), fixed=_project(fixed, 3))
    axes[0, 0].set_title(f"view from azimuth {VIEW_AZIMUTH:g}, elevation {VIEW_ELEVATION:g} deg "
                         "(far lines paler)", fontsize=8)
    for ax, (a, b), name in ((axes[0, 1], (0, 1), "plan: x right, y up"),
                             (axes[1, 0], (0, 2), "front: x right, z up"),
                             (axes[1, 1], (1, 2), "side: y right, z up")):
        _mode_panel(ax, geometry, nodes, xyz[:, [a, b]], moved_xyz[:, [a, b]], trans, amp, mode,
                    restraints, legend=False, fixed=fixed[:, [a, b]])
        ax.set_title(name, fontsize=8)
    fig.suptitle(title, fontsize=9)
    return _png(fig)


def _mode_panel(ax, geometry: results.ModelGeometry, nodes: NDArray[np.int64],
                base: NDArray[np.float64], moved: NDArray[np.float64], trans: NDArray[np.float64],
                amp: float, mode: results.NearSingularMode,
                restraints: Optional[list[results.Restraint]], *, legend: bool,
                depth: Optional[NDArray[np.float64]] = None,
                fixed: Optional[NDArray[np.float64]] = None) -> None:
    """One projection of a mode plot: undeformed (grey) and displaced (red)
    shape, located nodes numbered, the model's supports (``fixed``: projected
    positions of the nodes without DOFs; nodes lacking a DOF) and the
    suggested supports marked; ``depth`` (0 nearest to 1 farthest, per node)
    fades and thins the far lines."""
    edges = geometry.edges
    # Only what moves is drawn in colour (more than 1% of the largest motion).
    moving = np.linalg.norm(trans, axis=1) > 0.01 * amp if amp > 0 else np.zeros(len(nodes), bool)
    if edges is not None and edges.size:
        from matplotlib.collections import LineCollection

        live = edges[moving[edges].any(axis=1)]
        grey, red = np.array([0.55, 0.55, 0.55]), np.array([0.75, 0.22, 0.17])
        ax.add_collection(LineCollection(base[edges], colors=_faded(grey, depth, edges),
                                         linewidths=_thinned(0.8, depth, edges)))
        ax.add_collection(LineCollection(moved[live], colors=_faded(red, depth, live),
                                         linewidths=_thinned(1.1, depth, live)))
    ax.plot(base[:, 0], base[:, 1], ".", color="#999999", ms=3)
    ax.plot(moved[moving, 0], moved[moving, 1], ".", color="#c0392b", ms=4)
    # the existing supports, so a missing one stands out beside them
    if fixed is not None and len(fixed):
        ax.plot(fixed[:, 0], fixed[:, 1], "^", color="#4d4d4d", ms=7, label="support (node without DOFs)")
    if geometry.lacks_dofs is not None and geometry.lacks_dofs.any():
        part = base[geometry.lacks_dofs]
        ax.plot(part[:, 0], part[:, 1], "s", color="#4d4d4d", mfc="none", ms=6,
                label="node without some DOFs (restrained?)")
    located = np.isin(nodes, np.asarray(mode.nodes, dtype=np.int64))
    if located.any() and located.sum() < nodes.size:
        ax.plot(base[located, 0], base[located, 1], "o", mfc="none", color="#1a5276", ms=8,
                label="nodes that locate the mode")
    # Node numbers at the defect, so the engineer can find it on the structure.
    for i in np.flatnonzero(located)[:MAX_NODE_LABELS]:
        ax.annotate(str(int(nodes[i])), base[i], xytext=(4, 4), textcoords="offset points",
                    fontsize=7, color="#1a5276")
    for res in restraints or []:
        at = np.flatnonzero(nodes == res.node)
        if at.size:
            p = base[at[0]]
            ax.plot(p[0], p[1], "^", color="#117a65", ms=10, mfc="none", mew=1.5)
            ax.annotate(f"support {res.node} {res.dof}", p, xytext=(6, -12), textcoords="offset points",
                        fontsize=7, color="#117a65")
    if restraints:
        ax.plot([], [], "^", color="#117a65", mfc="none", label="suggested support")
    if legend and ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, loc="best")
    ax.set_aspect("equal", adjustable="datalim")
    ax.autoscale_view()
    ax.set_xticks([])
    ax.set_yticks([])


def _fixed_xyz(geometry: results.ModelGeometry) -> NDArray[np.float64]:
    """(p, 3) positions of the coordinates' nodes without DOFs (model length unit)."""
    return geometry.other_xyz if geometry.other_xyz is not None else np.zeros((0, 3))


def _faded(rgb: NDArray[np.float64], depth: Optional[NDArray[np.float64]],
           edges: NDArray[np.intp]) -> NDArray[np.float64]:
    """(e, 4) RGBA per edge: opaque nearest, down to alpha 0.25 farthest."""
    alpha = np.ones(len(edges)) if depth is None else 1.0 - 0.75 * depth[edges].mean(axis=1)
    return np.column_stack([np.tile(rgb, (len(edges), 1)), alpha])


def _thinned(width: float, depth: Optional[NDArray[np.float64]],
             edges: NDArray[np.intp]) -> NDArray[np.float64]:
    """(e,) line widths in points: ``width`` nearest, half of it farthest."""
    if depth is None:
        return np.full(len(edges), width)
    return width * (1.0 - 0.5 * depth[edges].mean(axis=1))


# ------------------------------------------------------------------ helpers
#: Node numbers written on a mode plot at most (the rest are in the tables).
MAX_NODE_LABELS = 12

#: Viewing angles of the 3D projection (degrees): azimuth about z, elevation.
#: Not 45 degrees, so square plans do not put corner nodes on top of each other.
VIEW_AZIMUTH, VIEW_ELEVATION = 30.0, 20.0


def _project(xyz: NDArray[np.float64], dim: int) -> NDArray[np.float64]:
    """x-y for 2D; for 3D an oblique parallel projection, z up."""
    if dim == 2:
        return xyz[:, :2]
    az, el = math.radians(VIEW_AZIMUTH), math.radians(VIEW_ELEVATION)
    x, y, z = xyz[:, 0], xyz[:, 1], xyz[:, 2]
    horizontal = x * math.cos(az) - y * math.sin(az)
    depth = x * math.sin(az) + y * math.cos(az)
    return np.column_stack([horizontal, z * math.cos(el) + depth * math.sin(el)])


def _depth(xyz: NDArray[np.float64]) -> NDArray[np.float64]:
    """(m,) distance of each point from the viewer of :func:`_project`, scaled
    to 0 (nearest) .. 1 (farthest); all 0 for a model without depth."""
    az, el = math.radians(VIEW_AZIMUTH), math.radians(VIEW_ELEVATION)
    x, y, z = xyz[:, 0], xyz[:, 1], xyz[:, 2]
    # the viewer sits at -y (rotated by the azimuth), above by the elevation
    along = (x * math.sin(az) + y * math.cos(az)) * math.cos(el) - z * math.sin(el)
    span = float(np.ptp(along))
    return (along - along.min()) / span if span > 0 else np.zeros(len(xyz))


def _marker(m: int) -> float:
    return float(np.clip(4000.0 / max(m, 1), 2.0, 60.0))


#: Corner pairs drawn for a flagged element, by its number of corners and kind.
_OUTLINE = {"tri": ((0, 1), (1, 2), (2, 0)), "quad": ((0, 1), (1, 2), (2, 3), (3, 0)),
            "tet": ((0, 1), (1, 2), (2, 0), (0, 3), (1, 3), (2, 3)),
            "hex": ((0, 1), (1, 2), (2, 3), (3, 0), (4, 5), (5, 6), (6, 7), (7, 4),
                    (0, 4), (1, 5), (2, 6), (3, 7))}
_CORNERS = {"tri": 3, "quad": 4, "tet": 4, "hex": 8}


def geometry_png(geometry: results.ModelGeometry, checks: results.GeometryChecks) -> Optional[bytes]:
    """The node graph with what the geometry checks flagged: coincident nodes
    K does not join (orange rings), nodes far from their coupled nodes (red
    crosses, labelled), and flagged elements (red outlines, labelled by id);
    None when nothing was flagged or positions are missing."""
    if geometry.nodes is None or geometry.xyz is None or not geometry.has_position().all():
        return None
    loose = [c for c in checks.coincident if c.joined == "no"]
    if not (loose or checks.far or checks.flagged_elements):
        return None
    Figure = require_matplotlib()
    from matplotlib.collections import LineCollection

    ids = np.concatenate([geometry.nodes, geometry.other_nodes if geometry.other_nodes is not None else []])
    xyz = np.vstack([geometry.xyz, geometry.other_xyz if geometry.other_xyz is not None else np.zeros((0, 3))])
    order = np.argsort(ids)
    xy = _project(xyz, geometry.dim or 2)

    def at(nodes):
        return xy[order[np.searchsorted(ids[order], np.asarray(nodes, dtype=np.int64))]]

    fig = Figure(figsize=(6.5, 4.2))
    ax = fig.subplots()
    if geometry.edges is not None and geometry.edges.size:
        ax.add_collection(LineCollection(xy[geometry.edges], colors="#cccccc", lw=0.6, zorder=0))
    ax.scatter(xy[:, 0], xy[:, 1], s=_marker(len(xy)) / 3, color="#777777", zorder=1)
    if loose:
        p = at([v for c in loose for v in c.nodes])
        ax.scatter(p[:, 0], p[:, 1], s=90, facecolors="none", edgecolors="#e07b00", linewidths=1.5, zorder=3,
                   label="coincident nodes K does not join")
    for f in checks.far:
        p = at([f.node])[0]
        ax.scatter([p[0]], [p[1]], marker="x", s=80, color="#c0392b", zorder=4)
        ax.annotate(f"node {f.node}", p, textcoords="offset points", xytext=(5, 5), fontsize=8, color="#c0392b")
    segments, labels = [], []
    for e in checks.flagged_elements:
        family = e.kind.rstrip("0123456789")
        if family not in _OUTLINE:
            continue
        corners = at(e.nodes[:_CORNERS[family]])
        segments += [corners[[a, b]] for a, b in _OUTLINE[family]]
        labels.append((e.element, corners.mean(axis=0)))
    if segments:
        ax.add_collection(LineCollection(segments, colors="#c0392b", lw=1.4, zorder=2))
        for eid, c in labels[:20]:
            ax.annotate(str(eid), c, fontsize=7, color="#c0392b", ha="center", va="center")
    ax.autoscale()
    ax.set_aspect("equal", adjustable="datalim")
    if loose:
        ax.legend(loc="best", fontsize=8)
    ax.set_title("geometry checks: flagged nodes and elements", fontsize=9)
    return _png(fig)
