"""A 'general' file holding one triangle plus a few stray entries of the other.

Outside reference: the public bcsstk01 (../shared/reference-matrices,
PROVENANCE.md: symmetric, 224 stored entries in its lower triangle), read
independently with scipy.io.mmread and expanded to full storage. The broken
exports below are invented from it: its lower triangle written as 'general'
with one entry moved across the diagonal, repeated there, or repeated with
another value; the tool must recognise the shape, say what it diagnosed, and
(when the stray carries no new value) recover exactly the public matrix.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

import conditioning
from conditioning.stages.findings import build_findings
from conditioning.io.matrix_formats import STRAY_SHARE, mirror_one_triangle_export
from conditioning.stages.structure import check_structure
from conftest import reference_matrix_path


def public_bcsstk01() -> sp.csr_array:
    """bcsstk01 expanded to both triangles by scipy alone (no project code)."""
    A = sp.coo_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    full = sp.csr_array(A + sp.triu(A, k=1).T + sp.tril(A, k=-1).T)
    return full


def write_general(path, rows, cols, vals, n):
    with open(path, "w") as fh:
        fh.write("%%MatrixMarket matrix coordinate real general\n% invented broken export\n")
        fh.write(f"{n} {n} {len(rows)}\n")
        for i, j, v in zip(rows, cols, vals):
            fh.write(f"{int(i) + 1} {int(j) + 1} {float(v)!r}\n")


def lower_entries(K):
    L = sp.tril(K).tocoo()
    return list(L.row), list(L.col), list(L.data)


def findings_of(model):
    return build_findings(model, check_structure(model), None, None, [], [], None, None)


def test_moved_entry_is_mirrored_back_to_the_public_matrix(tmp_path):
    """Lower triangle with K[8, 2] written as (3, 9) instead of (9, 3): mirroring recovers bcsstk01
    exactly, and the finding names the stray and says what was diagnosed."""
    K0 = public_bcsstk01()
    rows, cols, vals = lower_entries(K0)
    k = next(t for t in range(len(rows)) if (rows[t], cols[t]) == (8, 2))
    rows[k], cols[k] = cols[k], rows[k]
    p = tmp_path / "moved.mtx"
    write_general(p, rows, cols, vals, 48)
    model = conditioning.load_model(p)
    assert (model.K != K0).nnz == 0
    t = model.one_triangle
    assert t.triangle == "lower" and t.triangle_entries == 175
    assert (t.stray_rows.tolist(), t.stray_cols.tolist(), t.stray_paired.tolist()) == ([2], [8], [False])
    assert any("plus 1 stray entry in the upper triangle" in s for s in model.notes)
    findings = findings_of(model)
    f = next(f for f in findings if f.code == "input.one-triangle-export")
    assert f.severity == "warning"
    assert "stores only its lower triangle (175 off-diagonal entries) plus 1 entry" in f.message
    assert "(row 3, column 9)" in f.message
    assert "Diagnosed: the lower triangle mirrored; 1 stray entry with no partner mirrored as well" in f.message
    assert f.nodes == [3, 9]
    assert "Re-export K labelled 'symmetric'" in f.advice
    assert "input.asymmetric" not in [f.code for f in findings]


def test_repeated_equal_entry_is_kept_once(tmp_path):
    """A stray that repeats a lower entry with the same value: bcsstk01 exactly, paired stray."""
    K0 = public_bcsstk01()
    rows, cols, vals = lower_entries(K0)
    k = next(t for t in range(len(rows)) if rows[t] > cols[t])
    p = tmp_path / "repeated.mtx"
    write_general(p, rows + [cols[k]], cols + [rows[k]], vals + [vals[k]], 48)
    model = conditioning.load_model(p)
    assert (model.K != K0).nnz == 0
    assert model.one_triangle.stray_paired.tolist() == [True]
    f = next(f for f in findings_of(model) if f.code == "input.one-triangle-export")
    assert "1 stray entry repeating a stored pair kept as stored (equal to the mirrored value)" in f.message


def test_repeated_different_entry_stays_visible_as_asymmetry(tmp_path):
    """A stray that repeats a lower entry with a value 1% off: kept as stored, so the asymmetry
    finding names that very pair (numpy on the dense public matrix for the expected values)."""
    K0 = public_bcsstk01()
    rows, cols, vals = lower_entries(K0)
    k = next(t for t in range(len(rows)) if rows[t] > cols[t] and vals[t] != 0)
    i, j = cols[k], rows[k]  # the stray's position, above the diagonal
    p = tmp_path / "repeated-off.mtx"
    write_general(p, rows + [i], cols + [j], vals + [vals[k] * 1.01], 48)
    model = conditioning.load_model(p)
    expected = K0.toarray()
    expected[i, j] *= 1.01
    np.testing.assert_array_equal(model.K.toarray(), expected)
    findings = findings_of(model)
    codes = [f.code for f in findings]
    assert "input.one-triangle-export" in codes and "input.asymmetric" in codes
    a = check_structure(model).asymmetry
    assert (a.row, a.col) == (i, j)
    f = next(f for f in findings if f.code == "input.one-triangle-export")
    assert "1 differ from the lower value: see the asymmetry finding" in f.message


def test_stray_renumbered_after_restraints(tmp_path):
    """--fix removes rows before the diagnosis: the stray's position follows (node 1 ux removed,
    so row 3 / column 9 become row 2 / column 8)."""
    K0 = public_bcsstk01()
    rows, cols, vals = lower_entries(K0)
    k = next(t for t in range(len(rows)) if (rows[t], cols[t]) == (8, 2))
    rows[k], cols[k] = cols[k], rows[k]
    p = tmp_path / "moved.mtx"
    write_general(p, rows, cols, vals, 48)
    model = conditioning.load_model(p, dofs_per_node=6, fix=[(1, "ux")])
    t = model.one_triangle
    assert (t.stray_rows.tolist(), t.stray_cols.tolist()) == ([1], [7])
    f = next(f for f in findings_of(model) if f.code == "input.one-triangle-export")
    assert "(node 1 uz / node 2 uz)" in f.message
    assert conditioning.load_model(p, dofs_per_node=6, fix=[(1, "uz")]).one_triangle is None


def test_matrix_stored_in_full_or_as_pure_triangle_is_not_this_shape():
    """Both triangles in full (share 1) and a pure triangle (mirrored by the reader) are not strays."""
    K0 = public_bcsstk01()
    assert mirror_one_triangle_export(K0, [])[1] is None
    assert mirror_one_triangle_export(sp.csr_array(sp.tril(K0)), [])[1] is None


def test_share_threshold():
    """At most STRAY_SHARE of the triangle's entries may lie in the other one (invented chain)."""
    n = 41  # 40 entries below the diagonal
    L = sp.lil_array(sp.diags_array([-np.ones(n - 1), 2 * np.ones(n)], offsets=[-1, 0]))
    few = int(STRAY_SHARE * (n - 1))
    for k in range(few):
        L[k, k + 2] = -0.5
    assert mirror_one_triangle_export(sp.csr_array(L), [])[1].stray_rows.size == few
    L[few, few + 2] = -0.5
    assert mirror_one_triangle_export(sp.csr_array(L), [])[1] is None


@pytest.mark.parametrize("stray_above", [True, False])
def test_array_input_recognised_too(stray_above):
    """An array given to diagnose() goes through the same reading (invented 30-spring chain,
    upper or lower triangle with one stray): the diagnosed matrix is the full chain, whose scaled
    condition number is cot^2(pi / 62) (closed form, ../shared/REFERENCES.md)."""
    n = 30
    full = sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], offsets=[-1, 0, 1]).toarray()
    T = np.tril(full) if stray_above else np.triu(full)
    T[4, 5], T[5, 4] = T[5, 4], T[4, 5]  # one entry written on the wrong side of the diagonal
    report = conditioning.diagnose(T, measure=False)
    assert report.structure.one_triangle is not None
    assert report.structure.asymmetry.row is None
    expected = 1 / np.tan(np.pi / (2 * (n + 1))) ** 2
    assert abs(report.condition.scaled_estimate / expected - 1) < 1e-6
