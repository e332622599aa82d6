"""A sway mechanism is located at every node that moves, not only at the nodes
its scaled weight favours. Invented 2D portal frame (ux, uy, rz; N, mm): both
column bases pinned, the beam released at both ends, so the columns turn about
their bases and the beam slides. A scaled weight D^1/2 u puts the beam's stiff
axial DOFs far ahead of the columns' bending ones; the nodes low on the columns
(and the turning bases) move in length units all the same. The truth is the
null vector of the dense K from LAPACK eigh via numpy."""

from __future__ import annotations

import io

import numpy as np
import scipy.sparse as sp

import conditioning
from conditioning.model import Coordinates, DofTable, Model
from test_modes_hinge import _beam


def _pinned_portal():
    """Nodes 1, 2 pinned bases; columns 1-10-11-3 and 2-12-13-4; beam 3-14-15-16-4 released at 3 and 4."""
    xy = {1: (0, 0), 10: (0, 5000 / 3), 11: (0, 10000 / 3), 3: (0, 5000),
          2: (8000, 0), 12: (8000, 5000 / 3), 13: (8000, 10000 / 3), 4: (8000, 5000),
          14: (2000, 5000), 15: (4000, 5000), 16: (6000, 5000)}
    ids = sorted(xy)
    at = {v: i for i, v in enumerate(ids)}
    members = [(1, 10, False), (10, 11, False), (11, 3, False), (2, 12, False), (12, 13, False), (13, 4, False),
               (3, 14, True), (14, 15, False), (15, 16, False), (4, 16, True)]  # released at 3 and at 4
    n = len(ids)
    K = np.zeros((3 * n, 3 * n))
    for a, b, rel in members:
        idx = np.r_[3 * at[a]:3 * at[a] + 3, 3 * at[b]:3 * at[b] + 3]
        K[np.ix_(idx, idx)] += _beam(np.array(xy[a], float), np.array(xy[b], float), A=6000.0, I=1.0e8,
                                     release_a=rel)
    held = {3 * at[1], 3 * at[1] + 1, 3 * at[2], 3 * at[2] + 1}  # the pinned bases' ux, uy
    keep = np.array([r for r in range(3 * n) if r not in held])
    node = np.array(ids)[keep // 3]
    coords = np.array([[*xy[v], 0.0] for v in ids])
    return Model(sp.csr_array(K[np.ix_(keep, keep)]),
                 dofs=DofTable(node.astype(np.int64), np.array([0, 1, 5], np.int8)[keep % 3]),
                 coords=Coordinates(np.array(ids, dtype=np.int64), coords, 2))


def test_sway_mechanism_names_every_node_that_moves():
    model = _pinned_portal()
    w, V = np.linalg.eigh(model.K.toarray())  # LAPACK syevd
    assert w[0] < 1e-9 * w[-1] < w[1]          # one mechanism
    u = V[:, 0]
    size = 8000.0                              # the frame's largest extent (mm)
    length = np.where(model.dofs.dof >= 3, size, 1.0) * u
    nodes = np.unique(model.dofs.node)
    motion = np.array([np.linalg.norm(length[model.dofs.node == v]) for v in nodes])
    moving = set(nodes[motion >= 1e-2 * motion.max()].tolist())
    assert {10, 12, 1, 2} <= moving            # low on the columns, and the turning bases

    report = conditioning.diagnose(model, measure=False)
    (mode,) = report.spectrum.modes
    assert mode.kind == "mechanism"
    assert moving <= set(mode.nodes)
    finding = next(f for f in report.findings if f.code == "support.mechanism")
    assert "it moves all 11 nodes" in finding.message


def test_explained_row_shows_the_round_off_eigenvalue_as_zero():
    """The portal's mechanism eigenvalue is round-off (LAPACK: below n eps lambda_max); explaining
    a row must say so rather than print its noise digits, as the mode table does."""
    from rich.console import Console

    from conditioning.pipeline import explain
    from conditioning.render.terminal import explanation_view

    model = _pinned_portal()
    w = np.linalg.eigvalsh(model.K.toarray())  # LAPACK syevd
    assert abs(w[0]) < model.n * np.finfo(float).eps * w[-1]
    _, e = explain(model, 0)
    (share,) = e.mode_shares
    assert share.exact
    console = Console(width=100, record=True, color_system=None, file=io.StringIO())
    console.print(explanation_view(e))
    text = console.export_text()
    assert "(mechanism, eigenvalue 0 (round-off))" in text or "(mechanism, eigenvalue 0)" in text


def test_what_to_do_points_at_where_the_groups_meet():
    """Every node moves, so the action names the released ends where the rigid groups meet
    (the beam's ends, nodes 3 and 4, by construction) rather than only 'all 11 nodes'."""
    from conditioning.render.terminal import render_text

    report = conditioning.diagnose(_pinned_portal(), measure=False)
    assert report.spectrum.modes[0].meeting == [3, 4]
    text = " ".join(render_text(report, width=80).split())
    assert "move as a mechanism; its rigid groups meet at nodes 3, 4: look there" in text
