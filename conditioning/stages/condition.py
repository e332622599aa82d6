"""Condition numbers of the stiffness matrix, raw and after diagonal scaling.

Three figures, each labelled with how it was obtained:

* kappa_2(K) = lambda_max / lambda_min from the extreme eigenvalues (Lanczos
  for lambda_max, shift-and-invert Lanczos through the shared factorization
  for lambda_min);
* the Hager-Higham estimate of kappa_1(K) = ||K||_1 ||K^-1||_1, a lower bound
  usually within a factor 3, as LAPACK's xPOCON reports it
  (scipy.sparse.linalg.onenormest on the factor solves);
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

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from conditioning.engine.scipy_engine import SharedFactorization
from conditioning.linalg.one_norm import one_norm_estimate
from conditioning.results import ConditionResult
from conditioning.stages.spectrum import DENSE_LIMIT, ScaledSpectrum, largest_eigenvalue

logger = logging.getLogger(__name__)


def _lambda_min_raw(K: sp.csr_array, fac: SharedFactorization, spectrum: ScaledSpectrum) -> float:
    """Eigenvalue of K nearest zero, by Lanczos on K^-1 = D^-1/2 S^-1 D^-1/2 (K nonsingular).

    The Lanczos start is the smallest eigenvector of S mapped to K's DOFs,
    usually close to K's own, so that few solves are needed.
    """
    n = K.shape[0]
    if n <= DENSE_LIMIT:
        w = np.linalg.eigvalsh(K.toarray())
        return float(w[np.argmin(np.abs(w))])
    op = spla.LinearOperator((n, n), matvec=fac.solve, dtype=np.float64)
    v0 = None
    if spectrum.vectors.shape[1] > spectrum.first:
        v0 = np.zeros(n)
        v0[fac.active] = spectrum.vectors[:, spectrum.first]
        v0 = fac.scale * v0
        v0 /= np.linalg.norm(v0)
    if fac.info.negative_pivots == 0:
        # K positive definite: 1/lambda_min is the largest eigenvalue of K^-1.
        return 1.0 / largest_eigenvalue(op, rtol=1e-4, v0=v0)
    if v0 is None:
        v0 = np.random.default_rng(54321).standard_normal(n)
    mu = spla.eigsh(op, k=1, which="LM", tol=1e-4, v0=v0, return_eigenvectors=False)
    return 1.0 / float(mu[0])


def _one_norm_condition(K: sp.csr_array, fac: SharedFactorization) -> float:
    """Hager-Higham lower bound on ||K||_1 ||K^-1||_1 (K symmetric)."""
    n = K.shape[0]
    if n <= 4:
        return float(np.linalg.norm(K.toarray(), 1) * np.linalg.norm(np.linalg.inv(K.toarray()), 1))
    inv = spla.LinearOperator((n, n), matvec=fac.solve, rmatvec=fac.solve, matmat=fac.solve,
                              dtype=np.float64)
    norm_k = float(abs(K).sum(axis=0).max())
    # Seed 1: the global state the digits stage used to leave behind, so the
    # figures stay as they were until diagnose(seed=) is threaded here.
    return norm_k * one_norm_estimate(inv, t=2, rng=1)


def condition_numbers(K: sp.csr_array, fac: SharedFactorization, spectrum: ScaledSpectrum,
                      *, free_modes: int | None = None) -> ConditionResult:
    """kappa_2 raw and scaled, and the 1-norm estimate, for the model's K.

    ``free_modes`` is the number of genuine near-singular modes (after small
    eigenvalues of S caused by stiff links are set aside); by default every
    eigenvalue of S below the gap counts.

    Returns
    -------
    ConditionResult
        With ``singular=True`` and the raw, scaled and 1-norm figures set to
        None when K has near-singular modes below the gap or rows without
        stiffness (its condition number is then infinite at working precision).
    """
    K = sp.csr_array(K)
    free = spectrum.count if free_modes is None else free_modes
    singular = bool(fac.singular or free > 0)
    lam_max = float(np.linalg.eigvalsh(K.toarray())[-1]) if K.shape[0] <= DENSE_LIMIT else largest_eigenvalue(K)
    dense = K.shape[0] <= DENSE_LIMIT
    how_max = "dense eigensolver (LAPACK)" if dense else "Lanczos (residual bound 1e-3 relative)"
    s_lmin = None
    if spectrum.values.size:
        pos = spectrum.values[spectrum.values > 0]
        s_lmin = float(np.min(np.abs(spectrum.values))) if spectrum.values.size else None
    scaled_method = (f"2-norm of S = D^-1/2 K D^-1/2 from its extreme eigenvalues ({spectrum.method}); "
                     "governs the accuracy of a Cholesky-type solve (van der Sluis 1969; Demmel 1989)")
    if singular:
        return ConditionResult(
            singular=True, lambda_max=lam_max, lambda_min=None, estimate=None,
            estimate_method=_singular_because(free, fac.active.size - int(fac.active.sum())),
            scaled_estimate=None, scaled_lambda_min=s_lmin, scaled_lambda_max=spectrum.lambda_max,
            scaled_method=scaled_method, one_norm_estimate=None,
            one_norm_method="not computed: K is singular", scaling_gain_digits=None,
        )
    lam_min = _lambda_min_raw(K, fac, spectrum)
    kappa = lam_max / abs(lam_min) if lam_min != 0 else math.inf
    s_kappa = spectrum.lambda_max / s_lmin if s_lmin else math.inf
    how_min = ("dense eigensolver (LAPACK)" if dense else
               "Lanczos on K^-1 through the shared factorization (residual bound 1e-4 relative)")
    k1 = _one_norm_condition(K, fac)
    gain = math.log10(kappa / s_kappa) if math.isfinite(kappa) and math.isfinite(s_kappa) and s_kappa > 0 else None
    return ConditionResult(
        singular=False, lambda_max=lam_max, lambda_min=lam_min, estimate=kappa,
        estimate_method=f"2-norm, |lambda_max| / |lambda_min|: lambda_max by {how_max}, lambda_min by {how_min}",
        scaled_estimate=s_kappa, scaled_lambda_min=s_lmin, scaled_lambda_max=spectrum.lambda_max,
        scaled_method=scaled_method, one_norm_estimate=k1,
        one_norm_method="1-norm, Hager-Higham block estimate of ||K^-1||_1 (scipy onenormest on the "
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
