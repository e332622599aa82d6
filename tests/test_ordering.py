"""Nested-dissection ordering, checked against SuperLU's own orderings.

Models are assembled by scikit-fem (test-only reference library): plane
stress on quadrilaterals and linear elasticity on hexahedra. Fill is
counted by SuperLU (scipy.sparse.linalg.splu), the same factorization the
tool uses.
"""

from __future__ import annotations

import importlib
import sys

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from hypothesis import given, settings
from hypothesis import strategies as st

from conditioning.engine.ordering import choose_ordering, nested_dissection, supervariables

skfem = pytest.importorskip("skfem", reason="scikit-fem (test extra) builds the reference models")
from skfem import (Basis, ElementHex1, ElementQuad1, ElementTetP1, ElementTriP1,  # noqa: E402
                   ElementVector, MeshHex, MeshQuad, MeshTet, MeshTri, asm)
from skfem.models.elasticity import lame_parameters, linear_elasticity  # noqa: E402


def skfem_elasticity(n: int, dim: int):
    """Clamped (x = 0) elasticity stiffness by scikit-fem, with row coordinates."""
    x = np.linspace(0.0, 1.0, n + 1)
    if dim == 2:
        mesh, elem = MeshQuad.init_tensor(x, x), ElementQuad1()
        lam, mu = lame_parameters(210e9, 0.3)
        lam = 2 * lam * mu / (lam + 2 * mu)  # plane stress
    else:
        mesh, elem = MeshHex.init_tensor(x, x, x), ElementHex1()
        lam, mu = lame_parameters(210e9, 0.3)
    basis = Basis(mesh, ElementVector(elem), intorder=2)
    K = sp.csr_array(asm(linear_elasticity(lam, mu), basis))
    node_of_row = np.arange(K.shape[0]) // dim
    xyz = np.zeros((mesh.p.shape[1], 3))
    xyz[:, :dim] = mesh.p.T
    keep = np.flatnonzero(xyz[node_of_row, 0] > 1e-12)
    return sp.csr_array(K[keep][:, keep]), xyz[node_of_row[keep]]


def superlu_fill(K, perm=None, spec="NATURAL") -> int:
    A = K if perm is None else K[perm][:, perm]
    lu = spla.splu(sp.csc_array(A), permc_spec=spec, diag_pivot_thresh=0.0,
                   options=dict(SymmetricMode=True))
    return int(lu.nnz)


def is_permutation(p, n) -> bool:
    return p.dtype.kind == "i" and np.array_equal(np.sort(p), np.arange(n))


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 60), density=st.floats(0.0, 0.3), seed=st.integers(0, 2**16),
       geometric=st.booleans(), leaf=st.integers(1, 8))
def test_permutation_of_any_pattern(n, density, seed, geometric, leaf):
    """Any symmetric pattern, connected or not, gives a permutation of 0..n-1 (common practice)."""
    rng = np.random.default_rng(seed)
    A = sp.random_array((n, n), density=density, rng=rng, format="csr")
    A = sp.csr_array(A + A.T + sp.eye_array(n))
    coords = rng.standard_normal((n, 3)) if geometric else None
    assert is_permutation(nested_dissection(A, coords, leaf_size=leaf), n)


def test_separators_are_ordered_last_on_a_path():
    """Path graph 0-1-...-6 with leaf size 1: the middle vertex (3) is the top
    separator and is eliminated last, as in George (1973)."""
    T = sp.csr_array(sp.diags_array([-1.0, 2.0, -1.0], offsets=[-1, 0, 1], shape=(7, 7)))
    coords = np.zeros((7, 3))
    coords[:, 0] = np.arange(7)
    perm = nested_dissection(T, coords, leaf_size=1)
    # The geometric median split of 7 points puts 0..2 below: node 2 is the
    # lower-side vertex adjacent to the upper side, the first separator.
    assert perm[-1] == 2
    # Each part occupies a contiguous range: 0 and 1 come before 3..6.
    assert set(perm[:2].tolist()) == {0, 1}
    assert set(perm[2:6].tolist()) == {3, 4, 5, 6}


def test_dofs_of_a_node_are_kept_together():
    K, xyz = skfem_elasticity(6, 3)
    group, first = supervariables(K)
    assert first.size * 3 == K.shape[0]  # 3 DOFs per node, identical patterns
    perm = nested_dissection(K, xyz)
    assert np.all(group[perm][0::3] == group[perm][2::3])


