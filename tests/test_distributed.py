"""The PETSc engine (MUMPS LDL^T, SLEPc Krylov-Schur) against the scipy engine and LAPACK.

Runs in the engine's environment (scripts/setup-petsc-engine.sh), in CI as
``mpiexec -n 2 VENV/bin/python -m pytest -q tests/test_distributed.py``: every
rank runs every test on the same data, so each collective PETSc call is
matched. Skips with its reason where petsc4py is not importable (the main
test environment, numpy 2).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

if os.environ.get("CONDITIONING_REQUIRE_PETSC"):  # CI: these tests must run, never skip
    import petsc4py  # noqa: F401
    import slepc4py  # noqa: F401
pytest.importorskip("petsc4py", reason="petsc4py is not importable here; the PETSc engine's tests run in "
                                       "the environment of scripts/setup-petsc-engine.sh under mpiexec")
pytest.importorskip("slepc4py", reason="slepc4py is not importable here (scripts/setup-petsc-engine.sh)")

from conditioning import diagnose  # noqa: E402
from conditioning.cli import main  # noqa: E402
from conditioning.engine.base import Engine, Factorization, OwnEigensolver  # noqa: E402
from conditioning.engine.petsc_engine import PetscEngine  # noqa: E402
from conditioning.engine.scaling import diagonal_scaling, scale_stiffness, scaled_matrix  # noqa: E402
from conditioning.io.load import load_model  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
SHARED = Path(os.environ.get("CONDITIONING_SHARED", REPO.parent / "shared")) / "reference-matrices"
# Stiffness matrices only: the load vectors and the shipped supplied solution are n x 1.
DEMO = sorted(p.name for p in (REPO / "matrices").glob("*.mtx") if not p.stem.endswith(("_load", "_solution")))
#: Public matrices (SuiteSparse Harwell-Boeing BCSSTK set, ../shared/reference-matrices/PROVENANCE.md):
#: small ones take the dense spectrum path of the pipeline, bcsstk13 (n = 2003) the sparse one,
#: where SLEPc's shift-and-invert and lambda_max are used.
REFERENCE = ["bcsstk01.mtx", "bcsstk02.mtx", "bcsstk05.mtx", "bcsstk13.mtx"]


def _reference(name: str) -> Path:
    path = SHARED / name
    if not path.exists():
        pytest.skip(f"{path} absent (public reference matrices live next to the repository)")
    return path


def _scaled_dense(K) -> np.ndarray:
    return scaled_matrix(sp.csr_array(K), diagonal_scaling(sp.csr_array(K))).toarray()


def test_mumps_inertia_of_second_difference_closed_form():
    """tridiag(-1, 2, -1), n = 10: eigenvalues 2 - 2 cos(k pi / 11) (closed form); with
    sigma between the 3rd and 4th, exactly 3 lie below sigma (Sylvester's law of inertia)."""
    n = 10
    lam = 2 - 2 * np.cos(np.arange(1, n + 1) * np.pi / (n + 1))
    K = sp.csr_array(sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]))
    fac = PetscEngine().factorize(scale_stiffness(K))
    # S = K / 2 (unit diagonal), so eigenvalues of S are lam / 2.
    assert fac.count_below(0.5 * (lam[2] + lam[3]) / 2) == 3
    assert fac.inertia == (0, 0, n)
    values, _ = fac.smallest_eigenpairs(3)
    np.testing.assert_allclose(values, lam[:3] / 2, rtol=1e-10)


@pytest.mark.parametrize("name", DEMO)
def test_demo_model_engine_against_lapack(name):
    """Smallest eigenvalues of S (SLEPc, shift-and-invert on the MUMPS factor), lambda_max(S)
    and the inertia at the shift, against numpy.linalg.eigvalsh (LAPACK) of the dense S."""
    K = load_model(REPO / "matrices" / name).K
    fac = PetscEngine().factorize(scale_stiffness(K))
    lam = np.linalg.eigvalsh(_scaled_dense(K))  # LAPACK; the demo models have every row stiff
    values, vectors = fac.smallest_eigenpairs(6)
    # Agreement relative to ||S|| (null eigenvalues are round-off either way), and lambda_min
    # to 1e-4 relative (the scaled kappa_2 needs 1%; measured 4.5e-5 on mast_soft_spring,
    # where lambda_min = 1.8e-13).
    np.testing.assert_allclose(values, lam[:6], rtol=0, atol=1e-8 * lam[-1])
    if lam[0] > 1e-10:
        assert values[0] == pytest.approx(lam[0], rel=1e-4)
    np.testing.assert_allclose(fac.largest_eigenvalue(), lam[-1], rtol=1e-7)
    assert fac.inertia[0] == int(np.count_nonzero(lam < fac.shift))  # Sylvester
    c = 1e-3
    if not np.any(np.abs(lam - c) < 1e-6):
        assert fac.count_below(c) == int(np.count_nonzero(lam < c))
    S = _scaled_dense(K)
    residual = np.linalg.norm(S @ vectors - vectors * values, axis=0)
    # Measured up to 5.7e-5 * ||S|| (rack_penalty_tie, mast_soft_spring: an eigenvalue ~1e-13
    # or below, theta ~ 1e13 after the inversion, leaks into the other Krylov vectors); the
    # eigenvalues still agree to 1e-8 * ||S|| (checked above).
    bound = 1e-4
    assert np.all(residual <= bound * lam[-1]), residual


