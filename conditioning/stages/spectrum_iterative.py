"""Smallest eigenpairs of the scaled stiffness without factorizing it.

    S = D^-1/2 K D^-1/2  =>  lambda_1 <= ... <= lambda_k, v_1 ... v_k

The path taken when the factor of K would not fit in memory
(:func:`conditioning.engine.memory.fits`): the locally optimal block preconditioned
conjugate gradient method (LOBPCG, scipy.sparse.linalg.lobpcg) on S,
preconditioned by an incomplete LU factorization of S + tau*I whose fill is
capped at a multiple of the matrix's own, started from the rigid-body
motions of the model when its coordinates are known (they are the
near-null space the restraints should have removed).

Without a factorization there is no inertia count (Sylvester's law) to
confirm the number of modes, no pivots for diagonal decay, and no solve for
the measured digits; :attr:`IterativeSpectrum.cannot` lists them for the
report.
"""

from __future__ import annotations

import logging
import warnings
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.engine.scipy_engine import EPS, diagonal_scaling, scaled_matrix
from conditioning.model import Model
from conditioning.results import IterativeSpectrum
from conditioning.linalg.rigid_motions import rigid_motions
from conditioning.stages.spectrum import ScaledSpectrum, largest_eigenvalue, split_near_singular
from conditioning.stages.structure import rows_with_stiffness

logger = logging.getLogger(__name__)

#: Eigenpairs sought by default (rigid-body modes of a free 3D body: 6).
DEFAULT_K = 8
#: Most eigenpairs sought when every computed one is near-null.
MAX_K = 256
#: Below this many rows the spectrum is computed densely (LAPACK eigh) on this
#: path. Lower than the factorized path's :data:`~conditioning.stages.spectrum.DENSE_LIMIT`
#: on purpose (the project's choice): this path is taken for real only when
#: the factor of K would not fit in memory, far above either limit, so the
#: limit decides only whether models of a few hundred nodes (the tests of
#: tests/test_iterative.py, 882 and 1029 rows) exercise LOBPCG.
ITERATIVE_DENSE_LIMIT = 600
#: Shift of the incomplete factorization, relative to the unit diagonal of S.
ILU_SHIFT = 1e-6
#: Cap on the incomplete factor's entries, as a multiple of nnz(S).
ILU_FILL = 8.0
ILU_DROP = 1e-5
#: LOBPCG iterations between convergence checks of the wanted pairs.
ROUND = 25

CANNOT = (
    "no inertia count: the number of near-singular modes rests on the "
    "eigenvalue gap alone, not confirmed by Sylvester's law of inertia",
    "no digits measurement: there is no factorization to solve with",
    "no diagonal decay: there are no pivots",
)


