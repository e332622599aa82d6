"""Smallest eigenpairs of the scaled stiffness without factorizing it.

    S = D^-1/2 K D^-1/2  =>  lambda_1 <= ... <= lambda_k, v_1 ... v_k

The path taken when the factor of K would not fit in memory
(:func:`conditioning.engine.memory.fits`): the locally optimal block preconditioned
conjugate gradient method (LOBPCG, scipy.sparse.linalg.lobpcg) on S,
started from the rigid-body motions of the model when its coordinates are
known (they are the near-null space the restraints should have removed), and
preconditioned by one V-cycle of smoothed-aggregation algebraic multigrid
(pyamg, the optional ``amg`` extra) given those motions as its near-null
space. Without pyamg the preconditioner is an incomplete LU factorization of
S + tau*I whose fill is capped at a multiple of the matrix's own; it needs
about four times the iterations on a 27k-row cube and did not finish a
305k-row one in 15 minutes (docs/benchmarks.md), and the method string says
which one ran.

This is one of the ways the spectrum stage
(:func:`conditioning.stages.spectrum.smallest_eigenpairs`) obtains its
eigenpairs; the gap rule and the result are the stage's. Without a
factorization there is no inertia count (Sylvester's law) to confirm the
number of modes, no pivots to count digits lost at, and no solve for the measured
digits: the pipeline records those stages as skipped, with why.
"""

from __future__ import annotations

import logging
import warnings
from typing import Callable, Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.linalg.rigid_motions import rigid_motions
from conditioning.model import Model

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
#: Shift of the matrix the multigrid hierarchy is built on (S + sigma I),
#: relative to S's unit diagonal (the project's choice, as ILU_SHIFT). Built on
#: a singular S the coarsest level's pseudo-inverse drops the null space, so the
#: preconditioned residuals never point along null vectors missing from the
#: starting block (three separate free plates: 3 of 9 zero modes found, tested);
#: with the shift they are amplified, as in inverse iteration.
AMG_SHIFT = 1e-6
#: Aggregate node blocks (BSR) when the DOF map is regular: same LOBPCG
#: iterations (26) and time on 27k and 57k-row cubes as pointwise aggregation,
#: operator complexity 1.15 instead of 1.45 (measured, docs/benchmarks.md).
AMG_NODE_BLOCKS = True
#: Strength-of-connection threshold of the aggregation (pyamg's default, 0.0).
AMG_STRENGTH = 0.0
#: Rows of the coarsest level, solved by a dense pseudo-inverse (pyamg's default, 10).
AMG_MAX_COARSE = 10
#: LOBPCG iterations between convergence checks of the wanted pairs.
ROUND = 25

