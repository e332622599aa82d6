"""The verified lower bound on lambda_min and the certified error of a refined solution.

Outside references:

* LAPACK (numpy.linalg.eigvalsh) for the smallest eigenvalue of S = E K E;
  its error is a small multiple of u ||S||_2 (common practice), far below the
  margins here;
* python-flint's ``arb_mat.solve`` (ball arithmetic) for a certified
  enclosure of the exact solution: the proved error bound must contain
  flint's proved error (never claim a smaller error than flint proves);
* the public matrices of ../shared/reference-matrices (PROVENANCE.md) and
  invented models (said so where built).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.engine.scipy_engine import factorize
from conditioning.linalg.doubledouble import dd_residual
from conditioning.linalg.refinement import refine_block
from conditioning.linalg.verified_eigenvalue import (
    certified_errors,
    power_of_two_scaling,
    verified_smallest_eigenvalue,
)
from conftest import computed_stats, reference_matrix_path

try:
    import flint
except ImportError:  # test extra
    flint = None

SMALL = ["bcsstk01", "bcsstk02", "bcsstk04", "bcsstk05", "bcsstk06", "nos4", "LF10"]


def lapack_lambda_min(K: sp.csr_array, e: np.ndarray) -> float:
    A = K.toarray()
    return float(np.linalg.eigvalsh(A * e[:, None] * e[None, :])[0])


def unit_scaled_lambda_min(K: sp.csr_array) -> float:
    d = 1 / np.sqrt(K.diagonal())
    return float(np.linalg.eigvalsh(K.toarray() * d[:, None] * d[None, :])[0])


def test_power_of_two_scaling_is_exact_and_in_range():
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk02")))
    e = power_of_two_scaling(K)
    m, _ = np.frexp(e)
    assert np.all(m == 0.5)                               # powers of two
    diag = e * e * K.diagonal()
    assert np.all((diag > 0.25) & (diag <= 1.0))


@pytest.mark.parametrize("name", SMALL)
def test_bound_is_below_lapack_smallest_eigenvalue(name):
    """The proved bound never exceeds LAPACK's lambda_min of the same S, and is
    within a factor 10 of it (it is the shift c minus a rounding bound)."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    bound = verified_smallest_eigenvalue(K, unit_scaled_lambda_min(K))
    assert bound.verified, bound.reason
    lam = lapack_lambda_min(K, bound.scale)
    assert bound.lower <= lam
    assert bound.lower >= lam / 10
    assert bound.rounding_bound < 1e-10


def test_reuses_an_ordering():
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk05")))
    perm = np.random.default_rng(3).permutation(K.shape[0])
    bound = verified_smallest_eigenvalue(K, unit_scaled_lambda_min(K), perm=perm)
    assert bound.verified and bound.lower <= lapack_lambda_min(K, bound.scale)


def chain(n: int, ground: float) -> sp.csr_array:
    main = np.full(n, 2.0)
    main[0], main[-1] = 1.0, 1.0 + ground
    return sp.diags_array([-np.ones(n - 1), main, -np.ones(n - 1)], offsets=[-1, 0, 1]).tocsr()


def test_refuses_an_indefinite_matrix():
    """An invented chain with one spring entered as -3 (LAPACK: one negative
    eigenvalue): no shift gives positive pivots, nothing is proved."""
    K = chain(30, 1.0).toarray()
    K[np.ix_([14, 15], [14, 15])] += np.array([[-4.0, 4.0], [4.0, -4.0]])
    assert np.linalg.eigvalsh(K)[0] < 0
    bound = verified_smallest_eigenvalue(sp.csr_array(K), 1e-3)
    assert not bound.verified and bound.lower is None
    assert "not positive" in bound.reason


def test_refuses_a_singular_matrix():
    """A free chain (singular: rigid translation, textbook fact), even when handed
    a small positive estimate."""
    bound = verified_smallest_eigenvalue(chain(40, 0.0), 1e-14)
    assert not bound.verified


