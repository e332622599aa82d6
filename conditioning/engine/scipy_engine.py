"""The scipy engine: the one sparse factorization that every later stage shares.

Implements :class:`conditioning.engine.base.Engine` and
:class:`conditioning.engine.base.Factorization`. The matrix factored is the
symmetrically scaled stiffness of :mod:`conditioning.engine.scaling`,

    S = D^-1/2 K D^-1/2,   D = diag(|K_ii|)   (unit diagonal),

shifted to S - sigma*I with a small negative sigma only when S is singular
at working precision (the shift policy of :mod:`conditioning.engine.base`).

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

from conditioning.engine.base import FactorizationTooLarge
from conditioning.engine.memory import predict_factor_memory
from conditioning.engine.ordering import choose_ordering
from conditioning.engine.scaling import ScaledStiffness, diagonal_scaling, scale_stiffness, scaled_matrix
from conditioning.engine.base import FactorMemoryPrediction
from conditioning.results import FactorizationInfo
from conditioning.linalg.floating_point import EPS

logger = logging.getLogger(__name__)

#: A fill-reducing ordering: (pattern, coordinates per row or None) -> permutation.
OrderingFunction = Callable[[sp.csr_array, Optional[NDArray[np.float64]]], NDArray[np.intp]]
Ordering = Union[str, OrderingFunction]

#: Below this many rows the factor's size is not predicted (it always fits).
PREDICT_ABOVE = 20000


SUPERLU_ORDERINGS = ("MMD_AT_PLUS_A", "MMD_ATA", "COLAMD", "NATURAL")
#: Threshold partial pivoting (SuperLU's ``diag_pivot_thresh``) for a matrix
#: with zero diagonal entries (a constrained system: Lagrange multiplier rows):
#: a row is swapped in when the diagonal is below this share of the column's
#: largest entry. Without it SuperLU takes every nonzero diagonal, however
#: small, which is not a stable elimination of a saddle-point matrix; 0.1 is
#: the usual choice of threshold pivoting (I. S. Duff, A. M. Erisman, J. K.
#: Reid, Direct Methods for Sparse Matrices, 1986, section 5.4, from memory).
#: A matrix without zero diagonals keeps the diagonal pivots (0.0), whose signs
#: are the inertia.
STABLE_PIVOT_THRESHOLD = 0.1


@dataclass
class SharedFactorization:
    """SuperLU's factorization of S - sigma*I on the active rows, with solves
    (implements :class:`conditioning.engine.base.Factorization`).

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
    pivots : (n,) float64 or None
        Pivot of each row in the factorization of S - sigma*I, original row
        order; 0 for inactive rows. None when reading them would not have
        fitted in memory (``info.pivots_note`` says so).
    singular : bool
        True when S (restricted to active rows) had no usable unshifted
        factorization, or K has rows without stiffness.
    info : FactorizationInfo
    """

    n: int
    scale: NDArray[np.float64]
    shift: float
    active: NDArray[np.bool_]
    pivots: Optional[NDArray[np.float64]]
    singular: bool
    info: FactorizationInfo
    _lu: object
    _perm: Optional[NDArray[np.intp]]
    _S: Optional[sp.csr_array] = None
    _ordering: Optional[Ordering] = None

    def solve_scaled(self, b: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S - sigma*I)^-1 b on the active rows, b (n,) or (n, k) (inactive rows of the result are 0)."""
        b = np.asarray(b, dtype=np.float64)
        out = np.zeros_like(b)
        out[self.active] = self.solve_active(b[self.active])
        return out

    def release(self) -> None:
        """Free the factors (solves are no longer possible); pivots and info stay."""
        self._lu = None

    def solve_active(self, b: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S_a - sigma*I)^-1 b for b (n_active,) or (n_active, k), one pass over the factor."""
        b = np.asarray(b, dtype=np.float64)
        if self._perm is None:
            return self._lu.solve(b)
        x = np.empty_like(b)
        x[self._perm] = self._lu.solve(b[self._perm])
        return x

    def ordering_permutation(self) -> NDArray[np.intp]:
        """The fill-reducing ordering of the active rows, as an index array
        (S[p][:, p] is the matrix factored), for another factorization to reuse."""
        if self._perm is not None:
            return np.asarray(self._perm, dtype=np.intp)
        # SuperLU's perm_c maps a row of S to its position in the factor:
        # the matrix factored is S[p][:, p] with p its inverse.
        return np.argsort(self._lu.perm_c).astype(np.intp)

    def solve(self, f: NDArray[np.float64]) -> NDArray[np.float64]:
        """K^-1 f = diag(s) S^-1 diag(s) f, f (n,) or (n, k), in float64 as a production solver gets it.

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

    def count_below(self, c: float) -> Optional[int]:
        """Eigenvalues of S (active rows) below c, from the pivots' signs of S - c*I.

        Sylvester's law of inertia: S - c*I = L D L^T has as many negative
        pivots as S has eigenvalues below c. Costs one more factorization,
        with the same fill-reducing ordering as this one (the permutation
        itself when it was computed here, e.g. nested dissection from the
        coordinates). None when SuperLU had to pivot off the diagonal (the
        count would not be an inertia) or S - c*I was exactly singular.
        """
        if self._S is None:
            raise RuntimeError("this factorization keeps no copy of S to shift")
        if self.pivots is None:  # they did not fit in memory beside the factor: nor will these
            logger.info("inertia check not run: the pivots %s", self.info.pivots_note)
            return None
        A = sp.csr_array(self._S - c * sp.eye_array(self._S.shape[0], format="csr"))
        try:
            _, _, d, _, _, _, symmetric, _ = _factor_once(A, self._ordering, None)
        except RuntimeError as exc:  # c hit an eigenvalue exactly
            logger.warning("inertia check failed: %s", exc)
            return None
        return int(np.count_nonzero(d < 0)) if symmetric else None


