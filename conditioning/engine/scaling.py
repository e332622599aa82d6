"""The scaled stiffness every later stage works on, built once.

    S = D^-1/2 K D^-1/2,   D = diag(|K_ii|)   (unit diagonal on rows with stiffness)

Scaling first makes the pivot test, the shift and the eigenvalue thresholds
independent of the model's units (force/length against moment/rotation) and
costs nothing in accuracy: a solve with K is recovered exactly as
x = D^-1/2 S^-1 D^-1/2 f. Rows without any stiffness are left out of S
(they are the structure stage's ``empty_rows``) and make K singular.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray


def diagonal_scaling(K: sp.csr_array) -> NDArray[np.float64]:
    """s_i = 1/sqrt(|K_ii|), and 1 where K_ii = 0; S = diag(s) K diag(s).

    Returns
    -------
    (n,) float64
        In 1/sqrt(K's diagonal units).
    """
    d = np.abs(K.diagonal()).astype(np.float64)
    s = np.ones_like(d)
    pos = d > 0
    s[pos] = 1.0 / np.sqrt(d[pos])
    return s


def scaled_matrix(K: sp.csr_array, s: NDArray[np.float64]) -> sp.csr_array:
    """diag(s) K diag(s) in CSR (dimensionless for s from :func:`diagonal_scaling`),
    computed without forming the diagonal matrices."""
    K = sp.csr_array(K)
    rows = np.repeat(np.arange(K.shape[0]), np.diff(K.indptr))
    # float64 whatever K's type: an integer K (a Matrix Market "integer" file
    # read with scipy.io.mmread) would otherwise round every entry of S to 0.
    data = K.data.astype(np.float64) * s[rows] * s[K.indices]
    return sp.csr_array((data, K.indices.copy(), K.indptr.copy()), shape=K.shape)


@dataclass(frozen=True)
class ScaledStiffness:
    """K, its diagonal scaling and S on the rows with stiffness.

    Attributes
    ----------
    K : (n, n) csr_array
        The stiffness matrix in the model's units.
    scale : (n,) float64
        s with S = diag(s) K diag(s).
    active : (n,) bool
        Rows with stiffness (the complement of the structure stage's
        ``empty_rows``).
    S : (n_active, n_active) csr_array
        The scaled matrix restricted to the active rows, explicit zeros
        removed (dimensionless, unit diagonal where K_ii != 0).
    """

    K: sp.csr_array
    scale: NDArray[np.float64]
    active: NDArray[np.bool_]
    S: sp.csr_array

    @property
    def n(self) -> int:
        """Rows of K."""
        return int(self.K.shape[0])

    @property
    def rows(self) -> NDArray[np.intp]:
        """0-based indices of the active rows, ascending."""
        return np.flatnonzero(self.active)

    def on_all_rows(self, V: NDArray[np.float64]) -> NDArray[np.float64]:
        """Vectors given on the active rows, (n_a,) or (n_a, k), extended by zeros to all n rows."""
        out = np.zeros((self.n,) + V.shape[1:])
        out[self.active] = V
        return out


def scale_stiffness(K, empty_rows: Optional[NDArray[np.intp]] = None) -> ScaledStiffness:
    """Build :class:`ScaledStiffness` for K.

    Parameters
    ----------
    K : (n, n) sparse, symmetric, float64
    empty_rows : (m,) intp, optional
        Rows without stiffness, as the structure stage found them
        (``StructureResult.empty_rows``); recomputed from K when not given.

    Returns
    -------
    ScaledStiffness
    """
    K = sp.csr_array(K)
    n = K.shape[0]
    if empty_rows is None:
        rows = np.repeat(np.arange(n), np.diff(K.indptr))
        active = np.zeros(n, dtype=bool)
        active[rows[K.data != 0]] = True
    else:
        active = np.ones(n, dtype=bool)
        active[np.asarray(empty_rows, dtype=np.intp)] = False
    s = diagonal_scaling(K)
    idx = np.flatnonzero(active)
    S = sp.csr_array(scaled_matrix(K, s)[idx][:, idx])
    S.eliminate_zeros()
    return ScaledStiffness(K=K, scale=s, active=active, S=S)
