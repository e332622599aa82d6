"""Orthonormal basis of the span of some columns, dependent columns dropped.

    B (n, m)  =>  Q (n, r), Q^T Q = I, span(Q) = numerical span(B)

One helper for every stage that needs one (the mode stage, the restraint
advice): the left singular vectors of B whose singular values exceed
``rtol`` times the largest, as scipy.linalg.orth does.
"""

from __future__ import annotations

from typing import Optional

import numpy as np
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS


def orthonormal_basis(B: NDArray[np.float64], rtol: Optional[float] = None) -> NDArray[np.float64]:
    """Orthonormal basis of span(B), by the SVD.

    Parameters
    ----------
    B : (n, m) float64
        Columns spanning the space (any scaling; dependent columns allowed).
    rtol : float, optional
        Singular values at most ``rtol * sigma_max`` count as zero. Default
        max(n, m) * eps, the numerical-rank tolerance of numpy.linalg.matrix_rank
        and scipy.linalg.orth.

    Returns
    -------
    (n, r) float64
        Orthonormal columns (dimensionless), r the numerical rank of B; r = 0
        when B has no columns or is zero.
    """
    B = np.asarray(B, dtype=np.float64)
    if B.ndim != 2:
        raise ValueError(f"basis has shape {B.shape}; expected a 2-D (n, m) array")
    if B.shape[1] == 0:
        return B
    U, sv, _ = np.linalg.svd(B, full_matrices=False)
    if not sv[0] > 0:
        return U[:, :0]
    tol = max(B.shape) * EPS if rtol is None else rtol
    return U[:, : int(np.count_nonzero(sv > tol * sv[0]))]


__all__ = ["orthonormal_basis"]
