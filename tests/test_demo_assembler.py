"""Checks of the demo assembler against closed forms, hand statics and scikit-fem."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from conditioning.demo.assemble import (
    Assembly,
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
from conditioning.model import DOF_NAMES

from fe_reference import quad_plate

E_STEEL = 210000.0  # MPa (N/mm^2)


def zero_eigenvalues(K, rtol: float = 1e-10) -> int:
    """Number of eigenvalues below rtol * lambda_max (numpy eigvalsh, LAPACK syevd)."""
    w = np.linalg.eigvalsh(K.toarray())
    return int(np.sum(np.abs(w) <= rtol * w[-1]))


def solve(asm: Assembly, fixed, loads) -> tuple[Assembly, np.ndarray]:
    red = apply_restraints(asm, fixed)
    f = load_vector(red.dofs, loads)
    return red, np.linalg.solve(red.K.toarray(), f)


def at(asm: Assembly, u: np.ndarray, node: int, name: str) -> float:
    return float(u[asm.rows([(node, name)])[0]])


# ------------------------------------------------------------------ 2D frame


@pytest.mark.parametrize("angle_deg", [0.0, 30.0, 90.0, 217.0])
def test_cantilever_tip_deflection_rotation_and_stretch(angle_deg):
    """Cantilever with a tip load: v = PL^3/(3EI), theta = PL^2/(2EI), u = PL/(EA).

    Classical Euler-Bernoulli closed forms (any mechanics of materials text,
    e.g. Gere and Goodno, *Mechanics of Materials*, table of cantilever
    deflections; from memory). Cubic beam elements reproduce them exactly at
    the nodes. The beam is inclined by ``angle_deg`` to exercise the
    local-to-global transformation.
    """
    L, P, A, I = 2400.0, 1500.0, 2850.0, 1.94e7          # mm, N, mm^2, mm^4
    n_el = 4
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    r = np.linspace(0.0, L, n_el + 1)
    nodes = np.arange(1, n_el + 2)
    xy = np.column_stack([r * c, r * s])
    members = np.column_stack([nodes[:-1], nodes[1:]])
    asm = frame2d(nodes, xy, members, E=E_STEEL, A=A, I=I)
    fixed = [(1, "ux"), (1, "uy"), (1, "rz")]
    tip = int(nodes[-1])

    # Transverse load, perpendicular to the axis (direction (-s, c)).
    red, u = solve(asm, fixed, {(tip, "ux"): -s * P, (tip, "uy"): c * P})
    v = -s * at(red, u, tip, "ux") + c * at(red, u, tip, "uy")
    assert v == pytest.approx(P * L**3 / (3 * E_STEEL * I), rel=1e-10)
    assert at(red, u, tip, "rz") == pytest.approx(P * L**2 / (2 * E_STEEL * I), rel=1e-10)

    # Axial load along the axis.
    red, u = solve(asm, fixed, {(tip, "ux"): c * P, (tip, "uy"): s * P})
    stretch = c * at(red, u, tip, "ux") + s * at(red, u, tip, "uy")
    assert stretch == pytest.approx(P * L / (E_STEEL * A), rel=1e-10)


def test_fixed_fixed_beam_midspan_load():
    """Beam clamped at both ends, central point load: v_mid = PL^3/(192 EI).

    Classical closed form (Roark's Formulas for Stress and Strain, table of
    beam deflections; from memory).
    """
    L, P, A, I = 6000.0, 20000.0, 5380.0, 8.36e7
    nodes = np.arange(1, 6)
    xy = np.column_stack([np.linspace(0, L, 5), np.zeros(5)])
    asm = frame2d(nodes, xy, np.column_stack([nodes[:-1], nodes[1:]]), E=E_STEEL, A=A, I=I)
    fixed = [(n, d) for n in (1, 5) for d in ("ux", "uy", "rz")]
    red, u = solve(asm, fixed, {(3, "uy"): -P})
    assert at(red, u, 3, "uy") == pytest.approx(-P * L**3 / (192 * E_STEEL * I), rel=1e-10)
    assert at(red, u, 3, "rz") == pytest.approx(0.0, abs=1e-14)


def test_free_frame_has_three_rigid_body_modes():
    """An unsupported plane frame has 3 zero-energy modes (2 translations, 1
    rotation; textbook fact, common practice)."""
    nodes = [1, 2, 3, 4]
    xy = [[0, 0], [0, 3000], [4000, 3000], [4000, 0]]
    asm = frame2d(nodes, xy, [[1, 2], [2, 3], [3, 4]], E=E_STEEL, A=5000.0, I=5e7)
    assert asm.n == 12
    assert zero_eigenvalues(asm.K) == 3


@settings(max_examples=15, deadline=None)
@given(st.floats(0.0, 2 * math.pi))
def test_frame_spectrum_is_invariant_under_rotation(theta):
    """Rotating the whole structure rotates K (K' = Q^T K Q) and keeps its
    eigenvalues (objectivity of the element; common practice)."""
    xy = np.array([[0.0, 0.0], [0.0, 3000.0], [4000.0, 3500.0], [4000.0, 0.0]])
    members = [[1, 2], [2, 3], [3, 4], [1, 3]]
    R = np.array([[math.cos(theta), -math.sin(theta)], [math.sin(theta), math.cos(theta)]])
    a = frame2d([1, 2, 3, 4], xy, members, E=E_STEEL, A=4000.0, I=3e7)
    b = frame2d([1, 2, 3, 4], xy @ R.T, members, E=E_STEEL, A=4000.0, I=3e7)
    wa = np.linalg.eigvalsh(a.K.toarray())
    wb = np.linalg.eigvalsh(b.K.toarray())
    np.testing.assert_allclose(wb, wa, rtol=0, atol=1e-12 * wa[-1])


# ------------------------------------------------------------------ trusses


def test_symmetric_two_bar_truss_against_hand_statics():
    """Two bars at angle theta to the horizontal meeting at a loaded apex.

    Method of joints: N = P / (2 sin theta) in each bar (compression); the
    apex deflection by virtual work is delta = P L / (2 E A sin^2 theta)
    (hand statics, e.g. Hibbeler, *Structural Analysis*; from memory).
    """
    theta, L, A, P = math.radians(35.0), 2500.0, 640.0, 18000.0
    half_span, rise = L * math.cos(theta), L * math.sin(theta)
    xy = [[0.0, 0.0], [half_span, rise], [2 * half_span, 0.0]]
    asm = truss2d([1, 2, 3], xy, [[1, 2], [3, 2]], E=E_STEEL, A=A)
    red, u = solve(asm, [(1, "ux"), (1, "uy"), (3, "ux"), (3, "uy")], {(2, "uy"): -P})
    assert at(red, u, 2, "uy") == pytest.approx(-P * L / (2 * E_STEEL * A * math.sin(theta)**2),
                                                rel=1e-12)
    assert at(red, u, 2, "ux") == pytest.approx(0.0, abs=1e-12)


def _bar_forces(xy, bars, u_nodes, E, A):
    """Axial force of each bar, N = EA/L d.(u_2 - u_1), from nodal displacements."""
    xy = np.asarray(xy, float)
    out = []
    for (i, j), EA in zip(bars, np.broadcast_to(E * np.asarray(A, float), (len(bars),))):
        d = xy[j] - xy[i]
        L = np.linalg.norm(d)
        out.append(EA / L * d @ (u_nodes[j] - u_nodes[i]) / L)
    return np.array(out)


def test_asymmetric_two_bar_truss_member_forces_by_method_of_joints():
    """Statically determinate, so the bar forces follow from equilibrium alone.

    Joint equilibrium at the apex: sum_i N_i d_i + P = 0 with d_i the unit
    vector from the apex along bar i (method of joints, hand statics).
    """
    xy = np.array([[0.0, 0.0], [1800.0, 1200.0], [3000.0, 0.0]])
    P = np.array([4000.0, -15000.0])
    A = np.array([500.0, 800.0])
    asm = truss2d([1, 2, 3], xy, [[1, 2], [2, 3]], E=E_STEEL, A=A)
    red, u = solve(asm, [(1, "ux"), (1, "uy"), (3, "ux"), (3, "uy")],
                   {(2, "ux"): P[0], (2, "uy"): P[1]})
    u_nodes = np.zeros((3, 2))
    u_nodes[1] = [at(red, u, 2, "ux"), at(red, u, 2, "uy")]
    N = _bar_forces(xy, [(0, 1), (1, 2)], u_nodes, E_STEEL, A)
    # Tension positive: a bar pulls the apex toward its other end.
    d1 = (xy[0] - xy[1]) / np.linalg.norm(xy[0] - xy[1])
    d2 = (xy[2] - xy[1]) / np.linalg.norm(xy[2] - xy[1])
    N_statics = np.linalg.solve(np.column_stack([d1, d2]), -P)
    np.testing.assert_allclose(N, N_statics, rtol=1e-10)


def test_tripod_member_forces_by_joint_equilibrium():
    """3D truss tripod: three bars from ground points to an apex, determinate.

    Apex equilibrium sum_i N_i d_i + P = 0 gives the three bar forces (hand
    statics); the assembled solution must reproduce them.
    """
    base = np.array([[0.0, 0.0, 0.0], [2000.0, 0.0, 0.0], [700.0, 1800.0, 0.0]])
    apex = np.array([900.0, 600.0, 2500.0])
    xyz = np.vstack([base, apex])
    A = np.array([400.0, 450.0, 520.0])
    P = np.array([1200.0, -800.0, -9000.0])
    asm = truss3d([1, 2, 3, 4], xyz, [[1, 4], [2, 4], [3, 4]], E=E_STEEL, A=A)
    fixed = [(n, d) for n in (1, 2, 3) for d in ("ux", "uy", "uz")]
    red, u = solve(asm, fixed, {(4, "ux"): P[0], (4, "uy"): P[1], (4, "uz"): P[2]})
    u_nodes = np.zeros((4, 3))
    u_nodes[3] = [at(red, u, 4, d) for d in ("ux", "uy", "uz")]
    N = _bar_forces(xyz, [(0, 3), (1, 3), (2, 3)], u_nodes, E_STEEL, A)
    dirs = (base - apex) / np.linalg.norm(base - apex, axis=1)[:, None]
    N_statics = np.linalg.solve(dirs.T, -P)
    np.testing.assert_allclose(N, N_statics, rtol=1e-10)


def test_free_tetrahedron_truss_has_six_rigid_body_modes():
    """A free tetrahedral space truss is rigid: exactly 6 zero-energy modes
    (3 translations, 3 rotations; textbook fact, common practice)."""
    xyz = [[0, 0, 0], [1000, 0, 0], [0, 1000, 0], [0, 0, 1000]]
    bars = [[1, 2], [1, 3], [1, 4], [2, 3], [2, 4], [3, 4]]
    asm = truss3d([1, 2, 3, 4], xyz, bars, E=E_STEEL, A=300.0)
    assert zero_eigenvalues(asm.K) == 6


# ------------------------------------------------------------------ plane stress quad


def _distorted_mesh(nx=4, ny=3, Lx=80.0, Ly=40.0, seed=7):
    """Structured quad mesh with interior nodes moved (non-parallelogram elements)."""
    rng = np.random.default_rng(seed)
    X, Y = np.meshgrid(np.linspace(0, Lx, nx + 1), np.linspace(0, Ly, ny + 1), indexing="ij")
    interior = (X > 0) & (X < Lx) & (Y > 0) & (Y < Ly)
    X = X + interior * rng.uniform(-0.2, 0.2, X.shape) * Lx / nx
    Y = Y + interior * rng.uniform(-0.2, 0.2, Y.shape) * Ly / ny
    p = np.vstack([X.ravel(), Y.ravel()])
    idx = np.arange((nx + 1) * (ny + 1)).reshape(nx + 1, ny + 1)
    t = np.vstack([idx[:-1, :-1].ravel(), idx[1:, :-1].ravel(),
                   idx[1:, 1:].ravel(), idx[:-1, 1:].ravel()])      # counter-clockwise
    return p, t


def _as_dense_in_order(K, node, dof, order_node, order_dof):
    key = node.astype(np.int64) * 8 + dof
    want = order_node.astype(np.int64) * 8 + order_dof
    perm = np.argsort(key)[np.searchsorted(np.sort(key), want)]
    return K.toarray()[np.ix_(perm, perm)]


def test_quad_matches_scikit_fem_on_distorted_mesh():
    """Same mesh, same material: the demo quad and scikit-fem's
    ElementVector(ElementQuad1) with the 2 x 2 Gauss rule (intorder=3) and
    the plane-stress Lame parameters give the same stiffness matrix."""
    p, t = _distorted_mesh()
    E, nu, thick = 70000.0, 0.33, 3.0
    ref = quad_plate(p, t, E=E, nu=nu, thickness=thick)
    nodes = np.arange(p.shape[1]) + 1
    asm = plane_stress_quad(nodes, p.T, t.T + 1, E=E, nu=nu, t=thick)
    ours = asm.K.toarray()
    theirs = _as_dense_in_order(ref.K, ref.dofs.node, ref.dofs.dof, asm.dofs.node, asm.dofs.dof)
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-12 * np.abs(theirs).max())
    assert zero_eigenvalues(asm.K) == 3


def test_quad_rejects_clockwise_element():
    with pytest.raises(ValueError, match="counter-clockwise"):
        plane_stress_quad([1, 2, 3, 4], [[0, 0], [1, 0], [1, 1], [0, 1]], [[1, 4, 3, 2]],
                          E=1.0, nu=0.3, t=1.0)


def test_quad_patch_uniform_stretch():
    """Patch test: a uniform stress sigma_xx = q on a distorted mesh gives the
    exact uniform strain u_x = q x / E, u_y = -nu q y / E (Irons' patch test;
    from memory, as described in Cook et al.)."""
    p, t = _distorted_mesh(nx=3, ny=3, Lx=60.0, Ly=60.0, seed=3)
    E, nu, thick, q = 200000.0, 0.3, 2.0, 50.0
    nodes = np.arange(p.shape[1]) + 1
    asm = plane_stress_quad(nodes, p.T, t.T + 1, E=E, nu=nu, t=thick)
    x, y = p
    left = nodes[np.isclose(x, 0.0)]
    right = nodes[np.isclose(x, 60.0)]
    bottom_left = int(nodes[np.isclose(x, 0.0) & np.isclose(y, 0.0)][0])
    fixed = [(int(n), "ux") for n in left] + [(bottom_left, "uy")]
    # Consistent nodal forces of a uniform traction q on the right edge (equal segments).
    ry = np.sort(y[np.isclose(x, 60.0)])
    h = np.diff(ry)
    share = np.zeros(ry.size)
    share[:-1] += h / 2
    share[1:] += h / 2
    order = np.argsort(y[np.isclose(x, 60.0)])
    loads = {(int(n), "ux"): q * thick * share[k] for k, n in enumerate(right[order])}
    red, u = solve(asm, fixed, loads)
    for n, xi, yi in zip(nodes, x, y):
        if (int(n), "ux") not in fixed:
            assert at(red, u, int(n), "ux") == pytest.approx(q * xi / E, abs=1e-12)
        if int(n) != bottom_left:
            assert at(red, u, int(n), "uy") == pytest.approx(-nu * q * yi / E, abs=1e-12)


# ------------------------------------------------------------------ springs, restraints, loads


def _bar():
    return truss2d([1, 2], [[0, 0], [1000, 0]], [[1, 2]], E=E_STEEL, A=100.0)


def test_spring_and_ground_spring_entries():
    base = _bar()
    k = 1234.5
    s = spring(base, (1, "uy"), (2, "uy"), k)
    diff = (s.K - base.K).toarray()
    r1, r2 = s.rows([(1, "uy"), (2, "uy")])
    expected = np.zeros_like(diff)
    expected[r1, r1] = expected[r2, r2] = k
    expected[r1, r2] = expected[r2, r1] = -k
    np.testing.assert_array_equal(diff, expected)
    g = ground_spring(base, (2, "uy"), k)
    assert (g.K - base.K).toarray()[r2, r2] == k
    with pytest.raises(ValueError, match="no rz"):
        ground_spring(base, (2, "rz"), k)


def test_restraints_remove_rows_and_columns():
    asm = frame2d([1, 2, 3], [[0, 0], [0, 3000], [4000, 3000]], [[1, 2], [2, 3]],
                  E=E_STEEL, A=5000.0, I=5e7)
    red = apply_restraints(asm, [(1, "ux"), (1, "uy"), (3, "uy"), (1, "ux")])
    keep = [i for i in range(asm.n) if asm.dofs.label(i) not in
            ("node 1 ux", "node 1 uy", "node 3 uy")]
    np.testing.assert_array_equal(red.K.toarray(), asm.K.toarray()[np.ix_(keep, keep)])
    assert [red.dofs.label(i) for i in range(red.n)] == [asm.dofs.label(i) for i in keep]
    assert zero_eigenvalues(red.K) == 0


def test_load_vector_and_combine():
    frame = frame2d([1, 2], [[0, 0], [1000, 0]], [[1, 2]], E=E_STEEL, A=100.0, I=1e5)
    tie = truss2d([2, 3], [[1000, 0], [1000, 800]], [[2, 3]], E=E_STEEL, A=50.0)
    both = combine(frame, tie)
    labels = [both.dofs.label(i) for i in range(both.n)]
    assert labels == ["node 1 ux", "node 1 uy", "node 1 rz", "node 2 ux", "node 2 uy",
                      "node 2 rz", "node 3 ux", "node 3 uy"]
    dense = both.K.toarray()
    for part in (frame, tie):
        idx = both.rows((int(n), DOF_NAMES[int(d)]) for n, d in zip(part.dofs.node, part.dofs.dof))
        sub = np.zeros_like(dense)
        sub[np.ix_(idx, idx)] = part.K.toarray()
        dense = dense - sub
    assert np.abs(dense).max() == 0.0
    f = load_vector(both.dofs, {(3, "uy"): -10.0, (2, "rz"): 5.0e3})
    assert f[both.rows([(3, "uy")])[0]] == -10.0 and f[both.rows([(2, "rz")])[0]] == 5.0e3
    assert np.count_nonzero(f) == 2


def test_matrices_are_exactly_symmetric_without_explicit_zeros():
    asm = frame2d([1, 2, 3, 4], [[0, 0], [1000, 0], [1000, 1000], [0, 1300]],
                  [[1, 2], [2, 3], [3, 4], [4, 1], [1, 3]], E=E_STEEL, A=1000.0, I=1e6)
    K = asm.K
    assert isinstance(K, sp.csr_array)
    assert (K != K.T).nnz == 0
    assert np.all(K.data != 0)


# ------------------------------------------------------------------ 3D frame


def _unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


@pytest.mark.parametrize("axis", [(1.0, 0.0, 0.0), (0.0, 0.0, 1.0), (2.0, -1.0, 1.5)])
def test_space_cantilever_bending_torsion_and_stretch(axis):
    """Cantilever along ``axis``: tip deflections PL^3/(3EI_z) along local y and
    PL^3/(3EI_y) along local z, twist TL/(GJ), stretch PL/(EA) (classical
    Euler-Bernoulli and Saint-Venant torsion closed forms, e.g. Gere and
    Goodno, *Mechanics of Materials*; from memory)."""
    L, A, Iy, Iz, J = 3000.0, 1500.0, 2.2e6, 7.9e6, 1.1e5
    G = E_STEEL / (2 * 1.3)
    e1 = _unit(axis)
    v = np.array([0.0, 0.0, 1.0]) if abs(e1[2]) < 1 - 1e-6 else np.array([1.0, 0.0, 0.0])
    e2 = _unit(v - (v @ e1) * e1)
    e3 = np.cross(e1, e2)
    n_el = 3
    nodes = np.arange(1, n_el + 2)
    xyz = np.linspace(0.0, L, n_el + 1)[:, None] * e1
    asm = frame3d(nodes, xyz, np.column_stack([nodes[:-1], nodes[1:]]),
                   E=E_STEEL, G=G, A=A, Iy=Iy, Iz=Iz, J=J)
    fixed = [(1, d) for d in DOF_NAMES]
    tip = int(nodes[-1])
    P, T = 900.0, 2.0e5
    translations, rotations = ("ux", "uy", "uz"), ("rx", "ry", "rz")

    def tip_response(force, moment):
        loads = {(tip, d): f for d, f in zip(translations, force)}
        loads.update({(tip, d): m for d, m in zip(rotations, moment)})
        red, u = solve(asm, fixed, loads)
        return (np.array([at(red, u, tip, d) for d in translations]),
                np.array([at(red, u, tip, d) for d in rotations]))

    disp, _ = tip_response(P * e2, np.zeros(3))
    assert disp @ e2 == pytest.approx(P * L**3 / (3 * E_STEEL * Iz), rel=1e-10)
    disp, _ = tip_response(P * e3, np.zeros(3))
    assert disp @ e3 == pytest.approx(P * L**3 / (3 * E_STEEL * Iy), rel=1e-10)
    _, rot = tip_response(np.zeros(3), T * e1)
    assert rot @ e1 == pytest.approx(T * L / (G * J), rel=1e-10)
    disp, _ = tip_response(P * e1, np.zeros(3))
    assert disp @ e1 == pytest.approx(P * L / (E_STEEL * A), rel=1e-10)


def test_space_frame_in_a_plane_reduces_to_the_plane_frame():
    """A frame lying in the XY plane: the (ux, uy, rz) rows of the space frame
    equal the plane frame with I = I_y (with the reference vector global Z,
    in-plane bending is about the local y axis)."""
    nodes = [1, 2, 3, 4]
    xy = np.array([[0.0, 0.0], [0.0, 3000.0], [4000.0, 3500.0], [4500.0, 0.0]])
    members = [[1, 2], [2, 3], [3, 4], [1, 3]]
    plane = frame2d(nodes, xy, members, E=E_STEEL, A=4000.0, I=3e7)
    space = frame3d(nodes, np.column_stack([xy, np.zeros(4)]), members, E=E_STEEL,
                     G=8.1e4, A=4000.0, Iy=3e7, Iz=1e7, J=2e5)
    idx = space.rows((int(n), DOF_NAMES[int(d)]) for n, d in zip(plane.dofs.node, plane.dofs.dof))
    np.testing.assert_allclose(space.K.toarray()[np.ix_(idx, idx)], plane.K.toarray(),
                               rtol=0, atol=1e-9 * abs(plane.K).max())


def test_free_space_frame_has_six_rigid_body_modes():
    """An unsupported space frame has 6 zero-energy modes (textbook fact,
    common practice)."""
    xyz = [[0, 0, 0], [0, 0, 3000], [4000, 0, 3000], [4000, 2500, 3000], [4000, 2500, 0]]
    asm = frame3d([1, 2, 3, 4, 5], xyz, [[1, 2], [2, 3], [3, 4], [4, 5]], E=E_STEEL,
                   G=8.1e4, A=3000.0, Iy=1e7, Iz=2e7, J=5e5)
    assert asm.n == 30
    assert zero_eigenvalues(asm.K) == 6


# ------------------------------------------------------------------ rigid motions, any geometry


def _rigid_field(asm: Assembly, xyz: np.ndarray, nodes, t: np.ndarray, w: np.ndarray):
    """Nodal vector of the rigid motion u = t + w x r, rotations = w (small angles)."""
    pos = np.searchsorted(np.asarray(nodes), asm.dofs.node)
    r = xyz[pos]
    u = t[None, :] + np.cross(w[None, :], r)
    full = np.concatenate([u, np.broadcast_to(w, u.shape)], axis=1)     # ux uy uz rx ry rz
    return full[np.arange(asm.n), asm.dofs.dof.astype(int)]


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_rigid_motions_cost_no_energy(seed):
    """K r = 0 for every rigid translation and infinitesimal rotation r, for
    every element type on random geometry (a rigid motion strains nothing;
    common practice, the basis of the rigid-body-mode count)."""
    rng = np.random.default_rng(seed)
    m = 6
    nodes = np.arange(10, 10 + m)
    xyz = rng.uniform(-2000.0, 2000.0, (m, 3))
    bars = np.column_stack([nodes[:-1], nodes[1:]])
    bars = np.vstack([bars, [[nodes[0], nodes[-1]], [nodes[1], nodes[4]]]])
    plane = xyz.copy()
    plane[:, 2] = 0.0
    # A convex quad mesh: two squares with jittered corners.
    qxy = np.array([[0, 0], [1, 0], [2, 0], [0, 1], [1, 1], [2, 1]], float) * 500.0
    qxy += rng.uniform(-100.0, 100.0, qxy.shape)
    qnodes = np.arange(1, 7)
    qxyz = np.column_stack([qxy, np.zeros(6)])
    cases = [
        (truss2d(nodes, plane[:, :2], bars, E=E_STEEL, A=300.0), plane, nodes, True),
        (frame2d(nodes, plane[:, :2], bars, E=E_STEEL, A=300.0, I=4e6), plane, nodes, True),
        (plane_stress_quad(qnodes, qxy, [[1, 2, 5, 4], [2, 3, 6, 5]], E=E_STEEL, nu=0.3, t=5.0),
         qxyz, qnodes, True),
        (truss3d(nodes, xyz, bars, E=E_STEEL, A=300.0), xyz, nodes, False),
        (frame3d(nodes, xyz, bars, E=E_STEEL, G=8.1e4, A=300.0, Iy=2e6, Iz=5e6, J=1e5),
         xyz, nodes, False),
    ]
    for asm, coords, ids, in_plane in cases:
        t = rng.normal(size=3)
        w = rng.normal(size=3) * 1e-3
        if in_plane:
            t[2] = 0.0
            w[:2] = 0.0
        r = _rigid_field(asm, coords, ids, t, w)
        scale = abs(asm.K).max() * np.abs(r).max()
        assert np.abs(asm.K @ r).max() <= 1e-10 * scale
