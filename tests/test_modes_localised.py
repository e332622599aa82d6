"""Issue 11: near-singular modes located at the nodes that actually move.

Models are invented here (tests/mode_models.py, the demo assembler's element
matrices), never the demo scenarios. Truth, named beside each check:
- LAPACK's null space of the scaled matrix S = D^-1/2 K D^-1/2
  (scipy.linalg.null_space, an SVD): its dimension is the mode count, and the
  diagonal of its projector N N^T summed over a node's rows is the node's
  weight in the null space, whatever basis LAPACK happens to return;
- closed forms: a grillage of beams in a plane whose bending about the
  plane's normal is zero gives each node inside a wall exactly one free
  rotation, about that wall's normal; a member with all rotations released at
  both ends spins about its own axis (one mechanism on its inner nodes);
- LAPACK eigvalsh: K with the suggested restraints removed is positive definite.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as la

import mode_models as mm
from conditioning.linalg.local_null import group_null_directions, sparsest_basis
from conditioning.pipeline import diagnose
from conditioning.render.terminal import render_text


def _scaled_null_space(model):
    """LAPACK (SVD) null space of S, and each node's weight in it (node -> weight)."""
    K = model.K.toarray()
    d = np.sqrt(np.diag(K))
    N = la.null_space(K / np.outer(d, d), rcond=1e-10)
    weight = np.bincount(model.dofs.node, weights=np.sum(N**2, axis=1))
    return N, weight


def _positive_definite_after(model, restraints) -> bool:
    keep = np.setdiff1d(np.arange(model.n), [r.row for r in restraints])
    return np.linalg.eigvalsh(model.K.toarray()[np.ix_(keep, keep)])[0] > 0


