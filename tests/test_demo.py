"""Checks of the invented demo scenarios and their exported files.

What each case should show (``DemoCase.expected``) is verified with outside
references: dense symmetric eigenvalues and eigenvectors from LAPACK (numpy
``eigvalsh``/``eigh``), mpmath's ``eigsy`` in 40-digit arithmetic, and
scipy.io.mmread for the Matrix Market files. The scikit-fem solids check the
textbook rigid-body-mode counts (3 per free body in 2D, 6 in 3D; common
practice, also the count of PETSc's MatNullSpaceCreateRigidBody).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import mpmath
import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.demo.scenarios import (
    FIX_VARIANT,
    DemoCase,
    export_all,
    mast_missing_brace,
    mast_soft_spring,
    scenarios,
)
from conditioning.model import DOF_NAMES

import fe_reference as fer

MATRICES = Path(__file__).resolve().parents[1] / "matrices"
CASES = scenarios()
NAMES = list(CASES)

#: Eigenvalues of the unit-diagonal scaled matrix at or below this count as zero.
#: Computed zero eigenvalues of these small models are below 1e-15; the smallest
#: genuine (near-mechanism, penalty tie) ones are above 1e-13.
ZERO_SCALED = 2e-14
#: kappa_2 above this means "loses most of the 16 float64 digits" (the expected flags).
LARGE_KAPPA = 1e10


def scaled_dense(K) -> tuple[np.ndarray, np.ndarray]:
    """S = D^-1/2 K D^-1/2 with unit diagonal, and d = diag(K)^-1/2."""
    A = K.toarray()
    d = 1.0 / np.sqrt(np.abs(np.diag(A)))
    return A * d[:, None] * d[None, :], d


def moving_nodes(case: DemoCase, vectors: np.ndarray, rtol: float = 1e-6) -> tuple[int, ...]:
    """Nodes with a displacement above rtol * max in any of the mode ``vectors``."""
    big = np.abs(vectors) > rtol * np.abs(vectors).max(axis=0, keepdims=True)
    return tuple(int(n) for n in np.unique(case.model.dofs.node[np.any(big, axis=1)]))


# ------------------------------------------------------------------ the catalogue


@pytest.mark.parametrize("name", NAMES)
def test_case_is_a_consistent_small_model(name):
    case = CASES[name]
    m = case.model
    assert case.name == name and "\n" not in case.description
    assert any("invented" in note for note in m.notes)
    assert isinstance(m.K, sp.csr_array) and m.K.shape == (m.n, m.n)
    assert 10 <= m.n <= 300, "demo models stay small so the demo runs in seconds"
    assert (m.K != m.K.T).nnz == 0 and np.all(m.K.data != 0)
    assert len(m.dofs) == m.n and m.load.shape == (m.n,) and np.any(m.load != 0)
    assert np.all(m.coords.has(m.dofs.nodes))
    assert m.restrained == len(set(case.supports))
    assert case.unsupported.n == m.n + m.restrained


@pytest.mark.parametrize("name", NAMES)
def test_zero_energy_modes_match_expected(name):
    """Number of (numerically) zero eigenvalues of the scaled K, by LAPACK."""
    case = CASES[name]
    S, _ = scaled_dense(case.model.K)
    w = np.linalg.eigvalsh(S)
    assert int(np.sum(w <= ZERO_SCALED)) == case.expected.rigid_body_modes
    if not case.expected.penalty_nodes:
        # A penalty tie also makes tiny scaled eigenvalues; elsewhere only the
        # documented near-mechanisms may.
        near = int(np.sum((w > ZERO_SCALED) & (w <= 1e-8)))
        assert near == case.expected.near_zero_modes


@pytest.mark.parametrize("name", [n for n in NAMES
                                  if CASES[n].expected.rigid_body_modes
                                  + CASES[n].expected.near_zero_modes > 0])
def test_mode_nodes_match_expected(name):
    """The nodes that move in the lowest modes (LAPACK eigenvectors) are the documented ones."""
    case = CASES[name]
    k = case.expected.rigid_body_modes + case.expected.near_zero_modes
    S, d = scaled_dense(case.model.K)
    _, V = np.linalg.eigh(S)
    displacement = d[:, None] * V[:, :k]
    assert moving_nodes(case, displacement) == case.expected.mode_nodes


@pytest.mark.parametrize("name", NAMES)
def test_condition_flags_match_expected(name):
    """Raw and scaled kappa_2 = lambda_max / lambda_min (LAPACK), inf when singular."""
    case = CASES[name]
    S, _ = scaled_dense(case.model.K)
    ws = np.linalg.eigvalsh(S)
    w = np.linalg.eigvalsh(case.model.K.toarray())
    singular = case.expected.rigid_body_modes > 0
    kappa_scaled = math.inf if singular else ws[-1] / ws[0]
    kappa_raw = math.inf if singular else w[-1] / w[0]
    assert (kappa_scaled > LARGE_KAPPA) == case.expected.ill_conditioned
    assert (kappa_raw > LARGE_KAPPA) == case.expected.large_raw_condition


@pytest.mark.parametrize("name", NAMES)
def test_penalty_nodes_carry_the_outsized_eigenvalues(name):
    """Eigenvalues far above the typical diagonal (1e6 x median) come from the
    penalty springs: their eigenvectors (LAPACK) live on the penalty nodes only."""
    case = CASES[name]
    A = case.model.K.toarray()
    w, V = np.linalg.eigh(A)
    outsized = w > 1e6 * np.median(np.diag(A))
    if not case.expected.penalty_nodes:
        assert not np.any(outsized)
        return
    assert moving_nodes(case, V[:, outsized], rtol=1e-3) == case.expected.penalty_nodes


@pytest.mark.parametrize("name", ["mast_missing_brace", "mast_soft_spring"])
def test_mechanism_hinges_at_the_unbraced_panel(name):
    """In the lowest mode (LAPACK eigenvector) only the bars of the unbraced
    panel rotate; every other bar translates rigidly. The nodes of the rotating
    bars are the documented defect nodes (small-displacement kinematics: a bar
    rotates when its ends move differently across its axis)."""
    case = CASES[name]
    m = case.model
    _, V = np.linalg.eigh(m.K.toarray())
    u = np.zeros((m.coords.node.size, 2))
    pos = np.searchsorted(m.coords.node, m.dofs.node)
    u[pos, m.dofs.dof] = V[:, 0]
    xy = m.coords.xyz[:, :2]
    # Every pair of nodes joined by a bar has a nonzero stiffness coupling in K.
    free = case.unsupported
    A = free.K.tocoo()
    pairs = {tuple(sorted((int(free.dofs.node[i]), int(free.dofs.node[j]))))
             for i, j in zip(A.row, A.col) if free.dofs.node[i] != free.dofs.node[j]}
    rotating = set()
    for a, b in pairs:
        ia, ib = np.searchsorted(m.coords.node, [a, b])
        axis = (xy[ib] - xy[ia]) / np.linalg.norm(xy[ib] - xy[ia])
        normal = np.array([-axis[1], axis[0]])
        if abs(normal @ (u[ib] - u[ia])) > 1e-6 * np.abs(u).max():
            rotating |= {a, b}
    assert tuple(sorted(rotating)) == case.expected.defect_nodes


def test_loose_pad_defect_is_the_unmerged_coincident_nodes():
    """The defect nodes are exactly the pairs of distinct nodes at the same
    position (found from the coordinates alone)."""
    case = CASES["bracket_loose_pad"]
    c = case.model.coords
    dist = np.linalg.norm(c.xyz[:, None, :] - c.xyz[None, :, :], axis=-1)
    i, j = np.nonzero((dist < 1e-9) & ~np.eye(c.node.size, dtype=bool))
    assert tuple(int(n) for n in np.unique(c.node[np.concatenate([i, j])])) == \
        case.expected.defect_nodes


@pytest.mark.parametrize("name, component", [("rack_no_sway_support", "ux"),
                                             ("monorail_no_torsion_support", "rx")])
def test_rigid_body_mode_is_one_component_over_unrestrained_supports(name, component):
    """The rigid-body mode (LAPACK) moves every ``component`` by the same amount
    and nothing else (a sideways slide of the rack; a spin of the straight
    monorail about its own axis, which moves no node). The supports (defect
    nodes) leave exactly that component free."""
    case = CASES[name]
    m = case.model
    _, V = np.linalg.eigh(m.K.toarray())
    v = V[:, 0] / V[np.argmax(np.abs(V[:, 0])), 0]
    is_c = m.dofs.dof == DOF_NAMES.index(component)
    np.testing.assert_allclose(v[is_c], 1.0, atol=1e-8)
    np.testing.assert_allclose(v[~is_c], 0.0, atol=1e-8)
    assert {n for n, _ in case.supports} == set(case.expected.defect_nodes)
    assert all(d != component for _, d in case.supports)


def test_penalty_tie_is_ill_conditioned_but_not_singular():
    """The tie's two softest scaled modes (coincident nodes moving together)
    are tiny but clearly above the zero level (LAPACK)."""
    S, _ = scaled_dense(CASES["rack_penalty_tie"].model.K)
    w = np.linalg.eigvalsh(S)
    assert 1e2 * ZERO_SCALED < w[0] < 1e-8


def test_near_mechanism_eigenvalue_is_the_first_order_perturbation():
    """mast_soft_spring = mast_missing_brace + a soft spring k at one dof r.

    First-order perturbation of the (numerically) zero eigenvalue lambda_0
    with eigenvector v (classical Rayleigh-Schroedinger, e.g. Wilkinson, *The
    Algebraic Eigenvalue Problem*; from memory):
    lambda_min = lambda_0 + k v_r^2 / (v . v) + O(k^2). lambda_0 of the
    stored float64 matrix is round-off sized, not exactly 0, so both
    eigenvalues come from mpmath eigsy at 40 digits.
    """
    base, soft = mast_missing_brace(), mast_soft_spring()
    assert np.array_equal(base.model.dofs.node, soft.model.dofs.node)
    diff = (soft.model.K - base.model.K).toarray()
    (r,) = np.flatnonzero(np.diag(diff))
    k = diff[r, r]
    assert np.count_nonzero(diff) == 1
    _, V = np.linalg.eigh(base.model.K.toarray())
    v = V[:, 0]
    A = soft.model.K.toarray()
    with mpmath.workdps(40):
        lambda_0 = min(mpmath.eigsy(mpmath.matrix(base.model.K.toarray().tolist()),
                                    eigvals_only=True))
        exact = float(min(mpmath.eigsy(mpmath.matrix(A.tolist()), eigvals_only=True)))
        predicted = float(lambda_0 + mpmath.mpf(k) * mpmath.mpf(v[r]) ** 2
                          / mpmath.mpf(float(v @ v)))
    assert abs(float(lambda_0)) < 1e-3 * exact
    assert exact == pytest.approx(predicted, rel=1e-6)
    w = np.linalg.eigvalsh(A)
    assert w[0] == pytest.approx(exact, rel=2e-2)
    kappa = w[-1] / exact
    # "Loses nearly all digits": about 16 - log10(kappa) digits remain (rule of
    # thumb, common practice); fewer than 4 here.
    assert 16 - math.log10(kappa) < 4


# ------------------------------------------------------------------ exported files


def _read_csv(path: Path) -> list[list[str]]:
    with path.open(newline="") as fh:
        return list(csv.reader(fh))


@pytest.mark.parametrize("name", NAMES)
def test_committed_files_round_trip(name):
    """matrices/<name>*.{mtx,csv} read back (scipy.io.mmread) to the model scenarios() builds."""
    m = CASES[name].model
    K = sp.csr_array(scipy.io.mmread(MATRICES / f"{name}.mtx"))
    assert K.shape == m.K.shape and (K != m.K).nnz == 0
    load = np.asarray(scipy.io.mmread(MATRICES / f"{name}_load.mtx")).ravel()
    np.testing.assert_array_equal(load, m.load)
    rows = _read_csv(MATRICES / f"{name}_dofs.csv")
    assert rows[0] == ["node", "dof"]
    assert [(int(a), b) for a, b in rows[1:]] == [
        (int(n), DOF_NAMES[int(d)]) for n, d in zip(m.dofs.node, m.dofs.dof)]
    rows = _read_csv(MATRICES / f"{name}_coords.csv")
    assert rows[0] == ["node", "x", "y", "z"][: m.coords.dim + 1]
    table = np.array([[float(v) for v in row] for row in rows[1:]])
    np.testing.assert_array_equal(table[:, 0], m.coords.node)
    np.testing.assert_array_equal(table[:, 1:], m.coords.xyz[:, : m.coords.dim])


def test_fix_file_reproduces_the_supported_model():
    """Removing the rows/columns listed in <name>_free_fix.csv from <name>_free.mtx
    gives <name>.mtx exactly (the --fix workflow)."""
    free = sp.csr_array(scipy.io.mmread(MATRICES / f"{FIX_VARIANT}_free.mtx"))
    dofs = [(int(a), b) for a, b in _read_csv(MATRICES / f"{FIX_VARIANT}_free_dofs.csv")[1:]]
    fix = {(int(a), b) for a, b in _read_csv(MATRICES / f"{FIX_VARIANT}_free_fix.csv")[1:]}
    assert fix and fix <= set(dofs)
    keep = [i for i, key in enumerate(dofs) if key not in fix]
    reduced = free[keep][:, keep]
    supported = sp.csr_array(scipy.io.mmread(MATRICES / f"{FIX_VARIANT}.mtx"))
    assert (reduced != supported).nnz == 0
    w = np.linalg.eigvalsh(free.toarray())
    assert np.sum(np.abs(w) <= 1e-12 * w[-1]) == 3, "the free plane frame has 3 rigid-body modes"


def test_committed_files_are_current(tmp_path):
    """Regenerating matrices/ gives the same set of files with the same
    content: identical CSV text, identical matrices as read by scipy.io.mmread
    (number formatting may differ between scipy versions)."""
    written = export_all(tmp_path)
    names = sorted(p.name for p in written)
    assert names == sorted(p.name for p in MATRICES.iterdir() if p.name != "README.md")
    for p in written:
        committed = MATRICES / p.name
        if p.suffix == ".csv":
            assert p.read_text() == committed.read_text(), p.name
        else:
            new, old = scipy.io.mmread(p), scipy.io.mmread(committed)
            if sp.issparse(new):
                new, old = new.toarray(), old.toarray()
            np.testing.assert_array_equal(new, old, err_msg=p.name)


# ------------------------------------------------------------------ scikit-fem references


def _zero_count(K, rtol=1e-10) -> int:
    w = np.linalg.eigvalsh(K.toarray())
    return int(np.sum(np.abs(w) <= rtol * w[-1]))


@pytest.mark.parametrize("build, expected", [
    (fer.solid_block, 6), (fer.free_plate, 3), (fer.free_plate_strain, 3),
    (fer.two_blocks, 12), (fer.two_plates, 6)])
def test_scikit_fem_free_bodies_have_textbook_rigid_body_counts(build, expected):
    """Free body: 6 zero eigenvalues in 3D, 3 in 2D, per body (numpy eigvalsh)."""
    ref = build()
    assert ref.rigid_body_modes == expected
    assert _zero_count(ref.K) == expected


@pytest.mark.parametrize("build", [fer.solid_block, fer.free_plate, fer.free_plate_strain])
def test_scikit_fem_one_restraint_too_few(build):
    """3-2-1 supports remove every rigid-body mode; leaving out any one of them
    (each direction in turn) leaves exactly one."""
    ref = build()
    supports = fer.three_two_one_supports(ref)
    assert _zero_count(fer.restrained(ref, supports).K) == 0
    for missing in supports:
        partial = fer.restrained(ref, [s for s in supports if s != missing])
        assert partial.rigid_body_modes == 1
        assert _zero_count(partial.K) == 1, missing


def test_scikit_fem_dof_table_matches_nodal_dofs():
    """Rows of component c of vertex i are basis.nodal_dofs[c, i]: check that
    a rigid x-translation (u_x = 1 at every node) has zero energy and maps to
    the ux rows only."""
    ref = fer.solid_block()
    u = (ref.dofs.dof == DOF_NAMES.index("ux")).astype(float)
    assert np.abs(ref.K @ u).max() <= 1e-10 * abs(ref.K).max()
    rot = np.zeros(len(ref.dofs))      # rigid rotation about z: (u_x, u_y) = (-y, x)
    xyz = ref.coords.lookup(ref.dofs.node)
    rot[ref.dofs.dof == 0] = -xyz[ref.dofs.dof == 0, 1]
    rot[ref.dofs.dof == 1] = xyz[ref.dofs.dof == 1, 0]
    assert np.abs(ref.K @ rot).max() <= 1e-10 * abs(ref.K).max() * np.abs(xyz).max()


# ------------------------------------------------------------------ read back by the tool's own reader


@pytest.mark.parametrize("name", NAMES)
def test_load_model_reads_the_exported_files(name):
    """conditioning.load_model on matrices/<name>* gives the scenario's model."""
    from conditioning.io.load import load_model

    m = CASES[name].model
    got = load_model(MATRICES / f"{name}.mtx", dofs=MATRICES / f"{name}_dofs.csv",
                     coords=MATRICES / f"{name}_coords.csv", load=MATRICES / f"{name}_load.mtx")
    assert (got.K != m.K).nnz == 0
    np.testing.assert_array_equal(got.dofs.node, m.dofs.node)
    np.testing.assert_array_equal(got.dofs.dof, m.dofs.dof)
    np.testing.assert_array_equal(got.load, m.load)
    np.testing.assert_array_equal(got.coords.lookup(m.coords.node), m.coords.xyz)