def test_refuses_beyond_what_the_bound_proves():
    """The 12 x 12 Hilbert matrix, kappa_2 = 1.7e16 (REFERENCES.md): SPD in exact
    arithmetic, but its smallest eigenvalue is below the rounding bound."""
    i = np.arange(12)
    H = 1.0 / (i[:, None] + i[None, :] + 1)
    d = 1 / np.sqrt(np.diag(H))
    lam = np.linalg.eigvalsh(H * d[:, None] * d[None, :])[0]
    bound = verified_smallest_eigenvalue(sp.csr_array(H), max(lam, 1e-18))
    assert not bound.verified


#: The positive definite public matrices of PROVENANCE.md small enough for a dense
#: ball-arithmetic solve in test time (n <= 500; computed_stats.csv: posdef True).
FLINT_SIZED = ["bcsstk01", "bcsstk02", "bcsstk03", "bcsstk04", "bcsstk05", "bcsstk06", "bcsstk07",
               "bcsstk20", "bcsstk22", "nos1", "nos4", "plat362", "bcsstm02", "bcsstm05", "bcsstm06",
               "bcsstm07", "bcsstm20", "bcsstm22", "LF10"]


@pytest.mark.skipif(flint is None, reason="python-flint not installed")
@pytest.mark.parametrize("name", FLINT_SIZED)
def test_error_bound_contains_flints_enclosure(name):
    """x_r from double-double refinement: the proved |x_r - x|_i bound is never below
    python-flint's certified lower bound on the same error, and, where the scaled
    condition number (LAPACK) is below 1e8, the float64 solution's certified
    normwise digits agree with flint's within 0.3. Where the bound cannot be
    proved (conditioning beyond it), nothing is claimed."""
    row = next((r for r in computed_stats() if r["file"].startswith(name + ".")), None)
    assert row is not None and row["posdef"] == "True"          # PROVENANCE.md
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    n = K.shape[0]
    kappa_scaled = 1.0 / unit_scaled_lambda_min(K) * float(
        np.linalg.eigvalsh(K.toarray() / np.sqrt(np.outer(K.diagonal(), K.diagonal())))[-1])
    f = np.random.default_rng(21).standard_normal(n)
    fac = factorize(K)
    x = fac.solve(f)
    ref = refine_block(K, fac, f[:, None], X0=x[:, None])[0]
    bound = verified_smallest_eigenvalue(K, unit_scaled_lambda_min(K))
    if kappa_scaled < 1e8:
        assert bound.verified, bound.reason
    if not bound.verified:
        assert bound.lower is None
        return
    r_hi, r_lo = dd_residual(K, ref.x_hi, ref.x_lo, f)
    cert = certified_errors(K, bound.scale, bound.lower, f, ref.x_hi, ref.x_lo, r_hi, r_lo)
    with flint.ctx.workprec(200):
        X = flint.arb_mat(n, n, K.toarray().ravel().tolist()).solve(flint.arb_mat(n, 1, f.tolist()))
        exact_gap_lo = np.array([float((abs(X[i, 0] - flint.arb(float(ref.x_hi[i])) - flint.arb(float(ref.x_lo[i]))))
                                       .lower()) for i in range(n)])
        float_gap = [abs(X[i, 0] - flint.arb(float(x[i]))) for i in range(n)]
        big = max(abs(X[i, 0]).upper() for i in range(n))
        flint_digits = -np.log10(float(max(g.lower() for g in float_gap) / big))
    assert np.all(cert >= exact_gap_lo)
    err_up = np.abs((x - ref.x_hi) - ref.x_lo) * (1 + 4 * 2.0**-53) + cert
    ours = -np.log10(err_up.max() / (np.abs(ref.x_hi).max() - cert.max()))
    assert ours <= flint_digits + 1e-9
    if kappa_scaled < 1e8:
        assert abs(ours - flint_digits) <= 0.3


def _condition(K: sp.csr_array):
    """A ConditionResult carrying LAPACK's smallest eigenvalue of S (what the spectrum
    stage estimates), as the digits stage receives it."""
    from conditioning.results import ConditionResult

    lam = unit_scaled_lambda_min(K)
    return ConditionResult(singular=False, lambda_max=float("nan"), lambda_min=None, estimate=None,
                           estimate_method="-", scaled_estimate=None, scaled_lambda_min=lam,
                           scaled_lambda_max=None, scaled_method="LAPACK eigvalsh", one_norm_estimate=None,
                           one_norm_method="-", scaling_gain_digits=None)