# ---------------------------------------------------------------- kernels
def test_sparsest_basis_recovers_disjoint_local_motions():
    """Five motions on disjoint rows, mixed by a random orthogonal matrix
    (LAPACK QR): the column-pivoted QR basis is the five, up to scale."""
    rng = np.random.default_rng(5)
    M = np.zeros((40, 5))
    for k in range(5):
        M[8 * k:8 * k + 8, k] = rng.standard_normal(8)
    Q = la.qr(rng.standard_normal((5, 5)))[0]
    C = sparsest_basis(M @ Q)
    assert C.shape == (40, 5)
    for c in C.T:
        support = np.flatnonzero(c)
        k = support[0] // 8
        assert np.all(support // 8 == k)
        cos = abs(c @ M[:, k]) / np.linalg.norm(c) / np.linalg.norm(M[:, k])
        assert cos > 1 - 1e-12


def test_group_null_directions_finds_the_zero_of_a_block():
    """Two nodes, 2 DOFs each; node 1's block is [[1, 1], [1, 1]] and
    uncoupled: its null direction is (1, -1)/sqrt(2) (closed form)."""
    import scipy.sparse as sp
    S = sp.csr_array(np.array([[1.0, 1, 0, 0], [1, 1, 0, 0], [0, 0, 2, -1], [0, 0, -1, 2]]))
    found = group_null_directions(S, np.array([0, 0, 1, 1]), np.array([0, 1]), 1e-12)
    assert found.group.tolist() == [0]
    assert abs(abs(found.Z[0, 0]) - 2**-0.5) < 1e-12 and abs(found.Z[0, 0] + found.Z[1, 0]) < 1e-12


# ------------------------------------------------ 1. drilling rotations
def test_inclined_drilling_rotations_are_dofs_without_stiffness_with_their_axis():
    """Hopper of four sloping walls, 6 x 6 cells each, no stiffness about the
    wall normals: 4 walls x 6 rows x 5 inner columns = 120 free rotations
    (closed form), as many as LAPACK's null space of S; no row is empty."""
    model, normal = mm.hopper()
    N, weight = _scaled_null_space(model)
    assert N.shape[1] == 120 == len(normal)
    report = diagnose(model, measure=False)
    assert report.structure.empty_rows.size == 0
    modes = report.spectrum.modes
    assert report.spectrum.count == 120
    assert {m.kind for m in modes} == {"dof-without-stiffness"}
    for m in modes:
        (node,) = m.nodes
        assert weight[node] > 0.99                      # LAPACK: the node carries one whole null vector
        assert abs(abs(np.dot(m.axis, normal[node])) - 1) < 1e-8  # about its wall's normal
    assert sorted(v for m in modes for v in m.nodes) == sorted(normal)
    # One group for the part: count and node list, one line in the terminal.
    (group,) = report.spectrum.mode_groups
    assert group.count == 120 and group.nodes == sorted(normal) and group.kind == "dof-without-stiffness"
    text = render_text(report, width=200)
    assert "120 x dof-without-stiffness" in text
    assert not any(f.code == "support.mechanism" for f in report.findings)
    (f,) = [f for f in report.findings if f.code == "support.dof-without-stiffness"]
    assert f.nodes == sorted(normal) and "120 direction(s)" in f.message
    # The suggested restraints (one per node) leave K positive definite (LAPACK eigvalsh).
    assert len(report.restraints) == 120
    assert sorted(r.node for r in report.restraints) == sorted(normal)
    assert _positive_definite_after(model, report.restraints)


def test_hopper_with_drilling_stiffness_is_healthy():
    """Same walls with in-plane bending stiffness: no mode (LAPACK: S has no null space)."""
    model, _ = mm.hopper(cells=4, drilling=True)
    assert _scaled_null_space(model)[0].shape[1] == 0
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 0 and not report.condition.singular


# ------------------------------------------------ 2. a member spinning about its axis
def test_brace_released_at_both_ends_spins_about_its_own_axis():
    """Brace of 4 elements, rotations released at both posts: one mechanism
    (LAPACK: null space of dimension 1) on the 3 inner nodes, a rotation about
    the brace axis; no meeting nodes, since no two groups meet."""
    model, inner, axis = mm.braced_portal()
    N, weight = _scaled_null_space(model)
    assert N.shape[1] == 1
    report = diagnose(model, measure=False)
    (mode,) = report.spectrum.modes
    assert mode.kind == "mechanism"
    assert sorted(mode.nodes) == sorted(inner)
    carrying = set(np.flatnonzero(weight >= 1e-2 * weight.max()))
    assert sum(v in carrying for v in mode.nodes) >= 0.8 * len(mode.nodes)   # the 80%
    assert abs(abs(np.dot(mode.axis, axis)) - 1) < 1e-8
    assert mode.description.startswith("spin of a member about its own axis")
    assert mode.meeting == []
    (f,) = [f for f in report.findings if f.code == "support.mechanism"]
    assert f.nodes == sorted(inner) and "spin" in f.message and "meeting" not in f.message
    assert _positive_definite_after(model, report.restraints)


def test_brace_released_at_one_end_is_healthy():
    """Torsion held at one end: no mode (LAPACK: S has no null space)."""
    model, _, _ = mm.braced_portal(release_both_ends=False)
    assert _scaled_null_space(model)[0].shape[1] == 0
    report = diagnose(model, measure=False)
    assert report.spectrum.count == 0 and not report.condition.singular


def test_two_spinning_braces_are_two_local_mechanisms():
    """Two portals side by side, each with a brace released at both ends:
    the eigensolver's 2-dimensional null space is mixed; the sparsest basis
    gives one mechanism per brace, each on its own inner nodes only."""
    model, inner_a, inner_b = mm.two_braced_portals()
    N, _ = _scaled_null_space(model)
    assert N.shape[1] == 2
    report = diagnose(model, measure=False)
    located = sorted(sorted(m.nodes) for m in report.spectrum.modes)
    assert located == sorted([sorted(inner_a), sorted(inner_b)])
    assert all(m.description.startswith("spin") for m in report.spectrum.modes)
