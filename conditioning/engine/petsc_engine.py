"""The engine on PETSc under MPI: MUMPS LDL^T and SLEPc eigensolvers.

    S = D^-1/2 K D^-1/2 (active rows)  =>  MUMPS LDL^T of S - sigma*I,
    inertia, solves, smallest eigenpairs of S, lambda_max(S)

The same scaled matrix and shift policy as :mod:`conditioning.engine.scipy_engine`,
on a distributed PETSc AIJ matrix: rank 0 holds S (or every rank does; the
pipeline runs replicated) and scatters block rows, rank r owning rows
``row_split(n, size)[r]:[r + 1]``. Arrays handed in and out are numpy on
every rank (the stages run the same code on every rank, so every
collective call is matched); only what is of length n_active passes through
an allgather.

Null pivots: with ICNTL(24) = 1 MUMPS sets aside pivots with a row of
infinity norm below CNTL(3) * ||A_pre||, A_pre the matrix after MUMPS'
preprocessing, and counts them in INFOG(28) (the ``zero`` of the inertia).
CNTL(3) is set to n*eps, the relative threshold of the scipy engine; with
MUMPS' default (eps * 1e-5) a numerically singular S factors "successfully".
PETSc 3.18 sets ICNTL(13) = 1 (no ScaLAPACK on the root front) itself when
ICNTL(24) = 1, so the negative pivot count INFOG(12) is an exact inertia.

Implements :class:`conditioning.engine.base.Engine`; its factorization
implements :class:`conditioning.engine.base.Factorization` and the optional
:class:`conditioning.engine.base.OwnEigensolver` (SLEPc on the same factor).
What this engine cannot give: the pivots D of MUMPS' factor are not handed
back through PETSc, so ``pivots`` is None (the digits lost at the pivots are reported as
not available), and MUMPS' ordering is not handed back either, so
``ordering_permutation()`` is None (the digits stage then skips its verified
eigenvalue bound and says why).

Requires petsc4py and slepc4py with MUMPS (scripts/setup-petsc-engine.sh).

References
----------
.. [1] P. R. Amestoy, I. S. Duff, J.-Y. L'Excellent and J. Koster (2001), "A fully
       asynchronous multifrontal solver using distributed dynamic scheduling",
       SIAM J. Matrix Anal. Appl. 23(1), pp. 15-41.
.. [2] V. Hernandez, J. E. Roman and V. Vidal (2005), "SLEPc: A scalable and
       flexible toolkit for the solution of eigenvalue problems", ACM Trans.
       Math. Software 31(3), pp. 351-362.
"""

from __future__ import annotations

import logging
import time
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.engine.base import FactorizationTooLarge
from conditioning.engine.scaling import ScaledStiffness
from conditioning.engine.scipy_engine import PREDICT_ABOVE
from conditioning.linalg.floating_point import EPS
from conditioning.engine.base import FactorMemoryPrediction
from conditioning.results import FactorizationInfo

logger = logging.getLogger(__name__)

#: Relative tolerance of the Krylov-Schur eigensolves (as the scipy engine's eigsh).
EIGEN_TOL = 1e-10
#: Relative tolerance of lambda_max (the condition number needs 3 digits).
LARGEST_TOL = 1e-8


def _petsc():
    """petsc4py's PETSc and slepc4py's SLEPc, initialised; ImportError says how to get them."""
    try:
        from petsc4py import PETSc
        from slepc4py import SLEPc
    except ImportError as exc:
        raise ImportError(f"the petsc engine needs petsc4py and slepc4py ({exc}); "
                          "build its environment with scripts/setup-petsc-engine.sh VENV") from exc
    return PETSc, SLEPc


