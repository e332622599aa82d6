"""A rigid-body rotation about an axis through nodes leaves those nodes in
place: the report must not say it moves them. Invented model: a 3D truss tower
(4 legs, braced faces and levels) supported so that it can only turn about its
first leg; the truth is the null vector of the dense K from LAPACK eigh via numpy."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import conditioning
from conditioning.model import Coordinates, DofTable, Model


def _tower(panels: int = 12, width: float = 2.0, height: float = 1.5):
    corners = [(0.0, 0.0), (width, 0.0), (width, width), (0.0, width)]
    xyz = np.array([(x, y, k * height) for k in range(panels + 1) for x, y in corners])
    bars = []
    for k in range(panels + 1):
        level = [4 * k + c for c in range(4)]
        bars += [(level[c], level[(c + 1) % 4]) for c in range(4)] + [(level[0], level[2])]
        if k < panels:
            for c in range(4):
                a, b = 4 * k + c, 4 * k + (c + 1) % 4
                bars += [(a, a + 4), (a, b + 4), (b, a + 4)]
    n = 3 * len(xyz)
    K = np.zeros((n, n))
    for a, b in bars:
        d = xyz[b] - xyz[a]
        L = np.linalg.norm(d)
        k = 2.1e11 * 1e-3 / L * np.outer(d / L, d / L)   # N/m, invented section
        idx = np.r_[3 * a:3 * a + 3, 3 * b:3 * b + 3]
        K[np.ix_(idx, idx)] += np.block([[k, -k], [-k, k]])
    # supports: node 1 pinned, nodes 2-4 vertical only; the rotation about the
    # vertical axis through node 1 (the first leg) is left free.
    fixed = [0, 1, 2, 5, 8, 11]
    keep = np.setdiff1d(np.arange(n), fixed)
    node = keep // 3 + 1
    dof = (keep % 3).astype(np.int8)
    model = Model(sp.csr_array(K[np.ix_(keep, keep)]), dofs=DofTable(node.astype(np.int64), dof),
                  coords=Coordinates(np.arange(1, len(xyz) + 1, dtype=np.int64), xyz, 3))
    return model, xyz


def test_nodes_on_the_rotation_axis_are_not_said_to_move():
    model, xyz = _tower()
    K = model.K.toarray()
    w, V = np.linalg.eigh(K)                         # LAPACK eigh via numpy: the truth
    assert w[0] < 1e-12 * w[-1] < w[1]               # one zero-energy motion
    u = V[:, 0]
    node_motion = np.zeros(len(xyz) + 1)
    np.maximum.at(node_motion, model.dofs.node, np.abs(u))
    present = np.unique(model.dofs.node)
    moving = [int(v) for v in present if node_motion[v] > 1e-8 * np.abs(u).max()]
    still = [int(v) for v in present if node_motion[v] <= 1e-8 * np.abs(u).max()]
    assert still and moving                          # the truth has both
    report = conditioning.diagnose(model, samples=1)
    (mode,) = report.spectrum.modes
    assert mode.kind == "rigid-body"
    assert mode.nodes == moving
    finding = next(f for f in report.findings if f.code == "support.rigid-body-mode")
    assert "all " not in finding.message
    assert "stay in place" in finding.message and f"nodes {still[0]}, {still[1]}" in finding.message


def test_explaining_a_row_of_a_spread_out_free_rotation():
    """The free rotation of a 30-panel tower spreads over ~90 nodes, so each of
    its rows carries under 1% of it (v_i^2 / ||v||^2 of the scaled LAPACK null
    vector, v = D^1/2 u): such a row is part of the free motion, not a row the
    singularity does not explain."""
    from conditioning.pipeline import explain

    model, _ = _tower(panels=30)
    K = model.K.toarray()
    w, V = np.linalg.eigh(K)                     # LAPACK eigh via numpy
    v = np.sqrt(np.diag(K)) * V[:, 0]
    share = v**2 / (v @ v)
    rows = np.flatnonzero((share > 1e-3) & (share < 1e-2))
    assert rows.size > 50
    report, ex = explain(model, int(rows[-1]), row_base=0)
    text = " ".join(ex.advice)
    assert "not explained by this DOF" not in text
    (mine,) = ex.mode_shares
    assert mine.share == pytest.approx(share[rows[-1]], rel=1e-6)
    assert f"{mine.share:.1%} of near-singular mode 1" in text
