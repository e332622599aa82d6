"""Arbitrary-precision re-solve: flint enclosures contain mpmath's solution.

Sources of truth: mpmath ``lu_solve`` at 60 digits; python-flint's
``arb_mat.solve`` (ball arithmetic: the returned balls contain the exact
solution, Johansson 2017); the Harwell-Boeing matrix bcsstk01
(../shared/reference-matrices, PROVENANCE.md).
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.linalg.reference_solve import (
    FLINT_MAX_N,
    MPMATH_MAX_N,
    choose_reference_method,
    flint_available,
    reference_solve,
)
from conftest import reference_matrix_path

needs_flint = pytest.mark.skipif(not flint_available(), reason="python-flint (optional extra) not installed")


def hilbert(n: int) -> np.ndarray:
    i = np.arange(n)
    return 1.0 / (i[:, None] + i[None, :] + 1)


def mp_solve(A, f):
    with mpmath.workdps(60):
        x = mpmath.lu_solve(mpmath.matrix(A.tolist()), mpmath.matrix(f.tolist()))
        return [x[i] for i in range(len(f))]


def _contains(ref, j, x_exact):
    """Every |x_exact - (hi + lo)| <= radius (mpmath at 60 digits)."""
    with mpmath.workdps(60):
        for i, v in enumerate(x_exact):
            gap = abs(v - mpmath.mpf(ref.x_hi[i, j]) - mpmath.mpf(ref.x_lo[i, j]))
            assert gap <= mpmath.mpf(ref.radius[i, j]) + mpmath.mpf(10) ** -55 * abs(v)


@needs_flint
@pytest.mark.parametrize("n", [6, 9, 12])
def test_flint_enclosure_contains_mpmath_solution_hilbert(n):
    """Hilbert H_n (kappa_2 up to 1.7e16, REFERENCES.md): the certified balls contain
    the 60-digit mpmath solution of the same float64 matrix."""
    H = hilbert(n)
    F = np.column_stack([np.ones(n), np.arange(1.0, n + 1)])
    ref = reference_solve(sp.csr_array(H), F, method="certified", kappa=1e16)
    assert ref.method == "certified" and "python-flint" in ref.engine
    for j in range(2):
        _contains(ref, j, mp_solve(H, F[:, j]))
    assert np.all(ref.radius <= 1e-24 * np.max(np.abs(ref.x_hi)))


@needs_flint
def test_flint_enclosure_bcsstk01():
    """bcsstk01 (n = 48, Harwell-Boeing) with a seeded random load: enclosure check."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    f = np.random.default_rng(0).standard_normal(48)
    ref = reference_solve(K, f, method="certified", kappa=8.8e5)
    _contains(sp_to_cols(ref), 0, mp_solve(K.toarray(), f))


def sp_to_cols(ref):
    """View a 1-right-hand-side result with (n, 1) arrays."""
    class _R:
        x_hi = ref.x_hi[:, None]
        x_lo = ref.x_lo[:, None]
        radius = ref.radius[:, None]
    return _R


def test_mpmath_engine_matches_60_digit_solve():
    """mpmath engine (40 + log10 kappa digits) against mpmath at 60 digits: H_10."""
    H = hilbert(10)
    f = np.ones(10)
    ref = reference_solve(H, f, method="arbitrary precision", kappa=1.6e13)
    assert ref.radius is None and ref.method == "arbitrary precision"
    x = mp_solve(H, f)
    with mpmath.workdps(60):
        err = max(abs(x[i] - mpmath.mpf(ref.x_hi[i]) - mpmath.mpf(ref.x_lo[i])) for i in range(10))
        assert err <= mpmath.mpf(10) ** -30 * max(abs(v) for v in x)


def test_size_limits_choose_the_engine():
    """Limits set from measurements (module docstring): flint to 2000, mpmath to 200."""
    assert choose_reference_method(FLINT_MAX_N + 1) is None or (FLINT_MAX_N + 1) <= MPMATH_MAX_N
    assert choose_reference_method(MPMATH_MAX_N) in ("certified", "arbitrary precision")
    with pytest.raises(ValueError):
        reference_solve(sp.eye_array(MPMATH_MAX_N + 1, format="csr"), np.ones(MPMATH_MAX_N + 1),
                        method="arbitrary precision")


