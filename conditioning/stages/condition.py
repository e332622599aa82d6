"""Condition numbers of the stiffness matrix, raw and after diagonal scaling.

Three figures, each labelled with how it was obtained:

* kappa_2(K) = lambda_max / lambda_min from the extreme eigenvalues (Lanczos
  for lambda_max, shift-and-invert Lanczos through the shared factorization
  for lambda_min);
* the Hager-Higham estimate of kappa_1(K) = ||K||_1 ||K^-1||_1, a lower bound
  usually within a factor 3, as LAPACK's xPOCON reports it
  (:func:`conditioning.linalg.onenormest.one_norm_estimate` on the factor
  solves, with the run's random generator);
* kappa_2(S) of the symmetrically scaled S = D^-1/2 K D^-1/2, which governs
  the accuracy of a Cholesky-type solve.

References
----------
.. [1] W. W. Hager (1984), "Condition estimates", SIAM J. Sci. Stat. Comput.
       5(2), pp. 311-316.
.. [2] N. J. Higham and F. Tisseur (2000), "A Block Algorithm for Matrix 1-Norm
       Estimation, with an Application to 1-Norm Pseudospectra", SIAM J.
       Matrix Anal. Appl. 21(4), pp. 1185-1201.
.. [3] A. van der Sluis (1969), "Condition numbers and equilibration of
       matrices", Numer. Math. 14, pp. 14-23 (from memory).
.. [4] J. W. Demmel (1989), "On floating point errors in Cholesky", LAPACK
       Working Note 14 (from memory).
"""

from __future__ import annotations

import logging
import math
from typing import Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from conditioning.engine.base import Factorization
from conditioning.linalg.floating_point import EPS
from conditioning.linalg.onenormest import one_norm_estimate
from conditioning.results import ConditionResult
from conditioning.stages.spectrum import (DENSE_LIMIT, KW_EPS, Eigenpairs, largest_eigenvalue,
                                          largest_eigenvalue_bounded, psd_shift)

logger = logging.getLogger(__name__)


#: LAPACK's symmetric eigenvalues carry an absolute error of about n eps ||K||_2
#: (Demmel 1997, section 5.2; from memory). The dense eigenvalue nearest zero
#: is taken only when it exceeds DENSE_TRUST times that bound, so that the bound
#: is at most 1% of it; below, it is round-off (a penalty of 1e13 beside
#: ordinary stiffnesses of 1e11 leaves lambda_min ~ 3e2 under an error of
#: ~3e10) and lambda_min comes from K^-1 through the factor's solves instead.
DENSE_TRUST = 100.0


def _lambda_min_raw(K: sp.csr_array, fac: Factorization, spectrum: Eigenpairs, rng) -> tuple[float, str]:
    """(eigenvalue of K nearest zero, in K's units; how it was obtained), K nonsingular.

    Dense LAPACK below DENSE_LIMIT rows when its absolute accuracy resolves
    that eigenvalue; otherwise by the extreme eigenvalue of K^-1 =
    D^-1/2 S^-1 D^-1/2 through the shared factorization: dense (K^-1 from n
    solves) below DENSE_LIMIT rows, Lanczos above. The Lanczos start is the
    smallest eigenvector of S mapped to K's DOFs, usually close to K's own,
    so that few solves are needed.
    """
    n = K.shape[0]
    if n <= DENSE_LIMIT:
        w = np.linalg.eigvalsh(K.toarray())
        lam = float(w[np.argmin(np.abs(w))])
        if abs(lam) > DENSE_TRUST * n * EPS * float(np.max(np.abs(w))):
            return lam, "dense eigensolver (LAPACK)"
        inv = fac.solve(np.eye(n))
        mu = np.linalg.eigvalsh(0.5 * (inv + inv.T))
        how = ("1 / the largest eigenvalue of K^-1 (dense, from the factor's solves; LAPACK's own "
               "eigenvalue of K nearest zero is below its resolution n eps ||K||)")
        return 1.0 / float(mu[np.argmax(np.abs(mu))]), how
    how = "Lanczos on K^-1 through the shared factorization (residual bound 1e-4 relative)"
    op = spla.LinearOperator((n, n), matvec=fac.solve, dtype=np.float64)
    v0 = None
    if spectrum.vectors.shape[1] > spectrum.first:
        v0 = np.zeros(n)
        v0[fac.active] = spectrum.vectors[:, spectrum.first]
        v0 = fac.scale * v0
        v0 /= np.linalg.norm(v0)
    if fac.info.negative_pivots == 0:
        # K positive definite: 1/lambda_min is the largest eigenvalue of K^-1.
        lam = 1.0 / largest_eigenvalue(op, rtol=1e-4, v0=v0, check_every=1)
        return confirmed_lambda_min(K, fac, lam, op, how, rng)
    if v0 is None:
        v0 = rng.standard_normal(n)
    mu = spla.eigsh(op, k=1, which="LM", tol=1e-4, v0=v0, return_eigenvectors=False)
    return 1.0 / float(mu[0]), how


