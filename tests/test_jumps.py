"""Stiffness jumps: penalty links found with their digit cost; units are not jumps.

Outside references: closed forms of spring chains, LAPACK (numpy.linalg.cond,
numpy.linalg.eigvalsh) for condition numbers and rigid-body mode counts, and
the textbook 2D frame element below.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

from conditioning.stages.jumps import find_stiffness_jumps
from conditioning.model import Coordinates, DofTable, Model

# ----------------------------------------------------------------- models


def frame_2d(xy, members, *, E, A, I):
    """Assemble a plane frame of Euler-Bernoulli beam members (ux, uy, rz per node).

    The member stiffness in local axes is the classical 6 x 6 beam-column
    matrix (axial EA/L; bending 12EI/L^3, 6EI/L^2, 4EI/L, 2EI/L), rotated by
    T = [[c, s, 0], [-s, c, 0], [0, 0, 1]] per node (J. S. Przemieniecki,
    "Theory of Matrix Structural Analysis", McGraw-Hill 1968; from memory).
    Rows: 3*i + (0, 1, 2) for node i; node ids are i + 1.
    Returns a Model with DOF map and coordinates.
    """
    xy = np.asarray(xy, dtype=float)
    nn = xy.shape[0]
    rows, cols, vals = [], [], []
    for a, b in members:
        dx, dy = xy[b] - xy[a]
        L = math.hypot(dx, dy)
        c, s = dx / L, dy / L
        ea, k1, k2, k3, k4 = E * A / L, 12 * E * I / L**3, 6 * E * I / L**2, 4 * E * I / L, 2 * E * I / L
        kl = np.array([
            [ea, 0, 0, -ea, 0, 0],
            [0, k1, k2, 0, -k1, k2],
            [0, k2, k3, 0, -k2, k4],
            [-ea, 0, 0, ea, 0, 0],
            [0, -k1, -k2, 0, k1, -k2],
            [0, k2, k4, 0, -k2, k3],
        ])
        t = np.array([[c, s, 0], [-s, c, 0], [0, 0, 1.0]])
        T = np.zeros((6, 6))
        T[:3, :3] = T[3:, 3:] = t
        ke = T.T @ kl @ T
        dofs = np.r_[3 * a + np.arange(3), 3 * b + np.arange(3)]
        rows.append(np.repeat(dofs, 6))
        cols.append(np.tile(dofs, 6))
        vals.append(ke.ravel())
    K = sp.csr_array((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(3 * nn, 3 * nn))
    K.sum_duplicates()
    K.eliminate_zeros()
    table = DofTable(node=np.repeat(np.arange(1, nn + 1), 3).astype(np.int64),
                     dof=np.tile(np.array([0, 1, 5], dtype=np.int8), nn))
    coords = Coordinates(node=np.arange(1, nn + 1, dtype=np.int64),
                         xyz=np.c_[xy, np.zeros(nn)], dim=2)
    return Model(K, dofs=table, coords=coords)


def portal_frame_mm(bays: int = 3, storeys: int = 2, h: float = 3000.0, w: float = 5000.0, parts: int = 4):
    """A free plane frame in N and mm (steel, E = 210000 N/mm^2, an I-section
    with A = 5380 mm^2, I = 8.36e7 mm^4; invented scenario): columns and beams
    split into ``parts`` members each."""
    pts = {}

    def node(x, y):
        key = (round(x, 6), round(y, 6))
        return pts.setdefault(key, len(pts))

    members = []
    for level in range(storeys + 1):
        for bay in range(bays + 1):
            node(bay * w, level * h)
    for level in range(storeys):
        for bay in range(bays + 1):  # columns
            ids = [node(bay * w, level * h + k * h / parts) for k in range(parts + 1)]
            members += list(zip(ids[:-1], ids[1:]))
        for bay in range(bays):  # beams on top of the storey
            ids = [node(bay * w + k * w / parts, (level + 1) * h) for k in range(parts + 1)]
            members += list(zip(ids[:-1], ids[1:]))
    xy = np.array(sorted(pts, key=pts.get))
    return frame_2d(xy, members, E=210000.0, A=5380.0, I=8.36e7)


def fixed_free_chain(N: int, links=(), P: float = 0.0) -> Model:
    """N unit springs in a row, node 0 fixed (removed), nodes 1..N free (rows
    0..N-1, node ids 1..N); each (a, b) in ``links`` adds a spring P between
    rows a and b."""
    K = sp.csr_array(sp.diags_array([-np.ones(N - 1), np.r_[2 * np.ones(N - 1), 1.0], -np.ones(N - 1)],
                                    offsets=[-1, 0, 1], format="csr"))
    for a, b in links:
        K = K + sp.csr_array((P * np.array([1.0, 1.0, -1.0, -1.0]), ([a, b, a, b], [a, b, b, a])), shape=(N, N))
    table = DofTable(node=np.arange(1, N + 1, dtype=np.int64), dof=np.zeros(N, dtype=np.int8))
    return Model(sp.csr_array(K), dofs=table)


def scaled_dense(K) -> np.ndarray:
    A = K.toarray()
    s = 1.0 / np.sqrt(np.abs(np.diag(A)))
    return s[:, None] * A * s


def with_spring(model: Model, rows_a, rows_b, P: float) -> Model:
    """Add springs P between rows_a[k] and rows_b[k] (to ground when rows_b is None)."""
    K = model.K.tolil()
    for k, a in enumerate(rows_a):
        K[a, a] += P
        if rows_b is not None:
            b = rows_b[k]
            K[b, b] += P
            K[a, b] -= P
            K[b, a] -= P
    return Model(sp.csr_array(K), dofs=model.dofs, coords=model.coords)


# ------------------------------------------------------------------ tests


def test_penalty_tie_in_chain_costs_about_twelve_digits():
    """A tie of 1e12 times the unit spring stiffness between nodes 10 and 20 of
    a chain: the ratio to the typical diagonal (2, closed form) is 5e11, so
    digits_cost = log10(5e11) = 11.7, about 12. LAPACK check: the 2-norm
    condition of the scaled matrix (numpy.linalg.cond) is at least that
    ratio, so scaling indeed does not remove it."""
    P, N = 1e12, 40
    model = fixed_free_chain(N, links=[(9, 19)], P=P)
    jumps = find_stiffness_jumps(model)
    assert len(jumps) == 1
    jump = jumps[0]
    assert jump.kind == "coupling" and jump.nodes == [10, 20] and jump.rows == [9, 19]
    assert jump.ratio == pytest.approx(P / 2.0, rel=1e-9)
    assert jump.digits_cost == pytest.approx(math.log10(P / 2.0), rel=1e-9)
    assert abs(jump.digits_cost - 12.0) < 0.5
    assert math.log10(np.linalg.cond(scaled_dense(model.K))) >= jump.digits_cost


def test_advised_penalty_keeps_constraint_and_digits():
    """Replacing the 1e12 tie by the advised value: the tip displacement under
    a unit tip load stays within 1e-3 of the exactly tied chain (closed form:
    the tie shorts 10 springs, so u_tip = N - 10), and the scaled condition
    number (numpy.linalg.cond) grows by at most about 4 digits over the chain
    without the tie, as the common-practice rule says."""
    N = 40
    model = fixed_free_chain(N, links=[(9, 19)], P=1e12)
    advice = find_stiffness_jumps(model)[0].advice_value
    assert advice is not None and advice < 1e12
    advised = fixed_free_chain(N, links=[(9, 19)], P=advice)
    f = np.zeros(N)
    f[-1] = 1.0
    u_tip = np.linalg.solve(advised.K.toarray(), f)[-1]
    assert abs(u_tip - (N - 10)) / (N - 10) < 1e-3
    plain = fixed_free_chain(N)
    growth = math.log10(np.linalg.cond(scaled_dense(advised.K)) / np.linalg.cond(scaled_dense(plain.K)))
    assert growth <= 4.5
    again = find_stiffness_jumps(advised)
    assert all(j.digits_cost <= 4.5 and j.advice_value is None for j in again)


def test_free_frame_assembler_has_three_rigid_modes():
    """Check of the test's own frame assembler: an unsupported plane frame has
    3 zero-energy modes (textbook; LAPACK eigvalsh on the scaled matrix)."""
    model = portal_frame_mm(bays=1, storeys=1, parts=2)
    lam = np.linalg.eigvalsh(scaled_dense(model.K))
    assert np.count_nonzero(lam < 1e-10 * lam[-1]) == 3


def test_rotations_next_to_translations_are_not_jumps():
    """A plane frame in N and mm: rotation diagonals (N*mm/rad, ~1e10) sit
    orders of magnitude above translation diagonals (N/mm, ~1e4..1e5). That is
    units, not a jump: compared per DOF type, nothing is reported. The same
    matrix without a DOF map (one type) does show them, which is why the map
    matters."""
    model = portal_frame_mm()
    d = model.K.diagonal()
    assert math.log10(d.max() / d.min()) > 4  # the units do span decades
    assert find_stiffness_jumps(model) == []
    unmapped = find_stiffness_jumps(Model(model.K), min_digits=3.0)
    assert len(unmapped) > 0


def test_penalty_link_in_frame_found_between_its_nodes():
    """A link of 1e12 times the member axial stiffness EA/L in ux and uy
    between two nodes of the N-mm frame: one coupling jump naming both nodes,
    digits_cost near log10(1e12) (within the factor of the typical
    diagonal), and the frame's rotations still not reported."""
    model = portal_frame_mm()
    L = 3000.0 / 4
    P = 1e12 * 210000.0 * 5380.0 / L
    xyz = model.coords.xyz
    a = int(np.flatnonzero((xyz[:, 0] == 5000.0) & (xyz[:, 1] == 3000.0))[0])
    b = int(np.flatnonzero((xyz[:, 0] == 10000.0) & (xyz[:, 1] == 6000.0))[0])
    linked = with_spring(model, [3 * a, 3 * a + 1], [3 * b, 3 * b + 1], P)
    jumps = find_stiffness_jumps(linked)
    assert len(jumps) == 1
    jump = jumps[0]
    assert jump.kind == "coupling"
    assert jump.nodes == sorted([a + 1, b + 1])
    assert jump.rows == sorted([3 * a, 3 * a + 1, 3 * b, 3 * b + 1])
    assert 11.0 <= jump.digits_cost <= 12.5
    assert jump.advice_value is not None and jump.advice_value < P
    assert "1e3 to 1e4" in jump.reasoning


