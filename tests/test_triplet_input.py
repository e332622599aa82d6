"""Plain triplet files (``i j value``), as many programs export a stiffness.

The files are written from scipy's COO form of a bundled export read by
scipy.io.mmread (no project code), with numpy.savetxt: 0- and 1-based, CSV
and white space, full and one triangle; each must read back to scipy's
matrix exactly, with a note saying which indexing was detected.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.cli import main
from conditioning.errors import InputError
from conditioning.io.matrix_formats import read_matrix

DEMO = Path(__file__).resolve().parents[1] / "matrices"


def _reference() -> sp.csr_array:
    return sp.csr_array(scipy.io.mmread(DEMO / "footbridge.mtx"))


def _write(path: Path, A: sp.coo_array, *, base: int, delimiter: str, header: str = "") -> Path:
    table = np.column_stack([A.row + base, A.col + base, A.data])
    np.savetxt(path, table, fmt=["%d", "%d", "%.17g"], delimiter=delimiter, header=header,
               comments="")
    return path


@pytest.mark.parametrize("base", [0, 1])
@pytest.mark.parametrize("delimiter,header", [(",", "row,col,value"), (" ", ""), ("\t", "")])
@pytest.mark.parametrize("triangle", [False, True])
def test_triplets_read_back_to_scipys_matrix(tmp_path, base, delimiter, header, triangle):
    K = _reference()
    A = sp.coo_array(sp.tril(K) if triangle else K)
    path = _write(tmp_path / "k.txt", A, base=base, delimiter=delimiter, header=header)
    got, notes = read_matrix(path)
    assert got.shape == K.shape and (got != K).nnz == 0
    assert f"{base}-based indices" in notes[0]
    assert ("lower triangle" in " ".join(notes)) == triangle


def test_diagnosis_of_a_triplet_file_equals_the_matrix_market_one(tmp_path):
    from conditioning import diagnose

    path = _write(tmp_path / "k.csv", sp.coo_array(sp.tril(_reference())), base=1, delimiter=",")
    a = diagnose(str(path), samples=0)
    b = diagnose(str(DEMO / "footbridge.mtx"), samples=0)
    assert a.condition.estimate == pytest.approx(b.condition.estimate, rel=1e-10)


@pytest.mark.parametrize("text,says", [
    ("1 2 3 4\n5 6 7 8\n", "table of 4 numbers a line"),
    ("1.5 2 3\n2 2 3\n", "looks like a triplet list, but the indices are not all integers"),
    ("3 3 2\n1 1 2.0\n2 2 3.0\n", "Matrix Market file without its banner"),
    ("0 0 1\n-1 0 2\n", "an index is negative"),
    ("1 1 2.0\n2 2 x\n", "line 2: '2 2 x' is not 'row column value'"),
    # a header, then the first entry mistyped: the line is named, not the header
    ("row col value\n1 1 x\n2 2 3.0\n3 3 1.0\n", "line 2: '1 1 x' is not 'row column value'"),
])
def test_rejected_file_says_what_it_looks_like(tmp_path, capsys, text, says):
    path = tmp_path / "k.txt"
    path.write_text(text)
    with pytest.raises(InputError, match=says):
        read_matrix(path)
    assert main(["diagnose", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and says in err[0] and "Traceback" not in err[0]


def test_a_huge_index_is_a_one_line_error_not_an_allocation(tmp_path, capsys):
    """A mangled first line '0 3657822720 0' (found by the fuzz test) would make a
    3.7e9-order matrix from three entries: refused before anything is allocated."""
    p = tmp_path / "k.txt"
    p.write_text("0 3657822720 0\n2 1 -1\n2 2 2\n")
    assert main(["diagnose", str(p)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "order 3,657,822,721 from only 3 entries" in err


def test_an_index_beyond_int64_is_a_one_line_error(tmp_path, capsys):
    """A mangled size line read as a triplet ('99999999999999999999 5 13', found by
    the fuzz test) overflowed the integer conversion: now a one-line error."""
    p = tmp_path / "k.mtx"
    p.write_text("%\n99999999999999999999 5 13\n1 1 2\n1 2 -1\n2 1 -1\n2 2 2\n")
    assert main(["diagnose", str(p)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "index is too large" in err
