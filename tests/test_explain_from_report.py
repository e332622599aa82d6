"""Explaining one row from the JSON report of an earlier run (issue 15, part 1):
the same answer as explaining it from the matrix, without a factorization.

Outside references:

* a dense LDL^T (``scipy.linalg.ldl``, LAPACK's Bunch-Kaufman ``?sytrf``) of K
  permuted to the earlier run's elimination order, for the stored pivot;
* LAPACK's symmetric eigensolver (``numpy.linalg.eigh``) for the row's share
  of a free mode;
* Python's ``hashlib`` SHA-256 over the documented byte layout, for the
  matrix fingerprint.

The report keeps 4 significant figures of each per-row figure
(docs/report-format.md), so a stored figure is within a relative 5e-4 of the
one computed, and digits lost within log10(1 + 5e-4) = 2.2e-4.

Models are invented for the tests: chains of springs (tests/test_explain.py),
the bundled mast demo (invented), and the portal frame whose penalty tie
swallows the structure (tests/test_penalty.py).
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.io
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg

import conditioning
from conditioning.cli import main
from conditioning.errors import InputError
from conditioning.model import matrix_fingerprint
from conditioning.pipeline import explain, explain_from_report
from conditioning.render.json_report import write_json
from conditioning.stages.explain import SHARE_STORED
from test_explain import chain
from test_penalty import TIED, rows_of, tied_portal

MATRICES = Path(__file__).resolve().parents[1] / "matrices"
STORED = 5e-4                              # relative rounding of 4 significant figures
DIGITS_STORED = math.log10(1 + STORED)     # the same in digits lost


def saved(model, tmp_path, **options) -> Path:
    """The model diagnosed (without the digits measurement) and its JSON report written."""
    path = tmp_path / "earlier.json"
    write_json(conditioning.diagnose(model, measure=False, **options), path)
    return path


def mast():
    return conditioning.load_model(MATRICES / "mast_soft_spring.mtx", dofs=MATRICES / "mast_soft_spring_dofs.csv",
                                   coords=MATRICES / "mast_soft_spring_coords.csv")


def _demo(name: str) -> list[str]:
    return [str(MATRICES / f"{name}.mtx"), "--dofs", str(MATRICES / f"{name}_dofs.csv"),
            "--coords", str(MATRICES / f"{name}_coords.csv")]


# ------------------------------------------------------------ the same answer
@pytest.mark.parametrize("make", [lambda: chain(True), mast])
def test_same_explanation_as_from_the_matrix(make, tmp_path):
    """Every row: node, DOF, diagonal, couplings, jumps and advice equal; the pivot
    and the mode shares equal to the report's 4 significant figures; a share the
    report left out is below its threshold in the direct explanation too."""
    model = make()
    path = saved(model, tmp_path)
    shares_seen = 0
    for row in range(model.n):
        _, direct = explain(model, row)
        later = explain_from_report(model, row, path)
        assert later.from_report == str(path) and direct.from_report is None
        for name in ("row", "label", "node", "dof", "diagonal", "neighbour_diagonal", "type_diagonal",
                     "couplings"):
            assert getattr(later, name) == getattr(direct, name), name
        assert [(j.kind, j.rows, j.nodes) for j in later.jumps] == [(j.kind, j.rows, j.nodes) for j in direct.jumps]
        assert later.pivot_kept == pytest.approx(direct.pivot_kept, rel=STORED)
        assert later.pivot_digits == pytest.approx(direct.pivot_digits, abs=DIGITS_STORED)
        assert later.least_kept is None and later.most_digits is None  # they need (K^-1)_ii
        assert direct.most_digits is not None
        assert [(s.mode, s.kind) for s in later.mode_shares] == [(s.mode, s.kind) for s in direct.mode_shares]
        for a, b in zip(later.mode_shares, direct.mode_shares):
            assert a.eigenvalue == pytest.approx(b.eigenvalue, rel=1e-15)
            if a.share == 0.0:
                assert b.share < SHARE_STORED
            else:
                assert a.share == pytest.approx(b.share, rel=STORED)
                shares_seen += 1
    assert shares_seen == (4 if make is mast else 0)  # the mast's sway: 4 rows carry it (diagnose names them)


def test_pivot_against_dense_ldl_in_the_earlier_order(tmp_path):
    """The stored share kept at each row's pivot is D_kk / K_ii of LAPACK's LDL^T of
    K permuted to the earlier run's elimination order (a given permutation, named
    in the report)."""
    model = chain(True)
    K = model.K.toarray()
    n = K.shape[0]
    p = np.random.default_rng(5).permutation(n)

    def shuffled(S, coords):
        return p
    shuffled.ordering_name = "shuffled-for-the-test"
    path = saved(model, tmp_path, ordering=shuffled)
    assert json.loads(path.read_text())["factorization"]["ordering"] == "shuffled-for-the-test"
    _, d, perm = scipy.linalg.ldl(K[np.ix_(p, p)], lower=True)
    assert np.array_equal(perm, np.arange(n)) and np.count_nonzero(d - np.diag(np.diag(d))) == 0  # 1x1 pivots
    for k, row in enumerate(p):
        e = explain_from_report(model, int(row), path)
        assert e.pivot_kept == pytest.approx(d[k, k] / K[row, row], rel=STORED)
        assert e.pivot_digits == pytest.approx(-math.log10(d[k, k] / K[row, row]), abs=DIGITS_STORED)
        assert "shuffled-for-the-test" in e.pivot_method


def test_share_of_a_free_mode_against_lapack(tmp_path):
    """The free chain's rigid translation: the stored share of each row is v_i^2 of
    LAPACK's unit null vector of S = D^-1/2 K D^-1/2; K is singular, so no pivot,
    as from the matrix."""
    model = chain(False)
    path = saved(model, tmp_path)
    K = model.K.toarray()
    s = 1 / np.sqrt(np.diag(K))
    _, V = np.linalg.eigh(K * s[:, None] * s[None, :])
    for row in range(model.n):
        e = explain_from_report(model, row, path)
        (share,) = e.mode_shares
        assert share.kind == "rigid-body"
        assert share.share == pytest.approx(V[row, 0] ** 2, rel=STORED + 1e-6)  # + eigenvector error
        assert e.pivot_kept is None and e.pivot_method == explain(model, row)[1].pivot_method
        assert e.advice[0].startswith(("Restrain", "The row moves"))
        # The free chain's eigenvalue is zero at working precision (LAPACK: below n eps
        # lambda_max): shown as such from the report and from the matrix, never as noise digits.
        assert share.exact and explain(model, row)[1].mode_shares[0].exact
    from conditioning.render.terminal import explanation_view
    from rich.console import Console
    console = Console(width=100, record=True, color_system=None, file=__import__("io").StringIO())
    console.print(explanation_view(explain_from_report(model, 0, path)))
    import re
    assert re.search(r"eigenvalue 0( \(round-off\))?\)", console.export_text())


def test_rows_held_by_a_swallowing_penalty(tmp_path):
    """The earlier run held the rows a 1e20 tie swallowed and factored the rest: a
    held row has no stored pivot (said so), the others have theirs."""
    model = tied_portal(1e20)
    path = saved(model, tmp_path)
    held = explain_from_report(model, rows_of(model, TIED, "ux"), path)
    assert held.pivot_kept is None and "did not factor this row" in held.pivot_method
    assert held.jumps and held.jumps[0].swallowed
    other = explain_from_report(model, rows_of(model, 21, "uy"), path)
    assert other.pivot_kept is not None and 0 < other.pivot_kept <= 1 + STORED


def test_fingerprint_is_sha256_of_the_documented_layout():
    """docs/report-format.md: shape, row pointers, column indices (int64 little-endian)
    and values (float64 little-endian) of K in canonical CSR, hashed by hashlib."""
    K = sp.csr_array(chain(True).K)
    h = hashlib.sha256()
    for part, dtype in ((np.array(K.shape), "<i8"), (K.indptr, "<i8"), (K.indices, "<i8"), (K.data, "<f8")):
        h.update(np.asarray(part, dtype=dtype).tobytes())
    assert matrix_fingerprint(K) == "sha256:" + h.hexdigest()
    # The layout, not the storage: COO with the entries in another order and a duplicate split in two.
    coo = sp.coo_array(K)
    rows, cols, vals = coo.row[::-1], coo.col[::-1], coo.data[::-1]
    split = sp.coo_array((np.r_[vals, 0.0], (np.r_[rows, 0], np.r_[cols, 0])), shape=K.shape)
    assert matrix_fingerprint(split) == matrix_fingerprint(K)
    bumped = K.copy()
    bumped.data[0] = np.nextafter(bumped.data[0], np.inf)
    assert matrix_fingerprint(bumped) != matrix_fingerprint(K)


# --------------------------------------------------------------- no factoring
def test_no_factorization_is_made(tmp_path, monkeypatch, capsys):
    """With every way to factor K made to fail (SuperLU, the engine, the diagnosis),
    the command explains the row from the report; without the report it cannot."""
    demo = _demo("mast_soft_spring")
    monkeypatch.chdir(tmp_path)
    report = "earlier.json"  # named as a user would, so that the output's line breaks fall elsewhere
    assert main(["diagnose", *demo, "--json", report, "--quiet"]) == 3
    capsys.readouterr()

    class Factorized(AssertionError):
        pass

    def refuse(*args, **kwargs):
        raise Factorized("a factorization was attempted")
    from conditioning.engine import scipy_engine
    monkeypatch.setattr(scipy.sparse.linalg, "splu", refuse)
    with pytest.raises(Factorized):  # SuperLU is how the diagnosis factors K
        conditioning.diagnose(mast(), measure=False)
    monkeypatch.setattr(scipy_engine, "factorize", refuse)
    monkeypatch.setattr(scipy_engine.ScipyEngine, "factorize", refuse)
    monkeypatch.setattr(conditioning.pipeline, "diagnose", refuse)
    monkeypatch.setattr(conditioning.pipeline, "_analyse", refuse)
    assert main(["explain", *demo, "--row", "11", "--from-report", report]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "node 8 ux" in out and f"report {report}" in out and "No factorization" in out
    assert "MMD_AT_PLUS_A" in out or "nested-dissection" in out
    with pytest.raises(Factorized):  # the explanation from the matrix alone factors K
        explain(mast(), 10)


# ------------------------------------------------------------------ refusals
def _one_line_exit_2(capsys, args, *expected):
    assert main(args) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"conditioning: error: {args[args.index('--from-report') + 1]}: ")
    assert lines[0].count(": error: ") == 1 and "InputError" not in lines[0], lines[0]
    assert not captured.out
    for text in expected:
        assert text in lines[0]
    return lines[0]


def test_a_report_of_another_model_is_refused(tmp_path, capsys):
    """Another size, the same size with one value changed, another DOF map, an older
    report without the per-row figures, a file that is not a report: one line each,
    naming the report, exit status 2."""
    demo = _demo("mast_soft_spring")
    report = tmp_path / "earlier.json"
    assert main(["diagnose", *demo, "--json", str(report), "--quiet"]) == 3
    capsys.readouterr()
    row = ["--row", "3", "--from-report", str(report)]
    _one_line_exit_2(capsys, ["explain", *_demo("footbridge"), *row], str(report), "rows")
    # The same sparsity, one stiffness changed by a rounding (a re-export after an edit).
    K = conditioning.load_model(MATRICES / "mast_soft_spring.mtx").K
    K = sp.csr_array(K)
    K.data[K.data == K.data.max()] *= 1 + 2 ** -52
    edited = tmp_path / "edited.mtx"
    scipy.io.mmwrite(str(edited), sp.coo_matrix(K), precision=17)
    _one_line_exit_2(capsys, ["explain", str(edited), *demo[1:], *row], "fingerprint differs")
    _one_line_exit_2(capsys, ["explain", demo[0], *row], "no DOF map", "DOF map of 8 nodes")
    data = json.loads(report.read_text())
    del data["summary"]["fingerprint"]
    older = tmp_path / "older.json"
    older.write_text(json.dumps(data))
    _one_line_exit_2(capsys, ["explain", *demo, "--row", "3", "--from-report", str(older)],
                     str(older), "older version")
    data["schema"] = "conditioning-report/1"
    older.write_text(json.dumps(data))
    _one_line_exit_2(capsys, ["explain", *demo, "--row", "3", "--from-report", str(older)], "schema")
    _one_line_exit_2(capsys, ["explain", *demo, "--row", "3", "--from-report", demo[2]], "not a JSON file")
    _one_line_exit_2(capsys, ["explain", *demo, "--row", "3", "--from-report", str(tmp_path / "none.json")],
                     "none.json")
    with pytest.raises(InputError, match="fingerprint differs"):
        explain_from_report(conditioning.load_model(edited, dofs=demo[2]), 2, report)
