"""Explaining one row ("the solver warned about equation N").

Outside references:

* LAPACK's symmetric eigensolver (``numpy.linalg.eigh``) for the row's share
  of a free mode;
* a dense LDL^T (``scipy.linalg.ldl``, LAPACK's Bunch-Kaufman ``?sytrf``) for
  the pivot of the row in the natural elimination order and with the row
  eliminated last (the closed fact: that pivot is 1/(K^-1)_ii, and every
  order's pivot lies between it and K_ii).

Models are invented for the tests: chains of springs of different stiffness.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

import conditioning
from conditioning.cli import main
from conditioning.engine.scipy_engine import factorize
from conditioning.model import DofTable, Model
from conditioning.pipeline import explain
from conditioning.stages.explain import explain_row

MATRICES = Path(__file__).resolve().parents[1] / "matrices"
SPRINGS = np.array([3.0, 1.0, 4.0, 1.5, 9.0, 2.6, 5.0, 3.5]) * 1e3  # N/mm, invented


def chain(grounded: bool) -> Model:
    """8 nodes along x (ux only) joined by SPRINGS[1:], node 1 held by a ground
    spring SPRINGS[0] when ``grounded``, node 8 by a ground spring 2e3 N/mm;
    without them the chain is free to translate (one rigid-body mode)."""
    n = len(SPRINGS)
    K = np.zeros((n, n))
    for i, k in enumerate(SPRINGS[1:]):
        K[np.ix_([i, i + 1], [i, i + 1])] += k * np.array([[1.0, -1.0], [-1.0, 1.0]])
    if grounded:
        K[0, 0] += SPRINGS[0]
        K[-1, -1] += 2e3
    dofs = DofTable(np.arange(11, 11 + n, dtype=np.int64), np.zeros(n, dtype=np.int8))
    return Model(sp.csr_array(K), dofs=dofs)


def test_node_dof_and_couplings():
    """Row 4 (0-based 3) is node 14 ux; its couplings are K's off-diagonal entries
    of that row, strongest in |K_ij| / sqrt(K_ii K_jj) first."""
    model = chain(True)
    K = model.K.toarray()
    e = explain_row(model, 3)
    assert (e.node, e.dof, e.label) == (14, "ux", "node 14 ux")
    assert e.diagonal == K[3, 3] == SPRINGS[3] + SPRINGS[4]
    expected = sorted(((abs(K[3, j]) / np.sqrt(K[3, 3] * K[j, j]), j) for j in (2, 4)), reverse=True)
    assert [c.row for c in e.couplings] == [j for _, j in expected]
    for c, (strength, j) in zip(e.couplings, expected):
        assert c.value == K[3, j] and c.strength == pytest.approx(strength, rel=1e-14)
    assert e.neighbour_diagonal == pytest.approx(np.median([K[2, 2], K[4, 4]]))


def test_share_in_a_free_mode_against_lapack():
    """The free chain's rigid translation: the row's share v_i^2 of the unit
    null vector of S = D^-1/2 K D^-1/2 from LAPACK's eigh."""
    model = chain(False)
    report = conditioning.diagnose(model, measure=False)
    assert report.spectrum.count == 1
    K = model.K.toarray()
    s = 1 / np.sqrt(np.diag(K))
    w, V = np.linalg.eigh(K * s[:, None] * s[None, :])
    v = V[:, 0]
    for row in (0, 4, 7):
        e = explain_row(model, row, spectrum=report.spectrum, restraints=report.restraints)
        assert len(e.mode_shares) == 1
        assert e.mode_shares[0].share == pytest.approx(v[row] ** 2, rel=1e-6)
        assert e.pivot_kept is None and e.least_kept is None  # no pivot without an unshifted factorization
        assert any("mode" in a or "Restrain" in a for a in e.advice)


def test_pivot_against_dense_ldl():
    """Natural order: the row's share kept equals LDL^T's D_ii / K_ii; eliminated
    last: D = 1/(K^-1)_ii, the tool's least share; every order between."""
    model = chain(True)
    K = model.K.toarray()
    n = K.shape[0]
    fac = factorize(model.K, ordering="NATURAL")
    lu, d, perm = scipy.linalg.ldl(K, lower=True)
    assert np.array_equal(perm, np.arange(n)) and np.count_nonzero(d - np.diag(np.diag(d))) == 0
    rng = np.random.default_rng(3)
    for row in range(n):
        e = explain_row(model, row, fac=fac)
        assert e.pivot_kept == pytest.approx(d[row, row] / K[row, row], rel=1e-12)
        assert e.pivot_digits == pytest.approx(-np.log10(d[row, row] / K[row, row]), abs=1e-12)
        last = [j for j in range(n) if j != row] + [row]
        _, d_last, p_last = scipy.linalg.ldl(K[np.ix_(last, last)], lower=True)
        assert np.array_equal(p_last, np.arange(n))
        assert e.least_kept == pytest.approx(d_last[-1, -1] / K[row, row], rel=1e-12)
        assert e.most_digits == pytest.approx(-np.log10(d_last[-1, -1] / K[row, row]), rel=1e-12)
        for _ in range(5):  # any order: least_kept <= D_ii / K_ii <= 1
            order = list(rng.permutation(n))
            _, dp, pp = scipy.linalg.ldl(K[np.ix_(order, order)], lower=True)
            if np.array_equal(pp, np.arange(n)):
                kept = dp[order.index(row), order.index(row)] / K[row, row]
                assert e.least_kept * (1 - 1e-12) <= kept <= 1 + 1e-12
    fac.release()


def _demo(name: str) -> list[str]:
    return [str(MATRICES / f"{name}.mtx"), "--dofs", str(MATRICES / f"{name}_dofs.csv"),
            "--coords", str(MATRICES / f"{name}_coords.csv")]


def test_command_row_base(capsys):
    """--row 11 (1-based) and --row 10 --row-base 0 explain the same DOF; the output says the numbering."""
    demo = _demo("mast_soft_spring")
    assert main(["explain", *demo, "--row", "11"]) == 0
    one = capsys.readouterr().out
    assert main(["explain", *demo, "--row", "10", "--row-base", "0"]) == 0
    zero = capsys.readouterr().out
    assert "1-based numbering): node 8 ux" in one and "0-based numbering): node 8 ux" in zero
    assert main(["explain", *demo, "--row", "99"]) == 2
    assert "outside 1..16" in capsys.readouterr().err


def test_restraint_advice_at_the_suggested_support():
    """The mast's suggested support (node 10 ux, as diagnose names it) is the first advice at its row."""
    path, _, dofs, _, coords = _demo("mast_soft_spring")
    model = conditioning.load_model(path, dofs=dofs, coords=coords)
    report, e = explain(model, next(i for i in range(model.n) if model.row_label(i) == "node 10 ux"))
    assert [f"node {r.node} {r.dof}" for r in report.restraints] == ["node 10 ux"]
    assert e.advice[0].startswith("Restrain node 10 ux")
    assert e.mode_shares and e.mode_shares[0].kind == "mechanism"
