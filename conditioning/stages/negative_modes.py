"""Negative eigenvalues located by their eigenvectors, like the near-singular modes.

A negative pivot shows where the elimination met the indefiniteness: which
DOF that is depends on the elimination order, and it can lie far from the
cause (a negative spring inside a slab shows its pivot at a separator node,
metres away). The eigenvector of a negative eigenvalue of S lives where the
negative stiffness is: its nodes, by their share of the vector, are what the
report names first.

The eigenvectors come from the spectrum stage when it computed them (LAPACK
on a small model; shift-and-invert Lanczos when the negative eigenvalues lie
near zero) and otherwise from a Lanczos run for the smallest algebraic
eigenvalues of S (ARPACK ``eigsh``, ``which="SA"``): negative eigenvalues are
the low end of S's spectrum, where Lanczos converges first (Parlett, The
Symmetric Eigenvalue Problem, 1980, ch. 13, from memory).
"""
from __future__ import annotations

import logging

import numpy as np
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.model import Model
from conditioning.results import NegativeMode, SpectrumResult
from conditioning.stages.modes import CARRIES_MIN, _node_sums
from conditioning.stages.spectrum import DENSE_LIMIT, Eigenpairs

logger = logging.getLogger(__name__)

#: Negative eigenvalues located, the most negative first (the project's
#: choice: a buckling analysis beyond several loads has many; the first few
#: say where).
NEGATIVE_LOCATED = 4
#: Nodes named per negative eigenvalue, largest share first (project's choice).
NEGATIVE_NODES_SHOWN = 12
#: Relative residual ||S v - lambda v|| / |lambda| asked of the Lanczos run
#: (the project's choice: the node shares need two digits).
NEGATIVE_TOL = 1e-8
#: Restarts allowed to the Lanczos run (ARPACK's ``maxiter``; the project's choice: an invented
#: 30,300-row plate with a barely negative spring converges well within it; beyond it the
#: eigenvalues stay unlocated, the pivot names where the elimination met them).
NEGATIVE_MAXITER = 300


def locate_negative_modes(model: Model, scale: NDArray[np.float64], active: NDArray[np.bool_], S, eig: Eigenpairs,
                          spectrum: SpectrumResult, *, rng=0) -> list[NegativeMode]:
    """The most negative eigenvalues of S with the nodes their eigenvectors live on.

    Parameters
    ----------
    model : Model
        DOF map (nodes), or none (each row its own node, numbered row + 1).
    scale, active : arrays
        S = diag(scale) K diag(scale) on the ``active`` rows (the spectrum stage's).
    S : sparse matrix
        The scaled matrix on the active rows.
    eig : Eigenpairs
        The spectrum stage's eigenpairs; those below ``-eig.zero_level`` are reused.
    spectrum : SpectrumResult
        Its ``negative_eigenvalues`` says how many to look for.
    rng : int or numpy.random.Generator
        Draws the Lanczos start vector.

    Returns
    -------
    list of NegativeMode
        At most :data:`NEGATIVE_LOCATED`, most negative first; empty without
        negative eigenvalues or when the Lanczos run found none.
    """
    wanted = min(int(spectrum.negative_eigenvalues), NEGATIVE_LOCATED)
    if wanted == 0:
        return []
    rows = np.flatnonzero(active)
    below = np.flatnonzero(eig.values < -eig.zero_level)
    dense = S.shape[0] <= DENSE_LIMIT and "LAPACK" in eig.method
    if below.size >= wanted or dense:
        how = ("eigenvector from the dense symmetric eigensolver (LAPACK)" if dense
               else "eigenvector from the spectrum stage's eigen-solve")
        values, vectors = eig.values[below[:wanted]], eig.vectors[:, below[:wanted]]
    else:
        values, vectors = _lowest(S, wanted, rng)
        keep = values < -eig.zero_level
        values, vectors = values[keep], vectors[:, keep]
        how = "eigenvector from Lanczos for the smallest algebraic eigenvalues of S (ARPACK eigsh, which='SA')"
    out = []
    for lam, v in zip(values, vectors.T):
        v = v / np.linalg.norm(v)
        residual = float(np.linalg.norm(S @ v - lam * v) / abs(lam))
        out.append(_located(model, rows, float(lam), v, f"{how}; relative residual {residual:.0e}"))
    return out


def _lowest(S, k: int, rng) -> tuple[NDArray, NDArray]:
    rng = np.random.default_rng(rng)
    n = S.shape[0]
    k = min(k, n - 2)
    if k < 1:
        w, V = np.linalg.eigh(S.toarray())
        return w[:1], V[:, :1]
    try:
        w, V = spla.eigsh(S, k=k, which="SA", tol=NEGATIVE_TOL, maxiter=NEGATIVE_MAXITER,
                          v0=rng.standard_normal(n))
    except spla.ArpackNoConvergence as exc:
        logger.info("Lanczos for the negative eigenvalues: %d of %d converged", len(exc.eigenvalues), k)
        w, V = exc.eigenvalues, exc.eigenvectors
    order = np.argsort(w)
    return np.asarray(w)[order], np.asarray(V)[:, order]


def _located(model: Model, rows, lam: float, v: NDArray, how: str) -> NegativeMode:
    ids, weights, _ = _node_sums(model, rows, v**2)
    order = np.argsort(-weights, kind="stable")
    order = order[weights[order] >= CARRIES_MIN * weights[order[0]]][:NEGATIVE_NODES_SHOWN]
    total = float(weights.sum())
    return NegativeMode(lam, [int(i) for i in ids[order]], [float(w / total) for w in weights[order]], how)
