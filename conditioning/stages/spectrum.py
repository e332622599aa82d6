"""Extreme eigenvalues of the scaled stiffness and the near-singular split.

    S = D^-1/2 K D^-1/2 (rows with stiffness)  =>  smallest eigenpairs, lambda_max(S), the split

One stage, three ways to obtain the eigenpairs, chosen by what is available:

* small S (at most :data:`DENSE_LIMIT` rows with a factorization,
  :data:`conditioning.stages.spectrum_iterative.ITERATIVE_DENSE_LIMIT` without): all
  eigenvalues by LAPACK;
* a factorization of S - sigma*I (any :class:`conditioning.engine.base.Factorization`):
  shift-and-invert Lanczos (ARPACK through scipy.sparse.linalg.eigsh) at the
  factorization's shift, zero for a nonsingular S, a small negative number
  otherwise (never exactly zero on a singular matrix); when the factorization
  has its engine's own eigensolver (:class:`conditioning.engine.base.OwnEigensolver`,
  e.g. SLEPc on the PETSc engine), that one, on the same factor and shift;
* no factorization (it would not fit in memory): preconditioned LOBPCG
  (:mod:`conditioning.stages.spectrum_iterative`).

All three return the one internal type :class:`Eigenpairs`; the pipeline
turns it into the public :class:`conditioning.results.SpectrumResult`
(:func:`spectrum_result`).

The split between near-singular modes and the rest is a spectral gap, and the
count below it is cross-checked by Sylvester's law of inertia: the number of
negative pivots of S - c*I equals the number of eigenvalues below c.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, replace
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.linalg as la
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.engine.base import Factorization, OwnEigensolver
from conditioning.engine.scaling import ScaledStiffness, scale_stiffness
from conditioning.model import Model
from conditioning.results import NearSingularMode, SpectrumResult
from conditioning.stages import spectrum_iterative
from conditioning.stages.mode_groups import group_modes

from conditioning.linalg.floating_point import EPS
from conditioning.linalg.negative_eigenvalues import search_negative_eigenvalues

logger = logging.getLogger(__name__)

#: Eigenvalues of S at most this fraction of lambda_max(S) are candidates for
#: near-singular modes: such a mode alone costs at least 8 of the ~16 digits.
MODE_THRESHOLD = 1e-8
#: A split needs at least this ratio between the last mode and the next eigenvalue.
MIN_GAP = 1e3
#: Below this many active rows the spectrum of S (and, in the condition stage,
#: that of K) is computed densely (LAPACK syevd): every eigenvalue, with no
#: Lanczos convergence to doubt, for 11.5 MB of dense matrix at 1200 rows (the
#: project's choice).
DENSE_LIMIT = 1200

GAP_RULE = (
    "near-singular = eigenvalues of S up to the largest ratio gap (>= 1e3) among "
    "eigenvalues <= 1e-8 lambda_max(S), with eigenvalues below n*eps*lambda_max(S) "
    "treated as zero; without such a gap, only eigenvalues <= n eps lambda_max(S) (the usual numerical-rank "
    "tolerance)"
)


@dataclass(frozen=True)
class Eigenpairs:
    """Smallest eigenpairs of S on the active rows and their split (the spectrum stage's one type).

    Attributes
    ----------
    values : (k,) float64, ascending
        Smallest eigenvalues of S (dimensionless).
    vectors : (n_active, k) float64, orthonormal columns
        Eigenvectors of S on the rows with stiffness (v; the displacement
        shape is D^-1/2 v).
    lambda_max : float
        Largest eigenvalue of S (dimensionless).
    count : int
        Number of near-singular eigenvalues (below the split), from
        ``values[first]`` on, not counting true negative eigenvalues.
    first : int
        Index in ``values`` of the first near-singular eigenvalue (after the
        true negative ones).
    gap : float or None
        Ratio across the split; None without near-singular eigenvalues.
    zero_level : float
        n_active*eps*lambda_max(S): eigenvalues below it in magnitude are
        zero at working precision.
    split_point : float or None
        c, the geometric mean of the eigenvalues on either side of the gap;
        None without a split inside the computed values.
    below_split : int or None
        Eigenvalues of S below c from the computed eigenvalues and the
        factorization's inertia: what the inertia check at c is compared
        with. None without a split or without a factorization.
    negative : int
        Eigenvalues of S (hence of K, by Sylvester) below -zero_level; a
        lower bound when ``negative_exact`` is False.
    negative_method : str
        How ``negative`` was counted, in words.
    negative_exact : bool
        True when ``negative`` is a count (all eigenvalues, or the
        factorization's inertia); False when only the eigenvalues the solver
        found were counted.
    method : str
        How the eigenpairs were obtained, in words.
    converged : bool
        False when the iterative eigensolver stopped above its tolerance
        (the smallest eigenvalue is then an upper bound).
    """

    values: NDArray[np.float64]
    vectors: NDArray[np.float64]
    lambda_max: float
    count: int
    first: int
    gap: Optional[float]
    zero_level: float
    split_point: Optional[float]
    below_split: Optional[int]
    negative: int
    method: str
    converged: bool = True
    negative_method: str = ""
    negative_exact: bool = True


def largest_eigenvalue(A, rtol: float = 1e-3, max_steps: int = 600, v0: Optional[NDArray] = None,
                       rng=0, check_every: int = 10) -> float:
    """lambda_max of a symmetric matrix by plain Lanczos, to relative accuracy ``rtol``.

    Returns the largest Ritz value theta of the Lanczos tridiagonal T_m, which
    approaches lambda_max from below, once its residual bound
    |beta_m y_m| (y the eigenvector of T_m, y_m its last entry) is at most
    rtol*theta: an eigenvalue of A then lies within rtol*theta of theta [1]_.
    No reorthogonalization: loss of orthogonality only duplicates converged
    Ritz values, it does not move the extreme one [2]_. Costs m matrix-vector
    products and O(m) vectors of memory, against ARPACK's restarts. The start
    is ``v0``, else a normal random vector drawn from ``rng`` (a seed or a
    numpy Generator). The residual bound is checked every ``check_every``
    steps (an eigendecomposition of T_m each time): 1 when each product with
    A costs a solve, 10 when it is a cheap sparse product.

    References
    ----------
    .. [1] B. N. Parlett (1998), *The Symmetric Eigenvalue Problem*, SIAM,
           section 13.2 (from memory).
    .. [2] C. C. Paige (1976), "Error analysis of the Lanczos algorithm for
           tridiagonalizing a symmetric matrix", J. Inst. Maths Applics 18,
           pp. 341-349 (from memory).
    """
    n = A.shape[0]
    if n <= 50 and sp.issparse(A):
        return float(np.linalg.eigvalsh(A.toarray())[-1])
    q = np.random.default_rng(rng).standard_normal(n) if v0 is None else np.array(v0, dtype=np.float64)
    q /= np.linalg.norm(q)
    q_prev = np.zeros(n)
    alphas: list[float] = []
    betas: list[float] = []
    beta = 0.0
    theta = -np.inf
    for m in range(1, max_steps + 1):
        w = A @ q - beta * q_prev
        alpha = float(q @ w)
        w -= alpha * q
        beta = float(np.linalg.norm(w))
        alphas.append(alpha)
        if m % check_every == 0 or beta == 0.0 or m == max_steps:
            vals, vecs = la.eigh_tridiagonal(np.array(alphas), np.array(betas))
            theta = float(vals[-1])
            if beta * abs(vecs[-1, -1]) <= rtol * abs(theta) or beta == 0.0:
                return theta
        betas.append(beta)
        q_prev, q = q, w / beta
    logger.warning("Lanczos for lambda_max stopped after %d steps above tolerance %.0e", max_steps, rtol)
    return theta


#: Relative accuracy asked of lambda_max (0.1%) and the probability, at most, that a
#: random start misses it (the project's choice): the Kuczynski-Wozniakowski bound then
#: fixes the number of Lanczos steps before the run (:func:`largest_eigenvalue_bounded`).
KW_EPS = 1e-3
KW_FAIL = 1e-9
#: The constant of the Kuczynski-Wozniakowski bound for Lanczos from a random start (1992,
#: Theorem 4.2; from memory: the abstract, re-read, gives the form sqrt(n) e^(-sqrt(eps)(2k-1))).
KW_CONSTANT = 1.648
#: At most this many Lanczos steps (a bound on the time of very ill-centred spectra; the
#: accuracy actually proved is then stated; the project's choice).
KW_MAX_STEPS = 4000


def kw_steps(n: int, eps: float, fail: float) -> int:
    """Lanczos steps m (tridiagonal order) after which the largest Ritz value of a positive
    semi-definite n x n matrix is below (1 - eps) lambda_max with probability at most ``fail``,
    for a start uniform on the unit sphere (Kuczynski & Wozniakowski 1992):

        P(theta < (1 - eps) lambda_max) <= 1.648 sqrt(n) exp(-sqrt(eps) (2k - 1))

    with k the matrix-vector products of the Krylov information [b, Ab, ..., A^k b]. Counted
    conservatively as k = m - 1 (T_m uses m - 1 powers of A beyond b)."""
    k = math.ceil((math.log(KW_CONSTANT * math.sqrt(n) / fail) / math.sqrt(eps) + 1.0) / 2.0)
    return max(2, k + 1)


def psd_shift(A, fac: Optional[Factorization] = None, *, diagonal=None) -> tuple[float, str]:
    """(sigma >= 0 with A + sigma I positive semi-definite, how it is known).

    From ``fac``'s inertia when it is one (no negative pivot of S - c I with symmetric
    pivoting: S >= c I, Sylvester's law; for the raw K = D^1/2 S D^1/2 pass S's
    ``diagonal`` D: K >= c D), with a margin of n eps ||A||_inf for the rounding of the
    elimination (the project's choice: a negative eigenvalue the pivots' signs miss lies
    within the elimination's backward error, and moves the accuracy stated for lambda_max
    by its own size relative to lambda_max, far below KW_EPS); otherwise from Gershgorin's
    discs (no factorization read)."""
    n = A.shape[0]
    Aa = abs(A)
    row = np.asarray(Aa.sum(axis=1)).ravel()
    dg = np.asarray(A.diagonal()).ravel()
    norm_inf = float(row.max()) if n else 0.0
    if (fac is not None and fac.info.negative_pivots == 0 and fac.info.symmetric_pivoting
            and math.isfinite(fac.shift)):
        c = float(fac.shift)
        dmax = 1.0 if diagonal is None else float(np.max(diagonal))
        return (max(0.0, -c) * dmax + n * EPS * norm_inf,
                f"the factorization's inertia (no negative pivot at shift {c:.2g}; n eps ||A||_inf added for rounding)")
    lower = float(np.min(2 * dg - row)) if n else 0.0  # A_ii - sum_{j != i} |A_ij|
    return max(0.0, -lower), "Gershgorin's discs"


def largest_eigenvalue_bounded(A, *, shift: float = 0.0, shift_how: str = "the caller's assumption", name: str = "A",
                               eps: float = KW_EPS, fail: float = KW_FAIL, rng=0) -> tuple[float, str]:
    """(lambda_max of the symmetric A, how): Lanczos from a random start run for the number
    of steps the Kuczynski-Wozniakowski bound needs for a relative error ``eps`` with failure
    probability at most ``fail``.

    The bound is for a positive semi-definite matrix: it is applied to A + shift I (Lanczos
    is shift-invariant: the same Krylov spaces, Ritz values moved by the shift), with the
    relative accuracy asked of A + shift I reduced to eps d / (d + shift), d = max_i A_ii
    <= lambda_max, so that lambda_max - theta <= eps lambda_max. The number of steps is
    fixed before the run (a stopping rule read from the run would void the probability);
    no reorthogonalisation (memory of m vectors avoided): in floating point, loss of
    orthogonality follows the convergence of Ritz values and only repeats converged ones
    (Paige 1976, 1980; from memory); the bound itself is an exact-arithmetic one. A zero
    beta (an invariant Krylov space) gives lambda_max exactly, with probability 1.

    References
    ----------
    .. [1] J. Kuczynski and H. Wozniakowski (1992), "Estimating the largest eigenvalue by
           the power and Lanczos algorithms with a random start", SIAM J. Matrix Anal.
           Appl. 13(4), pp. 1094-1122.
    """
    n = A.shape[0]
    d = float(np.max(np.asarray(A.diagonal()).ravel())) if n else 0.0
    if n <= 50 and sp.issparse(A):
        return float(np.linalg.eigvalsh(A.toarray())[-1]), "dense eigensolver (LAPACK)"
    if not d > 0:
        lam = largest_eigenvalue(A, rng=rng)
        return lam, "Lanczos (residual bound 1e-3 relative; no diagonal entry > 0: no probability bound)"
    eps_shifted = eps * d / (d + shift)
    shift_how = (f"{name} + {shift:.2g} I positive semi-definite by {shift_how}" if shift > 0 else
                 f"{name} positive semi-definite by {shift_how}")
    m = min(n, kw_steps(n, eps_shifted, fail))
    capped = m > KW_MAX_STEPS
    m = min(m, KW_MAX_STEPS)
    gen = np.random.default_rng(rng)
    q = gen.standard_normal(n)  # normalised: uniform on the unit sphere
    q /= np.linalg.norm(q)
    q_prev = np.zeros(n)
    alphas: list[float] = []
    betas: list[float] = []
    beta = 0.0
    exact = False
    # Inner products by einsum, not BLAS: OpenBLAS threads ddot/dnrm2 above 10,000 entries,
    # and on a loaded machine each step then waits for its threads (measured: 0.2 s idle,
    # 6 s under load for 423 steps on 50k rows); einsum's loop is single-threaded.
    for j in range(m):
        w = A @ q
        if j:
            w -= beta * q_prev
        alpha = float(np.einsum("i,i->", q, w))
        w -= alpha * q
        beta = math.sqrt(float(np.einsum("i,i->", w, w)))
        alphas.append(alpha)
        if beta <= 8 * EPS * max(abs(alpha), d):
            exact = True
            break
        if j < m - 1:
            betas.append(beta)
            q_prev, q = q, w / beta
    steps = len(alphas)
    theta = float(la.eigvalsh_tridiagonal(np.array(alphas), np.array(betas), select="i",
                                          select_range=(steps - 1, steps - 1))[0])
    if exact or steps >= n:
        return theta, (f"Lanczos from a random start, {steps} steps to an invariant Krylov space "
                       "(exact with probability 1)")
    if capped:
        # the accuracy proved at the cap, relative to lambda_max
        k = steps - 1
        e_sh = (math.log(KW_CONSTANT * math.sqrt(n) / fail) / (2 * k - 1)) ** 2
        e = e_sh * (d + shift) / d
        return theta, (f"Lanczos from a random start, {steps} steps (capped): within {100 * e:.2g}% with "
                       f"probability >= 1 - {fail:g} (Kuczynski-Wozniakowski bound; {shift_how})")
    return theta, (f"Lanczos from a random start, {steps} steps: within {100 * eps:g}% with probability "
                   f">= 1 - {fail:g} (Kuczynski-Wozniakowski bound; {shift_how})")


def _smallest_sparse(Sa, fac: Factorization, k: int, rng) -> tuple[NDArray, NDArray]:
    if isinstance(fac, OwnEigensolver):  # the engine's eigensolver on its own factor
        return fac.smallest_eigenpairs(k, rng)
    na = Sa.shape[0]
    op = spla.LinearOperator((na, na), matvec=fac.solve_active, matmat=fac.solve_active, dtype=np.float64)
    v0 = rng.standard_normal(na)
    vals, vecs = spla.eigsh(Sa, k=k, sigma=fac.shift, which="LM", OPinv=op, tol=1e-10, v0=v0)
    order = np.argsort(vals)
    return vals[order], vecs[:, order]


def split_near_singular(values: NDArray, lam_max: float, n: int) -> tuple[int, int, Optional[float]]:
    """Apply :data:`GAP_RULE` to ascending eigenvalues of S.

    Returns
    -------
    (first, count, gap)
        ``values[first:first + count]`` are the near-singular eigenvalues
        (``first`` = number of eigenvalues below -n*eps*lambda_max, true
        negatives); ``gap`` is the ratio across the split, None without modes.
    """
    zero = n * EPS * lam_max
    first = int(np.count_nonzero(values < -zero))
    a = np.maximum(values[first:], zero)
    cand = np.flatnonzero(a <= MODE_THRESHOLD * lam_max)
    if cand.size == 0:
        return first, 0, None
    ratios = np.array([a[i + 1] / a[i] if i + 1 < a.size else np.inf for i in cand])
    best = int(np.argmax(ratios))
    if ratios[best] >= MIN_GAP:
        m = int(cand[best]) + 1
    else:  # a graded spectrum without a gap: only numerical zeros are modes
        # (numpy.linalg.matrix_rank's default tolerance, n*eps*largest)
        m = int(np.count_nonzero(a <= zero))
        if m == 0:
            return first, 0, None
    gap = float(a[m] / a[m - 1]) if m < a.size else None
    return first, m, gap


def smallest_eigenpairs(scaled: ScaledStiffness, fac: Optional[Factorization], *, model: Optional[Model] = None,
                        k: Optional[int] = None, rng=0, tol: float = 1e-9, maxiter: int = 400) -> Eigenpairs:
    """Smallest eigenpairs of S (active rows) and the near-singular split, with or without a factorization.

    Parameters
    ----------
    scaled : ScaledStiffness
        S = D^-1/2 K D^-1/2 on the rows with stiffness.
    fac : Factorization or None
        The shared factorization of S - sigma*I on ``scaled.active``; None
        when there is none (the factor would not fit): LOBPCG then.
    model : Model, optional
        DOF map and coordinates, for LOBPCG's rigid-body starting block.
    k : int, optional
        Number of smallest eigenpairs to start with (default 4 with a
        factorization: a healthy model needs no more, and each pair costs
        solves; 8 without, the rigid-body modes of a free 3D body and two);
        doubled while all computed ones are near-singular.
    rng : int or numpy.random.Generator
        Draws the Lanczos and LOBPCG start vectors.
    tol, maxiter : float, int
        LOBPCG's residual tolerance and iteration limit (no factorization).

    Returns
    -------
    Eigenpairs
    """
    rng = np.random.default_rng(rng)
    Sa = scaled.S
    na = Sa.shape[0]
    dense_limit = DENSE_LIMIT if fac is not None else spectrum_iterative.ITERATIVE_DENSE_LIMIT
    converged = True
    if na <= dense_limit:
        w, V = np.linalg.eigh(Sa.toarray())
        lam_max = float(w[-1]) if na else 1.0
        method = "dense symmetric eigensolver (LAPACK syevd), all eigenvalues"
        first, count, gap = split_near_singular(w, lam_max, max(na, 1))
        keep = max(min(na, max(k or 12, 12)), first + count + 1)
        values, vectors = w[:keep], V[:, :keep]
    elif fac is not None:
        own = isinstance(fac, OwnEigensolver)
        lam_max = fac.largest_eigenvalue(rng) if own else largest_eigenvalue(Sa, rng=rng)
        kk = min(na - 2, k or 4)
        while True:
            values, vectors = _smallest_sparse(Sa, fac, kk, rng)
            first, count, gap = split_near_singular(values, lam_max, na)
            if first + count < values.size or kk >= min(na - 2, 512):
                break
            kk = min(na - 2, 2 * kk)
        method = (f"{fac.eigensolver}; {values.size} smallest" if own else
                  f"shift-and-invert Lanczos (ARPACK eigsh, shift {fac.shift:.3g}) for the "
                  f"{values.size} smallest, Lanczos for lambda_max")
    else:
        lam_max = largest_eigenvalue(Sa, rng=rng)

        def all_near_null(vals):
            f, c, _ = split_near_singular(vals, lam_max, na)
            return f + c >= vals.size

        values, vectors, converged, how = spectrum_iterative.lobpcg_smallest(
            Sa, k or spectrum_iterative.DEFAULT_K, model=model if model is not None else Model(scaled.K),
            active=scaled.active, scale=scaled.scale, more_wanted=all_near_null, tol=tol, maxiter=maxiter, rng=rng)
        first, count, gap = split_near_singular(values, lam_max, na)
        method = how + ", Lanczos for lambda_max"
    return _split_result(values, vectors, lam_max, first, count, gap, na, fac, method, converged,
                         dense=na <= dense_limit)


def _split_result(values, vectors, lam_max, first, count, gap, na, fac, method, converged, *, dense) -> Eigenpairs:
    """The split point and the counts the inertia check is compared with."""
    zero = na * EPS * lam_max
    split_point = expected = None
    if count > 0 and first + count < values.size:
        lo = max(values[first + count - 1], zero)
        hi = values[first + count]
        split_point = float(np.sqrt(lo * hi))
        if dense and fac is not None:
            # Every eigenvalue is known: count them. (Adding the factorization's
            # negative pivots to the computed values above its shift miscounts
            # a zero eigenvalue whose round-off sign differs from its pivot's.)
            expected = int(np.count_nonzero(values < split_point))
        elif fac is not None and fac.info.negative_pivots is not None and fac.info.symmetric_pivoting:
            expected = int(fac.info.negative_pivots
                           + np.count_nonzero((values >= fac.shift) & (values < split_point)))
    # Shift-and-invert finds eigenvalues near the shift only: true negative
    # ones far below are counted by the factorization's inertia (when its
    # pivots were read; otherwise only those found are counted).
    if dense:
        negative, exact, how = first, True, "all eigenvalues of S (LAPACK)"
    elif fac is not None and fac.info.negative_pivots is not None and fac.info.symmetric_pivoting:
        negative, exact = int(fac.info.negative_pivots), True
        how = "the factorization's inertia (signs of its pivots, Sylvester's law)"
    elif fac is not None and fac.info.negative_pivots is not None:
        negative, exact = first, False
        how = ("the eigenvalues found near zero by shift-and-invert (no inertia: the factorization "
               "pivoted rows, so the signs of its pivots do not count eigenvalues)")
    elif fac is not None:
        negative, exact = first, False
        how = "the eigenvalues found near zero by shift-and-invert (no inertia: the pivots were not read)"
    else:
        negative, exact = first, False
        how = "the smallest eigenvalues found by LOBPCG (no inertia: no factorization)"
    return Eigenpairs(values, vectors, lam_max, count, first, gap, zero, split_point, expected, negative,
                      method, converged, negative_method=how, negative_exact=exact)


def scaled_spectrum(K: sp.csr_array, fac: Factorization, *, k: Optional[int] = None, rng=0) -> Eigenpairs:
    """:func:`smallest_eigenpairs` of K's scaled matrix on ``fac``'s active rows, with ``fac``."""
    return smallest_eigenpairs(scale_stiffness(K, np.flatnonzero(~fac.active)), fac, k=k, rng=rng)


def iterative_spectrum(model: Model, *, k: int = spectrum_iterative.DEFAULT_K, tol: float = 1e-9,
                       maxiter: int = 400, rng=0) -> Eigenpairs:
    """:func:`smallest_eigenpairs` of the model's S without a factorization (LOBPCG above
    :data:`conditioning.stages.spectrum_iterative.ITERATIVE_DENSE_LIMIT` rows, LAPACK below)."""
    return smallest_eigenpairs(scale_stiffness(model.K), None, model=model, k=k, rng=rng, tol=tol, maxiter=maxiter)


#: lambda_min(S) is confirmed when S - (1 - SMALLEST_MARGIN) lambda_min I has
#: no more negative pivots than S has negative eigenvalues (Sylvester's law);
#: the margin is far above the shift-and-invert run's tolerance 1e-10
#: (project's choice).
SMALLEST_MARGIN = 1e-3
#: Recomputations with more eigenpairs after a failed confirmation (project's choice).
SMALLEST_RETRIES = 2


def confirm_smallest(eig: Eigenpairs, scaled: ScaledStiffness, fac: Factorization, *, rng=0) -> Eigenpairs:
    """``eig`` with its smallest nonnegative eigenvalue confirmed by an inertia count, recomputed when it fails.

    Shift-and-invert Lanczos can return the second-smallest eigenvalue with
    a residual that passes its test when its start has almost no component
    along the smallest eigenvector. Sylvester's law of inertia counts the
    eigenvalues of S below c = (1 - SMALLEST_MARGIN) lambda_min from the
    pivots of S - cI (one more factorization, in the shared ordering): more
    than the negative ones means eigenvalues were missed, and the smallest
    eigenpairs are computed again with that many more. Only for the
    shift-and-invert path with the factorization's inertia; the dense path
    has every eigenvalue. The outcome is added to ``method``.
    """
    j = eig.first
    if (eig.values.size <= j or fac.info.negative_pivots is None or not eig.negative_exact
            or fac.shift != 0.0 or scaled.S.shape[0] <= DENSE_LIMIT):
        return eig
    rng = np.random.default_rng(rng)
    for attempt in range(SMALLEST_RETRIES + 1):
        lam = float(eig.values[eig.first])
        if lam <= eig.zero_level:
            return eig  # zero at working precision: the mode count is the inertia check's
        below = fac.count_below((1 - SMALLEST_MARGIN) * lam)
        if below is None:
            return replace(eig, method=eig.method + "; lambda_min not confirmed (the inertia count could not be read)")
        missed = below - eig.negative
        if missed <= 0:
            note = "confirmed" if attempt == 0 else f"recomputed {attempt} time(s) until confirmed"
            return replace(eig, method=eig.method + f"; lambda_min {note} by an inertia count (no eigenvalue of S "
                                                    f"below (1 - {SMALLEST_MARGIN:g}) lambda_min, Sylvester's law)")
        logger.warning("%d eigenvalue(s) of S below the smallest found (%.6g): recomputing", missed, lam)
        eig = smallest_eigenpairs(scaled, fac, k=min(scaled.S.shape[0] - 2, eig.values.size + missed + 2), rng=rng)
    return replace(eig, method=eig.method + "; lambda_min NOT confirmed by the inertia count after recomputing")


def confirm_largest(eig: Eigenpairs, scaled: ScaledStiffness, fac: Optional[Factorization], *, rng=0) -> Eigenpairs:
    """``eig`` with lambda_max(S) bounded by a probabilistic stopping test (no factorization).

    Lanczos stops when its largest Ritz value has a small residual, which
    shows that some eigenvalue is near it, not that it is the largest. A
    second Lanczos run from a random start, for the number of steps the
    Kuczynski-Wozniakowski bound needs (:func:`largest_eigenvalue_bounded`),
    gives a Ritz value within KW_EPS of lambda_max with probability at least
    1 - KW_FAIL; S + sigma I is positive semi-definite with sigma from the
    factorization's inertia (or Gershgorin's discs). The larger of the two
    Ritz values is kept (both are at most lambda_max). Only above the dense
    limit (LAPACK has every eigenvalue). Replaces an inertia count of
    S - (1 + delta) lambda_max I, which cost one more sparse factorization.
    """
    Sa = scaled.S
    na = Sa.shape[0]
    if na <= DENSE_LIMIT or not eig.lambda_max > 0 or eig.method.startswith("dense"):
        return eig  # every eigenvalue by LAPACK
    sigma, why = psd_shift(Sa, fac)
    theta, how = largest_eigenvalue_bounded(
        Sa, shift=sigma, shift_how=why, name="S", rng=rng)
    lam = max(eig.lambda_max, theta)
    note = f"; lambda_max by {how}"
    if theta > eig.lambda_max * (1 + KW_EPS):
        logger.warning("lambda_max of S %.6g was %.2g%% low: %.6g", eig.lambda_max,
                       100 * (1 - eig.lambda_max / theta), theta)
        note += f" (the first Lanczos run's value was {100 * (1 - eig.lambda_max / theta):.2g}% low: recomputed)"
    return replace(eig, lambda_max=lam, zero_level=na * EPS * lam, method=eig.method + note)


def inertia_check(fac: Factorization, eig: Eigenpairs) -> Optional[int]:
    """Sylvester's cross-check of the mode count: eigenvalues of S below the split point.

    Releases the shared factorization first (its solves are no longer
    available afterwards), then factors S - c*I with the same ordering, so
    the two factors never coexist in memory; run it after every stage that
    solves.

    Returns
    -------
    int or None
        Negative pivots of S - c*I; None without a split point, or when the
        count is not an inertia (see :meth:`Factorization.count_below`).
    """
    if eig.split_point is None:
        return None
    fac.release()
    return fac.count_below(eig.split_point)


def spectrum_result(eig: Eigenpairs, modes: list[NearSingularMode], stiff_link_eigenvalues: list[float],
                    active: NDArray[np.bool_], *, inertia_count: Optional[int] = None) -> SpectrumResult:
    """The public spectrum result from the stage's eigenpairs and the located modes.

    Returns
    -------
    SpectrumResult
        ``smallest`` keeps at least 12 eigenvalues and one beyond the split;
        ``count`` is the number of located modes (DOFs without stiffness
        included), ``mode_groups`` groups them by kind and part;
        ``inertia_agrees`` compares ``inertia_count`` with ``eig.below_split``.
    """
    method = eig.method if eig.converged else (
        eig.method + "; did not converge: the smallest eigenvalue is an upper bound")
    return SpectrumResult(
        smallest=eig.values[: max(12, eig.first + eig.count + 1)],
        count=len(modes),
        gap=eig.gap,
        gap_rule=GAP_RULE,
        inertia_count=inertia_count,
        inertia_agrees=None if inertia_count is None or eig.below_split is None
        else inertia_count == eig.below_split,
        negative_eigenvalues=int(eig.negative),
        negative_method=eig.negative_method,
        negative_exact=eig.negative_exact,
        modes=modes,
        method=method,
        smallest_vector=_smallest_vector(eig, active),
        below_split=eig.below_split,
        stiff_link_eigenvalues=list(stiff_link_eigenvalues),
        mode_groups=group_modes(modes),
    )


def with_low_end_search(spectrum: SpectrumResult, S: sp.sparray, *, rng=0) -> SpectrumResult:
    """``spectrum`` with the negative eigenvalues a Lanczos search of S's low end proves.

    For a spectrum whose negative count is only what the eigensolver found
    (``negative_exact`` False): a negative eigenvalue far below zero is outside
    a shift-and-invert window. The count becomes the larger of the two (they
    may be the same eigenvalues) and stays a lower bound; ``negative_method``
    says what the search showed (:func:`conditioning.linalg.negative_eigenvalues.search_negative_eigenvalues`).
    """
    search = search_negative_eigenvalues(S, rng=rng)
    return replace(spectrum, negative_eigenvalues=max(spectrum.negative_eigenvalues, search.proved),
                   negative_method=f"{spectrum.negative_method}; {search.how}")


def with_inertia(spectrum: SpectrumResult, inertia_count: Optional[int]) -> SpectrumResult:
    """``spectrum`` with the inertia check's count and whether it agrees with ``below_split``."""
    agrees = None if inertia_count is None or spectrum.below_split is None else inertia_count == spectrum.below_split
    return replace(spectrum, inertia_count=inertia_count, inertia_agrees=agrees)


def _smallest_vector(eig: Eigenpairs, active) -> Optional[NDArray[np.float64]]:
    """The eigenvector of S's smallest eigenvalue (beyond true negative ones), on all rows."""
    j = eig.first
    if eig.vectors.shape[1] <= j:
        return None
    v = np.zeros(active.size)
    v[active] = eig.vectors[:, j]
    return v