def _resolve_ordering(ordering: Ordering, K, coords) -> Ordering:
    """"auto" -> the ordering stage's choice for this pattern and these coordinates."""
    return choose_ordering(K, coords) if ordering == "auto" else ordering


def _superlu(A: sp.csc_array, permc_spec: str):
    zero_diagonal = bool(np.any(A.diagonal() == 0.0))
    return spla.splu(
        A,
        permc_spec=permc_spec,
        diag_pivot_thresh=STABLE_PIVOT_THRESHOLD if zero_diagonal else 0.0,
        options=dict(SymmetricMode=True),
    )


def _factor_once(S: sp.csr_array, ordering: Ordering, coords, memory_limit=None):
    """splu of S with the ordering.

    Returns (lu, perm or None, pivots in S's order or None, name, fill,
    flops, symmetric, note). The pivots are None, and ``note`` says why, when
    the prediction puts the factor within ``memory_limit`` but not the copy
    of it that reading them makes (scipy's ``SuperLU.U`` builds and keeps
    CSC copies of L and U).
    """
    perm = None
    if callable(ordering):
        perm = np.asarray(ordering(S, coords), dtype=np.intp)
    read_pivots, note, prediction = True, "", None
    if memory_limit is not None and S.shape[0] > PREDICT_ABOVE:
        prediction = predict_factor_memory(S, perm, coords=coords)
        logger.info("predicted factor memory %.2f GiB (%s)", prediction.bytes / 2**30, prediction.method)
        if prediction.bytes > memory_limit:
            alone = prediction.bytes - prediction.pivot_read_bytes
            if alone > memory_limit:
                raise FactorizationTooLarge(prediction, memory_limit)
            read_pivots = False
            note = (f"not read: the factor fits ({alone / 2**30:.1f} GiB predicted) but not the copy of it "
                    f"that reading the pivots makes ({prediction.bytes / 2**30:.1f} GiB together, "
                    f"{memory_limit / 2**30:.1f} GiB allowed)")
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
    del A
    fill = int(lu.nnz)
    symmetric = bool(np.array_equal(lu.perm_r, lu.perm_c))
    if not read_pivots:
        return lu, perm, None, name, fill, prediction.flops, symmetric, note
    U = lu.U
    d_perm = U.diagonal()
    # Pr A Pc = L U: column j of A is column perm_c[j] of the factored matrix.
    d = d_perm[lu.perm_c]
    del U
    # L comes with U (scipy builds both copies at once): its column counts are
    # read from the index pointer, no pass over the entries.
    counts = np.diff(lu.L.indptr).astype(np.float64)
    flops = float(np.sum(counts**2))
    if perm is not None:  # back to S's order
        dd = np.empty_like(d)
        dd[perm] = d
        d = dd
    return lu, perm, d, name, fill, flops, symmetric, note


def _near_singular_without_pivots(lu, perm, n: int, norm_inf: float) -> bool:
    """The shift policy's test when the pivots were not read: one solve.

    True when ||S^-1 b||_inf > ||b||_inf / (n eps ||S||_inf) for a seeded
    random b (fixed, so the verdict repeats). A pivot p makes S^-1 b grow by
    about 1/p along that pivot's row, and b has a component there, so a
    factor that is singular at working precision (a free mode: p near
    eps ||S||) is caught by a wide margin. The test is more lenient than the
    pivot test near its threshold: a pivot a little below n*eps*||S||_inf may
    pass, and the factor is then kept unshifted; the spectrum stage's gap
    rule still finds that mode as nearly free, and the digits measured on it
    say what it costs. The project's substitute for the pivot test, not a
    proof either way.
    """
    b = np.random.default_rng(20261203).standard_normal(n)
    if perm is None:
        x = lu.solve(b)
    else:
        x = np.empty_like(b)
        x[perm] = lu.solve(b[perm])
    growth = float(np.max(np.abs(x))) if np.all(np.isfinite(x)) else np.inf
    return growth * n * EPS * norm_inf > float(np.max(np.abs(b)))


class _FixedPermutation:
    """An ordering callable that returns a permutation already computed (for refactorizations)."""

    def __init__(self, perm: NDArray[np.intp], name: str):
        self.perm, self.ordering_name = perm, name

    def __call__(self, pattern, coords) -> NDArray[np.intp]:
        return self.perm