#: lambda_min is confirmed when K - (1 - INERTIA_MARGIN) lambda_min I has no
#: negative pivot (Sylvester's law); the margin is ten times the Lanczos run's
#: relative residual tolerance 1e-4 (project's choice).
INERTIA_MARGIN = 1e-3
#: Recomputations of lambda_min after a failed confirmation (project's choice).
CONFIRM_RETRIES = 2


#: A count of K's eigenvalues below c is trusted when the shift, in the scaled
#: matrix S - c D^-1, moves some eigenvalue by more than this many times
#: n eps lambda_max(S), the worst-case error of the float64 elimination that
#: counts them (the project's choice; below it the count is not read).
TRUST_ROOM = 1.0


def count_below_raw(K: sp.csr_array, c: float, perm) -> Optional[int]:
    """Eigenvalues of K below c from the pivots' signs of D^-1/2 (K - cI) D^-1/2 = S - c D^-1 (Sylvester),
    factored in the ordering ``perm``.

    None when SuperLU pivoted rows (the count would not be an inertia), the
    shifted matrix was exactly singular, or the shift is below what a float64
    elimination resolves (``TRUST_ROOM``).
    """
    n = K.shape[0]
    d = np.abs(K.diagonal())
    if np.any(d == 0):
        return None
    s = 1.0 / np.sqrt(d)
    S = sp.csr_array(sp.diags(s) @ K @ sp.diags(s))
    lam_s = float(abs(S).sum(axis=1).max())
    if abs(c) * float(np.max(1.0 / d)) <= TRUST_ROOM * n * EPS * lam_s:
        return None
    A = sp.csr_array(S - sp.diags(c / d))
    if perm is not None:
        A = A[perm][:, perm]
    try:
        lu = spla.splu(sp.csc_array(A), permc_spec="NATURAL" if perm is not None else "MMD_AT_PLUS_A",
                       diag_pivot_thresh=0.0, options=dict(SymmetricMode=True))
    except RuntimeError:
        return None
    if not np.array_equal(lu.perm_r, lu.perm_c):
        return None
    return int(np.count_nonzero(lu.U.diagonal() < 0))


def confirmed_lambda_min(K: sp.csr_array, fac: Factorization, lam: float, op, how: str,
                         rng) -> tuple[float, str]:
    """(lambda_min, how) with lam confirmed by an inertia count, recomputed when the count fails.

    A Lanczos run on K^-1 that starts almost orthogonal to K's smallest
    eigenvector converges to the next one with a residual that passes its
    test; K - (1 - INERTIA_MARGIN) lam I then has a negative pivot. The
    recomputation takes that many more eigenvalues of K^-1 (ARPACK, random
    start) and keeps the largest.
    """
    try:
        perm = fac.ordering_permutation()
    except (AttributeError, NotImplementedError):
        perm = None
    if fac.info.pivots_note:  # memory is tight: no second factorization
        return lam, how + "; not confirmed by an inertia count (no memory for a second factorization)"
    rng = np.random.default_rng(rng)
    n = K.shape[0]
    for attempt in range(CONFIRM_RETRIES + 1):
        below = count_below_raw(K, (1 - INERTIA_MARGIN) * lam, perm)
        if below is None:
            return lam, how + ("; not confirmed by an inertia count (the shift is below what a float64 "
                               "elimination resolves, or SuperLU pivoted rows)")
        if below == 0:
            note = "confirmed" if attempt == 0 else f"recomputed {attempt} time(s) until confirmed"
            return lam, (how + f"; {note} by an inertia count (no eigenvalue of K below "
                         f"(1 - {INERTIA_MARGIN:g}) lambda_min, Sylvester's law)")
        logger.warning("lambda_min %.6g not the smallest: %d eigenvalue(s) of K below it; recomputing", lam, below)
        k = min(n - 1, below + 1)
        mu = spla.eigsh(op, k=k, which="LA", tol=1e-8, v0=rng.standard_normal(n), return_eigenvectors=False)
        lam = 1.0 / float(np.max(mu))
    return lam, how + "; NOT confirmed by the inertia count after recomputing"