def lobpcg_smallest(
    S: sp.csr_array,
    k: int,
    *,
    model: Model,
    active: NDArray[np.bool_],
    scale: NDArray[np.float64],
    more_wanted: Callable[[NDArray[np.float64]], bool],
    tol: float = 1e-9,
    maxiter: int = 400,
    rng: Optional[np.random.Generator] = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], bool, str]:
    """The k smallest eigenpairs of S = D^-1/2 K D^-1/2 (active rows) by preconditioned LOBPCG.

    Parameters
    ----------
    S : (n_a, n_a) csr_array
        The scaled stiffness on the rows with stiffness (dimensionless).
    k : int
        Eigenpairs wanted (at least 1).
    model : Model
        DOF map and coordinates, for rigid-body starting vectors and the
        block-Jacobi fallback.
    active : (n,) bool
        Rows of K that S holds.
    scale : (n,) float64
        s with S = diag(s) K diag(s).
    more_wanted : callable
        ``more_wanted(values)`` is True when every computed pair is near-null
        (then there may be more: twice as many are sought, up to
        :data:`MAX_K`).
    tol : float
        Residual norm ||S v - lambda v||_2 (unit v) requested; S has unit
        diagonal, so this is relative to its scale.
    maxiter : int
        LOBPCG iterations allowed.
    rng : numpy.random.Generator
        Draws the random starting columns.

    Returns
    -------
    (values, vectors, converged, method)
        Eigenvalues ascending (k or more), (n_a, k) orthonormal
        eigenvectors, True when every residual norm is within 10 tol, and
        the solver and preconditioner in words.

    Notes
    -----
    LOBPCG [1]_ minimises the Rayleigh quotient over the span of the current
    block, its preconditioned residuals and the previous directions. The
    preconditioner is one symmetric V-cycle of smoothed-aggregation
    multigrid [3]_ (pyamg [4]_) for S + sigma I with the rigid-body motions as
    near-null space (:func:`_multigrid`); without pyamg, or when its setup
    fails, ILU(S + tau*I) [2]_ with tau = 1e-6, so that an exactly singular S
    still has a usable preconditioner; when the incomplete factorization
    fails too, the inverse of the diagonal blocks of each node (block Jacobi).

    References
    ----------
    .. [1] A. V. Knyazev (2001), "Toward the optimal preconditioned
           eigensolver: Locally optimal block preconditioned conjugate
           gradient method", SIAM J. Sci. Comput. 23(2), pp. 517-541,
           :doi:`10.1137/S1064827500366124`.
    .. [2] Y. Saad (2003), *Iterative Methods for Sparse Linear Systems*,
           2nd ed., SIAM, chapter 10 (from memory).
    .. [3] P. Vanek, J. Mandel and M. Brezina (1996), "Algebraic multigrid by
           smoothed aggregation for second and fourth order elliptic
           problems", Computing 56(3), pp. 179-196,
           :doi:`10.1007/BF02238511` (from memory).
    .. [4] N. Bell, L. N. Olson and J. Schroder (2022), "PyAMG: Algebraic
           multigrid solvers in Python", Journal of Open Source Software
           7(72), 4142, :doi:`10.21105/joss.04142` (from memory).
    """
    if k < 1:
        raise ValueError(f"k = {k}; ask for at least one eigenpair")
    rng = np.random.default_rng(rng)
    na = S.shape[0]
    ka = min(k, na)
    rows = np.flatnonzero(active)
    M, pre_name = _preconditioner(S, model, rows, scale)
    while True:
        # A block wider than the wanted eigenpairs converges faster: the
        # rate for pair j depends on lambda_j / lambda_(block + 1).
        block = min(ka + max(4, ka // 2), na // 5)
        X = _starting_block(model, rows, scale, max(block, ka), rng)
        vals, vecs, iterations = _lobpcg_core(S, X, M, tol, maxiter, ka)
        if not more_wanted(vals) or 2 * ka > min(MAX_K, na // 6):
            break
        ka *= 2
    res = np.linalg.norm(S @ vecs - vecs * vals, axis=0)
    converged = bool(np.all(res <= max(tol, 1e-14) * 10))
    if not converged:
        warnings.warn(f"LOBPCG: largest residual {res.max():.1e} did not reach the requested tolerance {tol:.1e}",
                      RuntimeWarning, stacklevel=2)
    method = (f"LOBPCG (scipy.sparse.linalg.lobpcg, block of {X.shape[1]}, {iterations} iterations, "
              f"largest residual {res.max():.1e}{'' if converged else ', NOT converged'}) "
              f"preconditioned by {pre_name}")
    logger.info("iterative spectrum: %d eigenpairs, %s, converged=%s", ka, method, converged)
    return vals, vecs, converged, method


def _starting_block(model: Model, active: NDArray[np.intp], s, k: int, rng) -> NDArray[np.float64]:
    """Rigid-body motions in S's coordinates (v = D^1/2 u) on the rows ``active``
    (0-based indices), then random columns; (n_a, k) orthonormal."""
    B, _ = _near_null_space(model, active, s)
    X = (B if B is not None else np.zeros((active.size, 0)))[:, :k]
    extra = max(k - X.shape[1], 0)
    X = np.hstack([X, rng.standard_normal((active.size, extra))])
    q, _ = np.linalg.qr(X)
    return q


def _preconditioner(Sa: sp.csr_array, model: Model, active, scale):
    """The preconditioner of S as an operator and its description in words.

    Smoothed-aggregation multigrid (:func:`_multigrid`) when pyamg (the
    ``amg`` extra) is installed, otherwise ILU(S + tau I); node-block Jacobi
    when both fail.
    """
    missing = ""
    try:
        import pyamg
    except ImportError:
        pyamg = None
        missing = " (pyamg, the 'amg' extra, is not installed: no multigrid)"
    if pyamg is not None:
        try:
            return _multigrid(pyamg, Sa, model, active, scale)
        except (ValueError, RuntimeError, np.linalg.LinAlgError) as exc:
            logger.info("multigrid setup failed (%s); incomplete LU instead", exc)
            missing = f" (the multigrid setup failed: {exc})"
    n = Sa.shape[0]
    A = sp.csc_array(Sa + ILU_SHIFT * sp.eye_array(n, format="csr"))
    try:
        ilu = spla.spilu(A, drop_tol=ILU_DROP, fill_factor=ILU_FILL, diag_pivot_thresh=0.0,
                         permc_spec="MMD_AT_PLUS_A", options=dict(SymmetricMode=True))
        name = (f"incomplete LU of S + {ILU_SHIFT:g} I (scipy.sparse.linalg.spilu, drop tolerance "
                f"{ILU_DROP:g}, fill at most {ILU_FILL:g} x nnz(S)){missing}")
        return spla.LinearOperator((n, n), matvec=ilu.solve, matmat=ilu.solve, dtype=np.float64), name
    except RuntimeError as exc:
        logger.info("incomplete factorization failed (%s); block Jacobi instead", exc)
    return (_block_jacobi(Sa, model, active),
            f"node-block Jacobi (inverse of each node's diagonal block){missing}")


def _near_null_space(model: Model, active: NDArray[np.intp], s) -> tuple[Optional[NDArray[np.float64]], str]:
    """The rigid-body motions in S's coordinates (v = D^1/2 u = u / s) on the
    rows ``active`` (translations only without coordinates), (n_a, r), and
    their description; (None, ...) without a DOF map."""
    if model.dofs is None:
        return None, "the constant vector (no DOF map)"
    xyz = model.positions_of(active)
    rb = rigid_motions(model.dofs.dof[active], xyz, model.dofs.node[active])
    if not rb.basis.size:
        return None, "the constant vector"
    what = "rigid-body motions" if xyz is not None else "translations per DOF type (no coordinates)"
    return rb.basis / s[active][:, None], f"{rb.basis.shape[1]} {what}"


def _node_block_size(model: Model, active: NDArray[np.intp]) -> int:
    """DOFs per node when every node of the rows ``active`` has the same DOF
    types in consecutive rows (then S is a block matrix of node blocks), else 1."""
    if model.dofs is None or active.size == 0:
        return 1
    node, dof = model.dofs.node[active], model.dofs.dof[active]
    first = np.flatnonzero(np.r_[True, node[1:] != node[:-1]])
    d = active.size // first.size
    if d < 2 or d * first.size != active.size or np.unique(node).size != first.size:
        return 1
    node, dof = node.reshape(-1, d), dof.reshape(-1, d)
    return d if np.all(node == node[:, :1]) and np.all(dof == dof[:1]) else 1


def _multigrid(pyamg, Sa: sp.csr_array, model: Model, active, scale):
    """A symmetric V-cycle of smoothed-aggregation multigrid for S, as an operator.

    The near-null space B given to the aggregation is the rigid-body motions
    in S's coordinates (translations only without coordinates): the motions a
    coarse level must represent exactly for elasticity (Vanek, Mandel and
    Brezina 1996, see :func:`lobpcg_smallest`). Smoothing is
    symmetric Gauss-Seidel before and after the coarse correction, so one
    V-cycle is a symmetric operator, as LOBPCG's preconditioner must be
    (positive definite: the hierarchy is built on S + sigma I, see
    :data:`AMG_SHIFT`). The coarsest level is solved by a dense
    pseudo-inverse.

    Returns
    -------
    (LinearOperator, str)
        One V-cycle applied to each column, and the hierarchy in words.
    """
    B, near_null = _near_null_space(model, active, scale)
    blocks = _node_block_size(model, active) if AMG_NODE_BLOCKS else 1
    A = sp.csr_matrix(Sa + AMG_SHIFT * sp.eye_array(Sa.shape[0], format="csr"))
    A = sp.bsr_matrix(A, blocksize=(blocks, blocks)) if blocks > 1 else A
    smoother = ("block_gauss_seidel" if blocks > 1 else "gauss_seidel", {"sweep": "symmetric"})
    ml = pyamg.smoothed_aggregation_solver(
        A, B=B, symmetry="symmetric", strength=("symmetric", {"theta": AMG_STRENGTH}),
        smooth=("jacobi", {"omega": 4.0 / 3.0}), presmoother=smoother, postsmoother=smoother,
        improve_candidates=None, max_coarse=AMG_MAX_COARSE, coarse_solver="pinv")
    logger.info("multigrid hierarchy: %s", ml)
    name = (f"smoothed-aggregation multigrid (pyamg {pyamg.__version__}: one V-cycle, symmetric "
            f"Gauss-Seidel before and after, {len(ml.levels)} levels, operator complexity "
            f"{ml.operator_complexity():.2f}, near-null space: {near_null}"
            f"{f', node blocks of {blocks}' if blocks > 1 else ''})")
    return ml.aspreconditioner(cycle="V"), name


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
    residuals below tol; (values, vectors, iterations done)."""
    done = 0
    calls = []  # one preconditioner application per LOBPCG iteration

    def apply(R):
        calls.append(1)
        return M @ R

    counted = spla.LinearOperator(Sa.shape, matvec=apply, matmat=apply, dtype=np.float64)
    while True:
        steps = min(ROUND, maxiter - done)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            vals, vecs = spla.lobpcg(Sa, X, M=counted, tol=tol, maxiter=steps, largest=False)
        done += steps
        order = np.argsort(vals)
        vals, vecs = vals[order], vecs[:, order]
        res = np.linalg.norm(Sa @ vecs[:, :k] - vecs[:, :k] * vals[:k], axis=0)
        logger.info("LOBPCG: %d iterations, largest residual of the %d wanted pairs %.1e", len(calls), k, res.max())
        if np.all(res <= tol) or done >= maxiter:
            return vals[:k], vecs[:, :k], len(calls)
        X = vecs