@pytest.mark.skipif(flint is None, reason="python-flint not installed")
@pytest.mark.parametrize("name", ["bcsstk02", "bcsstk06", "bcsstk08"])
def test_digits_stage_certifies_with_the_eigenvalue_bound(name):
    """Without the ball-arithmetic re-solve (confirm=False), every sample is certified
    by the eigenvalue bound after the shared factor is released; the figure never exceeds python-flint's certified digits
    of the very vector measured and is within 0.3 of them (scaled condition below 1e8:
    PROVENANCE.md / LAPACK)."""
    from conditioning.model import Model
    from conditioning.stages.digits import CERTIFIED_EIGENVALUE, certify_digits, measure_digits

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    n = K.shape[0]
    f = np.random.default_rng(5).standard_normal(n)
    model, fac, condition = Model(K=K, load=f), factorize(K), _condition(K)
    measured = measure_digits(model, fac, condition=condition, samples=0, confirm=False)
    perm = fac.ordering_permutation()
    fac.release()                      # as the pipeline does: the proof's factor comes after
    result = certify_digits(model, measured, condition, perm)
    assert result.certification.startswith("proved")
    sample = result.samples[0]
    assert sample.method == CERTIFIED_EIGENVALUE and sample.bound_trusted
    from test_digits import digits_of, external_error  # flint at a precision raised until narrow

    lo, _ = external_error(K.toarray(), f, sample.solution, algorithm="lu")
    certified = digits_of(lo)
    assert sample.trustworthy_digits <= certified + 1e-9
    assert abs(sample.trustworthy_digits - certified) <= 0.3


@pytest.mark.parametrize("name", ["bcsstk08", "bcsstk14"])
def test_ordering_permutation_reproduces_the_shared_fill(name):
    """Reusing the shared factorization's ordering: S[p][:, p] factored in natural
    order by SuperLU has exactly the shared factor's fill (so the verification costs
    about one more factorization, not a worse one)."""
    import scipy.sparse.linalg as spla

    from conditioning.engine.scipy_engine import diagonal_scaling, scaled_matrix

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    fac = factorize(K, ordering="MMD_AT_PLUS_A")
    p = fac.ordering_permutation()
    S = scaled_matrix(K, diagonal_scaling(K))
    lu = spla.splu(sp.csc_array(S[p][:, p]), permc_spec="NATURAL", diag_pivot_thresh=0.0,
                   options=dict(SymmetricMode=True))
    assert lu.nnz == fac.info.fill


DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "matrices"


@pytest.mark.skipif(flint is None, reason="python-flint not installed")
@pytest.mark.parametrize("name", sorted(p.stem for p in DEMO.glob("*.mtx") if not p.stem.endswith(("_load", "_solution"))))
def test_demo_models_bound_contains_flints_enclosure(name):
    """Every bundled demo export (invented models, matrices/README.md) that LAPACK finds
    positive definite: the proved error bound of a refined solution is never below
    python-flint's certified error, and the certified digits are within 0.3 of flint's
    where the scaled condition number is below 1e8; where the bound cannot be proved,
    nothing is claimed."""
    K = sp.csr_array(scipy.io.mmread(str(DEMO / f"{name}.mtx")))
    d = K.diagonal()
    if np.any(d <= 0):
        pytest.skip("rows without stiffness: singular by construction")
    s = 1 / np.sqrt(d)
    w = np.linalg.eigvalsh(K.toarray() * s[:, None] * s[None, :])          # LAPACK
    if w[0] <= 1e-14 * w[-1]:
        pytest.skip("singular at working precision (a free mode, built on purpose)")
    n = K.shape[0]
    f = np.random.default_rng(9).standard_normal(n)
    fac = factorize(K)
    x = fac.solve(f)
    ref = refine_block(K, fac, f[:, None], X0=x[:, None])[0]
    bound = verified_smallest_eigenvalue(K, float(w[0]))
    kappa_scaled = w[-1] / w[0]
    if kappa_scaled < 1e8:
        assert bound.verified, bound.reason
    if not bound.verified:
        assert bound.lower is None
        return
    assert bound.lower <= lapack_lambda_min(K, bound.scale)
    r_hi, r_lo = dd_residual(K, ref.x_hi, ref.x_lo, f)
    cert = certified_errors(K, bound.scale, bound.lower, f, ref.x_hi, ref.x_lo, r_hi, r_lo)
    from test_digits import digits_of, external_error

    lo, _ = external_error(K.toarray(), f, x, algorithm="lu")
    err_up = np.abs((x - ref.x_hi) - ref.x_lo) * (1 + 4 * 2.0**-53) + cert
    ours = -np.log10(err_up.max() / (np.abs(ref.x_hi).max() - cert.max()))
    assert ours <= digits_of(lo) + 1e-9
    if kappa_scaled < 1e8:
        assert abs(ours - digits_of(lo)) <= 0.3