def row_split(n: int, size: int) -> NDArray[np.intp]:
    """First row of each rank and n at the end, (size + 1,): PETSc's default split
    (the first n mod size ranks own one row more)."""
    counts = np.full(size, n // size, dtype=np.intp)
    counts[: n % size] += 1
    return np.concatenate([[0], np.cumsum(counts)])


def distribute(S: Optional[sp.csr_array], comm=None, *, replicated: bool = False):
    """S as a PETSc MPIAIJ matrix, rows split by :func:`row_split`.

    Parameters
    ----------
    S : (n, n) csr_array on rank 0 (other ranks may pass None or the same; only rank 0's is read)
        Dimensionless scaled stiffness; marked symmetric for MUMPS, which
        reads its upper triangle.
    replicated : bool
        Every rank holds the same S (the pipeline runs replicated): each
        takes its own block rows, nothing is sent.

    Returns
    -------
    petsc4py.PETSc.Mat
    """
    PETSc, _ = _petsc()
    comm = comm or PETSc.COMM_WORLD
    mpi = comm.tompi4py()
    blocks = None
    if replicated:
        S = sp.csr_array(S)
        edges = row_split(S.shape[0], comm.size)
        n, local = S.shape[0], S[edges[comm.rank]:edges[comm.rank + 1]]
    elif comm.rank == 0:
        S = sp.csr_array(S)
        edges = row_split(S.shape[0], comm.size)
        blocks = [(S.shape[0], S[edges[r]:edges[r + 1]]) for r in range(comm.size)]
    if not replicated:
        n, local = mpi.scatter(blocks, root=0)
    local = sp.csr_array(local)
    local.sort_indices()
    A = PETSc.Mat().createAIJ(size=((local.shape[0], n), (local.shape[0], n)),
                              csr=(local.indptr.astype(PETSc.IntType), local.indices.astype(PETSc.IntType),
                                   local.data.astype(PETSc.ScalarType)), comm=comm)
    A.assemble()
    A.setOption(PETSc.Mat.Option.SYMMETRIC, True)
    return A


def _allgather(v, comm) -> NDArray[np.float64]:
    """A PETSc Vec as one numpy array on every rank."""
    return np.concatenate(comm.tompi4py().allgather(np.array(v.getArray(), copy=True)))


def _mumps_ldlt(A, null_pivot_tol: float, *, analysis_only: bool = False):
    """KSP (preonly, Cholesky with MUMPS, i.e. LDL^T for an indefinite A) set up on A,
    with null-pivot detection; returns (ksp, factor Mat)."""
    PETSc, _ = _petsc()
    ksp = PETSc.KSP().create(A.getComm())
    ksp.setOperators(A)
    ksp.setType("preonly")
    pc = ksp.getPC()
    pc.setType("cholesky")
    pc.setFactorSolverType("mumps")
    pc.setFactorSetUpSolverType()
    F = pc.getFactorMatrix()
    F.setMumpsIcntl(24, 1)  # detect null pivots (getInertia refuses otherwise)
    F.setMumpsCntl(3, null_pivot_tol)  # relative to ||A_pre||: the scipy engine's n*eps
    if analysis_only:
        _analysis(F, A)
    else:
        ksp.setUp()
    return ksp, F


def _rayleigh_ritz(S: sp.csr_array, V: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Eigenpairs of S in the span of V: (ascending values, unit vectors (n, k)).

    Krylov-Schur on (S - sigma*I)^-1 knows S only through the inverse: with an
    eigenvalue near sigma (theta ~ 1e12) the other eigenvectors carry about
    eps*theta_1/theta_j of its direction and their values lose digits
    (measured: 4e-4 relative on mast_soft_spring). Projecting S itself onto the
    converged space removes that mixing and gives Rayleigh quotients."""
    Q, _ = np.linalg.qr(V)
    values, Y = np.linalg.eigh(Q.T @ (S @ Q))
    return values, Q @ Y


def _shifted(S, sigma: float):
    """S - sigma*I as a new Mat (S itself when sigma = 0): the factored operator must never
    change afterwards, or the next KSPSolve would factor it again."""
    if sigma == 0.0:
        return S
    A = S.duplicate(copy=True)
    A.shift(-sigma)
    return A


def _analysis(F, A) -> None:
    """MUMPS' analysis phase alone (MatCholeskyFactorSymbolic) on the factor Mat F of A.

    petsc4py 3.18 leaves ``Mat.factorSymbolicCholesky`` unimplemented, so the C
    function is called through ctypes in the library petsc4py itself loaded."""
    import ctypes

    from petsc4py.lib import ImportPETSc

    lib = ctypes.CDLL(ImportPETSc(None).__file__)  # its symbol lookup reaches libpetsc
    info = (ctypes.c_double * 64)()  # MatFactorInfo: 11 PetscReal in 3.18; room to spare
    lib.MatFactorInfoInitialize.argtypes = [ctypes.c_void_p]
    lib.MatCholeskyFactorSymbolic.argtypes = [ctypes.c_void_p] * 4
    perm, _ = A.getOrdering("natural")  # MUMPS orders itself; PETSc wants the argument
    if lib.MatFactorInfoInitialize(ctypes.addressof(info)) or \
            lib.MatCholeskyFactorSymbolic(F.handle, A.handle, perm.handle, ctypes.addressof(info)):
        raise RuntimeError("MUMPS analysis (MatCholeskyFactorSymbolic) failed")
    perm.destroy()


class PetscFactorization:
    """MUMPS LDL^T of S - sigma*I on the active rows (implements
    :class:`conditioning.engine.base.Factorization` and
    :class:`conditioning.engine.base.OwnEigensolver`).

    Every method is collective: call it on every rank, with the same arguments.

    Attributes
    ----------
    n : int
        Rows of K.
    scale : (n,) float64
        s with S = diag(s) K diag(s) (1/sqrt of each row's diagonal units).
    shift : float
        sigma factored (dimensionless); 0.0 unshifted.
    active : (n,) bool
        Rows in the factorization (rows with stiffness).
    pivots : None
        MUMPS does not hand back its pivots through PETSc.
    singular : bool
        True when S had null pivots (then S - sigma*I was factored) or K has
        rows without stiffness.
    inertia : (int, int, int)
        (negative, zero, positive) pivots of S - sigma*I: eigenvalues of S
        below, at (null pivots) and above sigma.
    info : FactorizationInfo
    memory : FactorMemoryPrediction
        MUMPS' analysis estimate, INFOG(17) MB over all ranks.
    """

    pivots = None

    def __init__(self, A, S, scale, active, shift, singular, ksp, factor, seconds, null_pivot_tol):
        self._A, self._S, self._ksp, self._F = A, S, ksp, factor
        self._null_pivot_tol = null_pivot_tol
        self.n = int(scale.size)
        self.scale = scale
        self.active = active
        self.shift = float(shift)
        self.singular = bool(singular)
        self.inertia = tuple(int(c) for c in factor.getInertia())
        self.memory = _memory_from_infog(factor, A.getComm().size)
        self.info = FactorizationInfo(
            ordering=_ordering_name(factor.getMumpsInfog(7)),
            shift=self.shift,
            negative_pivots=self.inertia[0],
            fill=int(_infog_entries(factor, 29)),
            flops=float(factor.getMumpsRinfog(3)),
            seconds=seconds,
            symmetric_pivoting=True,  # LDL^T with symmetric 1x1/2x2 pivots: the inertia is exact
        )

    @property
    def comm(self):
        """The PETSc communicator the factor lives on."""
        return self._A.getComm()

    @property
    def eigensolver(self) -> str:
        """The eigensolvers used, in words for the report."""
        return (f"SLEPc Krylov-Schur, shift-and-invert on the MUMPS factor (shift {self.shift:.3g}), "
                f"Rayleigh-Ritz with S; SLEPc Krylov-Schur for lambda_max")

    def solve_active(self, B: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S_a - sigma*I)^-1 B for B (n_active,) or (n_active, k); dimensionless,
        the same on every rank."""
        if self._ksp is None:
            raise RuntimeError("the factorization was released")
        B = np.asarray(B, dtype=np.float64)
        cols = B.reshape(B.shape[0], -1)
        r0, r1 = self._A.getOwnershipRange()
        b, x = self._A.createVecs()
        out = np.empty_like(cols)
        for j in range(cols.shape[1]):
            b.setArray(cols[r0:r1, j])
            self._ksp.solve(b, x)
            out[:, j] = _allgather(x, self.comm)
        return out.reshape(B.shape)

    def solve_scaled(self, B: NDArray[np.float64]) -> NDArray[np.float64]:
        """(S - sigma*I)^-1 B for B (n,) or (n, k); inactive rows of the result are 0."""
        B = np.asarray(B, dtype=np.float64)
        out = np.zeros_like(B)
        out[self.active] = self.solve_active(B[self.active])
        return out

    def solve(self, F: NDArray[np.float64]) -> NDArray[np.float64]:
        """K^-1 F = diag(s) S^-1 diag(s) F for loads F (n,) or (n, k); displacement units.

        Raises RuntimeError when K is singular (only a shifted factor exists)."""
        if self.singular or self.shift != 0.0:
            raise RuntimeError("K is singular: only the shifted factorization exists")
        F = np.asarray(F, dtype=np.float64)
        s = self.scale if F.ndim == 1 else self.scale[:, None]
        return s * self.solve_scaled(s * F)

    def ordering_permutation(self) -> None:
        """None: MUMPS' ordering is not handed back through PETSc."""
        return None

    def _start_vector(self, vec, rng) -> None:
        """Fill the distributed ``vec`` with this rank's part of one normal vector drawn
        from ``rng`` (every rank draws the same vector: the generators agree)."""
        r0, r1 = vec.getOwnershipRange()
        vec.setArray(np.random.default_rng(rng).standard_normal(vec.getSize())[r0:r1])

    def smallest_eigenpairs(self, k: int, rng=0) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """The k eigenvalues of S nearest sigma, ascending (dimensionless), and their
        orthonormal eigenvectors (n_active, k), by SLEPc Krylov-Schur on (S - sigma*I)^-1
        applied with this factor (shift-and-invert, no second factorization),
        then Rayleigh-Ritz with S on the converged vectors. Fewer than k pairs
        when Krylov-Schur did not converge them all (logged)."""
        PETSc, SLEPc = _petsc()
        if self._ksp is None:
            raise RuntimeError("the factorization was released")
        ksp = self._ksp

        class _Inverse:  # y = (S - sigma*I)^-1 x with the MUMPS factor
            def mult(self, mat, x, y):
                ksp.solve(x, y)

        m = self._A.getLocalSize()[0]
        na = self._A.getSize()[0]
        op = PETSc.Mat().createPython(((m, na), (m, na)), _Inverse(), comm=self.comm)
        op.setUp()
        eps = SLEPc.EPS().create(self.comm)
        eps.setOperators(op)
        eps.setProblemType(SLEPc.EPS.ProblemType.HEP)
        eps.setWhichEigenpairs(SLEPc.EPS.Which.LARGEST_MAGNITUDE)
        eps.setType(SLEPc.EPS.Type.KRYLOVSCHUR)
        eps.setDimensions(nev=min(k, na))
        eps.setTolerances(tol=EIGEN_TOL, max_it=1000)
        v = op.createVecRight()
        self._start_vector(v, rng)
        eps.setInitialSpace([v])
        eps.solve()
        nconv = min(eps.getConverged(), k)
        if nconv < k:
            logger.warning("Krylov-Schur converged %d of %d eigenpairs to %.0e", nconv, k, EIGEN_TOL)
        values = np.empty(nconv)
        vectors = np.empty((na, nconv))
        for i in range(nconv):
            theta = eps.getEigenpair(i, v).real
            values[i] = self.shift + 1.0 / theta  # lambda = sigma + 1/theta
            vectors[:, i] = _allgather(v, self.comm)
        eps.destroy()
        op.destroy()
        return _rayleigh_ritz(self._S, vectors) if nconv else (values, vectors)

    def largest_eigenvalue(self, rng=0) -> float:
        """lambda_max(S) (dimensionless) by SLEPc Krylov-Schur, relative tolerance
        :data:`LARGEST_TOL`; NaN when it did not converge (logged). Needs S only,
        so it works after :meth:`release`."""
        _, SLEPc = _petsc()
        eps = SLEPc.EPS().create(self.comm)
        eps.setOperators(self._A)
        eps.setProblemType(SLEPc.EPS.ProblemType.HEP)
        eps.setWhichEigenpairs(SLEPc.EPS.Which.LARGEST_REAL)
        eps.setDimensions(nev=1)
        eps.setTolerances(tol=LARGEST_TOL, max_it=1000)
        v = self._A.createVecRight()
        self._start_vector(v, rng)
        eps.setInitialSpace([v])
        eps.solve()
        value = float(eps.getEigenvalue(0).real) if eps.getConverged() >= 1 else float("nan")
        if not np.isfinite(value):
            logger.warning("Krylov-Schur did not converge to lambda_max within %.0e", LARGEST_TOL)
        eps.destroy()
        return value

    def count_below(self, c: float) -> Optional[int]:
        """Eigenvalues of S (active rows) below c: the negative pivots of a new MUMPS
        LDL^T of S - c*I (Sylvester's law of inertia, MUMPS ordering it anew); None
        when S - c*I has null pivots."""
        A = _shifted(self._A, float(c))
        ksp, F = _mumps_ldlt(A, self._null_pivot_tol)
        negative, zero, _ = F.getInertia()
        ksp.destroy()
        if A is not self._A:
            A.destroy()
        return None if zero else int(negative)

    def release(self) -> None:
        """Free the factors; ``inertia``, ``info`` stay; solves and the smallest eigenpairs
        no longer work, :meth:`count_below` and :meth:`largest_eigenvalue` still do
        (they need only S)."""
        if self._ksp is not None:
            self._ksp.destroy()
            self._ksp = None


def _ordering_name(infog7: int) -> str:
    """MUMPS' INFOG(7), the ordering its analysis used, in words (MUMPS 5.5 users' guide)."""
    names = {0: "AMD", 1: "user", 2: "AMF", 3: "SCOTCH", 4: "PORD", 5: "METIS", 6: "QAMD"}
    return f"{names.get(infog7, f'INFOG(7)={infog7}')} via MUMPS"


def _infog_entries(F, i: int) -> int:
    """An entry count from INFOG(i); MUMPS stores counts above 2^31 as -count/1e6."""
    v = F.getMumpsInfog(i)
    return int(-v * 1_000_000) if v < 0 else int(v)


def _memory_from_infog(F, ranks: int) -> FactorMemoryPrediction:
    """MUMPS' analysis estimate: INFOG(17) MB over all ranks (in-core), INFOG(20) factor entries."""
    mb_total = F.getMumpsInfog(17)
    mb_max = F.getMumpsInfog(16)
    return FactorMemoryPrediction(
        bytes=int(mb_total) * 10**6,
        factor_entries=_infog_entries(F, 20),
        flops=float(F.getMumpsRinfog(1)),
        method=(f"MUMPS analysis estimate INFOG(17) = {mb_total} MB over {ranks} rank(s) "
                f"(INFOG(16) = {mb_max} MB on the largest), before factorizing"),
        confidence=float("nan"),  # not yet measured against the factorization's actual INFOG(19)
    )


class PetscEngine:
    """MUMPS LDL^T and SLEPc eigensolvers of the scaled stiffness on PETSc, under MPI
    (implements :class:`conditioning.engine.base.Engine`).

    Every rank of ``mpiexec`` runs the same diagnosis on the same model; the
    engine's calls are collective, and their results are the same on every rank.

    Parameters
    ----------
    comm : petsc4py.PETSc.Comm, optional
        Default ``PETSc.COMM_WORLD`` (every rank of ``mpiexec``).
    """

    name = "petsc"

    def __init__(self, comm=None):
        PETSc, _ = _petsc()
        if not PETSc.Sys.hasExternalPackage("mumps"):
            raise ImportError("this PETSc was built without MUMPS, which the petsc engine needs")
        self.comm = comm or PETSc.COMM_WORLD

    def predict_memory(self, scaled: ScaledStiffness,
                       coords: Optional[NDArray[np.float64]] = None) -> FactorMemoryPrediction:
        """Peak memory of the MUMPS factorization of S (bytes, summed over all ranks),
        from MUMPS' analysis alone (INFOG(17)); ``coords`` is not used (MUMPS orders
        by the pattern)."""
        Sa = scaled.S
        if Sa.shape[0] == 0:
            raise ValueError("the matrix has no stored nonzero entry")
        A = distribute(Sa, self.comm, replicated=True)
        ksp, F = _mumps_ldlt(A, Sa.shape[0] * EPS, analysis_only=True)
        prediction = _memory_from_infog(F, self.comm.size)
        ksp.destroy()
        A.destroy()
        return prediction

    def factorize(self, scaled: ScaledStiffness, *, shift: Optional[float] = None,
                  coords: Optional[NDArray[np.float64]] = None,
                  memory_limit: Optional[int] = None) -> PetscFactorization:
        """MUMPS LDL^T of S - sigma*I under the shift policy of :mod:`conditioning.engine.base`.

        A null pivot found by MUMPS (row below n*eps*||S||, CNTL(3)) plays the
        scipy engine's tiny pivot: S - sigma*I is then factored with
        sigma = -sqrt(eps)*||S||_inf and the result is singular. ``coords`` is
        not used (MUMPS orders by the pattern). With ``memory_limit`` (bytes)
        and more than :data:`conditioning.engine.scipy_engine.PREDICT_ABOVE`
        active rows, MUMPS' analysis predicts the memory first (one more
        analysis) and :class:`FactorizationTooLarge` is raised, on every rank,
        when the sum over the ranks exceeds the limit.

        Returns
        -------
        PetscFactorization
        """
        Sa = scaled.S
        na = Sa.shape[0]
        if na == 0:
            raise ValueError("the matrix has no stored nonzero entry")
        if memory_limit is not None and na > PREDICT_ABOVE:
            prediction = self.predict_memory(scaled)
            logger.info("predicted factor memory %.2f GiB (%s)", prediction.bytes / 2**30, prediction.method)
            if prediction.bytes > memory_limit:  # INFOG(17) is global: every rank raises
                raise FactorizationTooLarge(prediction, memory_limit)
        tol = na * EPS
        t0 = time.perf_counter()
        S = distribute(Sa, self.comm, replicated=True)
        sigma = 0.0 if shift is None else float(shift)
        ksp, F = _mumps_ldlt(_shifted(S, sigma), tol)
        singular = na < scaled.n
        if shift is None and F.getInertia()[1] > 0:
            logger.info("MUMPS found %d null pivot(s): refactoring with a small negative shift",
                        F.getInertia()[1])
            ksp.destroy()
            sigma = -np.sqrt(EPS) * float(abs(Sa).sum(axis=1).max())
            ksp, F = _mumps_ldlt(_shifted(S, sigma), tol)
            singular = True
        seconds = time.perf_counter() - t0
        fac = PetscFactorization(S, Sa, scaled.scale, scaled.active, sigma, singular, ksp, F, seconds, tol)
        logger.info("MUMPS LDL^T of %d rows on %d rank(s): inertia %s, %.2f s",
                    na, self.comm.size, fac.inertia, seconds)
        return fac
