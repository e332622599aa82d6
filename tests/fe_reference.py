"""Test-only reference stiffness matrices assembled by scikit-fem.

scikit-fem (https://github.com/kinnala/scikit-fem) is an independent,
general-purpose finite element library; we use it only in tests, as an
outside reference for the demo assembler and for the rigid-body-mode counts
of free solids. It assembles the linear elasticity bilinear form
a(u, v) = int sigma(u) : eps(v) dx (``skfem.models.elasticity``).

Each builder returns a :class:`FEReference`: K as a csr_array with full
symmetric storage, a :class:`conditioning.model.DofTable` and
:class:`conditioning.model.Coordinates` consistent with the rest of the
package. Node ids are scikit-fem vertex indices + 1; the row of component
c (0 = ux, 1 = uy, 2 = uz) of vertex i is ``basis.nodal_dofs[c, i]``.

Units: whatever E is given in (the tests use MPa and mm, so K is in N/mm).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

import skfem
from skfem.models.elasticity import lame_parameters, linear_elasticity, plane_stress

from conditioning.model import DOF_NAMES, Coordinates, DofTable


@dataclass(frozen=True)
class FEReference:
    """A scikit-fem stiffness matrix with its dof map.

    Attributes
    ----------
    K : (n, n) csr_array
        Stiffness matrix (force/length), full symmetric storage.
    dofs : DofTable
        Node id and component (ux, uy, uz) of each row.
    coords : Coordinates
        Vertex positions (z = 0 for 2D).
    rigid_body_modes : int
        Zero-energy modes the model must have (textbook: 3 for a free body in
        2D, 6 in 3D, per free body; minus one per independent restraint).
    """

    K: sp.csr_array
    dofs: DofTable
    coords: Coordinates
    rigid_body_modes: int


def _from_basis(basis: skfem.Basis, K, dim: int, bodies: int = 1) -> FEReference:
    mesh = basis.mesh
    nverts = mesh.p.shape[1]
    nodal = np.asarray(basis.nodal_dofs)                 # (dim, nverts): row of component c of vertex i
    n = basis.N
    node = np.empty(n, dtype=np.int64)
    dof = np.empty(n, dtype=np.int8)
    for c in range(dim):
        node[nodal[c]] = np.arange(nverts) + 1
        dof[nodal[c]] = DOF_NAMES.index(("ux", "uy", "uz")[c])
    xyz = np.zeros((nverts, 3))
    xyz[:, :dim] = mesh.p.T
    K = sp.csr_array(K)
    K = sp.csr_array(0.5 * (K + K.T))
    K.eliminate_zeros()
    rbm = (3 if dim == 2 else 6) * bodies
    return FEReference(K, DofTable(node, dof), Coordinates(np.arange(nverts) + 1, xyz, dim), rbm)


def solid_block(nx: int = 3, ny: int = 2, nz: int = 2, size=(30.0, 20.0, 20.0),
                E: float = 210000.0, nu: float = 0.3, origin=(0.0, 0.0, 0.0)) -> FEReference:
    """Free 3D solid block of trilinear hexahedra (6 rigid-body modes)."""
    axes = [np.linspace(o, o + s, k + 1) for o, s, k in zip(origin, size, (nx, ny, nz))]
    mesh = skfem.MeshHex.init_tensor(*axes)
    basis = skfem.Basis(mesh, skfem.ElementVector(skfem.ElementHex1()))
    K = linear_elasticity(*lame_parameters(E, nu)).assemble(basis)
    return _from_basis(basis, K, 3)


def quad_plate(p: NDArray[np.float64], t: NDArray[np.intp], *, E: float = 210000.0,
               nu: float = 0.3, thickness: float = 1.0, intorder: int = 3,
               plane: str = "stress") -> FEReference:
    """Bilinear quad plate on a given mesh, plane stress or plane strain (3 rigid-body modes).

    ``p`` is (2, m) vertex positions, ``t`` is (4, e) counter-clockwise vertex
    indices, as scikit-fem's MeshQuad takes them. ``intorder=3`` selects the
    2 x 2 Gauss rule.
    """
    mesh = skfem.MeshQuad(np.asarray(p, dtype=float), np.asarray(t))
    basis = skfem.Basis(mesh, skfem.ElementVector(skfem.ElementQuad1()), intorder=intorder)
    lame = {"stress": plane_stress, "strain": lame_parameters}[plane](E, nu)
    K = thickness * linear_elasticity(*lame).assemble(basis)
    return _from_basis(basis, K, 2)


def free_plate(nx: int = 4, ny: int = 2, size=(40.0, 20.0), E: float = 210000.0,
               nu: float = 0.3, thickness: float = 2.0, origin=(0.0, 0.0),
               plane: str = "stress") -> FEReference:
    """Free rectangular 2D plate, plane stress or strain (3 rigid-body modes)."""
    mesh = skfem.MeshQuad.init_tensor(np.linspace(origin[0], origin[0] + size[0], nx + 1),
                                      np.linspace(origin[1], origin[1] + size[1], ny + 1))
    return quad_plate(mesh.p, mesh.t, E=E, nu=nu, thickness=thickness, plane=plane)


def free_plate_strain() -> FEReference:
    """Free rectangular 2D slice in plane strain (3 rigid-body modes)."""
    return free_plate(plane="strain", nu=0.45)


def two_blocks(gap: float = 5.0) -> FEReference:
    """Two 3D blocks that share no node (12 rigid-body modes)."""
    a = solid_block()
    b = solid_block(origin=(30.0 + gap, 0.0, 0.0))
    return _stack(a, b)


def two_plates(gap: float = 5.0) -> FEReference:
    """Two 2D plates that share no node (6 rigid-body modes)."""
    a = free_plate()
    b = free_plate(origin=(40.0 + gap, 0.0))
    return _stack(a, b)


def _stack(a: FEReference, b: FEReference) -> FEReference:
    shift = int(a.coords.node.max())
    K = sp.csr_array(sp.block_diag([a.K, b.K], format="csr"))
    dofs = DofTable(np.concatenate([a.dofs.node, b.dofs.node + shift]),
                    np.concatenate([a.dofs.dof, b.dofs.dof]))
    coords = Coordinates(np.concatenate([a.coords.node, b.coords.node + shift]),
                         np.vstack([a.coords.xyz, b.coords.xyz]), a.coords.dim)
    return FEReference(K, dofs, coords, a.rigid_body_modes + b.rigid_body_modes)


def three_two_one_supports(ref: FEReference) -> list[tuple[int, str]]:
    """Minimal statically determinate supports ("3-2-1" in 3D, "2-1" in 2D).

    At the corner with the smallest x, y, z: all translations; at the corner
    furthest along x on the same edge: the translations normal to that edge;
    in 3D, at the corner furthest along y: uz. Removes every rigid-body mode
    of one body and nothing more (common practice).
    """
    xyz = ref.coords.xyz
    lo = xyz.min(axis=0)
    hi = xyz.max(axis=0)
    dim = ref.coords.dim

    def corner(target):
        return int(ref.coords.node[np.argmin(np.linalg.norm(xyz - target, axis=1))])

    a = corner(lo)
    b = corner(np.array([hi[0], lo[1], lo[2]]))
    if dim == 2:
        return [(a, "ux"), (a, "uy"), (b, "uy")]
    c = corner(np.array([lo[0], hi[1], lo[2]]))
    return [(a, "ux"), (a, "uy"), (a, "uz"), (b, "uy"), (b, "uz"), (c, "uz")]


def restrained(ref: FEReference, fixed: list[tuple[int, str]]) -> FEReference:
    """Remove the rows/columns of ``fixed`` (node, component) pairs.

    Each restraint removes one rigid-body mode when ``fixed`` is a subset of
    :func:`three_two_one_supports` (each of those is independent).
    """
    drop = np.zeros(len(ref.dofs), dtype=bool)
    for node, name in fixed:
        hit = (ref.dofs.node == node) & (ref.dofs.dof == DOF_NAMES.index(name))
        assert hit.sum() == 1, (node, name)
        drop |= hit
    keep = np.flatnonzero(~drop)
    return replace(ref, K=sp.csr_array(ref.K[keep][:, keep]), dofs=ref.dofs.take(keep),
                   rigid_body_modes=ref.rigid_body_modes - len(set(fixed)))