def test_round_off_asymmetry_is_bounded_through_the_symmetric_part():
    """bcsstk05 with every upper entry perturbed by one ulp (an export's round-off):
    no longer exactly symmetric, still proved, and the bound is below the smallest
    singular value of E K E (LAPACK SVD), as x'Kx = x'Hx guarantees."""
    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk05")))
    A = K.toarray()
    iu = np.triu_indices_from(A, 1)
    A[iu] = np.nextafter(A[iu], np.inf)
    Kp = sp.csr_array(A)
    assert abs(Kp - Kp.T).max() > 0
    bound = verified_smallest_eigenvalue(Kp, unit_scaled_lambda_min(K))
    assert bound.verified, bound.reason
    e = bound.scale
    sigma = np.linalg.svd(A * e[:, None] * e[None, :], compute_uv=False)[-1]
    assert bound.lower <= sigma


def _arb(A: np.ndarray):
    """A dense float64 matrix as a python-flint arb_mat (every entry exact)."""
    return flint.arb_mat(A.shape[0], A.shape[1], [flint.arb(float(v)) for v in A.ravel()])


def _exact_norm(build) -> float:
    """||M||_2 for the matrix ``build()`` forms from _arb matrices: M formed exactly in
    python-flint (arb at 2000 bits: every product and sum of these doubles is exact,
    checked through the balls' radii), its 2-norm by LAPACK (numpy.linalg.norm(., 2),
    an SVD). Rounding the exact entries to double moves that norm by a relative
    sqrt(n) u at most, far below the margins checked."""
    with flint.ctx.workprec(2000):
        M = build()
        n, m = M.nrows(), M.ncols()
        assert all(M[i, j].rad() == 0 for i in range(n) for j in range(m))
        Mm = np.array([[float(M[i, j].mid()) for j in range(m)] for i in range(n)])
    return float(np.linalg.norm(Mm, 2))


@pytest.mark.skipif(flint is None, reason="python-flint not installed")
@pytest.mark.parametrize("name,spec", [("bcsstk01", "MMD_AT_PLUS_A"), ("bcsstk02", "NATURAL"),
                                       ("bcsstk04", "NATURAL"), ("bcsstk04", "MMD_AT_PLUS_A"),
                                       ("bcsstk05", "MMD_AT_PLUS_A"), ("nos1", "MMD_AT_PLUS_A"),
                                       ("nos4", "MMD_AT_PLUS_A"), ("LF10", "NATURAL")])
