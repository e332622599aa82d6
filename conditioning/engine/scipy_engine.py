"""The one sparse factorization that every later stage shares.

The matrix factored is the symmetrically scaled stiffness

    S = D^-1/2 K D^-1/2,   D = diag(|K_ii|)   (unit diagonal),

shifted to S - sigma*I with a small negative sigma only when S is singular
at working precision. Scaling first makes the pivot test, the shift and the
eigenvalue thresholds independent of the model's units, and costs nothing in
accuracy: a solve with K is recovered exactly as x = D^-1/2 S^-1 D^-1/2 f.

The factorization is SuperLU (scipy.sparse.linalg.splu) in symmetric mode
with diagonal pivoting, so for a matrix whose diagonal pivots are all usable
it is an LDL^T in disguise: U = D_piv L^T. The signs of the pivots then give
the inertia of S - sigma*I (Sylvester's law of inertia).
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass
from typing import Callable, Optional, Union

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS
from conditioning.results import FactorizationInfo

logger = logging.getLogger(__name__)

#: A fill-reducing ordering: (pattern, coordinates per row or None) -> permutation.
OrderingFunction = Callable[[sp.csr_array, Optional[NDArray[np.float64]]], NDArray[np.intp]]
Ordering = Union[str, OrderingFunction]

#: Below this many rows the factor's size is not predicted (it always fits).
PREDICT_ABOVE = 20000


class FactorizationTooLarge(MemoryError):
    """The predicted factor does not fit the memory limit (raised before factorizing).

    Attributes
    ----------
    prediction : conditioning.results.FactorMemoryPrediction
    limit : int
        Bytes allowed.
    """

    def __init__(self, prediction, limit: int):
        self.prediction = prediction
        self.limit = int(limit)
        super().__init__(f"the factorization would need about {prediction.bytes / 2**30:.1f} GiB "
                         f"(limit {limit / 2**30:.1f} GiB)")
SUPERLU_ORDERINGS = ("MMD_AT_PLUS_A", "MMD_ATA", "COLAMD", "NATURAL")


def diagonal_scaling(K: sp.csr_array) -> NDArray[np.float64]:
    """s_i = 1/sqrt(|K_ii|), and 1 where K_ii = 0; S = diag(s) K diag(s)."""
    d = np.abs(K.diagonal())
    s = np.ones_like(d)
    pos = d > 0
    s[pos] = 1.0 / np.sqrt(d[pos])
    return s


def scaled_matrix(K: sp.csr_array, s: NDArray[np.float64]) -> sp.csr_array:
    """diag(s) K diag(s) in CSR, computed without forming the diagonal matrices."""
    K = sp.csr_array(K)
    rows = np.repeat(np.arange(K.shape[0]), np.diff(K.indptr))
    data = K.data * s[rows] * s[K.indices]
    return sp.csr_array((data, K.indices.copy(), K.indptr.copy()), shape=K.shape)


@dataclass
class SharedFactorization:
    """A factorization of S - sigma*I on the active rows, with solves.

    Attributes
    ----------
    n : int
        Rows of K.
    scale : (n,) float64
        s with S = diag(s) K diag(s).
    shift : float
        sigma; 0.0 when S itself was factored.
    active : (n,) bool
        Rows included in the factorization (rows with any stiffness).
    pivots : (n,) float64
        Pivot of each row in the factorization of S - sigma*I, original row
        order; 0 for inactive rows.
    singular : bool
        True when S (restricted to active rows) had no usable unshifted
        factorization, or K has rows without stiffness.
    info : FactorizationInfo
    """

    n: int
    scale: NDArray[np.float64]
    shift: float
    active: NDArray[np.bool_]
    pivots: NDArray[np.float64]
    singular: bool
    info: FactorizationInfo
    _lu: object
    _perm: Optional[NDArray[np.intp]]

    def solve_scaled(self, b: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S - sigma*I)^-1 b on the active rows (inactive rows of the result are 0)."""
        b = np.asarray(b, dtype=np.float64)
        out = np.zeros_like(b)
        out[self.active] = self.solve_active(b[self.active])
        return out

    def release(self) -> None:
        """Free the factors (solves are no longer possible); pivots and info stay."""
        self._lu = None

    def solve_active(self, b: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S_a - sigma*I)^-1 b for b indexed by the active rows only."""
        b = np.asarray(b, dtype=np.float64)
        if self._perm is None:
            return self._lu.solve(b)
        x = np.empty_like(b)
        x[self._perm] = self._lu.solve(b[self._perm])
        return x

    def solve(self, f: NDArray[np.float64]) -> NDArray[np.float64]:
        """K^-1 f = diag(s) S^-1 diag(s) f, in float64 as a production solver gets it.

        Raises
        ------
        RuntimeError
            When K is singular (the factorization is of a shifted matrix).
        """
        if self.singular or self.shift != 0.0:
            raise RuntimeError("K is singular: only the shifted factorization exists")
        f = np.asarray(f, dtype=np.float64)
        s = self.scale if f.ndim == 1 else self.scale[:, None]
        return s * self.solve_scaled(s * f)


def _resolve_ordering(ordering: Ordering, K, coords) -> Ordering:
    if ordering != "auto":
        return ordering
    try:  # the scale stage's own choice, when present
        from conditioning.engine.ordering import choose_ordering
    except ImportError:
        return "MMD_AT_PLUS_A"
    return choose_ordering(K, coords)


def _superlu(A: sp.csc_array, permc_spec: str):
    return spla.splu(
        A,
        permc_spec=permc_spec,
        diag_pivot_thresh=0.0,
        options=dict(SymmetricMode=True),
    )


def _factor_once(S: sp.csr_array, ordering: Ordering, coords, memory_limit=None):
    """splu of S with the ordering; returns (lu, perm or None, pivots in S's order, info-ish)."""
    perm = None
    if callable(ordering):
        perm = np.asarray(ordering(S, coords), dtype=np.intp)
    if memory_limit is not None and S.shape[0] > PREDICT_ABOVE:
        from conditioning.engine.memory import predict_factor_memory

        prediction = predict_factor_memory(S, perm, coords=coords)
        logger.info("predicted factor memory %.2f GiB (%s)", prediction.bytes / 2**30, prediction.method)
        if prediction.bytes > memory_limit:
            raise FactorizationTooLarge(prediction, memory_limit)
    if callable(ordering):
        A = sp.csc_array(S[perm][:, perm])
        name = getattr(ordering, "ordering_name", getattr(ordering, "__name__", "custom"))
        spec = "NATURAL"
    else:
        if ordering not in SUPERLU_ORDERINGS:
            raise ValueError(f"unknown ordering {ordering!r}; expected one of {SUPERLU_ORDERINGS} or a callable")
        A = sp.csc_array(S)
        name = spec = ordering
    lu = _superlu(A, spec)
    U = lu.U
    d_perm = U.diagonal()
    # Pr A Pc = L U: column j of A is column perm_c[j] of the factored matrix.
    d = d_perm[lu.perm_c]
    # U = D L^T in symmetric mode: row counts of U are the column counts of L.
    counts = np.bincount(U.indices, minlength=U.shape[0]).astype(np.float64)
    flops = float(np.sum(counts**2))
    fill = int(lu.nnz)
    symmetric = bool(np.array_equal(lu.perm_r, lu.perm_c))
    del U
    if perm is not None:  # back to S's order
        dd = np.empty_like(d)
        dd[perm] = d
        d = dd
    return lu, perm, d, name, fill, flops, symmetric


def factorize(
    K: sp.csr_array,
    *,
    shift: Optional[float] = None,
    ordering: Ordering = "auto",
    coords: Optional[NDArray[np.float64]] = None,
    active: Optional[NDArray[np.bool_]] = None,
    memory_limit: Optional[int] = None,
) -> SharedFactorization:
    """Factor the scaled stiffness S = D^-1/2 K D^-1/2 once, for every stage.

    Parameters
    ----------
    K : (n, n) sparse, symmetric, float64
        Stiffness matrix in the model's units.
    shift : float, optional
        Factor S - shift*I. By default S itself is tried first; when it is
        exactly singular, or a pivot is below n*eps*||S||_inf in magnitude,
        it is refactored with shift = -sqrt(eps)*||S||_inf (a small negative
        shift, never exactly zero, for near-null spaces).
    ordering : "auto", a SuperLU ``permc_spec`` name, or a callable
        Fill-reducing ordering; a callable gets (pattern, coords) and returns a
        permutation applied symmetrically.
    coords : (n, 3) float64, optional
        Position of each row's node, for geometric orderings.
    active : (n,) bool, optional
        Rows to factor (default: rows with any stored entry). Rows without
        stiffness are left out and make K singular.
    memory_limit : int, optional
        Bytes the factorization may use. When given, the factor's size is
        predicted by symbolic analysis first (conditioning.engine.memory), and
        :class:`FactorizationTooLarge` is raised instead of factorizing when
        it would not fit.

    Returns
    -------
    SharedFactorization
    """
    K = sp.csr_array(K)
    n = K.shape[0]
    if active is None:
        from conditioning.stages.structure import rows_with_stiffness

        active = rows_with_stiffness(K)
    idx = np.flatnonzero(active)
    s = diagonal_scaling(K)
    S = scaled_matrix(K, s)
    Sa = sp.csr_array(S[idx][:, idx])
    Sa.eliminate_zeros()
    ca = None if coords is None else np.asarray(coords)[idx]
    norm_inf = float(abs(Sa).sum(axis=1).max()) if Sa.nnz else 1.0
    ordering = _resolve_ordering(ordering, Sa, ca)

    t0 = time.perf_counter()
    singular = bool(idx.size < n)
    sigma = 0.0 if shift is None else float(shift)
    result = None
    if idx.size == 0:
        raise ValueError("the matrix has no stored nonzero entry")
    try:
        A = Sa if sigma == 0.0 else sp.csr_array(Sa - sigma * sp.eye_array(idx.size, format="csr"))
        result = _factor_once(A, ordering, ca, memory_limit)
        tiny = np.min(np.abs(result[2])) <= idx.size * EPS * norm_inf
        if shift is None and tiny:
            logger.info("smallest pivot below n*eps*||S||: refactoring with a small negative shift")
            result = None
    except FactorizationTooLarge:
        raise
    except RuntimeError as exc:  # SuperLU: "Factor is exactly singular"
        if shift is not None:
            raise
        logger.info("unshifted factorization failed (%s): refactoring with a shift", exc)
    if result is None:
        singular = True
        sigma = -np.sqrt(EPS) * norm_inf
        A = sp.csr_array(Sa - sigma * sp.eye_array(idx.size, format="csr"))
        result = _factor_once(A, ordering, ca)
    lu, perm, d, name, fill, flops, symmetric = result
    seconds = time.perf_counter() - t0
    pivots = np.zeros(n)
    pivots[idx] = d
    info = FactorizationInfo(
        ordering=name,
        shift=sigma,
        negative_pivots=int(np.count_nonzero(d < 0)),
        fill=fill,
        flops=flops,
        seconds=seconds,
        symmetric_pivoting=symmetric,
    )
    logger.info("factorized %d rows, ordering %s, fill %d, %.2f s", idx.size, name, fill, seconds)
    return SharedFactorization(
        n=n, scale=s, shift=sigma, active=np.asarray(active, dtype=bool), pivots=pivots,
        singular=singular, info=info, _lu=lu, _perm=perm,
    )
