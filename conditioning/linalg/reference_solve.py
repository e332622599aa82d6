"""Independent re-solve in arbitrary precision, as confirmation of the reference.

    K x = F  =>  x (dense, many digits) and, with python-flint, a certified radius

Two engines, both dense and O(n^3), for models up to a size limit:

* python-flint (optional extra): ``arb_mat.solve`` in ball arithmetic [1]_,
  which returns balls that enclose the exact solution of the exported matrix
  (the float64 entries taken as exact numbers). The digits are then
  certified, not estimated.
* mpmath: ``mp.lu_solve`` at a working precision chosen from the condition
  number; an accurate solution but without an enclosure.

Size limits come from measurements on this project's 2-core test machine
(bcsstk08 leading blocks, one right-hand side, 2026): python-flint LU at 128
bits took 0.3 s for n = 400, 2.5 s for n = 800 and 5.0 s for n = 1074, and
39 s for a diagonally dominant n = 2000 matrix at 163 bits (relative radius
3e-33); mpmath ``lu_solve`` at 40 digits took 0.6 s for n = 50, 4.6 s for
n = 100 and 10 s for n = 150.

The ball solve runs on the power-of-two diagonal scaling of K
(:func:`power_of_two_scaling`, exact). On raw K plain elimination in balls
widened the radii far beyond the true error or met a pivot ball containing
zero (bcsstk06, bcsstk19, bcsstk20 at 320 bits; bcsstk14, n = 1806, raw
kappa 1.2e10 but scaled kappa 7e3, at 173 and at 346 bits, 7 to 11 s each).
Scaled, "lu" enclosed bcsstk06 (n = 420) to 4e-32 at 273 bits in 0.3 s and
bcsstk14 to 2e-49 at 346 bits in 11 s. arb_mat's "precond" algorithm is
about 10 times slower than "lu" at the same precision but gave relative radii
near 1e-47 at 160 bits where "lu" did not (bcsstk19 n = 817: 10 to 18 s;
bcsstk20 n = 485: 4.6 s). So "lu" is tried first, with the precision its
first radius asks for, and "precond" only up to n = 1100.

References
----------
.. [1] F. Johansson (2017), "Arb: efficient arbitrary-precision midpoint-radius
       interval arithmetic", IEEE Trans. Computers 66(8), pp. 1281-1292.
.. [2] S. M. Rump (2010), "Verification methods: rigorous results using
       floating-point arithmetic", Acta Numerica 19, pp. 287-449.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field
from typing import Literal, Optional

import mpmath
import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

logger = logging.getLogger(__name__)

#: Largest n re-solved with python-flint (39 s for n = 2000, measured).
FLINT_MAX_N = 2000
#: Largest n for the slower preconditioned ball solver, used when the balls of
#: plain elimination come out wide (18 s for bcsstk19, n = 817, at 160 bits).
FLINT_PRECOND_MAX_N = 1100
#: Highest precision of a ball solve (bits); bcsstk14 (n = 1806) needs about 280.
MAX_BITS = 640
#: Largest n re-solved with mpmath (about 25 s for n = 200, extrapolated
#: from 10 s at n = 150 as n^3).
MPMATH_MAX_N = 200

ReferenceMethod = Literal["certified", "arbitrary precision"]


@dataclass(frozen=True)
class ReferenceSolution:
    """An arbitrary-precision solution of K X = F."""

    x_hi: NDArray[np.float64] = field(repr=False)
    """(n,) or (n, k): nearest float64 to each component."""
    x_lo: NDArray[np.float64] = field(repr=False)
    """Remainder, so that x_hi + x_lo carries about 32 digits."""
    radius: Optional[NDArray[np.float64]] = field(repr=False)
    """Certified bound on |x_exact - (x_hi + x_lo)| per component (python-flint),
    rounded upwards; None for mpmath."""
    method: ReferenceMethod
    """``"certified"`` (python-flint ball arithmetic) or ``"arbitrary precision"`` (mpmath)."""
    engine: str
    """Which library and precision, in words."""
    seconds: float
    """Wall time of the re-solve (s)."""


def flint_available() -> bool:
    """True when python-flint (the optional extra) can be imported."""
    try:
        import flint  # noqa: F401
    except ImportError:
        return False
    return True


def choose_reference_method(n: int) -> Optional[ReferenceMethod]:
    """Which re-solve fits a model of n rows: certified, arbitrary precision, or none.

    Returns
    -------
    "certified", "arbitrary precision" or None (model too large for either).
    """
    if n <= FLINT_MAX_N and flint_available():
        return "certified"
    if n <= MPMATH_MAX_N:
        return "arbitrary precision"
    return None


def reference_solve(
    K: sp.sparray,
    F: NDArray[np.float64],
    *,
    method: Optional[ReferenceMethod] = None,
    kappa: Optional[float] = None,
) -> ReferenceSolution:
    """Solve K X = F densely in arbitrary precision.

    Parameters
    ----------
    K : (n, n) sparse or dense, float64
        Stiffness matrix; its float64 entries are taken as exact.
    F : (n,) or (n, k) float64
        Right-hand sides.
    method : "certified", "arbitrary precision", optional
        Default: :func:`choose_reference_method`.
    kappa : float, optional
        A condition estimate, to choose the precision (more digits for larger kappa).

    Returns
    -------
    ReferenceSolution

    Raises
    ------
    ValueError
        When the model is above the size limit of the requested engine, or the
        matrix is singular in ball arithmetic at the highest precision tried.
    """
    n = K.shape[0]
    method = method or choose_reference_method(n)
    extra = 0 if kappa is None or not math.isfinite(kappa) else max(0, math.ceil(math.log10(max(kappa, 1.0))))
    F = np.asarray(F, dtype=np.float64)
    Fm = F[:, None] if F.ndim == 1 else F
    A = K.toarray() if sp.issparse(K) else np.asarray(K, dtype=np.float64)
    t0 = time.perf_counter()
    if method == "certified" and n <= FLINT_MAX_N:
        hi, lo, rad, engine = _flint_solve(A, Fm, 160 + int(3.33 * extra))
    elif method == "arbitrary precision" and n <= MPMATH_MAX_N:
        hi, lo, engine = _mpmath_solve(A, Fm, 40 + extra)
        rad = None
    else:
        raise ValueError(f"no arbitrary-precision re-solve for n = {n} with method {method!r}")
    seconds = time.perf_counter() - t0
    logger.info("reference re-solve: %s, n = %d, %.1f s", engine, n, seconds)
    if F.ndim == 1:
        hi, lo = hi[:, 0], lo[:, 0]
        rad = None if rad is None else rad[:, 0]
    return ReferenceSolution(hi, lo, rad, method, engine, seconds)


#: Relative radius a ball solution must reach to count as a reference: far
#: below the double-double resolution (about 1e-32 of the scale is not needed,
#: 1e-24 leaves 8 digits to spare over float64's 16).
NARROW = 1e-24
#: Bits added on top of the precision a wide first attempt says is needed, for
#: the growth of the radii not being exactly proportional to 2^-bits.
BITS_MARGIN = 24


def power_of_two_scaling(A: NDArray[np.float64]) -> NDArray[np.float64]:
    """(n,) powers of two s_i near 1/sqrt(|A_ii|) (1 where A_ii = 0).

    diag(s) A diag(s) then has diagonal entries in [1/2, 2) and, being scaled
    by powers of two, holds exactly the same numbers as A up to exponents:
    the certified enclosure of the scaled system is one of the exported
    matrix's solution once multiplied back by s (exact in binary).
    """
    d = np.abs(np.diagonal(A))
    e = np.zeros(d.size)
    pos = d > 0
    e[pos] = np.round(-0.5 * np.log2(d[pos]))
    return np.ldexp(1.0, e.astype(int))


def _flint_solve(A, F, prec: int):
    """arb_mat solve of the power-of-two-scaled system.

    Plain elimination on the raw K of a model mixing rotations and
    translations often fails outright (a pivot ball contains zero: bcsstk14,
    n = 1806, kappa 1.2e10 raw, 7e3 scaled, at 173 and at 346 bits), while the
    scaled system gives a relative radius of 2e-49 at 346 bits in 11 s.
    Interval elimination widens the balls by a factor that depends on the
    matrix, hardly on the precision (bcsstk14 scaled: about 2^184 at both 240
    and 346 bits), so up to n = 1100 a wide first "lu" attempt says how many
    bits are needed and one retry is made at that precision, then the
    preconditioned solver ("precond") is tried. Above n = 1100 one "lu"
    attempt is made at twice the precision, and a failure says how many bits
    it would have needed.
    """
    import flint

    n, k = F.shape
    s = power_of_two_scaling(A)
    As = (A * s[:, None]) * s[None, :]   # exact: powers of two
    Fs = F * s[:, None]
    if not (np.array_equal((As / s[None, :]) / s[:, None], A) and np.array_equal(Fs / s[:, None], F)):
        s, As, Fs = np.ones(n), A, F   # an entry under- or overflowed: solve K as given
    M = flint.arb_mat(n, n, As.ravel().tolist())
    B = flint.arb_mat(n, k, Fs.ravel().tolist())
    if n <= FLINT_PRECOND_MAX_N:
        attempts = [("lu", prec), ("precond", prec), ("precond", 2 * prec), ("precond", 4 * prec)]
        adapted = False
    else:
        # One attempt only, at twice the precision: a second "lu" costs more than
        # the extra bits do (bcsstk14: 7.5 s at 173 bits, 11 s at 346).
        attempts = [("lu", 2 * prec)]
        adapted = True
    tried: list[str] = []
    while attempts:
        algorithm, bits = attempts.pop(0)
        with flint.ctx.workprec(bits):
            try:
                X = M.solve(B, algorithm=algorithm)
            except ZeroDivisionError:
                tried.append(f"{algorithm} at {bits} bits: a pivot ball contained zero")
                if algorithm == "lu" and not adapted:
                    adapted = True
                    attempts.insert(0, ("lu", 2 * bits))
                continue
            hi, lo, rad = _split_balls(X, n, k)
        hi, lo, rad = hi * s[:, None], lo * s[:, None], rad * s[:, None]   # exact: powers of two
        scale = np.maximum(np.max(np.abs(hi), axis=0, initial=0.0), np.finfo(float).tiny)
        relative = float(np.max(rad / scale)) if np.all(np.isfinite(rad)) else math.inf
        if relative <= NARROW:
            return hi, lo, rad, f"python-flint arb_mat.solve ({algorithm}, ball arithmetic, {bits} bits)"
        tried.append(f"{algorithm} at {bits} bits: relative radius {relative:.1e}")
        if algorithm == "lu" and not adapted and math.isfinite(relative):
            # The radius scales as 2^-bits: ask for what reaches NARROW.
            adapted = True
            need = bits + math.ceil(math.log2(relative / NARROW)) + BITS_MARGIN
            if need <= MAX_BITS:
                attempts.insert(0, ("lu", need))
            else:
                tried.append(f"lu would need about {need} bits, above the {MAX_BITS} allowed")
        elif algorithm == "lu" and n > FLINT_PRECOND_MAX_N and math.isfinite(relative):
            tried.append(f"lu would need about {bits + math.ceil(math.log2(relative / NARROW))} bits; "
                         f"no second attempt above n = {FLINT_PRECOND_MAX_N}")
    raise ValueError("ball arithmetic gave no enclosure narrower than "
                     f"{NARROW:.0e} of the solution ({'; '.join(tried)}): interval elimination "
                     "widened the balls more than the precision tried could absorb; a limit of "
                     "the re-solve, not by itself a sign that K is ill-conditioned")


def _split_balls(X, n: int, k: int):
    """Midpoints as double-double pairs, radii rounded up to float64."""
    import flint

    hi = np.empty((n, k))
    lo = np.empty((n, k))
    rad = np.empty((n, k))
    for i in range(n):
        for j in range(k):
            ball = X[i, j]
            mid = ball.mid()
            h = float(mid)
            rest = mid - flint.arb(h)
            l = float(rest)
            hi[i, j], lo[i, j] = h, l
            bound = float(ball.rad()) + abs(float(rest - flint.arb(l)))
            rad[i, j] = math.nextafter(bound, math.inf)
    return hi, lo, rad


def _mpmath_solve(A, F, dps: int):
    """mp.lu_solve at dps digits (scoped), column by column of F."""
    n, k = F.shape
    hi = np.empty((n, k))
    lo = np.empty((n, k))
    with mpmath.workdps(dps):
        M = mpmath.matrix(A.tolist())
        for j in range(k):
            x = mpmath.lu_solve(M, mpmath.matrix(F[:, j].tolist()))
            for i in range(n):
                h = float(x[i])
                hi[i, j], lo[i, j] = h, float(x[i] - h)
    return hi, lo, f"mpmath lu_solve ({dps} digits)"