class ScipyEngine:
    """SuperLU (scipy.sparse.linalg.splu) in symmetric mode with the project's
    orderings (implements :class:`conditioning.engine.base.Engine`).

    Parameters
    ----------
    ordering : "auto", a SuperLU ``permc_spec`` name, or a callable
        Fill-reducing ordering; a callable gets (pattern, coords) and returns a
        permutation applied symmetrically; "auto" asks
        :func:`conditioning.engine.ordering.choose_ordering`.
    """

    name = "scipy"

    def __init__(self, ordering: Ordering = "auto"):
        self.ordering = ordering

    def predict_memory(self, scaled: ScaledStiffness,
                       coords: Optional[NDArray[np.float64]] = None) -> Optional[FactorMemoryPrediction]:
        """Predicted peak bytes of the factorization (symbolic analysis,
        :func:`conditioning.engine.memory.predict_factor_memory`); None below
        :data:`PREDICT_ABOVE` active rows, where the factor always fits."""
        S = scaled.S
        if S.shape[0] <= PREDICT_ABOVE:
            return None
        ca = None if coords is None else np.asarray(coords)[scaled.active]
        ordering = _resolve_ordering(self.ordering, S, ca)
        perm = np.asarray(ordering(S, ca), dtype=np.intp) if callable(ordering) else None
        return predict_factor_memory(S, perm, coords=ca)

    def factorize(self, scaled: ScaledStiffness, *, shift: Optional[float] = None,
                  coords: Optional[NDArray[np.float64]] = None,
                  memory_limit: Optional[int] = None) -> SharedFactorization:
        """Factor S - sigma*I under the shift policy of :mod:`conditioning.engine.base`.

        Returns
        -------
        SharedFactorization
            Raises :class:`FactorizationTooLarge` before factorizing when the
            predicted factor exceeds ``memory_limit`` bytes.
        """
        return _factorize_scaled(scaled, shift=shift, ordering=self.ordering, coords=coords,
                                 memory_limit=memory_limit)


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
        Rows to factor (default: rows with any stored nonzero entry). Rows
        without stiffness are left out and make K singular.
    memory_limit : int, optional
        Bytes the factorization may use. When given, the factor's size is
        predicted by symbolic analysis first (conditioning.engine.memory), and
        :class:`FactorizationTooLarge` is raised instead of factorizing when
        it would not fit.

    Returns
    -------
    SharedFactorization
    """
    empty = None if active is None else np.flatnonzero(~np.asarray(active, dtype=bool))
    return _factorize_scaled(scale_stiffness(K, empty), shift=shift, ordering=ordering, coords=coords,
                             memory_limit=memory_limit)


def _factorize_scaled(scaled: ScaledStiffness, *, shift, ordering, coords, memory_limit) -> SharedFactorization:
    """The shift policy around :func:`_factor_once`."""
    n = scaled.n
    idx = scaled.rows
    Sa = scaled.S
    if idx.size == 0:
        raise ValueError("the matrix has no stored nonzero entry")
    ca = None if coords is None else np.asarray(coords)[idx]
    norm_inf = float(abs(Sa).sum(axis=1).max()) if Sa.nnz else 1.0
    ordering = _resolve_ordering(ordering, Sa, ca)
    t0 = time.perf_counter()
    if callable(ordering):  # computed once: the shifted retry and the inertia check reuse it
        name = getattr(ordering, "ordering_name", getattr(ordering, "__name__", "custom"))
        ordering = _FixedPermutation(np.asarray(ordering(Sa, ca), dtype=np.intp), name)

    singular = bool(idx.size < n)
    sigma = 0.0 if shift is None else float(shift)
    result = None
    try:
        A = Sa if sigma == 0.0 else sp.csr_array(Sa - sigma * sp.eye_array(idx.size, format="csr"))
        result = _factor_once(A, ordering, ca, memory_limit)
        if result[2] is None:
            tiny = _near_singular_without_pivots(result[0], result[1], idx.size, norm_inf)
        else:
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
        result = _factor_once(A, ordering, ca, memory_limit)
    lu, perm, d, name, fill, flops, symmetric, note = result
    seconds = time.perf_counter() - t0
    pivots = None
    if d is not None:
        pivots = np.zeros(n)
        pivots[idx] = d
    info = FactorizationInfo(
        ordering=name,
        shift=sigma,
        negative_pivots=None if d is None else int(np.count_nonzero(d < 0)),
        fill=fill,
        flops=flops,
        seconds=seconds,
        symmetric_pivoting=symmetric,
        pivots_note=note,
    )
    logger.info("factorized %d rows, ordering %s, fill %d, %.2f s", idx.size, name, fill, seconds)
    # Refactorizations (the inertia check) reuse this ordering, never a fresh choice without coordinates.
    return SharedFactorization(
        n=n, scale=scaled.scale, shift=sigma, active=scaled.active, pivots=pivots,
        singular=singular, info=info, _lu=lu, _perm=perm, _S=Sa, _ordering=ordering,
    )


__all__ = ["EPS", "PREDICT_ABOVE", "SUPERLU_ORDERINGS", "FactorizationTooLarge", "ScipyEngine",
           "SharedFactorization", "diagonal_scaling", "factorize", "scaled_matrix"]
