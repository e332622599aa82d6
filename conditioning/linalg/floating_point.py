"""The float64 constants the kernels and stages share, defined once.

EPS is the spacing of float64 numbers at 1.0, 2^-52 (``numpy.finfo(float).eps``);
the unit round-off u = EPS / 2 = 2^-53 of the error analyses is
:data:`conditioning.linalg.doubledouble.U`.
"""

from __future__ import annotations

import numpy as np

#: Machine epsilon of float64, 2^-52 = 2.22e-16 (dimensionless): the relative
#: spacing of floats at 1.0. Rank and zero tolerances are multiples of it.
EPS: float = float(np.finfo(np.float64).eps)

__all__ = ["EPS"]