@needs_flint
def test_singular_matrix_is_refused():
    """An exactly singular matrix [[1, 1], [1, 1]] has no enclosure: ValueError (common practice)."""
    with pytest.raises(ValueError):
        reference_solve(np.ones((2, 2)), np.ones(2), method="certified")


def test_power_of_two_scaling_is_exact():
    """bcsstk01 (Harwell-Boeing): diag(s) K diag(s) with s powers of two has its
    diagonal in [1/2, 2) and divides back to K bit for bit (IEEE 754 scaling by 2^e)."""
    from conditioning.linalg.reference_solve import power_of_two_scaling

    K = scipy.io.mmread(reference_matrix_path("bcsstk01")).toarray()
    s = power_of_two_scaling(K)
    assert np.all(np.frexp(s)[0] == 0.5)   # each s_i is exactly a power of two
    S = (K * s[:, None]) * s[None, :]
    assert np.all((np.diag(S) >= 0.5) & (np.diag(S) < 2.0 + 1e-15))
    assert np.array_equal((S / s[None, :]) / s[:, None], K)


@needs_flint
def test_flint_scaled_solve_bcsstk06_narrow_and_fits_lapack():
    """bcsstk06 (n = 420, Harwell-Boeing): ball elimination
    on raw K gave no usable enclosure at 320 bits (module docstring); on the exact
    power-of-two scaling it must. Checks: the radius is narrow, the residual of the
    midpoint computed in mpmath at 60 digits is far below float64's, and LAPACK's
    float64 solve (numpy.linalg.solve) lies within kappa_1 * u of the midpoint."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk06")))
    A = K.toarray()
    f = np.random.default_rng(0).standard_normal(420)
    ref = reference_solve(K, f, method="certified", kappa=1e6)
    scale = np.max(np.abs(ref.x_hi))
    assert np.max(ref.radius) <= 1e-24 * scale
    with mpmath.workdps(60):
        x = [mpmath.mpf(h) + mpmath.mpf(l) for h, l in zip(ref.x_hi, ref.x_lo)]
        rows = sp.csr_array(K)
        res = max(abs(mpmath.fsum(mpmath.mpf(float(v)) * x[int(c)] for v, c in
                                  zip(rows.data[rows.indptr[i]:rows.indptr[i + 1]],
                                      rows.indices[rows.indptr[i]:rows.indptr[i + 1]])) - f[i])
                  for i in range(420))
    norm_a = np.max(np.sum(np.abs(A), axis=1))
    assert float(res) <= 1e-24 * norm_a * scale
    x_lapack = np.linalg.solve(A, f)
    kappa_1 = np.linalg.cond(A, 1)
    assert np.max(np.abs(x_lapack - ref.x_hi)) <= 10 * kappa_1 * 2.0**-53 * scale


@needs_flint
def test_flint_failure_message_does_not_blame_the_condition_number(monkeypatch):
    """When the ball solve gives up, the message says what happened (the radii it
    reached) and not that K is singular or too ill-conditioned: [[1, 1], [1, 1]]
    (exactly singular, common practice) and [[3, 1], [1, 2]] (x = (1/5, 2/5), not
    binary, so its balls keep a radius) with a width target no precision tried reaches."""
    import conditioning.linalg.reference_solve as rs

    with pytest.raises(ValueError) as singular:
        reference_solve(np.ones((2, 2)), np.ones(2), method="certified")
    assert "pivot ball contained zero" in str(singular.value)
    monkeypatch.setattr(rs, "NARROW", 1e-300)
    with pytest.raises(ValueError) as wide:
        reference_solve(np.array([[3.0, 1.0], [1.0, 2.0]]), np.ones(2), method="certified")
    assert "too ill-conditioned" not in str(wide.value) and "relative radius" in str(wide.value)
