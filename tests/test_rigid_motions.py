"""The shared kernels of the mode and restraint stages against outside references.

* The rigid-motion basis: a rigid motion strains nothing, so K R = 0 for K of
  an unsupported body assembled by scikit-fem (tests/fe_reference.py: a free
  3D block of hexahedra, a free 2D plate of quads), and span(R) is the null
  space LAPACK finds (scipy.linalg.null_space); for rotation DOFs, the demo
  assembler's space frame and a grid in the xy plane (uz, rx, ry only: the
  rigid motions of a plate are uz, rx and ry; common practice).
* Connected parts: the count scipy.sparse.csgraph finds on the graph of K.
* The orthonormal basis: scipy.linalg.orth's span and rank.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from scipy.sparse import csgraph

from conditioning.demo.assemble import frame3d, truss2d
from conditioning.linalg.orthonormal import orthonormal_basis
from conditioning.linalg.rigid_motions import rigid_motions
from conditioning.model import Model
from conditioning.stages.modes import part_rigid_motions
from conditioning.stages.structure import connected_parts

from fe_reference import free_plate, solid_block, two_blocks


def _basis_of(ref):
    rows = np.arange(ref.K.shape[0])
    return rigid_motions(ref.dofs.dof, ref.coords.lookup(ref.dofs.node[rows]), ref.dofs.node)


def _same_span(A, B) -> bool:
    """Largest sine of the principal angles between span(A) and span(B) is tiny."""
    return scipy.linalg.subspace_angles(A, B).max() < 1e-8


def test_free_solid_block_rigid_motions_cost_no_energy():
    """scikit-fem hexahedra: 6 rigid motions, K R = 0 to round-off, and
    span(R) = null(K) by LAPACK (a free 3D body has 6 zero-energy modes)."""
    ref = solid_block()
    rb = _basis_of(ref)
    assert rb.motions == ("ux", "uy", "uz", "rx", "ry", "rz")
    K = ref.K.toarray()
    assert np.abs(K @ rb.basis).max() <= 1e-12 * np.abs(K).max() * np.abs(rb.basis).max()
    null = scipy.linalg.null_space(K, rcond=1e-10)
    assert null.shape[1] == ref.rigid_body_modes == 6
    assert _same_span(rb.basis, null)


def test_free_plate_rigid_motions_cost_no_energy():
    """scikit-fem plane-stress quads: ux, uy, rz; K R = 0; span(R) = null(K)."""
    ref = free_plate()
    rb = _basis_of(ref)
    assert rb.motions == ("ux", "uy", "rz")
    K = ref.K.toarray()
    assert np.abs(K @ rb.basis).max() <= 1e-12 * np.abs(K).max() * np.abs(rb.basis).max()
    assert _same_span(rb.basis, scipy.linalg.null_space(K, rcond=1e-10))


def test_unit_rotation_moves_nodes_about_one_length_unit():
    """Default lever: the radius of gyration, so a unit rotation coefficient
    moves the nodes (rms) by one length unit, like a unit translation."""
    ref = solid_block()
    rb = _basis_of(ref)
    radians = rigid_motions(ref.dofs.dof, ref.coords.lookup(ref.dofs.node), ref.dofs.node, lever=1.0)
    np.testing.assert_allclose(rb.basis[:, 3:] * rb.radius, radians.basis[:, 3:], rtol=1e-14)
    np.testing.assert_allclose(rb.centroid, [15.0, 10.0, 10.0])


_SPACE = dict(E=2.1e5, G=8.1e4, A=3000.0, Iy=1e7, Iz=2e7, J=5e5)


def test_space_frame_with_rotation_dofs():
    """Demo space frame (ux..rz per node): the 6 rigid motions cost no energy."""
    xyz = np.array([[0, 0, 0], [0, 0, 3000], [4000, 0, 3000], [4000, 2500, 3000], [4000, 2500, 0]], float)
    asm = frame3d([1, 2, 3, 4, 5], xyz, [[1, 2], [2, 3], [3, 4], [4, 5]], **_SPACE)
    rb = rigid_motions(asm.dofs.dof, xyz[asm.dofs.node - 1], asm.dofs.node)
    K = asm.K.toarray()
    assert rb.basis.shape[1] == 6
    assert np.abs(K @ rb.basis).max() <= 1e-10 * np.abs(K).max() * np.abs(rb.basis).max()


def test_grid_in_plane_has_rigid_rotations_rx_ry():
    """A grid of beams in the xy plane with only its out-of-plane DOFs (uz,
    rx, ry) and 2D coordinates: its rigid motions are uz, rx and ry, all of
    zero energy (the null space LAPACK finds has dimension 3). The basis
    used to leave rx and ry out for 2D coordinates."""
    xyz = np.array([[0, 0, 0], [3000, 0, 0], [3000, 2000, 0], [0, 2000, 0]], float)
    asm = frame3d([1, 2, 3, 4], xyz, [[1, 2], [2, 3], [3, 4], [4, 1]], **_SPACE)
    keep = np.flatnonzero(np.isin(asm.dofs.dof, (2, 3, 4)))
    K = asm.K.toarray()[np.ix_(keep, keep)]
    assert np.abs(asm.K.toarray()[np.ix_(keep, np.setdiff1d(np.arange(asm.n), keep))]).max() == 0
    dof, node = asm.dofs.dof[keep], asm.dofs.node[keep]
    rb = rigid_motions(dof, xyz[node - 1], node)
    assert rb.motions == ("uz", "rx", "ry")
    assert np.abs(K @ rb.basis).max() <= 1e-10 * np.abs(K).max() * np.abs(rb.basis).max()
    assert _same_span(rb.basis, scipy.linalg.null_space(K, rcond=1e-10))


def test_part_rigid_motions_without_coordinates_or_map():
    """Without coordinates: translations only; without a DOF map: one uniform motion."""
    ref = free_plate()
    rows = np.arange(10)
    no_coords = Model(ref.K, dofs=ref.dofs)
    assert part_rigid_motions(no_coords, rows).motions == ("ux", "uy")
    bare = part_rigid_motions(Model(ref.K), rows)
    assert bare.motions == ("uniform",) and np.all(bare.basis == 1.0)


def test_connected_parts_match_csgraph():
    """Two scikit-fem blocks that do not touch: 2 parts, as csgraph finds on
    the graph of K; each part's rows are one block's."""
    ref = two_blocks()
    count, labels = connected_parts(ref.K, ref.dofs.node)
    assert count == csgraph.connected_components(ref.K, directed=False)[0] == 2
    half = ref.K.shape[0] // 2
    assert len(set(labels[:half])) == len(set(labels[half:])) == 1 and labels[0] != labels[-1]


def test_connected_parts_join_the_dofs_of_a_node():
    """An axis-aligned truss square with a diagonal-free bay: its ux and uy
    rows never couple, so the row graph has several components (csgraph),
    but the structure is one part once the rows of a node are joined."""
    xy = np.array([[0, 0], [1000, 0], [1000, 1000], [0, 1000]], float)
    asm = truss2d([1, 2, 3, 4], xy, [[1, 2], [2, 3], [3, 4], [4, 1]], E=2.1e5, A=100.0)
    assert csgraph.connected_components(asm.K, directed=False)[0] > 1
    assert connected_parts(asm.K, asm.dofs.node)[0] == 1


def test_orthonormal_basis_matches_scipy_orth():
    """Same span and rank as scipy.linalg.orth (LAPACK gesdd), dependent column dropped."""
    rng = np.random.default_rng(3)
    B = rng.standard_normal((20, 3))
    B = np.column_stack([B, B @ [1.0, -2.0, 0.5]])
    Q = orthonormal_basis(B)
    assert Q.shape == scipy.linalg.orth(B).shape == (20, 3)
    np.testing.assert_allclose(Q.T @ Q, np.eye(3), atol=1e-14)
    assert _same_span(Q, scipy.linalg.orth(B))
    assert orthonormal_basis(np.zeros((5, 2))).shape == (5, 0)
    assert orthonormal_basis(sp.csr_array((5, 0)).toarray()).shape == (5, 0)
