"""Condition numbers against published and LAPACK-computed figures.

Sources:
- SuiteSparse Matrix Collection site statistics (``pub_site_cond``, 2-norm
  condition from a full SVD) as copied into computed_stats.csv, see
  ../shared/reference-matrices/PROVENANCE.md;
- numpy.linalg.cond / eigvalsh / inv (LAPACK) recomputed here on the same files;
- the closed form kappa_2 = cot^2(pi / (2(n+1))) of the second-difference
  matrix tridiag(-1, 2, -1) (classical; see ../shared/REFERENCES.md).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp

from conditioning.stages.condition import condition_numbers
from conditioning.engine.scipy_engine import factorize
from conditioning.io.load import load_model
from conditioning.stages.spectrum import scaled_spectrum

from conftest import computed_stats, reference_matrix_path


def _stages(K):
    fac = factorize(K)
    spec = scaled_spectrum(K, fac)
    return fac, spec, condition_numbers(K, fac, spec)


def second_difference(n: int) -> sp.csr_array:
    return sp.csr_array(sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]))


@pytest.mark.parametrize("n", [10, 100, 1000, 3000])
def test_second_difference_kappa2_closed_form(n):
    """tridiag(-1, 2, -1): kappa_2 = cot^2(pi/(2(n+1))); n=10 -> 48.37415, n=100 -> 4133.643."""
    expected = 1.0 / math.tan(math.pi / (2 * (n + 1))) ** 2
    _, spec, cond = _stages(second_difference(n))
    assert not cond.singular and spec.count == 0
    # Dense LAPACK below 1,200 rows; above, Lanczos at ARPACK tolerance 1e-3,
    # whose Ritz value for lambda_max approaches from below (documented in spectrum.largest_eigenvalue).
    rel = 1e-9 if n <= 1200 else 1e-3
    assert cond.estimate == pytest.approx(expected, rel=rel)
    # Unit diagonal after scaling by 1/2: the scaled condition is the same number.
    assert cond.scaled_estimate == pytest.approx(expected, rel=rel)


def _pd_rows(limit: int):
    rows = [r for r in computed_stats() if r["posdef"] == "True" and int(r["n"]) <= limit]
    return rows


def _pd_files():
    try:
        return [r["file"] for r in _pd_rows(10**9)]  # every positive definite public matrix
    except BaseException:  # data absent: one placeholder that skips
        return ["<reference matrices absent>"]


@pytest.mark.parametrize("name", _pd_files())
def test_reference_kappa2_matches_published(name):
    """2-norm estimate within 1% of the published SuiteSparse figure and of LAPACK;
    1-norm estimate a lower bound within a factor 3 of the exact kappa_1 (LAPACK inv);
    scaled estimate within 1% of the dense scaled condition (LAPACK eigvalsh)."""
    path = reference_matrix_path(name)
    row = next(r for r in computed_stats() if r["file"] == name)
    model = load_model(path)
    K = model.K
    fac, spec, cond = _stages(K)
    assert not cond.singular, name
    published = float(row["pub_site_cond"])
    lapack = float(row["cond2_computed"])
    assert cond.estimate == pytest.approx(published, rel=0.01)
    assert cond.estimate == pytest.approx(lapack, rel=0.01)
    n = K.shape[0]
    if n <= 2000:
        A = K.toarray()
        if n <= 600:
            assert cond.estimate == pytest.approx(np.linalg.cond(A), rel=0.01)
        exact_1 = np.linalg.norm(A, 1) * np.linalg.norm(np.linalg.inv(A), 1)
        assert exact_1 / 3 <= cond.one_norm_estimate <= exact_1 * (1 + 1e-6)
        s = 1 / np.sqrt(np.diag(A))
        w = np.linalg.eigvalsh(A * s[:, None] * s[None, :])
        assert cond.scaled_estimate == pytest.approx(w[-1] / w[0], rel=0.01)


@pytest.mark.parametrize("name, published_rank", [
    ("bcsstm01", 24), ("bcsstm03", 72), ("bcsstm04", 66), ("bcsstm13", 1241),
])
def test_singular_reference_rank_deficiency(name, published_rank):
    """SJSU Singular Matrix Collection numrank (SJ_Index, see PROVENANCE.md): the
    number of free modes found equals n - numrank."""
    from conditioning.pipeline import diagnose

    path = reference_matrix_path(name)
    report = diagnose(path, measure=False)
    assert report.condition.singular
    n = report.summary.rows
    assert report.spectrum.count == n - published_rank


def test_indefinite_reference_negative_eigenvalues():
    """bcsstm10 is indefinite: 54 negative eigenvalues (LAPACK eigvalsh, computed_stats.csv),
    counted here from the pivots' signs (Sylvester's law of inertia)."""
    from conditioning.pipeline import diagnose

    path = reference_matrix_path("bcsstm10")
    row = next(r for r in computed_stats() if r["file"] == "bcsstm10.mtx")
    report = diagnose(path, measure=False)
    assert report.spectrum.negative_eigenvalues == int(row["n_nonpositive_eigs"])
    # Said once: with the count and, when pivots exist, where the first negative pivot is.
    said = [f for f in report.findings if f.code in ("stiffness.indefinite", "factor.negative-pivot")]
    assert len(said) == 1 and f"{report.spectrum.negative_eigenvalues:,} negative eigenvalue" in said[0].message


def test_integer_matrix_is_factored_in_float64():
    """nos1 is stored as a Matrix Market "integer" file; scipy.io.mmread returns int64.
    Its scaled matrix must not be rounded to integers (it was: every entry became 0
    and an SPD matrix with kappa_2 2e7 (PROVENANCE.md) was called singular)."""
    import scipy.io

    from conditioning.engine.scipy_engine import factorize

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("nos1")))
    assert K.dtype.kind == "i"
    fac = factorize(K)
    assert not fac.singular and fac.shift == 0.0
    row = next(r for r in computed_stats() if r["file"] == "nos1.mtx")
    assert float(row["cond2_computed"]) == pytest.approx(1.99e7, rel=0.01)


def test_two_materials_are_named_as_a_cause_the_scaling_removes():
    """Invented strip of plane-stress quads, one half 1e5 times stiffer (E) than
    the other, clamped at the stiff end: one unit system and one DOF type, so
    'units or DOF-type mixing' alone would blame the wrong cause. The scaling
    gain shown is log10(raw / scaled) of LAPACK eigvalsh (numpy) on K and on
    D^-1/2 K D^-1/2."""
    import conditioning
    from conditioning.demo import assemble

    nx, ny, h = 12, 3, 10.0
    ids = np.arange((nx + 1) * (ny + 1)).reshape(ny + 1, nx + 1) + 1
    xy = np.array([(i * h, j * h) for j in range(ny + 1) for i in range(nx + 1)], float)
    quads = np.array([[ids[j, i], ids[j, i + 1], ids[j + 1, i + 1], ids[j + 1, i]]
                      for j in range(ny) for i in range(nx)])
    E = np.where(np.arange(len(quads)) % nx < nx // 2, 2.0e5, 2.0)   # MPa, invented
    strip = assemble.plane_stress_quad(ids.ravel(), xy, quads, E=E, nu=0.3, t=1.0)
    strip = assemble.apply_restraints(strip, [(int(n), c) for n in ids[:, 0] for c in ("ux", "uy")])
    K = strip.K.toarray()
    s = 1.0 / np.sqrt(np.diag(K))
    raw = np.linalg.eigvalsh(K)
    scaled = np.linalg.eigvalsh(K * s[:, None] * s[None, :])
    gain = np.log10(raw[-1] / raw[0]) - np.log10(scaled[-1] / scaled[0])
    assert gain > 3   # the truth: the contrast is mostly row scale
    report = conditioning.diagnose(strip.K, samples=1)
    assert report.condition.scaling_gain_digits == pytest.approx(gain, abs=0.05)
    note = next(f for f in report.findings if f.code == "condition.units-only")
    shown = f"{report.condition.scaling_gain_digits:.1f} digits"
    assert shown in note.message and "stiff material next to soft" in note.message



def _portal_with_penalty_bases(factor: float) -> sp.csr_array:
    """Invented steel portal (mm, N): columns 4000 high, beam 6000 long, each
    member in 2 elements; both bases held by diagonal penalties ``factor``
    times the largest diagonal (the way exporters keep restrained rows in K)."""
    from conditioning.demo import assemble

    xy = np.array([[0, 0], [6000, 0], [0, 4000], [6000, 4000], [0, 2000], [6000, 2000], [3000, 4000]], float)
    members = np.array([[1, 5], [5, 3], [2, 6], [6, 4], [3, 7], [7, 4]])
    frame = assemble.frame2d(np.arange(1, 8), xy, members, E=210e3, A=5000.0, I=6e7)
    big = factor * float(frame.K.diagonal().max())
    for node in (1, 2):
        for dof in ("ux", "uy", "rz"):
            frame = assemble.ground_spring(frame, (node, dof), big)
    return frame.K


@pytest.mark.parametrize("factor", [1e13, 1e15])
def test_raw_condition_with_penalty_supports_is_resolved(factor):
    """The smallest eigenvalue of the penalty-supported portal (about 3e2) lies far
    below LAPACK's absolute resolution n eps ||K|| of the dense eigenvalues (1e10
    and more): the eigenvalue nearest zero that eigvalsh returns is round-off (it
    gave 2.4e20 for the 69-row frame of the same kind instead of 5.7e21). The raw
    condition number must still be right, and say how it was obtained.
    Truth: mpmath.eigsy at 80 digits on the same matrix."""
    import mpmath

    K = _portal_with_penalty_bases(factor)
    with mpmath.workdps(80):
        ev = mpmath.eigsy(mpmath.matrix(K.toarray().tolist()), eigvals_only=True)
        lo, hi = min(ev), max(ev)
        truth = float(hi / lo)
    _, _, cond = _stages(K)
    assert not cond.singular
    assert cond.lambda_min == pytest.approx(float(lo), rel=1e-6)       # mpmath eigsy, 80 digits
    assert cond.estimate == pytest.approx(truth, rel=1e-6)             # mpmath eigsy, 80 digits
    assert "K^-1" in cond.estimate_method


def _spring_chain(rng: np.random.Generator, n: int) -> sp.csr_array:
    """K of n DOFs on a chain of n + 1 random springs (1 to 100) held at both ends."""
    springs = rng.uniform(1.0, 100.0, n + 1)
    return sp.csr_array(sp.diags([-springs[1:-1], springs[:-1] + springs[1:], -springs[1:-1]], [-1, 0, 1]))


def test_lambda_min_not_the_smallest_is_caught_by_inertia_and_recomputed():
    """A lambda_min that is K's second eigenvalue (LAPACK eigvalsh gives both) fails the
    Sylvester count of K - (1 - delta) lambda I and is recomputed to the smallest."""
    from conditioning.stages.condition import confirmed_lambda_min
    import scipy.sparse.linalg as spla

    rng = np.random.default_rng(3)
    n = 1300
    K = _spring_chain(rng, n)
    w = np.linalg.eigvalsh(K.toarray())
    fac = factorize(K)
    op = spla.LinearOperator((n, n), matvec=fac.solve, dtype=np.float64)
    lam, how = confirmed_lambda_min(K, fac, float(w[1]), op, "test", rng)
    assert lam == pytest.approx(w[0], rel=1e-6)
    assert "recomputed" in how
    lam, how = confirmed_lambda_min(K, fac, float(w[0]), op, "test", rng)
    assert lam == w[0] and "confirmed" in how


def _spring_chain_spectrum(seed: int):
    """A chain of 1,300 random springs held at both ends: (LAPACK eigvalsh of its scaled
    matrix, the scaled matrix, its factorization, the spectrum stage's eigenpairs)."""
    from conditioning.engine.scaling import scale_stiffness
    from conditioning.stages.spectrum import smallest_eigenpairs

    n = 1300
    K = _spring_chain(np.random.default_rng(seed), n)
    s = 1 / np.sqrt(K.diagonal())
    w = np.linalg.eigvalsh(K.toarray() * s[:, None] * s[None, :])
    scaled = scale_stiffness(K)
    fac = factorize(K)
    return w, scaled, fac, smallest_eigenpairs(scaled, fac, rng=0)


def test_scaled_lambda_min_missed_is_caught_by_inertia_and_recomputed():
    """Eigenpairs that miss S's smallest eigenvalue (LAPACK eigvalsh is the truth) fail
    the Sylvester count of S - (1 - delta) lambda I and are computed again."""
    from dataclasses import replace as dc_replace

    from conditioning.stages.spectrum import confirm_smallest

    w, scaled, fac, eig = _spring_chain_spectrum(4)
    assert eig.values[0] == pytest.approx(w[0], rel=1e-8)
    missed = dc_replace(eig, values=eig.values[1:], vectors=eig.vectors[:, 1:])
    fixed = confirm_smallest(missed, scaled, fac, rng=1)
    assert fixed.values[0] == pytest.approx(w[0], rel=1e-8)
    assert "recomputed 1 time(s) until confirmed" in fixed.method
    assert "confirmed by an inertia count" in confirm_smallest(eig, scaled, fac).method


def test_scaled_lambda_max_short_of_the_largest_is_caught_by_the_probabilistic_bound():
    """A lambda_max that is 5% short of S's largest eigenvalue (LAPACK eigvalsh is the truth)
    is replaced by the Kuczynski-Wozniakowski-length Lanczos run's value, within 0.1% of the
    largest; no factorization is involved (a factor whose count_below raises shows it)."""
    from dataclasses import replace as dc_replace

    from conditioning.stages.spectrum import confirm_largest

    w, scaled, fac, eig = _spring_chain_spectrum(5)

    def no_factorization(c):
        raise AssertionError("lambda_max must not cost a factorization")

    fac.count_below = no_factorization
    short = dc_replace(eig, lambda_max=0.95 * float(w[-1]))
    fixed = confirm_largest(short, scaled, fac, rng=1)
    # Ritz values are at most lambda_max (Cauchy interlacing) up to rounding; the bound asks 0.1%.
    assert (1 - 1e-3) * w[-1] <= fixed.lambda_max <= w[-1] * (1 + 1e-12)
    assert "recomputed" in fixed.method and "Kuczynski-Wozniakowski" in fixed.method
    assert "probability >= 1 - 1e-09" in confirm_largest(eig, scaled, fac).method


def test_kuczynski_wozniakowski_steps_meet_the_bound_on_a_closed_form_spectrum():
    """The run length makes 1.648 sqrt(n) exp(-sqrt(eps)(2k - 1)) <= 1e-9 (the published bound,
    Kuczynski & Wozniakowski 1992, constant from memory), and on the second-difference matrix
    (eigenvalues 2 - 2 cos(j pi / (n + 1)), closed form), whose top eigenvalues cluster so that a
    residual test stops at any of them, the value is within 0.1% of the largest for every start."""
    import math

    from conditioning.stages.spectrum import kw_steps, largest_eigenvalue_bounded

    n = 4000
    m = kw_steps(n, 1e-3, 1e-9)
    assert 1.648 * math.sqrt(n) * math.exp(-math.sqrt(1e-3) * (2 * (m - 1) - 1)) <= 1e-9
    assert 1.648 * math.sqrt(n) * math.exp(-math.sqrt(1e-3) * (2 * (m - 2) - 1)) > 1e-9
    A = sp.csr_array(sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]))
    top = 2 - 2 * math.cos(n * math.pi / (n + 1))
    for seed in range(5):
        theta, how = largest_eigenvalue_bounded(A, rng=seed)
        assert (1 - 1e-3) * top <= theta <= top * (1 + 1e-12), seed
        assert f"{m} steps" in how
    # A shift for an indefinite matrix asks more steps (the relative accuracy is of A + shift I).
    theta, how = largest_eigenvalue_bounded(A - sp.identity(n, format="csr"), shift=1.0, rng=0)
    assert (1 - 1e-3) * (top - 1) <= theta <= (top - 1) * (1 + 1e-12)
    assert int(how.split(",")[1].split()[0]) > m


