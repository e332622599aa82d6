"""Distributed backend (PETSc/SLEPc through petsc4py/slepc4py): see docs/distributed.md.

Neither package has a binary wheel on PyPI (checked with
``pip download --no-deps --only-binary=:all: petsc4py``: "no matching
distribution"; the sdist needs a PETSc build, far beyond CI's time), so the
prototype is not written and this test skips unless both are installed.
"""

from __future__ import annotations

import pytest


def test_petsc_slepc_available_for_the_distributed_backend():
    petsc4py = pytest.importorskip(
        "petsc4py", reason="petsc4py has no wheel on PyPI; building PETSc from source exceeds CI's time "
                           "(docs/distributed.md)")
    slepc4py = pytest.importorskip("slepc4py", reason="slepc4py has no wheel on PyPI (docs/distributed.md)")
    petsc4py.init()
    slepc4py.init()
    from petsc4py import PETSc

    # The plan's mode count: inertia of K - sigma*I from a MUMPS Cholesky
    # (MatGetInertia). For tridiag(-1, 2, -1), n = 10, the eigenvalues are
    # 2 - 2 cos(k pi / 11) (closed form, /work/shared/REFERENCES.md); with
    # sigma between the 3rd and 4th, exactly 3 are negative.
    if not PETSc.Sys.hasExternalPackage("mumps"):
        pytest.skip("PETSc was built without MUMPS, which the inertia count needs")
    import numpy as np

    n = 10
    lam = 2 - 2 * np.cos(np.arange(1, n + 1) * np.pi / (n + 1))
    sigma = 0.5 * (lam[2] + lam[3])
    A = PETSc.Mat().createAIJ([n, n], nnz=3, comm=PETSc.COMM_SELF)
    for i in range(n):
        A.setValue(i, i, 2.0 - sigma)
        if i > 0:
            A.setValue(i, i - 1, -1.0)
        if i < n - 1:
            A.setValue(i, i + 1, -1.0)
    A.assemble()
    A.setOption(PETSc.Mat.Option.SYMMETRIC, True)
    ksp = PETSc.KSP().create(comm=PETSc.COMM_SELF)
    ksp.setOperators(A)
    ksp.setType("preonly")
    pc = ksp.getPC()
    pc.setType("cholesky")
    pc.setFactorSolverType("mumps")
    ksp.setUp()
    negative, zero, positive = pc.getFactorMatrix().getInertia()
    assert (negative, zero, positive) == (3, 0, n - 3)
