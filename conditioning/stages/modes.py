"""Near-singular modes located in the model: rigid-body, mechanism, or a DOF
without stiffness.

Input is the near-null basis found by :mod:`conditioning.stages.spectrum` (smallest
eigenvectors of the scaled matrix S). Within that basis:

1. Small eigenvalues of S that come from very stiff links (a penalty spring
   between two DOFs makes S nearly singular although K is not) are separated
   out by a second, per-dof-type scaling T (median diagonal of each dof type):
   a true near-null vector has a small Rayleigh quotient u'Ku / u'Tu too.
2. The remaining basis is split by connected part; on each part, the rigid
   motions (translations, rotations about the centroid) that lie in the null
   space are found by a small generalized eigenproblem, and the rest of the
   part's null space is a mechanism.
3. A mechanism is cut into groups of nodes that move rigidly together by
   fitting a rigid motion to each node's neighbourhood; nodes whose
   neighbourhood fits no single rigid motion are where the groups meet.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.model import DOF_NAMES, Model
from conditioning.results import NearSingularMode, StructureResult
from conditioning.linalg.rigid_motions import rigid_basis
from conditioning.stages.spectrum import MODE_THRESHOLD, Eigenpairs

logger = logging.getLogger(__name__)

#: A rigid motion lies in the null space when its relative residual after
#: projection on the null space is below this (1%).
RIGID_TOL = 1e-2
#: Above this many moving nodes a mechanism is located by its largest motions only.
MECHANISM_NODE_LIMIT = 20000
#: Unit vectors kept for at most this many DOFs without stiffness.
VECTORS_KEPT = 100
TRANSLATION_ORDER = ("ux", "uy", "uz", "uniform", "rx", "ry", "rz")


@dataclass(frozen=True)
class LocatedModes:
    """Near-singular modes with their kinds, and what was set aside.

    Attributes
    ----------
    modes : list of NearSingularMode
    basis : (n, m) float64
        The near-null space of the rows with stiffness, in K's DOFs (columns =
        mode vectors); DOFs without stiffness are not in it (each is its own
        null vector, e_i).
    stiff_link_eigenvalues : list of float
        Small eigenvalues of S explained by very stiff links (not modes).
    """

    modes: list[NearSingularMode]
    basis: NDArray[np.float64]
    stiff_link_eigenvalues: list[float]


def typical_stiffness(model: Model) -> NDArray[np.float64]:
    """Per row, the median |K_ii| of the row's dof type (over rows with stiffness)."""
    d = np.abs(model.K.diagonal())
    out = np.ones_like(d)
    types = model.dofs.dof if model.dofs is not None else np.zeros(d.size, dtype=np.int8)
    for t in np.unique(types):
        sel = types == t
        pos = d[sel & (d > 0)]
        out[sel] = float(np.median(pos)) if pos.size else 1.0
    return out


def _orth(A: NDArray, rtol: float = 1e-6) -> NDArray:
    if A.shape[1] == 0:
        return A
    U, s, _ = la.svd(A, full_matrices=False)
    r = int(np.count_nonzero(s > rtol * (s[0] if s.size else 0)))
    return U[:, :r]


def _rayleigh_scaled(K, u, d) -> float:
    """u'Ku / u'Du: the eigenvalue of S this vector stands for."""
    den = float(u @ (d * u))
    return float(u @ (K @ u)) / den if den > 0 else 0.0


def _node_adjacency(model: Model, rows: NDArray[np.intp]):
    """Node ids of the part and their adjacency (sparse, by shared stiffness)."""
    K = model.K[rows][:, rows].tocoo()
    nodes = model.dofs.node[rows]
    uniq, inv = np.unique(nodes, return_inverse=True)
    A = sp.coo_array((np.ones(K.nnz), (inv[K.row], inv[K.col])), shape=(uniq.size, uniq.size)).tocsr()
    A.setdiag(0)
    A.eliminate_zeros()
    return uniq, inv, A


