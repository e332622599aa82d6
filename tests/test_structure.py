"""Rows holding only a diagonal, connected parts, asymmetry: conditioning.stages.structure.

Outside references, named beside each check:

* scipy.sparse.csgraph.connected_components on the matrix with the
  diagonal-only rows removed (the part count the tool must report);
* the public Harwell-Boeing matrices in ../shared/reference-matrices
  (PROVENANCE.md: bcsstk14, bcsstk15 and bcsstk16 have a smallest diagonal of
  exactly 1 and are positive definite; bcsstm02 is a diagonal mass matrix,
  66 stored entries for n = 66);
* the closed form kappa_2 = cot^2(pi / (2(n + 1))) of tridiag(-1, 2, -1)
  (../shared/REFERENCES.md), which is also the condition number of its
  diagonally scaled form, so rows scaled to 1 must not change it;
* numpy on the dense matrix for the asymmetry figures.

Models built here (chains of springs with placeholder rows, a spring to
ground) are invented for the tests.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse import csgraph

import conditioning
from conditioning.stages.findings import build_findings
from conditioning.io.matrix_formats import read_matrix
from conditioning.model import DofTable, Model
from conditioning.stages.structure import check_structure, looks_like_placeholder, uncoupled_rows
from conftest import reference_matrix_path


def second_difference(n: int) -> sp.csr_array:
    """tridiag(-1, 2, -1), the stiffness of a fixed-fixed chain of unit springs."""
    return sp.csr_array(sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)],
                                       offsets=[-1, 0, 1]))


def with_diagonal_rows(K: sp.csr_array, at: list[int], values: list[float]) -> sp.csr_array:
    """K with extra rows/columns holding only a diagonal, inserted at positions ``at`` (invented)."""
    n = K.shape[0] + len(at)
    structural = np.setdiff1d(np.arange(n), at)
    coo = K.tocoo()
    rows = np.concatenate([structural[coo.row], at])
    cols = np.concatenate([structural[coo.col], at])
    vals = np.concatenate([coo.data, values])
    return sp.csr_array(sp.coo_array((vals, (rows, cols)), shape=(n, n)))


def findings_of(model: Model):
    return build_findings(model, check_structure(model), None, None, [], [], None, None)


def independent_diagonal_only_rows(K) -> np.ndarray:
    """Rows whose only nonzero is a positive diagonal, found with plain scipy."""
    A = sp.csr_array(K)
    off = sp.csr_array(A - sp.diags_array(A.diagonal()))
    off.eliminate_zeros()
    lone = (np.diff(off.indptr) == 0) & (np.diff(sp.csc_array(off).indptr) == 0)
    return np.flatnonzero(lone & (A.diagonal() > 0))


# --------------------------------------------------------------------------- #
# Public matrices with placeholder rows (bcsstk14, bcsstk15, bcsstk16)
# --------------------------------------------------------------------------- #


@pytest.mark.parametrize("name", ["bcsstk14", "bcsstk15", "bcsstk16"])
def test_placeholder_rows_of_reference_matrices_are_not_parts(name):
    """The part count equals csgraph's on the matrix with the diagonal-only rows removed.

    PROVENANCE.md gives a smallest diagonal of exactly 1 for these matrices;
    the rows holding it and nothing else are the placeholders.
    """
    K, _ = read_matrix(reference_matrix_path(name))
    st = check_structure(Model(K=K))
    expected = independent_diagonal_only_rows(K)
    assert expected.size > 0
    np.testing.assert_array_equal(st.placeholder_rows, expected)
    np.testing.assert_array_equal(K.diagonal()[st.placeholder_rows], 1.0)  # PROVENANCE.md: diag min 1
    keep = np.setdiff1d(np.arange(K.shape[0]), expected)
    n_parts, _ = csgraph.connected_components(K[keep][:, keep], directed=False)
    assert st.parts == n_parts == 1
    # Without removing them, csgraph sees one part per placeholder row more.
    assert csgraph.connected_components(K, directed=False)[0] == n_parts + expected.size


def test_bcsstk14_one_placeholder_finding_no_separate_parts():
    """bcsstk14: 40 diagonal-only rows (csgraph: 41 components, 1 after removing them)."""
    K, _ = read_matrix(reference_matrix_path("bcsstk14"))
    findings = findings_of(Model(K=K))
    codes = [f.code for f in findings]
    assert codes.count("structure.placeholder-rows") == 1
    assert "structure.separate-parts" not in codes
    f = next(f for f in findings if f.code == "structure.placeholder-rows")
    n = independent_diagonal_only_rows(K).size
    assert f.severity == "note"
    assert f.message.startswith(f"{n} rows look like restrained DOFs kept as placeholders: a diagonal of 1")


def test_bcsstk14_node_graph_with_placeholders_is_one_part():
    """With a 6-DOF node map the placeholder DOFs sit on nodes that have other DOFs: still one part."""
    K, _ = read_matrix(reference_matrix_path("bcsstk14"))
    model = conditioning.load_model(K, dofs_per_node=6)
    st = check_structure(model)
    assert st.parts == 1
    assert st.placeholder_rows.size == independent_diagonal_only_rows(K).size


def test_diagonal_mass_matrix_has_no_placeholders():
    """bcsstm02 is diagonal (PROVENANCE.md: 66 entries, n = 66): no structure, so no placeholder;
    every row is its own part, as csgraph counts."""
    K, _ = read_matrix(reference_matrix_path("bcsstm02"))
    st = check_structure(Model(K=K))
    assert st.placeholder_rows.size == 0
    assert st.parts == csgraph.connected_components(K, directed=False)[0] == 66


# --------------------------------------------------------------------------- #
# Invented models: a chain with placeholders and a spring to ground
# --------------------------------------------------------------------------- #


def test_chain_with_placeholders_and_a_grounded_spring():
    """Chain of 10 springs of 1e4 (fixed-fixed) plus three unit placeholder rows and one DOF held
    only by a spring of 3.7e3 (invented). All four are diagonal-only rows; the message tells the
    placeholders (a diagonal of 1, four orders below the chain's 2e4) from the spring."""
    chain = second_difference(10) * 1e4  # typical diagonal 2e4: a unit diagonal is 4 orders apart
    K = with_diagonal_rows(chain, [0, 5, 12, 13], [1.0, 1.0, 3.7e3, 1.0])
    model = Model(K=K)
    st = check_structure(model)
    np.testing.assert_array_equal(st.placeholder_rows, [0, 5, 12, 13])
    keep = np.setdiff1d(np.arange(K.shape[0]), st.placeholder_rows)
    assert st.parts == csgraph.connected_components(K[keep][:, keep], directed=False)[0] == 1
    # The counted part is label 0; the diagonal-only rows come after it.
    assert np.all(st.part_of_row[keep] == 0) and np.all(st.part_of_row[st.placeholder_rows] > 0)
    assert st.part_sizes[0] == 10
    f = next(f for f in findings_of(model) if f.code == "structure.placeholder-rows")
    assert "3 rows look like restrained DOFs kept as placeholders: a diagonal of 1" in f.message
    assert "rows 1, 6, 14" in f.message
    assert "1 row holds only a diagonal (3.7e+03) and no coupling" in f.message
    assert "row 13" in f.message
    assert "missing from the export" in f.advice


def test_placeholders_change_neither_modes_nor_scaled_condition():
    """Unit placeholder rows scale to 1, inside the chain's scaled spectrum (1 - cos(k pi / 11)):
    kappa_2 of the scaled matrix stays cot^2(pi / 22) = 48.374 (closed form, REFERENCES.md), no mode,
    no restraint advice, no separate parts."""
    K = with_diagonal_rows(second_difference(10) * 1e4, [0, 5, 12], [1.0, 1.0, 1.0])
    report = conditioning.diagnose(K, measure=False)
    assert report.structure.parts == 1
    assert report.restraints == [] and report.spectrum.modes == []
    assert math.isclose(report.condition.scaled_estimate, 1 / math.tan(math.pi / 22) ** 2, rel_tol=1e-6)
    codes = [f.code for f in report.findings]
    assert "structure.separate-parts" not in codes and "structure.placeholder-rows" in codes


def test_node_whose_dofs_are_all_placeholders_is_not_a_part():
    """Invented 2-DOF-per-node chain: node 3's two DOFs hold only a unit diagonal. With the node
    map, node 3 would be a part of its own; it is not counted (csgraph on the node graph without
    it: 1 part)."""
    K = with_diagonal_rows(second_difference(8) * 1e3, [4, 5], [1.0, 1.0])
    nodes = np.repeat(np.arange(1, 6), 2)
    dofs = DofTable(node=nodes.astype(np.int64), dof=np.tile([0, 1], 5).astype(np.int8))
    st = check_structure(Model(K=K, dofs=dofs))
    assert st.parts == 1
    np.testing.assert_array_equal(st.placeholder_rows, [4, 5])
    assert st.part_of_row[4] == st.part_of_row[5] == 1  # one node, one (uncounted) part


def test_separate_parts_still_reported_and_sizes_exclude_placeholders():
    """Two chains that share nothing plus one placeholder (invented): csgraph without the
    placeholder gives 2 parts, and the finding lists only their sizes."""
    A = sp.block_diag([second_difference(6), second_difference(4)], format="csr")
    K = with_diagonal_rows(sp.csr_array(A), [3], [1.0])
    model = Model(K=K)
    st = check_structure(model)
    keep = np.setdiff1d(np.arange(K.shape[0]), [3])
    assert st.parts == csgraph.connected_components(K[keep][:, keep], directed=False)[0] == 2
    np.testing.assert_array_equal(st.part_sizes[: st.parts], [6, 4])
    f = next(f for f in findings_of(model) if f.code == "structure.separate-parts")
    assert "2 parts" in f.message and "6, 4)" in f.message


def test_row_coupled_only_through_its_column_is_not_a_placeholder():
    """In a non-symmetric matrix a row with no off-diagonal entry may still be coupled through its
    column (invented 3 x 3)."""
    K = sp.csr_array(np.array([[2.0, 0.0, 0.0], [-1.0, 2.0, -1.0], [0.0, -1.0, 2.0]]))
    np.testing.assert_array_equal(uncoupled_rows(K), [])


def test_looks_like_placeholder_rule():
    """Exact powers of ten at least two orders from the typical diagonal; other values are springs."""
    values = np.array([1.0, 10.0, 1e6, 3.7e3, 1.0000001, 1e4])
    np.testing.assert_array_equal(looks_like_placeholder(values, 1e4),
                                  [True, True, True, False, False, False])
    np.testing.assert_array_equal(looks_like_placeholder(np.array([1.0, 2.0]), None), [True, False])


# --------------------------------------------------------------------------- #
# Asymmetry: one entry changed by 1 %
# --------------------------------------------------------------------------- #


def test_one_entry_changed_by_one_percent_bcsstk01():
    """bcsstk01 (symmetric, PROVENANCE.md) with K[11, 6] scaled by 1.01: the asymmetry names the
    pair, its size relative to the entry (0.01 / 1.01) and to max |K| (numpy on the dense matrix)."""
    K, _ = read_matrix(reference_matrix_path("bcsstk01"))
    A = K.toarray()
    assert A[11, 6] != 0
    A[11, 6] *= 1.01
    model = Model(K=sp.csr_array(A))
    a = check_structure(model).asymmetry
    assert (a.row, a.col, a.pairs) == (6, 11, 1)
    assert a.pair_values == (A[6, 11], A[11, 6])
    assert math.isclose(a.pair_relative, 0.01 / 1.01, rel_tol=1e-12)
    assert math.isclose(a.relative, np.abs(A - A.T).max() / np.abs(A).max(), rel_tol=1e-12)
    f = next(f for f in findings_of(model) if f.code == "input.asymmetric")
    assert f.severity == "warning"
    assert "at row 7, column 12" in f.message and "1.0% of the entry" in f.message
    assert "no other pair differs" in f.message
    assert f.nodes == [7, 12]


def test_small_entry_changed_by_one_percent_is_still_a_warning():
    """An entry 1e-9 of the largest one, changed by 1% on one side (invented): relative to max |K|
    the difference is 5e-12, yet 1% of the entry is no round-off."""
    A = second_difference(6).toarray() * 1e9
    A[0, 5] = A[5, 0] = 1.0
    A[5, 0] = 1.01
    f = next(f for f in findings_of(Model(K=sp.csr_array(A))) if f.code == "input.asymmetric")
    assert f.severity == "warning"


def test_round_off_asymmetry_is_not_reported():
    """Differences at 1e-14 of the entries are export round-off, and entries of 1e-17 max |K| that
    disagree entirely are cancellation noise of assembly (invented): no finding."""
    A = second_difference(6).toarray()
    A[1, 0] *= 1 + 1e-14
    A[0, 3], A[3, 0] = 3e-17, -2e-17
    model = Model(K=sp.csr_array(A))
    assert check_structure(model).asymmetry.pairs == 0
    assert "input.asymmetric" not in [f.code for f in findings_of(model)]
