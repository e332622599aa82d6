"""A member end released by a hinge turns an arm into a mechanism about the
hinge node. Invented 2D frame (ux, uy, rz; N, mm): a column fixed at its base
and an arm of two members hanging from its top through a moment release. The
truth is the null vector of the dense K from LAPACK eigh via numpy."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

import conditioning
from conditioning.model import Coordinates, DofTable, Model


def _beam(xa, xb, E=210000.0, A=2000.0, I=4.0e6, release_a=False):
    """6 x 6 plane frame member in global axes; the end-a moment condensed out when released."""
    d = np.subtract(xb, xa)
    L = float(np.hypot(*d))
    c, s = d / L
    k = np.zeros((6, 6))
    k[np.ix_([0, 3], [0, 3])] = E * A / L * np.array([[1, -1], [-1, 1]])
    b = E * I / L**3 * np.array([[12, 6 * L, -12, 6 * L], [6 * L, 4 * L * L, -6 * L, 2 * L * L],
                                 [-12, -6 * L, 12, -6 * L], [6 * L, 2 * L * L, -6 * L, 4 * L * L]])
    k[np.ix_([1, 2, 4, 5], [1, 2, 4, 5])] = b
    if release_a:
        keep = [0, 1, 3, 4, 5]
        kc = np.zeros((6, 6))
        kc[np.ix_(keep, keep)] = k[np.ix_(keep, keep)] - np.outer(k[keep, 2], k[2, keep]) / k[2, 2]
        k = kc
    r = np.array([[c, s, 0], [-s, c, 0], [0, 0, 1]])
    T = np.kron(np.eye(2), r)
    return T.T @ k @ T


def _hinged_arm():
    """The column (nodes 1-4, clamped at 1) and the arm (nodes 5-7) hinged at node 4."""
    xy = np.array([[0, 0], [0, 1000], [0, 2000], [0, 3000], [1000, 3000], [2000, 3000], [2000, 1800]], float)
    members = [(0, 1, False), (1, 2, False), (2, 3, False), (3, 4, True), (4, 5, False), (5, 6, False)]
    n = len(xy)
    K = np.zeros((3 * n, 3 * n))
    for a, b, rel in members:
        idx = np.r_[3 * a:3 * a + 3, 3 * b:3 * b + 3]
        K[np.ix_(idx, idx)] += _beam(xy[a], xy[b], release_a=rel)
    keep = np.arange(3, 3 * n)                   # node 1 clamped
    node = keep // 3 + 1
    return Model(sp.csr_array(K[np.ix_(keep, keep)]),
                 dofs=DofTable(node.astype(np.int64), np.array([0, 1, 5], np.int8)[keep % 3]),
                 coords=Coordinates(np.arange(1, n + 1, dtype=np.int64), np.c_[xy, np.zeros(n)], 2))


def test_arm_on_a_hinge_is_a_mechanism_meeting_at_the_hinge_node():
    """The arm's nodes move, the column stands still, they meet at the hinge
    node; K is singular, so no digits are measured and the inertia count agrees
    with the eigenvalues (this small K factors without a tiny pivot, so only the
    spectrum shows the singularity)."""
    model = _hinged_arm()
    Kr = model.K.toarray()
    node = model.dofs.node
    w, V = np.linalg.eigh(Kr)                    # LAPACK eigh via numpy: the truth
    assert abs(w[0]) < 1e-12 * w[-1] < w[1]
    u = np.abs(V[:, 0])
    moving = sorted({int(node[i]) for i in np.flatnonzero(u > 1e-8 * u.max())})
    assert moving == [5, 6, 7]
    report = conditioning.diagnose(model, samples=1)
    (mode,) = report.spectrum.modes
    assert mode.kind == "mechanism" and mode.nodes == moving
    assert mode.meeting == [4]                   # the released member end
    finding = next(f for f in report.findings if f.code == "support.mechanism")
    assert "meet at node 4;" in finding.message
    assert report.spectrum.below_split == 1 and report.spectrum.inertia_agrees
    assert report.digits.skipped.startswith("K is singular") and not report.digits.samples


def test_its_pivot_loss_is_shown_as_a_lower_bound_without_a_shift():
    """The hinge model factors without a shift, yet K is singular (LAPACK, above):
    the pivot figure is a lower bound of a total loss and is shown with '>='."""
    from conditioning.render.terminal import render_text

    Kr = _hinged_arm().K.toarray()
    w = np.linalg.eigvalsh(Kr)                   # LAPACK via numpy: singular
    assert abs(w[0]) < 1e-12 * w[-1]
    report = conditioning.diagnose(sp.csr_array(Kr), samples=1)
    assert report.factorization.shift == 0.0     # the case this test is about
    line = [ln for ln in render_text(report, width=120).splitlines()
            if ln.startswith("digits lost at a pivot")][0]
    assert ">= " in line and "K singular" in line and "shifted" not in line