def _mechanism_groups(model: Model, rows: NDArray[np.intp], u: NDArray) -> tuple[list[list[int]], list[int]]:
    """Groups of nodes moving rigidly together, and the nodes where they meet."""
    coords = model.coords
    uniq, inv, A = _node_adjacency(model, rows)
    dim = coords.dim
    X = coords.lookup(uniq)[:, :dim]
    dof = model.dofs.dof[rows]
    U = np.zeros((uniq.size, dim))
    for t in range(dim):
        sel = dof == t
        U[inv[sel], t] = u[sel]
    scale = float(np.max(np.abs(U))) or 1.0
    moving = np.linalg.norm(U, axis=1) > 1e-6 * scale
    if uniq.size > MECHANISM_NODE_LIMIT:
        top = np.argsort(-np.linalg.norm(U, axis=1))[:10]
        return [], [int(uniq[i]) for i in top]
    nrot = 1 if dim == 2 else 3
    params = np.zeros((uniq.size, dim + nrot))
    rigid = np.ones(uniq.size, dtype=bool)
    indptr, indices = A.indptr, A.indices
    for a in range(uniq.size):
        nb = np.concatenate(([a], indices[indptr[a]:indptr[a + 1]]))
        r = X[nb] - X[a]
        # Rows: u_b = t + w x r_b ; 2D: w x r = (-w r_y, w r_x)
        if dim == 2:
            M = np.zeros((2 * nb.size, 3))
            M[0::2, 0] = 1
            M[1::2, 1] = 1
            M[0::2, 2] = -r[:, 1]
            M[1::2, 2] = r[:, 0]
        else:
            M = np.zeros((3 * nb.size, 6))
            for c in range(3):
                M[c::3, c] = 1
            M[0::3, 4], M[0::3, 5] = r[:, 2], -r[:, 1]
            M[1::3, 3], M[1::3, 5] = -r[:, 2], r[:, 0]
            M[2::3, 3], M[2::3, 4] = r[:, 1], -r[:, 0]
        y = U[nb].reshape(-1)
        p, *_ = np.linalg.lstsq(M, y, rcond=None)
        params[a] = p
        rigid[a] = np.linalg.norm(M @ p - y) <= 1e-3 * scale * np.sqrt(nb.size)
    # Join neighbouring rigid nodes whose fitted rigid motions agree.
    coo = sp.triu(A).tocoo()
    a, b = coo.row, coo.col
    keep = rigid[a] & rigid[b]
    a, b = a[keep], b[keep]
    same_w = np.linalg.norm(params[a, dim:] - params[b, dim:], axis=1) <= 1e-3 * scale / max(np.ptp(X, axis=0).max(), 1e-300)
    pred_b = params[a, :dim] + (
        np.stack([-params[a, dim] * (X[b, 1] - X[a, 1]), params[a, dim] * (X[b, 0] - X[a, 0])], axis=1)
        if dim == 2 else np.cross(params[a, dim:], X[b] - X[a]))
    same_t = np.linalg.norm(pred_b - params[b, :dim], axis=1) <= 1e-3 * scale
    ok = same_w & same_t
    G = sp.coo_array((np.ones(int(ok.sum())), (a[ok], b[ok])), shape=A.shape)
    from scipy.sparse import csgraph

    ncomp, lab = csgraph.connected_components(G, directed=False)
    groups = []
    for c in range(ncomp):
        members = np.flatnonzero((lab == c) & rigid)
        if members.size >= 2 or (members.size == 1 and moving[members[0]]):
            groups.append([int(v) for v in uniq[members]])
    groups.sort(key=len, reverse=True)
    meeting = [int(v) for v in uniq[~rigid]]
    return groups, meeting


def _canonical_rigid(R: NDArray, names: tuple[str, ...], coeff_basis: NDArray) -> list[NDArray]:
    """Coefficient vectors of rigid motions in span(coeff_basis), pure motions first."""
    P = coeff_basis @ coeff_basis.T
    chosen: list[NDArray] = []
    order = sorted(range(len(names)), key=lambda j: TRANSLATION_ORDER.index(names[j]))
    for j in order:
        if len(chosen) == coeff_basis.shape[1]:
            break
        c = P[:, j].copy()
        if np.linalg.norm(c) < 0.3:
            continue
        resid = c.copy()
        for q in chosen:
            resid -= (q @ resid) / (q @ q) * q
        if np.linalg.norm(resid) >= 0.3 * np.linalg.norm(c):
            chosen.append(c)
    return chosen


