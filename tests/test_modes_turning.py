"""A rigid-body mode that turns about a supported point is named as that
rotation, not as a mix of shares about the centroid. Invented 2D truss (a
braced square of bars, ux and uy per node; N, mm) pinned at one corner only:
its one free motion is a rotation about that corner. The truth is the null
vector of the dense K from LAPACK eigh via numpy, checked to be the rotation
about the pin (displacement perpendicular to the radius, proportional to it)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

import conditioning
from conditioning.model import Coordinates, DofTable, Model


def _bar(xa, xb, EA=2.0e5 * 100.0):
    d = np.subtract(xb, xa)
    L = float(np.hypot(*d))
    c = np.r_[d / L, -d / L]
    return EA / L * np.outer(c, c)


def _pinned_square():
    """Nodes 1 (0,0), 2 (1000,0), 3 (1000,1000), 4 (0,1000); four sides and both diagonals; node 1 pinned."""
    xy = np.array([[0, 0], [1000, 0], [1000, 1000], [0, 1000]], float)
    K = np.zeros((8, 8))
    for a, b in [(0, 1), (1, 2), (2, 3), (3, 0), (0, 2), (1, 3)]:
        idx = np.r_[2 * a:2 * a + 2, 2 * b:2 * b + 2]
        K[np.ix_(idx, idx)] += _bar(xy[a], xy[b])
    keep = np.arange(2, 8)                            # node 1's ux, uy held out of K
    return (Model(sp.csr_array(K[np.ix_(keep, keep)]),
                  dofs=DofTable((keep // 2 + 1).astype(np.int64), (keep % 2).astype(np.int8)),
                  coords=Coordinates(np.arange(1, 5, dtype=np.int64), np.c_[xy, np.zeros(4)], 2)), xy)


def test_rotation_about_the_pin_is_named_as_such():
    model, xy = _pinned_square()
    w, V = np.linalg.eigh(model.K.toarray())         # LAPACK syevd
    assert w[0] < 1e-9 * w[-1] < w[1]
    u = V[:, 0].reshape(3, 2)
    r = xy[1:] - xy[0]                                 # radius from the pin to nodes 2, 3, 4
    perp = np.c_[-r[:, 1], r[:, 0]]                    # rotation about the pin: u = theta * perp
    theta = float(np.sum(u * perp) / np.sum(perp * perp))
    assert np.allclose(u, theta * perp, atol=1e-10 * np.abs(u).max())

    report = conditioning.diagnose(model, measure=False)
    (mode,) = report.spectrum.modes
    assert mode.kind == "rigid-body"
    assert mode.description == "rotation rz about node 1"
    assert "rz" in mode.motion and ("ux" in mode.motion or "uy" in mode.motion)  # shares stay about the centroid
    finding = next(f for f in report.findings if f.code == "support.rigid-body-mode")
    assert "(rotation rz about node 1)" in finding.message


def test_a_pure_translation_gets_no_turning_words():
    """The same square on two rollers (uy held at nodes 1 and 2): its one free motion is the
    slide in x (LAPACK: one null vector, every ux equal, every uy zero), described by its
    share alone."""
    xy = np.array([[0, 0], [1000, 0], [1000, 1000], [0, 1000]], float)
    K = np.zeros((8, 8))
    for a, b in [(0, 1), (1, 2), (2, 3), (3, 0), (0, 2), (1, 3)]:
        idx = np.r_[2 * a:2 * a + 2, 2 * b:2 * b + 2]
        K[np.ix_(idx, idx)] += _bar(xy[a], xy[b])
    keep = np.array([0, 2, 4, 5, 6, 7])               # uy of nodes 1 and 2 held
    K = K[np.ix_(keep, keep)]
    model = Model(sp.csr_array(K), dofs=DofTable((keep // 2 + 1).astype(np.int64), (keep % 2).astype(np.int8)),
                  coords=Coordinates(np.arange(1, 5, dtype=np.int64), np.c_[xy, np.zeros(4)], 2))
    w, V = np.linalg.eigh(K)                          # LAPACK syevd
    assert w[0] < 1e-9 * w[-1] < w[1]
    ux = V[keep % 2 == 0, 0]
    assert np.allclose(ux, ux[0]) and np.allclose(V[keep % 2 == 1, 0], 0, atol=1e-10)
    report = conditioning.diagnose(model, measure=False)
    (mode,) = report.spectrum.modes
    assert mode.description == "" and mode.motion == {"ux": 1.0}


def test_restraint_advice_names_a_node_of_the_part_that_turns():
    """The bracket's loose pad (demo, invented) has nodes at the same positions as plate nodes
    (coordinates alone show the coincident pairs): a rotation of the pad about one of its
    corners is named by the pad's own node, never by the plate node at the same place."""
    from conditioning.demo.scenarios import scenarios

    case = scenarios()["bracket_loose_pad"]
    report = conditioning.diagnose(case.model, measure=False)
    pad = set(report.spectrum.modes[0].nodes)         # the part that moves (the pad)
    turning = [r for r in report.restraints if "rotation" in r.reason]
    assert turning
    for r in turning:
        node = int(r.reason.split(" about node ")[1].split(",")[0])
        assert node in pad, r.reason