@pytest.mark.parametrize("geometric", [True, False])
def test_2d_fill_close_to_superlu_mmd(geometric):
    """Plane-stress plate 60 x 60 quads (7,320 rows): nested dissection's
    fill is within 10% (geometric) or 25% (level structures) of SuperLU's
    MMD on A'+A (George 1973: both are O(N log N) on a 2D mesh) and far
    below the natural (band) ordering."""
    K, xyz = skfem_elasticity(60, 2)
    nd = superlu_fill(K, nested_dissection(K, xyz if geometric else None))
    mmd = superlu_fill(K, spec="MMD_AT_PLUS_A")
    natural = superlu_fill(K, spec="NATURAL")
    assert nd < (1.10 if geometric else 1.25) * mmd
    assert nd < 0.6 * natural


def test_3d_geometric_fill_below_superlu_orderings():
    """Hexahedral cube 14^3 (9,450 rows): geometric nested dissection leaves
    less fill than SuperLU's MMD(A'+A) and COLAMD, the issue's motivation
    (measured there at 106k rows: 33 s / 3.9 GB against 82 s / 5.6 GB)."""
    K, xyz = skfem_elasticity(14, 3)
    nd = superlu_fill(K, nested_dissection(K, xyz))
    assert nd < superlu_fill(K, spec="MMD_AT_PLUS_A")
    assert nd < superlu_fill(K, spec="COLAMD")


@pytest.mark.parametrize("mesh,elem,dim", [
    (lambda: MeshTri.init_circle(6), ElementTriP1(), 2),     # 16,642 rows
    (lambda: MeshTet.init_ball().refined(1), ElementTetP1(), 3),  # 18,051 rows
])
def test_unstructured_mesh_fill_below_superlu_mmd(mesh, elem, dim):
    """Unstructured triangles (disc) and tetrahedra (ball) from
    scikit-fem: the separators are minimum vertex covers of the cut edges,
    so geometric nested dissection leaves less fill than SuperLU's
    MMD(A'+A) here too."""
    m = mesh()
    basis = Basis(m, ElementVector(elem))
    lam, mu = lame_parameters(1.0e4, 0.3)
    K = sp.csr_array(asm(linear_elasticity(lam, mu), basis))
    xyz = np.zeros((K.shape[0], 3))
    xyz[:, :dim] = basis.doflocs.T
    K = sp.csr_array(K + 1e-3 * sp.eye_array(K.shape[0]))  # free body: make it factorable
    assert superlu_fill(K, nested_dissection(K, xyz)) < superlu_fill(K, spec="MMD_AT_PLUS_A")


def test_choose_ordering_rule():
    """The documented rule (docs/benchmarks.md): geometric nested dissection
    for 3D and for 2D above 20,000 rows, SuperLU's MMD(A'+A) otherwise."""
    K2, xyz2 = skfem_elasticity(120, 2)   # 29,040 rows, flat
    K3, xyz3 = skfem_elasticity(14, 3)    # 9,450 rows, solid
    small, xyzs = skfem_elasticity(20, 2)  # 840 rows
    assert choose_ordering(K2, xyz2) is nested_dissection
    assert choose_ordering(K3, xyz3) is nested_dissection
    assert choose_ordering(small, xyzs) == "MMD_AT_PLUS_A"
    assert choose_ordering(K3, None) == "MMD_AT_PLUS_A"  # no positions: SuperLU's own


def test_benchmark_generator_matches_scikit_fem():
    """The benchmark harness's vectorised assembly gives scikit-fem's matrix
    (same mesh, same elements, same restraints) to round-off."""
    from conftest import REPO

    sys.path.insert(0, str(REPO))
    try:
        models = importlib.import_module("benchmarks.models")
    finally:
        sys.path.remove(str(REPO))
    for dim, n, make in ((2, 5, models.plate), (3, 3, models.cube)):
        ours = make(n)
        K_ref, xyz_ref = skfem_elasticity(n, dim)
        thick = models.THICKNESS if dim == 2 else 1.0
        # Match rows through (position, dof) keys.
        key = lambda xyz, d: np.lexsort((d, *np.round(xyz, 9).T[::-1]))  # noqa: E731
        d_ref = np.tile(np.arange(dim), K_ref.shape[0] // dim)
        a = key(ours.coords, ours.dof)
        b = key(xyz_ref, d_ref)
        A = ours.K[a][:, a].toarray()
        B = thick * K_ref[b][:, b].toarray()
        np.testing.assert_allclose(A, B, rtol=1e-12, atol=1e-12 * np.abs(B).max())


def test_docstring_examples_of_the_scale_modules():
    """The Examples sections of ordering, memory and iterative run as written."""
    import doctest

    import conditioning.stages.spectrum_iterative
    import conditioning.engine.memory
    import conditioning.engine.ordering

    for module in (conditioning.engine.ordering, conditioning.engine.memory, conditioning.stages.spectrum_iterative):
        failed, attempted = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
        assert failed == 0
    assert doctest.testmod(conditioning.engine.memory).attempted >= 2
