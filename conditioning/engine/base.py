"""What the stages need from a sparse factorization: the engine interface.

    S = D^-1/2 K D^-1/2 (active rows)  =>  F = factors of S - sigma*I

Every stage that solves, counts pivots or reads them goes through the two
protocols below and nothing else, so another engine (PETSc/MUMPS, issue 13)
joins by implementing them; :mod:`conditioning.engine.scipy_engine` is the
SuperLU one. The matrix an engine factors is always the scaled stiffness of
:class:`conditioning.engine.scaling.ScaledStiffness`, built in one place.

Shift policy (``shift`` of :meth:`Engine.factorize`):

* ``None``: factor S itself; when that factorization is exactly singular, or
  a pivot is below n*eps*||S||_inf in magnitude, factor S - sigma*I instead
  with sigma = -sqrt(eps)*||S||_inf (a small negative shift, never exactly
  zero on a singular matrix; the project's choice, square root of the unit
  round-off so that near-null eigenvalues stay well separated from the
  shift) and report the result as singular;
* a float c: factor S - c*I as given (no retry).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional, Protocol, runtime_checkable

import numpy as np
from numpy.typing import NDArray

from conditioning.engine.scaling import ScaledStiffness
from conditioning.results import FactorizationInfo



@dataclass(frozen=True)
class FactorMemoryPrediction:
    """Size of the factorization, predicted before it runs (conditioning.engine.memory)."""

    bytes: int
    """Predicted peak memory the factorization adds (bytes)."""
    factor_entries: int
    """Predicted stored entries of L + U as SuperLU counts them."""
    flops: float
    """Predicted operations: sum over columns of (column count of L)^2."""
    method: str
    """How it was predicted, in words."""
    confidence: float
    """Relative accuracy of ``bytes`` measured on the benchmark models
    (0.25: within 25%)."""
    pivot_read_bytes: int = 0
    """The part of ``bytes`` spent reading the pivots out of the factor (a
    copy of it); the factorization can run without that read when
    ``bytes - pivot_read_bytes`` fits and ``bytes`` does not."""


class FactorizationTooLarge(MemoryError):
    """The predicted factor does not fit the memory limit (raised before factorizing).

    Attributes
    ----------
    prediction : conditioning.results.FactorMemoryPrediction
    limit : int
        Bytes allowed.
    """

    def __init__(self, prediction: FactorMemoryPrediction, limit: int):
        self.prediction = prediction
        self.limit = int(limit)
        super().__init__(f"the factorization would need about "
                         f"{(prediction.bytes - prediction.pivot_read_bytes) / 2**30:.1f} GiB "
                         f"(limit {limit / 2**30:.1f} GiB)")


@runtime_checkable
class Factorization(Protocol):
    """Factors of S - sigma*I on the active rows, as the stages use them.

    Attributes
    ----------
    n : int
        Rows of K (active and inactive).
    scale : (n,) float64
        s with S = diag(s) K diag(s) (1/sqrt of the force/length or
        moment/rotation units of each row's diagonal).
    shift : float
        sigma actually factored (dimensionless, S's scale); 0.0 unshifted.
    active : (n,) bool
        Rows in the factorization (rows with stiffness).
    pivots : (n,) float64 or None
        Pivot of each row of S - sigma*I in the original row order
        (dimensionless); 0 for inactive rows. Kept after :meth:`release`.
        None when the engine does not expose the pivots of its factor
        (MUMPS through PETSc), or when reading them would not have fitted
        in memory beside the factor: the pivot stage then does not run and
        the report says why (:func:`conditioning.stages.pivots.pivots_unavailable`).
    singular : bool
        True when S had no usable unshifted factorization or K has rows
        without stiffness: :meth:`solve` is then refused.
    info : FactorizationInfo
        Ordering, shift, inertia (``negative_pivots``), fill, flops, time.
    """

    n: int
    scale: NDArray[np.float64]
    shift: float
    active: NDArray[np.bool_]
    pivots: Optional[NDArray[np.float64]]
    singular: bool
    info: FactorizationInfo

    def solve_active(self, B: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S_a - sigma*I)^-1 B for B (n_active,) or (n_active, k) on the active rows."""

    def solve_scaled(self, B: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S - sigma*I)^-1 B for B (n,) or (n, k); inactive rows of the result are 0."""

    def solve(self, F: NDArray[np.float64]) -> NDArray[np.float64]:
        """K^-1 F for loads F (n,) or (n, k) in force units; displacement units.

        Raises RuntimeError when K is singular (only a shifted factor exists)."""

    def count_below(self, c: float) -> Optional[int]:
        """Eigenvalues of S (active rows) below c: the negative pivots of
        S - c*I (Sylvester's law of inertia), factored with this
        factorization's ordering; None when the count is not an inertia (off-
        diagonal pivoting) or S - c*I is exactly singular."""

    def release(self) -> None:
        """Free the factors; ``pivots`` and ``info`` stay, solves no longer work."""

    def ordering_permutation(self) -> Optional[NDArray[np.intp]]:
        """The fill-reducing ordering of the active rows (S_a[p][:, p] is what was
        factored), for another factorization to reuse; None when the engine
        does not expose it."""


@runtime_checkable
class OwnEigensolver(Protocol):
    """Optional capability of a :class:`Factorization`: the engine's own eigensolver.

    A factorization that has these members is asked by the spectrum stage
    (:func:`conditioning.stages.spectrum.smallest_eigenpairs`) for the
    eigenpairs of S instead of running ARPACK on :meth:`Factorization.solve_active`;
    one that has not (the scipy engine) gets ARPACK. Used by the PETSc engine,
    whose solves are collective MPI calls and whose eigensolver (SLEPc) works
    on the distributed vectors.
    """

    eigensolver: str
    """How :meth:`smallest_eigenpairs` and :meth:`largest_eigenvalue` compute, in
    words for the report's ``method``."""

    def smallest_eigenpairs(self, k: int, rng: np.random.Generator
                            ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """The k eigenvalues of S (active rows) nearest the factorization's shift,
        ascending (dimensionless), and orthonormal eigenvectors (n_active, k),
        with this factor (shift-and-invert); ``rng`` draws the start vector.
        Fewer than k when the solver did not converge them all."""

    def largest_eigenvalue(self, rng: np.random.Generator) -> float:
        """lambda_max(S) (dimensionless), to at least 3 significant digits; ``rng``
        draws the start vector. Works after :meth:`Factorization.release`."""


@runtime_checkable
class Engine(Protocol):
    """A sparse direct solver that factors the scaled stiffness."""

    name: str
    """Short name for reports (``"scipy"``)."""

    def predict_memory(self, scaled: ScaledStiffness,
                       coords: Optional[NDArray[np.float64]] = None) -> Optional[FactorMemoryPrediction]:
        """Peak memory the factorization of ``scaled`` would add (bytes), predicted
        without factorizing; None when the engine cannot tell (then it always tries)."""

    def factorize(self, scaled: ScaledStiffness, *, shift: Optional[float] = None,
                  coords: Optional[NDArray[np.float64]] = None,
                  memory_limit: Optional[int] = None) -> Factorization:
        """Factor S - sigma*I on ``scaled.active`` under the shift policy above.

        ``coords`` (n, 3) are the rows' node positions (for geometric
        orderings). Raises :class:`FactorizationTooLarge` before factorizing
        when ``memory_limit`` (bytes) is given and the prediction exceeds it."""