def test_spring_to_ground_is_a_diagonal_outlier():
    """A support given as a spring of 1e12 x EA/L to ground at one node: a
    diagonal outlier at that node, not a coupling; it costs no digits (see the
    next test for the LAPACK check) and no smaller value is advised."""
    model = portal_frame_mm()
    P = 1e12 * 210000.0 * 5380.0 / 750.0
    grounded = with_spring(model, [3 * 5], None, P)
    jumps = find_stiffness_jumps(grounded)
    assert [(j.kind, j.nodes, j.rows) for j in jumps] == [("diagonal-outlier", [6], [15])]
    assert jumps[0].digits_cost == 0.0 and jumps[0].advice_value is None


@pytest.mark.parametrize("factor", [1e12, 1e15])
def test_penalty_supports_cost_no_digits(factor):
    """Every DOF of the frame's base nodes held by a diagonal penalty `factor`
    times the largest diagonal (invented; how exporters keep restrained rows):
    one diagonal outlier per base node, each with digits_cost 0 and no smaller
    stiffness advised. Truth: numpy.linalg.cond (LAPACK SVD) of the scaled
    matrix with the penalties equals, to 1e-6 in digits, that of the frame
    with those rows removed (the exactly held frame), while the raw ratio is
    1e12 and more."""
    model = portal_frame_mm(bays=2, storeys=2, parts=2)
    base = np.flatnonzero(model.coords.xyz[:, 1] == 0.0)
    rows = np.sort(np.concatenate([3 * base, 3 * base + 1, 3 * base + 2]))
    P = factor * float(model.K.diagonal().max())
    held = with_spring(model, rows, None, P)
    jumps = find_stiffness_jumps(held)
    assert sorted(j.nodes[0] for j in jumps) == sorted(int(b) + 1 for b in base)
    assert all(j.kind == "diagonal-outlier" and j.ratio >= factor for j in jumps)
    keep = np.setdiff1d(np.arange(model.n), rows)
    removed = model.K.toarray()[np.ix_(keep, keep)]
    cost = math.log10(np.linalg.cond(scaled_dense(held.K)) / np.linalg.cond(scaled_dense(sp.csr_array(removed))))
    assert abs(cost) < 1e-6                                   # LAPACK: the penalties cost nothing
    assert all(j.digits_cost == 0.0 and j.advice_value is None for j in jumps)