@pytest.mark.parametrize("name", DEMO)
def test_demo_model_diagnosis_same_as_scipy_engine(name):
    """diagnose(..., engine="petsc") against the scipy engine: the same near-singular mode
    count, scaled kappa_2 within 1%, the same verdict status."""
    path = REPO / "matrices" / name
    ref = diagnose(str(path), measure=False)
    got = diagnose(str(path), measure=False, engine="petsc")
    assert got.spectrum.count == ref.spectrum.count
    assert got.spectrum.negative_eigenvalues == ref.spectrum.negative_eigenvalues
    assert got.condition.singular == ref.condition.singular
    if ref.condition.scaled_estimate is not None:
        assert got.condition.scaled_estimate == pytest.approx(ref.condition.scaled_estimate, rel=0.01)
    assert got.status == ref.status
    assert got.pivots is None and got.skipped["pivots"].startswith("not available on this engine")


@pytest.mark.parametrize("name", REFERENCE)
def test_reference_matrix_same_as_scipy_engine_and_lapack(name):
    """BCSSTK stiffness matrices (SuiteSparse): mode count and scaled kappa_2 (within 1%) as
    the scipy engine; the smallest eigenvalues of S as numpy.linalg.eigvalsh (LAPACK)."""
    path = _reference(name)
    ref = diagnose(str(path), measure=False)
    got = diagnose(str(path), measure=False, engine="petsc")
    assert got.spectrum.count == ref.spectrum.count
    if ref.condition.scaled_estimate is not None:
        assert got.condition.scaled_estimate == pytest.approx(ref.condition.scaled_estimate, rel=0.01)
    K = load_model(path).K
    lam = np.linalg.eigvalsh(_scaled_dense(K))
    fac = PetscEngine().factorize(scale_stiffness(K))
    values, _ = fac.smallest_eigenpairs(4)
    np.testing.assert_allclose(values, lam[:4], rtol=1e-8, atol=1e-12 * lam[-1])
    assert fac.inertia[0] == int(np.count_nonzero(lam < fac.shift))


def test_load_digits_as_scipy_engine():
    """mast_soft_spring with its load (matrices/README.md): the measured digits of the
    displacements within 0.5 of the scipy engine's, the solves going through MUMPS."""
    base = REPO / "matrices" / "mast_soft_spring"
    kwargs = dict(dofs=f"{base}_dofs.csv", load=f"{base}_load.mtx", samples=1)
    ref = diagnose(f"{base}.mtx", **kwargs)
    got = diagnose(f"{base}.mtx", engine="petsc", **kwargs)
    assert got.digits is not None and ref.digits is not None
    load_ref = next(x for x in ref.digits.samples if x.sample == "load")
    load_got = next(x for x in got.digits.samples if x.sample == "load")
    assert abs(load_got.trustworthy_digits - load_ref.trustworthy_digits) <= 0.5


def test_memory_predicted_by_mumps_analysis():
    """MUMPS' analysis-only estimate (INFOG(17), MB) is reported before factorizing and
    agrees with the factorization's own record of it."""
    n = 30
    T = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1])
    K = sp.csr_array(sp.kronsum(sp.kronsum(T, T), T))  # 3D Laplacian, 27,000 rows
    engine = PetscEngine()
    predicted = engine.predict_memory(scale_stiffness(K))
    fac = engine.factorize(scale_stiffness(K))
    assert predicted.bytes > 0 and predicted.factor_entries > K.nnz // 2
    assert predicted.bytes == fac.memory.bytes
    assert "INFOG(17)" in predicted.method


def test_engine_implements_the_interface():
    """PetscEngine and its factorization satisfy main's protocols (conditioning.engine.base),
    its own eigensolver through the optional OwnEigensolver capability; what it cannot
    give is None, not made up."""
    n = 12
    K = sp.csr_array(sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1]))
    engine = PetscEngine()
    fac = engine.factorize(scale_stiffness(K))
    assert isinstance(engine, Engine) and isinstance(fac, Factorization) and isinstance(fac, OwnEigensolver)
    assert fac.pivots is None and fac.ordering_permutation() is None
    # K^-1 f against LAPACK, one load and two at once
    F = np.column_stack([np.ones(n), np.arange(n, dtype=float)])
    X = np.linalg.solve(K.toarray(), F)
    np.testing.assert_allclose(fac.solve(F), X, rtol=1e-12)
    np.testing.assert_allclose(fac.solve(F[:, 0]), X[:, 0], rtol=1e-12)
    fac.release()
    with pytest.raises(RuntimeError):
        fac.solve_active(np.ones(n))


def test_digits_say_why_the_proof_was_not_attempted():
    """The verified eigenvalue bound needs the engine's ordering, which MUMPS does not hand
    back: the digits stage says so instead of certifying."""
    report = diagnose(str(REPO / "matrices" / "mast_soft_spring.mtx"), samples=1, engine="petsc")
    assert report.digits is not None
    assert "shares no fill-reducing ordering" in str(report.digits.certification)


def test_command_line_rank_zero_writes(tmp_path):
    """conditioning diagnose --engine petsc under mpiexec: the exit status of the scipy
    engine on every rank; the JSON written by rank 0 only."""
    from petsc4py import PETSc

    path = str(REPO / "matrices" / DEMO[0])
    out = tmp_path / "report.json"
    status = main(["diagnose", path, "--engine", "petsc", "--quiet", "--json", str(out)])
    assert status == main(["diagnose", path, "--quiet"])
    assert out.exists() == (PETSc.COMM_WORLD.rank == 0)