def test_raw_lambda_max_short_of_the_largest_is_caught_without_a_factorization():
    """K's lambda_max given 5% short (LAPACK eigvalsh is the truth) comes back within 0.1% of the
    largest from the Kuczynski-Wozniakowski-length run; an indefinite K (one negative spring)
    takes its shift from Gershgorin's discs and is still within 0.1%. No factorization is used
    (the factor's count_below raises if called)."""
    from conditioning.stages.condition import confirmed_lambda_max

    rng = np.random.default_rng(6)
    n = 1400
    K = _spring_chain(rng, n)
    w = np.linalg.eigvalsh(K.toarray())
    fac = factorize(K)

    def no_factorization(c):
        raise AssertionError("lambda_max must not cost a factorization")

    fac.count_below = no_factorization
    lam, how = confirmed_lambda_max(K, fac, 0.95 * float(w[-1]), "test", rng)
    assert (1 - 1e-3) * w[-1] <= lam <= w[-1] * (1 + 1e-12)
    assert "recomputed" in how and "probability >= 1 - 1e-09" in how and "inertia" in how
    Kn = sp.lil_array(K)
    Kn[700, 700] = -50.0  # a negative spring: K indefinite
    Kn = sp.csr_array(Kn)
    wn = np.linalg.eigvalsh(Kn.toarray())
    assert wn[0] < 0  # LAPACK: indefinite
    lam, how = confirmed_lambda_max(Kn, None, -np.inf, "test", rng)
    assert (1 - 1e-3) * wn[-1] <= lam <= wn[-1] * (1 + 1e-12)
    assert "Gershgorin" in how
