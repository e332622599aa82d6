"""Several load cases in one load file: every case measured, worst first, each audited.

Outside references:

* python-flint ``arb_mat.solve`` (ball arithmetic, a certified enclosure of
  the exact solution; through ``external_error`` of tests/test_digits.py) for
  the digits of the very float64 vector the tool measured for each case;
* the normwise backward error of a vector scaled by 1.01 (at most 0.01 / 1.01,
  closed form; Rigal and Gaches 1967, from memory) for the audit.

The model is invented for the tests: a chain of 30 springs held by a ground
spring 1e-8 times softer, so the cases keep different digits.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

import conditioning
from conditioning import load_model
from conditioning.cli import main
from conditioning.errors import InputError
from test_digits import digits_of, external_error, soft_chain

try:
    import flint
except ImportError:  # test extra
    flint = None

N = 30
CASES = ("dead", "live", "wind", "pair", "sway")


def five_cases() -> np.ndarray:
    """(30, 5) loads (force units): uniform, tip, random, a self-equilibrated pair, alternating."""
    F = np.zeros((N, 5))
    F[:, 0] = -1.0
    F[-1, 1] = 10.0
    F[:, 2] = np.random.default_rng(7).standard_normal(N)
    F[10, 3], F[11, 3] = 1.0, -1.0
    F[:, 4] = (-1.0) ** np.arange(N)
    return F


def write_csv(path, F, header=True) -> None:
    lines = [",".join(CASES)] if header else []
    lines += [",".join(repr(float(v)) for v in row) for row in F]
    path.write_text("\n".join(lines) + "\n")


@pytest.mark.skipif(flint is None, reason="python-flint (test extra) not installed")
def test_five_load_cases_each_within_half_a_digit_of_flint(tmp_path):
    """A 5-column CSV with a header: five figures named by the header, fewest
    digits first, each within 0.5 of python-flint's certified figure of the
    vector measured and never above it."""
    K = soft_chain(N, 1e-8)
    F = five_cases()
    write_csv(tmp_path / "loads.csv", F)
    model = load_model(K, load=tmp_path / "loads.csv", fix=None)
    assert model.load.shape == (N, 5) and model.load_names == CASES
    report = conditioning.diagnose(model)
    cases = report.digits.samples[:5]
    assert sorted(s.sample for s in cases) == sorted(CASES)
    assert [s.trustworthy_digits for s in cases] == sorted(s.trustworthy_digits for s in cases)
    assert not any(s.sample in CASES for s in report.digits.samples[5:])
    for s in cases:
        f = F[:, CASES.index(s.sample)]
        np.testing.assert_array_equal(s.load_vector, f)  # the case's own load, not another column
        lo, hi = external_error(K.toarray(), f, s.solution)
        assert s.trustworthy_digits <= digits_of(lo) + 1e-9, s.sample
        assert abs(s.trustworthy_digits - digits_of(hi)) <= 0.5, s.sample
    # the cases do not all keep the same digits, so the order means something
    assert len({s.trustworthy_digits for s in cases}) > 1


def test_matrix_market_block_without_header_names_cases_by_column(tmp_path):
    """A Matrix Market 30 x 5 array: cases load-1..load-5."""
    K = soft_chain(N, 1e-8)
    scipy.io.mmwrite(tmp_path / "loads.mtx", five_cases())
    model = load_model(K, load=tmp_path / "loads.mtx", fix=None)
    assert model.load_names == tuple(f"load-{k}" for k in range(1, 6))
    report = conditioning.diagnose(model)
    assert sorted(s.sample for s in report.digits.samples[:5]) == list(model.load_names)


def test_csv_block_without_header_and_bad_rows(tmp_path):
    F = five_cases()
    write_csv(tmp_path / "plain.csv", F, header=False)
    model = load_model(soft_chain(N, 1e-8), load=tmp_path / "plain.csv", fix=None)
    np.testing.assert_array_equal(model.load, F)
    (tmp_path / "ragged.csv").write_text("1,2\n3\n")
    with pytest.raises(InputError, match="line 2: expected 2 values"):
        load_model(soft_chain(2, 1.0), load=tmp_path / "ragged.csv", fix=None)


def test_every_solution_column_is_audited_worst_first(tmp_path):
    """A 5-column solution, the 'wind' column scaled by 1.01: five audits, the
    wind case first and not fitting (backward error at most 0.01 / 1.01), the
    others fitting."""
    K = soft_chain(N, 1e-3)
    F = five_cases()
    X = np.linalg.solve(K.toarray(), F)
    X[:, 2] *= 1.01
    model = load_model(K, load=F, solution=X, fix=None)
    report = conditioning.diagnose(model)
    audits = report.digits.audits
    assert [a.case for a in audits][0] == "load-3" and len(audits) == 5
    assert report.digits.audit is audits[0] and not audits[0].fits
    # eta of (1+d) x_exact: ||d K x|| / ((1+d) ||K|| ||x|| + ||f||) <= d / (1+d), d = 0.01
    assert 100 * audits[0].allowed_backward_error < audits[0].backward_error <= 0.01 / 1.01
    assert all(a.fits for a in audits[1:])
    audited = [s.sample for s in report.digits.samples if s.audited]
    assert sorted(audited) == sorted(f"solution (load-{k})" for k in range(1, 6))
    assert any("load case 'load-3'" in f.message for f in report.findings)


def test_column_mismatch_is_one_line_exit_2(tmp_path, capsys):
    """4 solution columns against 5 load cases: exit 2, one line naming the solution file."""
    K = soft_chain(N, 1e-3)
    scipy.io.mmwrite(tmp_path / "K.mtx", sp.coo_matrix(K))
    F = five_cases()
    write_csv(tmp_path / "loads.csv", F)
    scipy.io.mmwrite(tmp_path / "x.mtx", np.linalg.solve(K.toarray(), F)[:, :4])
    code = main(["diagnose", str(tmp_path / "K.mtx"), "--load", str(tmp_path / "loads.csv"),
                 "--solution", str(tmp_path / "x.mtx"), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1 and "x.mtx" in err and "4 columns" in err and "has 5" in err


def test_json_lists_every_case_and_audit(tmp_path):
    K = soft_chain(N, 1e-3)
    F = five_cases()
    write_csv(tmp_path / "loads.csv", F)
    scipy.io.mmwrite(tmp_path / "K.mtx", sp.coo_matrix(K))
    scipy.io.mmwrite(tmp_path / "x.mtx", np.linalg.solve(K.toarray(), F))
    out = tmp_path / "r.json"
    main(["diagnose", str(tmp_path / "K.mtx"), "--load", str(tmp_path / "loads.csv"),
          "--solution", str(tmp_path / "x.mtx"), "--json", str(out), "--quiet"])
    data = json.loads(out.read_text())
    names = [d["sample"] for d in data["digits"]]
    assert sorted(names[:5]) == sorted(CASES)
    assert sorted(a["case"] for a in data["digits_summary"]["audits"]) == sorted(CASES)
