"""Negative eigenvalues located by their eigenvectors, not by the pivot that met them.

Outside truth: LAPACK (numpy.linalg.eigh) on the dense scaled matrix S = D^-1/2 K D^-1/2
gives the eigenvector of the negative eigenvalue; its per-node weights (sum of v_i^2 over
the node's rows) say which nodes carry it. The model is an invented plane-stress slab
clamped along one edge with a negative spring to ground at one interior node, its diagonal
left positive (half the node's own stiffness), so the negative pivot falls elsewhere.
"""
from __future__ import annotations

import numpy as np
import pytest

import conditioning
from conditioning.demo.assemble import apply_restraints, ground_spring, plane_stress_quad
from conditioning.demo.scenarios import _coordinates, _quad_grid
from conditioning.model import Model
from conditioning.render.json_report import report_to_dict
from conditioning.render.terminal import render_text


def _slab_with_negative_spring(nx: int, ny: int):
    ids, xy, quads = _quad_grid(0.0, 0.0, 250.0 * nx, 250.0 * ny, nx, ny, 1)
    asm = plane_stress_quad(ids.ravel(), xy, quads, E=30000.0, nu=0.2, t=200.0)
    node = int(ids[ny // 2 + 1, (2 * nx) // 3])
    (row,) = asm.rows([(node, "uy")])
    asm = ground_spring(asm, (node, "uy"), -0.5 * float(asm.K[row, row]))
    red = apply_restraints(asm, [(int(i), c) for i in ids[:, 0] for c in ("ux", "uy")])
    return Model(K=red.K, dofs=red.dofs, coords=_coordinates(ids.ravel(), xy), source="slab"), node


def _lapack_nodes(model: Model, k: int = 4):
    K = model.K.toarray()
    d = 1.0 / np.sqrt(np.diag(K))
    w, V = np.linalg.eigh(d[:, None] * K * d[None, :])
    assert np.count_nonzero(w < 0) == 1
    weights = np.bincount(model.dofs.node, weights=V[:, 0] ** 2)
    return w[0], list(np.argsort(-weights)[:k]), weights[np.argsort(-weights)[:k]]


@pytest.mark.parametrize("nx, ny", [(12, 8), (30, 20)])   # LAPACK path (216 rows) and Lanczos path (1,200+)
def test_negative_spring_named_by_its_eigenvector(nx, ny):
    model, spring_node = _slab_with_negative_spring(nx, ny)
    lam, top, weights = _lapack_nodes(model)
    assert top[0] == spring_node            # the LAPACK eigenvector lives at the spring (the premise)
    report = conditioning.diagnose(model, seed=3)
    sp = report.spectrum
    assert sp.negative_eigenvalues == 1
    (mode,) = sp.negative_modes
    assert mode.eigenvalue == pytest.approx(lam, rel=1e-6)
    assert mode.nodes[:4] == top                                  # LAPACK's node order
    np.testing.assert_allclose(mode.shares[:4], weights, rtol=1e-4)
    pivot_node = report.pivots.negative_pivots[0].label
    assert pivot_node != f"node {spring_node} uy"                 # the pivot falls elsewhere
    # The verdict and the first action name the spring's node, not the pivot's.
    assert f"its eigenvector at nodes {spring_node}," in report.verdict
    finding = next(f for f in report.findings if f.code == "factor.negative-pivot")
    assert finding.nodes[0] == spring_node
    assert "The elimination met it at " + pivot_node in finding.message
    text = render_text(report, width=80)
    what_to_do = text.split("What to do")[1].split("Key figures")[0]
    assert f"{spring_node}" in what_to_do.split(":")[0]
    # The count's method is named as it was obtained.
    assert sp.negative_method in finding.message
    assert report_to_dict(report)["spectrum"]["negative_modes"][0]["nodes"][0] == spring_node