def confirmed_lambda_max(K: sp.csr_array, fac: Optional[Factorization], lam: float, how: str,
                         rng) -> tuple[float, str]:
    """(lambda_max of K, how), bounded by a probabilistic stopping test (no factorization).

    A Lanczos run from a random start for the number of steps the Kuczynski-Wozniakowski
    bound needs (:func:`conditioning.stages.spectrum.largest_eigenvalue_bounded`): its Ritz
    value is within KW_EPS of lambda_max with probability at least 1 - KW_FAIL. K + sigma I
    is positive semi-definite with sigma from the shared factorization's inertia (S - cI
    with no negative pivot gives K >= c D, D = diag K) or from Gershgorin's discs. The
    larger of ``lam`` and that Ritz value is kept (both are at most lambda_max). Replaces
    an inertia count of K - (1 + delta) lam I, which cost one more sparse factorization.
    """
    sigma, why = psd_shift(K, fac, diagonal=np.abs(K.diagonal()))
    theta, bounded = largest_eigenvalue_bounded(
        K, shift=sigma, shift_how=why, name="K", rng=rng)
    if math.isfinite(lam) and theta > lam * (1 + KW_EPS):
        logger.warning("lambda_max of K %.6g was %.2g%% low: %.6g", lam, 100 * (1 - lam / theta), theta)
        return theta, bounded + f" (the first Lanczos run's value was {100 * (1 - lam / theta):.2g}% low: recomputed)"
    return max(lam, theta), bounded


#: K's largest entry is brought to 2**BIG_TARGET (resp. 2**-BIG_TARGET) before norms and
#: eigenvalues when it lies beyond 2**BIG_EXPONENT (about 1e289, resp. below 1e-289): room for
#: sums of n entries and for squares, and 500 binary orders below it before any entry could
#: become subnormal. The project's choice; a scale of 1 (nothing done) for every other matrix.
BIG_EXPONENT, BIG_TARGET = 960, 500


def exponent_scale(K) -> float:
    """A power of two c such that c * K keeps clear of overflow and underflow; 1.0 for ordinary K."""
    big = float(np.max(np.abs(K.data))) if K.nnz else 0.0
    if big == 0.0 or not math.isfinite(big):
        return 1.0
    e = math.frexp(big)[1]
    if e > BIG_EXPONENT:
        return math.ldexp(1.0, BIG_TARGET - e)
    if e < -BIG_EXPONENT:
        return math.ldexp(1.0, -BIG_TARGET - e)
    return 1.0


class _Rescaled:
    """The shared factorization of K seen as one of c * K: solve(x) = (cK)^-1 x, kept in range."""

    def __init__(self, fac: Factorization, c: float):
        self._fac, self._c = fac, c

    def __getattr__(self, name):
        return getattr(self._fac, name)

    def solve(self, x):
        x = np.asarray(x, dtype=np.float64)
        # K huge (c < 1): K^-1 x is small, divide after; K tiny (c > 1): scale x down first.
        return self._fac.solve(x) / self._c if self._c < 1.0 else self._fac.solve(x / self._c)


def _one_norm_condition(K: sp.csr_array, fac: Factorization, rng) -> float:
    """Hager-Higham lower bound on ||K||_1 ||K^-1||_1 (K symmetric)."""
    n = K.shape[0]
    if n <= 4:
        return float(np.linalg.norm(K.toarray(), 1) * np.linalg.norm(np.linalg.inv(K.toarray()), 1))
    norm_k = float(abs(K).sum(axis=0).max())
    return norm_k * one_norm_estimate(fac.solve, fac.solve, n, t=2, rng=rng)