def test_limit_keeps_the_largest():
    """Three ties of different stiffness, limit 2: the two stiffest, largest first."""
    N = 60
    model = fixed_free_chain(N)
    K = model.K
    for (a, b), P in zip([(5, 15), (20, 30), (40, 50)], [1e6, 1e12, 1e9]):
        K = with_spring(Model(K, dofs=model.dofs), [a], [b], P).K
    jumps = find_stiffness_jumps(Model(K, dofs=model.dofs), limit=2)
    assert [j.nodes for j in jumps] == [[21, 31], [41, 51]]


def test_vectorised_on_a_large_chain():
    """1,000,000 DOFs (a chain with one 1e12 tie): found in well under a few
    seconds because no Python loop runs over the entries."""
    import time

    N = 1_000_000
    model = fixed_free_chain(N)
    tie = sp.csr_array((1e12 * np.array([1.0, 1.0, -1.0, -1.0]),
                        ([1000, 2000, 1000, 2000], [1000, 2000, 2000, 1000])), shape=(N, N))
    model = Model(sp.csr_array(model.K + tie), dofs=model.dofs)
    t0 = time.perf_counter()
    jumps = find_stiffness_jumps(model)
    elapsed = time.perf_counter() - t0
    assert [j.nodes for j in jumps] == [[1001, 2001]]
    assert elapsed < 10.0


