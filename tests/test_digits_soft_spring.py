"""A slab held in one direction only by a very soft spring (issue 22).

Invented model: a plane-stress slab (8 x 4 bilinear quadrilaterals, 250 mm,
E = 30 GPa, t = 200 mm) with uy held along its bottom edge and ux held only by
a ground spring of 3e-7 N/mm at one corner. Its scaled condition number is
about 1e15 (LAPACK eigvalsh through numpy), so the stored K is still
nonsingular, and a float64 solve keeps about one digit. The digits the report
gives must be measured (never more than the truth, within 0.5 digits of it),
not a bound of 0, checked against an mpmath re-solve of the stored K at 60
decimal digits.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from conditioning.demo import assemble

mpmath = pytest.importorskip("mpmath")

SPRING = 3e-7   # N/mm, invented: chosen so that the scaled condition is about 1e15


def soft_spring_slab(k: float = SPRING, nx: int = 8, ny: int = 4, h: float = 250.0):
    ids = np.arange((nx + 1) * (ny + 1)).reshape(ny + 1, nx + 1) + 1
    xy = np.array([(i * h, j * h) for j in range(ny + 1) for i in range(nx + 1)], float)
    quads = np.array([[ids[j, i], ids[j, i + 1], ids[j + 1, i + 1], ids[j + 1, i]]
                      for j in range(ny) for i in range(nx)])
    a = assemble.plane_stress_quad(ids.ravel(), xy, quads, E=30000.0, nu=0.2, t=200.0)
    a = assemble.apply_restraints(a, [(int(n), "uy") for n in ids[0, :]])
    a = assemble.ground_spring(a, (int(ids[0, 0]), "ux"), k)
    f = np.zeros(a.n)
    f[a.rows([(int(ids[-1, -1]), "ux")])] = 1.0e4   # N, at the top far corner
    return a, f


def _true_digits(K: np.ndarray, f: np.ndarray, x: np.ndarray) -> float:
    """-log10 ||x - x_exact||_inf / ||x_exact||_inf, x_exact from mpmath at 60 digits."""
    with mpmath.workdps(60):
        A = mpmath.matrix(K.tolist())
        ref = mpmath.lu_solve(A, mpmath.matrix(f.tolist()))
        exact = np.array([float(ref[i]) for i in range(len(f))])
        err = max(abs(mpmath.mpf(float(x[i])) - ref[i]) for i in range(len(f)))
        return -math.log10(float(err) / float(np.max(np.abs(exact))))


def test_soft_spring_slab_gets_measured_digits_not_a_bound_of_zero():
    import conditioning

    a, f = soft_spring_slab()
    K = a.K.toarray()
    s = 1.0 / np.sqrt(np.diag(K))
    w = np.linalg.eigvalsh(K * s[:, None] * s[None, :])    # LAPACK
    assert 1e14 < w[-1] / abs(w[0]) < 1e16                  # the model the issue describes

    supplied = np.linalg.solve(K, f)                        # LAPACK getrf/getrs: another float64 solve
    report = conditioning.diagnose(a.K, dofs=a.dofs, load=f, solution=supplied, samples=1)
    d = report.digits
    assert d is not None and d.samples, d.skipped if d is not None else None
    own = next(x for x in d.samples if x.sample == "load")
    truth = _true_digits(K, f, own.solution)
    assert own.trustworthy_digits <= truth + 1e-9           # never more than measured
    assert own.trustworthy_digits >= truth - 0.5
    # The supplied solution is judged by its measured digits, not "0.0 (bound)".
    audit = d.audit
    assert audit is not None and not audit.method.startswith("bound")
    truth_s = _true_digits(K, f, supplied)
    assert audit.trustworthy_digits <= truth_s + 1e-9
    assert audit.trustworthy_digits >= truth_s - 0.5


def test_soft_spring_slab_is_proved_supported_by_the_motion_the_spring_resists():
    """The slab's near-zero mode is its ux translation, which K resists at the spring's row
    (433 u of that row's |K| |b|; free scikit-fem bodies measure 1-3 u): the support proof
    decides it, not the eigenvalue's size. The slab is supported by the spring (no support
    advised, not singular), its lambda_min(S) is bracketed by the proved bound from below
    and mpmath's eigensolver at 40 digits (eigsy) from above."""
    import conditioning

    a, f = soft_spring_slab()
    report = conditioning.diagnose(a.K, dofs=a.dofs, load=f, samples=0)
    assert report.verdict.startswith("near-singular"), report.verdict
    assert not report.condition.singular and report.restraints == []
    support = report.spectrum.support
    assert support.outcome == "proved supported"
    K = a.K.toarray()
    s = 1.0 / np.sqrt(np.diag(K))
    with mpmath.workdps(40):
        lam = float(min(mpmath.eigsy(mpmath.matrix((K * s[:, None] * s[None, :]).tolist()),
                                     eigvals_only=True)))
    assert 0 < support.lower_bound_scaled <= lam
    (mode,) = report.spectrum.modes
    assert mode.eigenvalue == pytest.approx(lam, rel=0.05)