def condition_numbers(K: sp.csr_array, fac: Optional[Factorization], spectrum: Eigenpairs,
                      *, free_modes: Optional[int] = None, empty_rows: Optional[int] = None,
                      no_factorization: str = "no factorization", rng=0) -> ConditionResult:
    """kappa_2 raw and scaled, and the 1-norm estimate, for the model's K.

    Parameters
    ----------
    K : (n, n) sparse, symmetric
        Stiffness in the model's units.
    fac : Factorization or None
        The shared factorization; None when there is none: the raw kappa_2
        and the 1-norm figure are then not computed (their methods say why)
        and the scaled one rests on the spectrum stage's eigenvalues alone.
    spectrum : Eigenpairs
        The spectrum stage's smallest eigenvalues and lambda_max of S.
    free_modes : int, optional
        The number of genuine near-singular modes (after small eigenvalues
        of S caused by stiff links are set aside); by default every
        eigenvalue of S below the gap counts.
    empty_rows : int, optional
        DOFs without stiffness (default: the rows ``fac`` leaves out, 0
        without a factorization).
    no_factorization : str
        Why there is no factorization, for the methods of the figures it
        would have given.
    rng : int or numpy.random.Generator
        Draws the start vectors of the Lanczos runs and the 1-norm estimator.

    Returns
    -------
    ConditionResult
        With ``singular=True`` and the raw, scaled and 1-norm figures set to
        None when K has near-singular modes below the gap or rows without
        stiffness (its condition number is then infinite at working precision).
    """
    K = sp.csr_array(K)
    rng = np.random.default_rng(rng)
    # Entries near overflow (or underflow) are scaled by a power of two c, exactly, before any
    # norm, square or eigenvalue is formed; kappa does not change, lambdas are divided back by c.
    c = exponent_scale(K)
    Kc, fac_c = (K, fac) if c == 1.0 else (sp.csr_array(K * c), None if fac is None else _Rescaled(fac, c))
    free = spectrum.count if free_modes is None else free_modes
    if empty_rows is None:
        empty_rows = 0 if fac is None else fac.active.size - int(fac.active.sum())
    singular = bool((fac is not None and fac.singular) or free > 0 or empty_rows > 0)
    dense = K.shape[0] <= DENSE_LIMIT
    if dense:
        lam_max_c, how_max = float(np.linalg.eigvalsh(Kc.toarray())[-1]), "dense eigensolver (LAPACK)"
    else:
        # One Lanczos run, its length fixed by the Kuczynski-Wozniakowski bound: the estimate
        # and its confirmation at once (no residual-stopped run before it).
        lam_max_c, how_max = confirmed_lambda_max(Kc, fac_c, -math.inf, "", rng)
    with np.errstate(over="ignore"):
        lam_max = lam_max_c / c  # in K's units: inf when K's own lambda_max is beyond float64
    s_lmin = float(np.min(np.abs(spectrum.values))) if spectrum.values.size else None
    scaled_method = (f"2-norm of S = D^-1/2 K D^-1/2 from its extreme eigenvalues ({spectrum.method}); "
                     "governs the accuracy of a Cholesky-type solve (van der Sluis 1969; Demmel 1989)")
    if not spectrum.converged:
        scaled_method += "; the eigensolver did not converge: the smallest eigenvalue is an upper bound"
    if singular:
        return ConditionResult(
            singular=True, lambda_max=lam_max, lambda_min=None, estimate=None,
            estimate_method=_singular_because(free, empty_rows),
            scaled_estimate=None, scaled_lambda_min=s_lmin, scaled_lambda_max=spectrum.lambda_max,
            scaled_method=scaled_method, one_norm_estimate=None,
            one_norm_method="not computed: K is singular", scaling_gain_digits=None,
        )
    s_kappa = spectrum.lambda_max / s_lmin if s_lmin else math.inf
    if fac is None:
        return ConditionResult(
            singular=False, lambda_max=lam_max, lambda_min=None, estimate=None,
            estimate_method=f"not computed: {no_factorization}",
            scaled_estimate=s_kappa, scaled_lambda_min=s_lmin, scaled_lambda_max=spectrum.lambda_max,
            scaled_method=scaled_method, one_norm_estimate=None,
            one_norm_method=f"not computed: {no_factorization}", scaling_gain_digits=None,
        )
    lam_min_c, how_min = _lambda_min_raw(Kc, fac_c, spectrum, rng)
    lam_min = lam_min_c / c
    kappa = lam_max_c / abs(lam_min_c) if lam_min_c != 0 else math.inf
    k1 = _one_norm_condition(Kc, fac_c, rng)
    gain = math.log10(kappa / s_kappa) if math.isfinite(kappa) and math.isfinite(s_kappa) and s_kappa > 0 else None
    return ConditionResult(
        singular=False, lambda_max=lam_max, lambda_min=lam_min, estimate=kappa,
        estimate_method=f"2-norm, |lambda_max| / |lambda_min|: lambda_max by {how_max}, lambda_min by {how_min}",
        scaled_estimate=s_kappa, scaled_lambda_min=s_lmin, scaled_lambda_max=spectrum.lambda_max,
        scaled_method=scaled_method, one_norm_estimate=k1,
        one_norm_method="1-norm, Hager-Higham block estimate of ||K^-1||_1 (Algorithm 2.4, t = 2, on the "
        "factor solves) times ||K||_1: a lower bound, usually within a factor 3 (as LAPACK xPOCON)",
        scaling_gain_digits=gain,
    )


def _singular_because(free: int, empty: int) -> str:
    """Why K is singular, counting what the mode table lists under the same names."""
    why = []
    if free:
        why.append(f"{free} zero-energy mode(s) of S below the spectral gap")
    if empty:
        why.append(f"{empty} DOF(s) without stiffness")
    return "singular: " + (" and ".join(why) if why else
                           "the factorization met a zero pivot (it needed a shift)")