def test_docstring_example_runs():
    """The Examples section of the module's docstrings (a closed-form case) runs as a doctest."""
    import doctest

    import conditioning.stages.jumps

    result = doctest.testmod(conditioning.stages.jumps)
    assert result.attempted > 0 and result.failed == 0


def test_jump_names_its_part_when_the_model_has_several():
    """Two chains that do not touch, a 1e12 tie in the second: the jump's
    reasoning names the part holding it (labels from the structure stage,
    graph components by scipy.sparse.csgraph)."""
    from conditioning.stages.structure import check_structure

    a, b = fixed_free_chain(10), fixed_free_chain(12, links=[(2, 7)], P=1e12)
    K = sp.csr_array(sp.block_diag([a.K, b.K]))
    table = DofTable(np.r_[a.dofs.node, b.dofs.node + 100], np.r_[a.dofs.dof, b.dofs.dof])
    model = Model(K, dofs=table)
    structure = check_structure(model)
    assert structure.parts == 2
    jumps = find_stiffness_jumps(model, structure)
    assert [j.nodes for j in jumps] == [[103, 108]]
    part = int(structure.part_of_row[10 + 2]) + 1  # reports number parts from 1
    assert jumps[0].reasoning.startswith(f"Part {part}. The link between node 103 and node 108")
