"""Structured stiffness models at any size, assembled without a loop per element.

Invented test structures (no real design): a square plate in plane stress
(bilinear quadrilaterals, 2 DOF per node) and a cube (trilinear hexahedra,
3 DOF per node), clamped on the face x = 0 and loaded by a shear traction on
the face x = L. The ``free`` variants restrain only ux on x = 0, which leaves
rigid-body modes: 1 in 2D (translation in y), 3 in 3D (translations in y and
z, rotation about x).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.io
import scipy.sparse as sp
from numpy.typing import NDArray

YOUNG = 210e9      # Pa (steel-like; invented)
POISSON = 0.3
THICKNESS = 0.01   # m, plane stress


@dataclass(frozen=True)
class GeneratedModel:
    """An assembled, restrained model with its context."""

    name: str
    K: sp.csr_array
    """Restrained stiffness matrix, N/m, full symmetric storage."""
    node: NDArray[np.int64]
    """1-based node id of each row."""
    dof: NDArray[np.int8]
    """Dof index (0 ux, 1 uy, 2 uz) of each row."""
    node_xyz: NDArray[np.float64]
    """(nodes, 3) positions of all nodes, m; node id k is row k-1."""
    load: NDArray[np.float64]
    """Nodal forces on the rows, N."""
    rigid_modes: int
    """Rigid-body modes the restraints leave free (0 when clamped)."""

    @property
    def coords(self) -> NDArray[np.float64]:
        """(n, 3) position of each row's node."""
        return self.node_xyz[self.node - 1]


def _gauss(order: int):
    g = 1.0 / np.sqrt(3.0)
    return np.array([-g, g]), np.ones(2)


def quad_stiffness(h: float, E: float = YOUNG, nu: float = POISSON, t: float = THICKNESS):
    """8 x 8 stiffness of a square bilinear plane-stress element of side h (2x2 Gauss)."""
    C = E / (1 - nu**2) * np.array([[1, nu, 0], [nu, 1, 0], [0, 0, (1 - nu) / 2]])
    xi_n = np.array([-1, 1, 1, -1])
    eta_n = np.array([-1, -1, 1, 1])
    pts, _ = _gauss(2)
    Ke = np.zeros((8, 8))
    J = h / 2
    for xi in pts:
        for eta in pts:
            dN = np.array([xi_n * (1 + eta * eta_n) / 4, eta_n * (1 + xi * xi_n) / 4]) / J
            B = np.zeros((3, 8))
            B[0, 0::2] = dN[0]
            B[1, 1::2] = dN[1]
            B[2, 0::2] = dN[1]
            B[2, 1::2] = dN[0]
            Ke += B.T @ C @ B * t * J * J
    return Ke


def hex_stiffness(h: float, E: float = YOUNG, nu: float = POISSON):
    """24 x 24 stiffness of a cube trilinear element of side h (2x2x2 Gauss)."""
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    C = np.zeros((6, 6))
    C[:3, :3] = lam
    C[np.arange(3), np.arange(3)] += 2 * mu
    C[np.arange(3, 6), np.arange(3, 6)] = mu
    sx = np.array([-1, 1, 1, -1, -1, 1, 1, -1])
    sy = np.array([-1, -1, 1, 1, -1, -1, 1, 1])
    sz = np.array([-1, -1, -1, -1, 1, 1, 1, 1])
    pts, _ = _gauss(2)
    J = h / 2
    Ke = np.zeros((24, 24))
    for a in pts:
        for b in pts:
            for c in pts:
                dN = np.array([sx * (1 + b * sy) * (1 + c * sz),
                               sy * (1 + a * sx) * (1 + c * sz),
                               sz * (1 + a * sx) * (1 + b * sy)]) / 8 / J
                B = np.zeros((6, 24))
                for k in range(3):
                    B[k, k::3] = dN[k]
                B[3, 0::3], B[3, 1::3] = dN[1], dN[0]
                B[4, 1::3], B[4, 2::3] = dN[2], dN[1]
                B[5, 0::3], B[5, 2::3] = dN[2], dN[0]
                Ke += B.T @ C @ B * J**3
    return Ke


def _assemble(conn: NDArray[np.int64], Ke, dpn: int, n_nodes: int) -> sp.csr_array:
    """Sum identical element matrices over the connectivity, vectorised."""
    dofs = (conn[:, :, None] * dpn + np.arange(dpn)).reshape(conn.shape[0], -1)
    k = dofs.shape[1]
    rows = np.repeat(dofs, k, axis=1).ravel()
    cols = np.tile(dofs, (1, k)).ravel()
    data = np.broadcast_to(Ke.ravel(), (conn.shape[0], k * k)).ravel()
    N = n_nodes * dpn
    return sp.coo_array((data, (rows, cols)), shape=(N, N)).tocsr()


