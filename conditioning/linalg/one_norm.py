"""The 1-norm of an operator known only through products: Higham and Tisseur's block estimator.

    A (n x n, by A @ X and A^T @ X)  =>  est <= ||A||_1

The one place the project calls scipy.sparse.linalg.onenormest (the condition
stage's kappa_1 and the digits stage's scaled and componentwise condition
numbers all go through :func:`one_norm_estimate`).

Randomness. With t > 1 columns, the block algorithm starts from the vector of
ones plus t - 1 random +-1 columns and replaces parallel columns by random
ones [1]_. SciPy (up to at least 1.17) offers no generator argument and draws
them from NumPy's global legacy generator (``np.random.randint``). Rather than
reset the global seed, as this project once did, the wrapper saves the global
state, seeds it from the caller's ``rng``, runs the estimator and restores the
state: the estimate is reproducible from ``rng``, and the caller's own use of
``np.random`` is left as it was. (The save and restore is not thread-safe: two
threads estimating at once share the global state. The stages run in one
thread.) With t = 1 the algorithm draws nothing: "there is no randomness" [1]_.

References
----------
.. [1] N. J. Higham and F. Tisseur (2000), "A Block Algorithm for Matrix 1-Norm
       Estimation, with an Application to 1-Norm Pseudospectra", SIAM J.
       Matrix Anal. Appl. 21(4), pp. 1185-1201 (DOI 10.1137/S0895479899356080, from memory).
.. [2] W. W. Hager (1984), "Condition estimates", SIAM J. Sci. Stat. Comput.
       5(2), pp. 311-316.
.. [3] A. H. Al-Mohy and N. J. Higham (2009), "A new scaling and squaring
       algorithm for the matrix exponential", SIAM J. Matrix Anal. Appl.
       31(3), pp. 970-989 (as cited by scipy).
"""

from __future__ import annotations

from typing import Union

import numpy as np
import scipy.sparse.linalg as spla

#: Columns of the block: t = 2 is scipy's default (the project's choice of
#: balance between accuracy and products); t = 1 is Hager's estimator [2]_, as
#: in LAPACK's xLACN2.
DEFAULT_COLUMNS = 2

SeedLike = Union[None, int, np.random.Generator, np.random.SeedSequence]


def one_norm_estimate(A, *, t: int = DEFAULT_COLUMNS, rng: SeedLike = None) -> float:
    """Lower bound on ||A||_1 = max_j sum_i |a_ij|, from products with A and A^T.

    Parameters
    ----------
    A : (n, n) scipy.sparse.linalg.LinearOperator, sparse or dense array
        The operator; a LinearOperator needs ``matvec`` and ``rmatvec`` (or
        ``matmat`` and ``rmatmat``). Units: those of A.
    t : int, optional
        Columns of the block (>= 1). Larger t is more accurate and costs about
        t products with A and with A^T per iteration.
    rng : None, int, numpy.random.Generator or SeedSequence, optional
        Source of the random starting and replacement columns (t > 1 only).
        An int seeds them directly (the same int gives the same estimate);
        a Generator gives one seed drawn from it (so a generator threaded
        through the stages gives a reproducible sequence); None draws fresh
        entropy. NumPy's global generator is left as it was.

    Returns
    -------
    float
        est with est <= ||A||_1 (in A's units). For n <= t the norm is
        computed exactly from A applied to the identity.

    Raises
    ------
    ValueError
        A is not square, or t < 1.

    Notes
    -----
    This is algorithm 2.4 of [1]_ (scipy's ``onenormest``), described by
    Al-Mohy and Higham [3]_ as one that "typically requires the evaluation of
    about 4t matrix-vector products and almost invariably produces a norm
    estimate (which is, in fact, a lower bound on the norm) correct to within
    a factor 3" (quoted from scipy's documentation of ``onenormest``).

    Examples
    --------
    The second-difference matrix tridiag(-1, 2, -1) of order 5 has 1-norm 4:

    >>> import scipy.sparse as sp
    >>> T = sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(5, 5))
    >>> one_norm_estimate(T, rng=0)
    4.0
    """
    shape = A.shape
    if len(shape) != 2 or shape[0] != shape[1]:
        raise ValueError(f"operator is {shape}; the 1-norm estimator takes a square operator")
    if t < 1:
        raise ValueError(f"t = {t}; the block needs at least one column")
    seed = _legacy_seed(rng)
    saved = np.random.get_state()
    try:
        np.random.seed(seed)  # scipy's onenormest draws from the global legacy generator
        return float(spla.onenormest(A, t=t))
    finally:
        np.random.set_state(saved)


def _legacy_seed(rng: SeedLike) -> int:
    """A seed for the legacy global generator (0 <= seed < 2^32): an int as
    given, else one drawn from ``np.random.default_rng(rng)``."""
    if isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
        if not 0 <= int(rng) < 2**32:
            raise ValueError(f"seed {rng} is outside 0 .. 2^32 - 1")
        return int(rng)
    return int(np.random.default_rng(rng).integers(2**32))


__all__ = ["one_norm_estimate"]