def iterative_spectrum(
    model: Model,
    *,
    k: int = DEFAULT_K,
    tol: float = 1e-9,
    maxiter: int = 400,
    rng=None,
) -> IterativeSpectrum:
    """Smallest eigenpairs of S = D^-1/2 K D^-1/2 by preconditioned LOBPCG.

    Parameters
    ----------
    model : Model
        The stiffness matrix, with its DOF map and coordinates when known
        (used for rigid-body starting vectors).
    k : int
        Number of eigenpairs wanted.
    tol : float
        Residual norm ||S v - lambda v||_2 (unit v) requested; S has unit
        diagonal, so this is relative to its scale.
    maxiter : int
        LOBPCG iterations allowed.
    rng : int or numpy.random.Generator, optional
        Seed of the random starting vectors.

    Returns
    -------
    IterativeSpectrum
        Eigenvalues (ascending), eigenvectors in S's coordinates, residual
        norms, whether all converged, the number of near-null eigenvalues by
        the spectrum stage's gap rule, the method, and what this path cannot
        provide. Rows without stiffness appear as exact zero eigenvalues
        with unit eigenvectors.

    Notes
    -----
    LOBPCG [1]_ minimises the Rayleigh quotient over the span of the current
    block, its preconditioned residuals and the previous directions. The
    preconditioner is ILU(S + tau*I) [2]_ with tau = 1e-6, so that an
    exactly singular S still has a usable preconditioner; when the
    incomplete factorization fails the preconditioner is the inverse of the
    diagonal blocks of each node (block Jacobi).

    References
    ----------
    .. [1] A. V. Knyazev (2001), "Toward the optimal preconditioned
           eigensolver: Locally optimal block preconditioned conjugate
           gradient method", SIAM J. Sci. Comput. 23(2), pp. 517-541,
           :doi:`10.1137/S1064827500366124`.
    .. [2] Y. Saad (2003), *Iterative Methods for Sparse Linear Systems*,
           2nd ed., SIAM, chapter 10 (from memory).
    """
    K = sp.csr_array(model.K)
    n = K.shape[0]
    if k < 1:
        raise ValueError(f"k = {k}; ask for at least one eigenpair")
    rng = np.random.default_rng(rng)
    has_stiffness = rows_with_stiffness(K)
    empty = np.flatnonzero(~has_stiffness)
    active = np.flatnonzero(has_stiffness)
    s = diagonal_scaling(K)
    S = scaled_matrix(K, s)
    Sa = sp.csr_array(S[active][:, active])
    Sa.eliminate_zeros()
    ka = min(k, active.size)
    if active.size <= ITERATIVE_DENSE_LIMIT:
        vals, vecs = np.linalg.eigh(Sa.toarray())
        vals, vecs = vals[:ka], vecs[:, :ka]
        method = "dense symmetric eigensolver (LAPACK syevd via numpy.linalg.eigh), small matrix"
        converged = True
    else:
        M, pre_name = _preconditioner(Sa, model, active)
        lam_max = _lambda_max(Sa)
        while True:
            # A block wider than the wanted eigenpairs converges faster: the
            # rate for pair j depends on lambda_j / lambda_(block + 1).
            block = min(ka + max(4, ka // 2), active.size // 5)
            X = _starting_block(model, active, s, max(block, ka), rng)
            vals, vecs = _lobpcg_core(Sa, X, M, tol, maxiter, ka)
            first, count, _ = split_near_singular(vals, lam_max, active.size)
            # All computed pairs near-null: there may be more; ask for twice as many.
            if first + count < ka or 2 * ka > min(MAX_K, active.size // 6):
                break
            ka *= 2
        converged = False  # decided from the residuals below
        method = f"LOBPCG (scipy.sparse.linalg.lobpcg) preconditioned by {pre_name}"
    res = np.linalg.norm(Sa @ vecs - vecs * vals, axis=0) if ka else np.zeros(0)
    if active.size > ITERATIVE_DENSE_LIMIT:
        converged = bool(np.all(res <= max(tol, 1e-14) * 10))
    # Back to all rows; rows without stiffness are exact zero eigenvalues.
    full = np.zeros((n, empty.size + ka))
    full[empty, np.arange(empty.size)] = 1.0
    full[active, empty.size:] = vecs
    values = np.concatenate([np.zeros(empty.size), vals])
    residuals = np.concatenate([np.zeros(empty.size), res])
    if active.size <= ITERATIVE_DENSE_LIMIT:
        lam_max = _lambda_max(Sa)
    first, count, _ = split_near_singular(vals, lam_max, max(active.size, 1))
    if not converged:
        warnings.warn(f"LOBPCG: largest residual {res.max():.1e} did not reach the requested tolerance {tol:.1e}",
                      RuntimeWarning, stacklevel=2)
    logger.info("iterative spectrum: %d eigenpairs, %s, converged=%s", ka, method, converged)
    return IterativeSpectrum(
        eigenvalues=values, eigenvectors=full, residual_norms=residuals, converged=converged,
        near_null_count=int(empty.size + count), method=method, cannot=CANNOT, lambda_max=lam_max,
    )


def as_scaled_spectrum(result: IterativeSpectrum, model: Model) -> ScaledSpectrum:
    """The factorization-free eigenpairs in the form the mode stages read.

    Parameters
    ----------
    result : IterativeSpectrum
        From :func:`iterative_spectrum` on ``model``.
    model : Model

    Returns
    -------
    ScaledSpectrum
        Eigenpairs on the rows with stiffness (rows without any are left to
        the structure stage, as with a factorization), the split by the
        spectrum stage's gap rule, and no inertia count (``None``): there
        are no pivots to count.
    """
    n_empty = int(np.count_nonzero(~rows_with_stiffness(model.K)))
    active = rows_with_stiffness(model.K)
    values = np.asarray(result.eigenvalues[n_empty:])
    vectors = np.asarray(result.eigenvectors[active][:, n_empty:])
    na = int(active.sum())
    lam_max = float(result.lambda_max) if result.lambda_max is not None else 1.0
    first, count, gap = split_near_singular(values, lam_max, max(na, 1))
    zero = na * EPS * lam_max
    split_point = None
    if count > 0 and first + count < values.size:
        split_point = float(np.sqrt(max(values[first + count - 1], zero) * values[first + count]))
    return ScaledSpectrum(values, vectors, lam_max, count, first, gap, zero, split_point,
                          None, None, first, result.method)


def _lambda_max(Sa: sp.csr_array) -> float:
    """lambda_max(S) by the spectrum stage's Lanczos (1.0 for an empty matrix)."""
    return largest_eigenvalue(Sa) if Sa.shape[0] else 1.0


def _starting_block(model: Model, active, s, k: int, rng) -> NDArray[np.float64]:
    """Rigid-body motions in S's coordinates (v = D^1/2 u), then random columns."""
    cols = []
    if model.dofs is not None:
        basis = rigid_motions(model.dofs.dof[active], model.positions_of(active),
                              model.dofs.node[active]).basis  # u on the active rows
        if basis.size:
            cols.append(basis / s[active][:, None])  # D^1/2 u = u / s
    X = np.column_stack(cols) if cols else np.zeros((active.size, 0))
    X = X[:, :k]
    extra = max(k - X.shape[1], 0)
    X = np.hstack([X, rng.standard_normal((active.size, extra))])
    q, _ = np.linalg.qr(X)
    return q


def _preconditioner(Sa: sp.csr_array, model: Model, active):
    """ILU(S + tau I) as an operator, or node-block Jacobi when ILU fails."""
    n = Sa.shape[0]
    A = sp.csc_array(Sa + ILU_SHIFT * sp.eye_array(n, format="csr"))
    try:
        ilu = spla.spilu(A, drop_tol=ILU_DROP, fill_factor=ILU_FILL, diag_pivot_thresh=0.0,
                         permc_spec="MMD_AT_PLUS_A", options=dict(SymmetricMode=True))
        name = (f"incomplete LU of S + {ILU_SHIFT:g} I (scipy.sparse.linalg.spilu, drop tolerance "
                f"{ILU_DROP:g}, fill at most {ILU_FILL:g} x nnz(S))")
        return spla.LinearOperator((n, n), matvec=ilu.solve, matmat=ilu.solve, dtype=np.float64), name
    except RuntimeError as exc:
        logger.info("incomplete factorization failed (%s); block Jacobi instead", exc)
    return _block_jacobi(Sa, model, active), "node-block Jacobi (inverse of each node's diagonal block)"


def _block_jacobi(Sa: sp.csr_array, model: Model, active):
    n = Sa.shape[0]
    if model.dofs is None:
        return spla.LinearOperator((n, n), matvec=lambda x: x, dtype=np.float64)
    node = model.dofs.node[active]
    mask = node[Sa.tocoo().row] == node[Sa.tocoo().col]
    C = Sa.tocoo()
    B = sp.csc_array((C.data[mask], (C.row[mask], C.col[mask])), shape=(n, n))
    lu = spla.splu(B + ILU_SHIFT * sp.eye_array(n, format="csc"), permc_spec="MMD_AT_PLUS_A")
    return spla.LinearOperator((n, n), matvec=lu.solve, matmat=lu.solve, dtype=np.float64)


def _lobpcg_core(Sa, X, M, tol: float, maxiter: int, k: int):
    """LOBPCG in rounds of :data:`ROUND` iterations, restarted from the
    current block, until the k smallest pairs (not the whole block) have
    residuals below tol."""
    done = 0
    while True:
        steps = min(ROUND, maxiter - done)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            vals, vecs = spla.lobpcg(Sa, X, M=M, tol=tol, maxiter=steps, largest=False)
        done += steps
        order = np.argsort(vals)
        vals, vecs = vals[order], vecs[:, order]
        res = np.linalg.norm(Sa @ vecs[:, :k] - vecs[:, :k] * vals[:k], axis=0)
        if np.all(res <= tol) or done >= maxiter:
            return vals[:k], vecs[:, :k]
        X = vecs