def test_rounding_bound_contains_the_exact_factorization_error(name, spec):
    """The proved bound on ||L D L^T - (S - cI)||_2 is never below that norm computed
    exactly (python-flint, LAPACK; see _exact_norm) for SuperLU's own
    factors of S - cI, S = E K E of a public reference matrix (PROVENANCE.md) and c half
    LAPACK's smallest eigenvalue of S. Its first part, the row sums of |L| |D L^T - U|
    read block by block from L's rows and U's columns, equals the same sums formed
    from dense numpy arrays, and is never below the exact ||L (D L^T - U)||_2. The cases
    include factors whose L^T and U differ in pattern (an entry computed as exactly zero
    on one side only; with this scipy: bcsstk04, bcsstk05 and nos1 under MMD)."""
    from conditioning.linalg.verified_eigenvalue import (
        _bound_at_shift,
        _factor_without_pivoting,
        _rounding_row_sums,
        _shifted,
    )

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    e = power_of_two_scaling(K)
    S = sp.csr_array(K.multiply(e[:, None]).multiply(e[None, :]))   # exact: powers of two
    S.sum_duplicates()
    c = 0.5 * lapack_lambda_min(K, e)
    lu = _factor_without_pivoting(_shifted(S, c)[0], spec)
    assert np.array_equal(lu.perm_r, lu.perm_c)
    q = np.argsort(lu.perm_c)                  # L U = A[q][:, q] (scipy.sparse.linalg.splu's documented Pr A Pc)
    L, U = lu.L.copy(), lu.U.copy()
    bound, _ = _bound_at_shift(S, c, spec)     # the same deterministic factorization, inside
    n = K.shape[0]
    u = 2.0**-53
    Ld, Ud = L.toarray(), U.toarray()
    d = np.diag(Ud).copy()
    Sq = S.toarray()[q][:, q]
    exact = _exact_norm(lambda: _arb(Ld) * _arb(np.diag(d)) * _arb(Ld.T) - _arb(Sq) + _arb(c * np.eye(n)))
    assert exact > 0
    assert bound >= exact * (1 + 10 * n * u)
    # The D L^T - U part alone (gamma_k = 0), against dense numpy with the same roundings.
    F = np.abs(d[:, None] * Ld.T - Ud)
    dense = float(np.max(np.abs(Ld) @ (F.sum(axis=1) * (1 + 2 * u) + 2 * u * d * np.abs(Ld).sum(axis=0))))
    part = _rounding_row_sums(L.copy(), U.copy(), d, 0)
    assert part == pytest.approx(dense, rel=1e-12)
    exact_LF = _exact_norm(lambda: _arb(Ld) * (_arb(np.diag(d)) * _arb(Ld.T) - _arb(Ud)))
    assert part >= exact_LF * (1 + 10 * n * u)


def test_symmetric_part_only_when_k_is_not_symmetric():
    """The symmetry test behind the proof, against scipy's own K - K^T: a stored zero
    without a stored mirror leaves bcsstk05 exactly symmetric (nothing to add to the
    bound); one entry moved by one ulp does not, and the symmetric part returned is
    scipy's (K + K^T) / 2 entry by entry."""
    from conditioning.linalg.verified_eigenvalue import _symmetric_part

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk05")))
    A = K.toarray()
    i, j = np.argwhere(A == 0)[0]              # an unstored position (i != j: the diagonal is stored)
    Z = sp.coo_array((np.r_[K.tocoo().data, 0.0], (np.r_[K.tocoo().row, i], np.r_[K.tocoo().col, j])),
                     shape=K.shape).tocsr()
    Z.sum_duplicates()
    assert Z.nnz == K.nnz + 1 and abs(Z - Z.T).max() == 0
    assert _symmetric_part(Z) is None
    A[0, 1] = np.nextafter(A[0, 1], np.inf)
    P = sp.csr_array(A)
    H = _symmetric_part(P)
    assert H is not None and abs(H - (P + P.T) * 0.5).max() == 0


@pytest.mark.parametrize("name", ["bcsstk20", "bcsstk19"])
def test_rayleigh_shift_proves_a_bound_near_lambda_min(name):
    """With S's smallest eigenvector the shift sits just below the Rayleigh quotient of
    E K E: the proved bound is within 15% of LAPACK's lambda_min(E K E) (eigvalsh), where
    a quarter of the D-scaled estimate left it a factor 3-6 below."""
    from types import SimpleNamespace

    from conditioning.linalg.verified_eigenvalue import power_of_two_scaling
    from conditioning.stages.digits import _verify

    K = sp.csr_array(scipy.io.mmread(reference_matrix_path(name)))
    d = K.diagonal()
    s = 1 / np.sqrt(d)
    w, V = np.linalg.eigh(K.toarray() * s[:, None] * s[None, :])       # LAPACK
    e = power_of_two_scaling(K)
    lam_e = np.linalg.eigvalsh(K.toarray() * e[:, None] * e[None, :])[0]
    perm = factorize(K).ordering_permutation()
    bound, _ = _verify(K, perm, SimpleNamespace(scaled_lambda_min=float(w[0])), V[:, 0])
    assert bound is not None and bound.verified
    assert 0.85 * lam_e <= bound.lower <= lam_e