def locate_modes(model: Model, structure: StructureResult, scale: NDArray[np.float64],
                 active: NDArray[np.bool_], spectrum: Eigenpairs) -> LocatedModes:
    """Classify and locate the near-singular modes.

    Parameters
    ----------
    model : Model
    structure : StructureResult
    scale : (n,) float64
        s with S = diag(s) K diag(s) (the shared factorization's).
    active : (n,) bool
        Rows the spectrum was computed on.
    spectrum : Eigenpairs

    Returns
    -------
    LocatedModes
    """
    K = model.K
    n = model.n
    d = np.abs(K.diagonal())
    lam_max = spectrum.lambda_max
    # Zero at working precision, with a little room for the Rayleigh quotient's own error.
    zero = 10 * spectrum.zero_level
    modes: list[NearSingularMode] = []
    columns: list[NDArray] = []
    # DOFs without stiffness: each is its own mode (a unit vector). Their
    # vectors are kept for the first few only: there may be very many.
    for k, row in enumerate(structure.empty_rows):
        e = None
        if k < VECTORS_KEPT:
            e = np.zeros(n)
            e[row] = 1.0
        name = model.dofs.dof_name(row) if model.dofs is not None else "uniform"
        modes.append(NearSingularMode(0.0, 0.0, "dof-without-stiffness", {name: 1.0},
                                      model.nodes_of([row]), int(structure.part_of_row[row]) + 1, float("nan"),
                                      [], e))
    idx = np.flatnonzero(active)
    V = spectrum.vectors[:, spectrum.first:spectrum.first + spectrum.count]
    W = np.zeros((n, V.shape[1]))
    W[idx] = scale[idx, None] * V
    stiff_links: list[float] = []
    if W.shape[1]:
        # (1) separate stiff-link eigenvalues with the per-type scaling T.
        T = typical_stiffness(model)
        Kw = W.T @ (K @ W)
        Tw = W.T @ (T[:, None] * W)
        q, Y = la.eigh((Kw + Kw.T) / 2, (Tw + Tw.T) / 2)
        genuine = q <= MODE_THRESHOLD * lam_max
        for j in np.flatnonzero(~genuine):
            stiff_links.append(_rayleigh_scaled(K, W @ Y[:, j], d))
        Wg = W @ Y[:, genuine]
        # Orthonormal basis in the scaled coordinates v = D^1/2 u, where the
        # null spaces of separate parts are exactly orthogonal.
        sq = np.sqrt(np.where(d > 0, d, 1.0))
        Vg = la.qr(sq[:, None] * Wg, mode="economic")[0] if Wg.shape[1] else Wg
        # (2) split by part: a part's share of the basis has singular values near 1.
        parts = structure.part_of_row
        for p in np.unique(parts[np.sum(Vg**2, axis=1) > 1e-12]):
            rows = np.flatnonzero(parts == p)
            Uv, sv, _ = la.svd(Vg[rows], full_matrices=False)
            Bv = Uv[:, sv > 0.5]
            if Bv.shape[1] == 0:
                continue
            B = _orth(Bv / sq[rows, None])
            rb = rigid_basis(model, rows)
            R = rb.basis
            found_rigid: list[NDArray] = []
            if R.shape[1]:
                # Rigid combinations c with R c in span(B): small singular values
                # of the projection residual, in an orthonormal basis of span(R).
                Ur, sr, Vrt = la.svd(R, full_matrices=False)
                keep = sr > 1e-10 * sr[0]
                Ur, sr, Vrt = Ur[:, keep], sr[keep], Vrt[keep]
                E = Ur - B @ (B.T @ Ur)
                _, se, Zt = la.svd(E, full_matrices=False)
                inside_o = Zt[se <= RIGID_TOL].T
                if inside_o.shape[1]:
                    coeff = Vrt.T @ (inside_o / sr[:, None])
                    Cn = la.orth(coeff)
                    for c in _canonical_rigid(R, rb.motions, Cn):
                        found_rigid.append(c)
            node_list = model.nodes_of(rows)
            rigid_vecs = []
            for c in found_rigid:
                u_part = R @ c
                u = np.zeros(n)
                u[rows] = u_part
                share = c**2 / np.sum(c**2)
                motion = {name: float(v) for name, v in zip(rb.motions, share) if v > 1e-6}
                lam = _rayleigh_scaled(K, u, d)
                modes.append(NearSingularMode(lam, lam / lam_max, "rigid-body", motion, node_list, int(p) + 1,
                                              1.0, [], u / np.max(np.abs(u)), exact=abs(lam) <= zero))
                columns.append(u)
                rigid_vecs.append(u_part)
            # (3) what is left of the part's null space is a mechanism.
            if rigid_vecs:
                Q = _orth(np.column_stack(rigid_vecs))
                Ur2, sr2, _ = la.svd(B - Q @ (Q.T @ B), full_matrices=False)
                rest = Ur2[:, sr2 > 1e-3]
            else:
                rest = B
            for j in range(rest.shape[1]):
                u_part = rest[:, j]
                u = np.zeros(n)
                u[rows] = u_part
                share = 0.0
                if R.shape[1]:
                    c, *_ = np.linalg.lstsq(R, u_part, rcond=None)
                    share = float(np.linalg.norm(R @ c) ** 2 / np.linalg.norm(u_part) ** 2)
                groups, meeting = [], []
                if model.coords is not None and model.dofs is not None:
                    groups, meeting = _mechanism_groups(model, rows, u_part)
                if not meeting:
                    top = rows[np.argsort(-np.abs(u_part))[:10]]
                    meeting = model.nodes_of(top)
                lam = _rayleigh_scaled(K, u, d)
                modes.append(NearSingularMode(lam, lam / lam_max, "mechanism", {}, meeting, int(p) + 1,
                                              share if model.coords is not None else float("nan"),
                                              groups, u / np.max(np.abs(u)), exact=abs(lam) <= zero))
                columns.append(u)
    basis = np.column_stack(columns) if columns else np.zeros((n, 0))
    return LocatedModes(modes, basis, stiff_links)