def test_load_model_applies_the_fix_file():
    """load_model(<name>_free.mtx, fix=<name>_free_fix.csv) equals <name>.mtx with its maps."""
    from conditioning.io.load import load_model

    stem = MATRICES / f"{FIX_VARIANT}_free"
    got = load_model(f"{stem}.mtx", dofs=f"{stem}_dofs.csv", coords=f"{stem}_coords.csv",
                     load=f"{stem}_load.mtx", fix=f"{stem}_fix.csv")
    m = CASES[FIX_VARIANT].model
    assert got.restrained == m.restrained
    np.testing.assert_array_equal(got.load, m.load)
    assert (got.K != m.K).nnz == 0
    np.testing.assert_array_equal(got.dofs.node, m.dofs.node)
    np.testing.assert_array_equal(got.dofs.dof, m.dofs.dof)


def test_shipped_solution_is_the_six_digit_answer():
    """matrices/footbridge_solution.mtx (the README's --solution example) is
    the footbridge's displacement to 6 significant digits: against numpy's
    dense LAPACK solve each component differs by at most half a unit in the
    6th digit, and the audit credits it with 5 to 6 digits."""
    from conditioning import diagnose

    K = scipy.io.mmread(MATRICES / "footbridge.mtx").toarray()
    f = np.asarray(scipy.io.mmread(MATRICES / "footbridge_load.mtx")).ravel()
    u = np.asarray(scipy.io.mmread(MATRICES / "footbridge_solution.mtx")).ravel()
    exact = np.linalg.solve(K, f)
    # a 6-digit mantissa d.ddddd is off by at most 0.5e-5 of its leading power of ten;
    # components that are round-off zeros (1e-17 beside 1) differ between solvers
    unit = 10.0 ** np.floor(np.log10(np.abs(exact)))
    noise = 1e-12 * np.abs(exact).max()
    assert np.all(np.abs(u - exact) <= 0.5e-5 * unit * (1 + 1e-6) + noise)
    report = diagnose(str(MATRICES / "footbridge.mtx"), dofs=str(MATRICES / "footbridge_dofs.csv"),
                      load=str(MATRICES / "footbridge_load.mtx"),
                      solution=str(MATRICES / "footbridge_solution.mtx"))
    audit = [s for s in report.digits.samples if s.sample == "solution"]
    assert len(audit) == 1 and 5.0 <= audit[0].trustworthy_digits <= 6.3