def plate(n: int, *, free: bool = False) -> GeneratedModel:
    """Square plate of n x n plane-stress quads, side 1 m; 2 n (n + 1) rows when clamped."""
    h = 1.0 / n
    i, j = np.meshgrid(np.arange(n + 1), np.arange(n + 1), indexing="ij")
    nid = (i + j * (n + 1)).astype(np.int64)  # 0-based node index
    xyz = np.zeros(((n + 1) ** 2, 3))
    xyz[nid.ravel(), 0] = i.ravel() * h
    xyz[nid.ravel(), 1] = j.ravel() * h
    e0 = nid[:-1, :-1].ravel()
    conn = np.stack([e0, e0 + 1, e0 + 1 + (n + 1), e0 + (n + 1)], axis=1)
    K = _assemble(conn, quad_stiffness(h), 2, (n + 1) ** 2)
    f = np.zeros(K.shape[0])
    tip = nid[-1, :]
    f[2 * tip + 1] = -1e3 / (n + 1)  # total 1 kN shear on x = 1
    fixed_nodes = nid[0, :]
    fixed = np.concatenate([2 * fixed_nodes] if free else [2 * fixed_nodes, 2 * fixed_nodes + 1])
    return _restrain(f"plate2d-{n}{'-free' if free else ''}", K, f, fixed, 2, xyz, 1 if free else 0)


def cube(n: int, *, free: bool = False) -> GeneratedModel:
    """Cube of n^3 hexahedra, side 1 m; 3 n (n + 1)^2 rows when clamped."""
    h = 1.0 / n
    m = n + 1
    i, j, k = np.meshgrid(np.arange(m), np.arange(m), np.arange(m), indexing="ij")
    nid = (i + m * j + m * m * k).astype(np.int64)
    xyz = np.zeros((m**3, 3))
    xyz[nid.ravel()] = np.stack([i.ravel(), j.ravel(), k.ravel()], axis=1) * h
    e0 = nid[:-1, :-1, :-1].ravel()
    q = [e0, e0 + 1, e0 + 1 + m, e0 + m]
    conn = np.stack(q + [a + m * m for a in q], axis=1)
    K = _assemble(conn, hex_stiffness(h), 3, m**3)
    f = np.zeros(K.shape[0])
    tip = nid[-1].ravel()
    f[3 * tip + 2] = -1e3 / tip.size
    face = nid[0].ravel()
    fixed = 3 * face if free else np.concatenate([3 * face, 3 * face + 1, 3 * face + 2])
    return _restrain(f"cube3d-{n}{'-free' if free else ''}", K, f, fixed, 3, xyz, 3 if free else 0)


def _restrain(name, K, f, fixed, dpn, xyz, rigid) -> GeneratedModel:
    keep = np.setdiff1d(np.arange(K.shape[0]), fixed)
    Kr = sp.csr_array(K[keep][:, keep])
    Kr.sum_duplicates()
    Kr.eliminate_zeros()  # cancelled couplings, as a reader that drops zeros sees them
    return GeneratedModel(name=name, K=Kr, node=(keep // dpn + 1).astype(np.int64),
                          dof=(keep % dpn).astype(np.int8), node_xyz=xyz, load=f[keep],
                          rigid_modes=rigid)


def rows_of_plate(n: int) -> int:
    return 2 * n * (n + 1)


def rows_of_cube(n: int) -> int:
    return 3 * n * (n + 1) ** 2


def export(model: GeneratedModel, directory: Path) -> dict[str, Path]:
    """Write K (Matrix Market, symmetric), load (Matrix Market array), DOF map
    and node coordinates (CSV) into ``directory``; returns the paths."""
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    paths = {k: directory / f"{model.name}_{k}{ext}" for k, ext in
             (("K", ".mtx"), ("load", ".mtx"), ("dofs", ".csv"), ("coords", ".csv"))}
    scipy.io.mmwrite(paths["K"], sp.coo_array(model.K), symmetry="symmetric",
                     comment="invented benchmark model (conditioning benchmarks)")
    scipy.io.mmwrite(paths["load"], model.load.reshape(-1, 1))
    names = ("ux", "uy", "uz")
    with paths["dofs"].open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["row", "node", "dof"])
        w.writerows(zip(range(1, model.K.shape[0] + 1), model.node.tolist(),
                        [names[d] for d in model.dof.tolist()]))
    with paths["coords"].open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["node", "x", "y", "z"])
        ids = np.arange(1, model.node_xyz.shape[0] + 1)
        w.writerows(zip(ids.tolist(), *(model.node_xyz[:, c].tolist() for c in range(3))))
    return paths
