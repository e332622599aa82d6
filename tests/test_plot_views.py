"""The 3D mode plot: four views, a depth cue, node numbers and supports.

Checked on the figure's contents (matplotlib artists), not on pixels. The
projection is checked against the closed form of a parallel projection: every
point on one line of sight lands on the same spot, and the distance along it
grows linearly (common practice of axonometric drawing).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("matplotlib")

from conditioning.render import plots  # noqa: E402

DEMO = Path(__file__).resolve().parents[1] / "matrices"


def test_a_line_of_sight_projects_to_one_point_and_depth_grows_along_it():
    az, el = math.radians(plots.VIEW_AZIMUTH), math.radians(plots.VIEW_ELEVATION)
    # away from the viewer: into the picture horizontally, and downwards
    sight = np.array([math.sin(az) * math.cos(el), math.cos(az) * math.cos(el), -math.sin(el)])
    start = np.array([100.0, -40.0, 7.0])
    points = start + np.outer(np.linspace(0.0, 500.0, 6), sight)
    flat = plots._project(points, 3)
    np.testing.assert_allclose(flat, np.repeat(flat[:1], 6, axis=0), atol=1e-9)
    np.testing.assert_allclose(plots._depth(points), np.linspace(0.0, 1.0, 6), atol=1e-12)


def test_monorail_mode_plot_has_four_views_a_depth_cue_labels_and_the_support(monkeypatch):
    from conditioning import diagnose

    name = "monorail_no_torsion_support"
    report = diagnose(str(DEMO / f"{name}.mtx"), dofs=str(DEMO / f"{name}_dofs.csv"),
                      coords=str(DEMO / f"{name}_coords.csv"), samples=0)
    figures = []
    monkeypatch.setattr(plots, "_png", lambda fig: figures.append(fig) or b"")
    plots.mode_shape_png(report.geometry, report.spectrum.modes[0], 1, report.restraints)
    (fig,) = figures
    axes = fig.axes
    assert len(axes) == 4
    titles = [ax.get_title() for ax in axes]
    assert titles[0].startswith("view from azimuth") and "plan" in titles[1]
    assert "front" in titles[2] and "side" in titles[3]
    # depth cue in the axonometric view only: edge opacity spans a range there
    from matplotlib.collections import LineCollection

    alphas = np.concatenate([c.get_colors()[:, 3] for c in axes[0].collections
                             if isinstance(c, LineCollection)])
    assert alphas.min() < 0.5 < alphas.max() == pytest.approx(1.0, abs=0.05)
    for ax in axes[1:]:
        flat = np.concatenate([c.get_colors()[:, 3] for c in ax.collections
                               if isinstance(c, LineCollection)])
        assert np.all(flat == 1.0)
    for ax in axes:
        assert ax.get_aspect() == 1.0
        texts = [t.get_text() for t in ax.texts]
        assert any(t.startswith("support ") for t in texts)
        r = report.restraints[0]
        assert f"support {r.node} {r.dof}" in texts
    labels = {t.get_text() for t in axes[0].texts} - {f"support {r.node} {r.dof}"}
    located = {str(n) for n in report.spectrum.modes[0].nodes}
    assert labels and labels <= located


@pytest.mark.parametrize("name", ["mast_missing_brace", "rack_no_sway_support"])
def test_mode_plot_draws_the_existing_supports(monkeypatch, name):
    """Supports the export already has, read from its CSV files with the csv
    module: nodes of the coordinates without a line in the DOF map are filled
    triangles at their positions; nodes with fewer DOF lines than the most
    any node has are hollow squares."""
    import csv

    from conditioning import diagnose

    files = {k: DEMO / f"{name}{s}" for k, s in (("K", ".mtx"), ("dofs", "_dofs.csv"),
                                                  ("coords", "_coords.csv"))}
    with files["coords"].open(newline="") as fh:
        coords = {int(r["node"]): (float(r["x"]), float(r["y"])) for r in csv.DictReader(fh)}
    with files["dofs"].open(newline="") as fh:
        count: dict[int, int] = {}
        for r in csv.DictReader(fh):
            count[int(r["node"])] = count.get(int(r["node"]), 0) + 1
    without = sorted(set(coords) - set(count))
    fewer = sorted(n for n, c in count.items() if c < max(count.values()))
    report = diagnose(str(files["K"]), dofs=str(files["dofs"]), coords=str(files["coords"]),
                      samples=0)
    figures = []
    monkeypatch.setattr(plots, "_png", lambda fig: figures.append(fig) or b"")
    plots.mode_shape_png(report.geometry, report.spectrum.modes[0], 1, report.restraints)
    (ax,) = figures[0].axes
    by_label = {line.get_label(): line for line in ax.lines}
    for nodes, label in ((without, "support (node without DOFs)"),
                         (fewer, "node without some DOFs (restrained?)")):
        if not nodes:
            assert label not in by_label
            continue
        drawn = sorted(zip(*by_label[label].get_data()))
        assert drawn == sorted(coords[n] for n in nodes)
