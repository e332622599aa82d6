"""Fixed-width Harwell-Boeing files read by the columns of their Fortran formats.

Outside references: scipy.io.mmread reading the same matrix from a Matrix
Market file (the independent reader); the Fortran 77 rules for numeric input
fields (ANSI X3.9-1978, section 13.5.9: a D exponent reads as E, the exponent
letter may be left out before a signed exponent, a field without a decimal
point has d implied decimals, a kP scale factor divides a field without an
exponent by 10**k, blanks in a field are ignored; from memory); the
Harwell-Boeing header layout (Duff, Grimes, Lewis 1992, users' guide, from
memory); the public file bcsstk24.rsa in ../shared/reference-matrices with
its published order and entry count (PROVENANCE.md: ssstats.csv, order 3562,
159,910 entries) and 2-norm (suitesparse_site_matrix_stats.csv, 3.069198e13).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from conditioning.cli import main
from conditioning.errors import InputError
from conditioning.io.harwell_boeing import FortranFormat, read_field
from conditioning.io.matrix_formats import read_matrix
from conftest import REFERENCE_MATRICES


def _stiffness(n: int = 40) -> sp.csc_array:
    """An invented symmetric matrix with entries of every sign and magnitudes 1e-3..1e9,
    so that fields written with (4E20.13) abut: a negative number fills all 20 columns."""
    rng = np.random.default_rng(7)
    A = sp.random_array((n, n), density=0.3, rng=rng, format="csr")
    A.data = rng.choice([-1.0, 1.0], A.data.size) * 10.0 ** rng.uniform(-3, 9, A.data.size)
    A = A + A.T + sp.diags_array(10.0 ** rng.uniform(8, 9, n))
    return sp.csc_array(sp.tril(A))


def _fortran_e(x: float, letter: str = "E", scale: int = 0) -> str:
    """``x`` as Fortran writes it under E20.13 (scale 0: 0.ddddE+ee) or 1P,E20.13
    (d.dddE+ee), 13 significant digits; written from Python's exact decimal digits."""
    if x == 0.0:
        return f"{0.0:.13f}{letter}+00".rjust(20) if scale == 0 else f"{0.0:.12f}{letter}+00".rjust(20)
    mant, exp = f"{abs(x):.12e}".split("e")
    digits = mant.replace(".", "")
    sign = "-" if x < 0 else ""
    if scale == 0:
        text = f"{sign}0.{digits}{letter}{int(exp) + 1:+03d}"
    else:
        text = f"{sign}{digits[0]}.{digits[1:]}{letter}{int(exp):+03d}"
    return text.rjust(20)


def _rounded(x: np.ndarray) -> np.ndarray:
    """The values as 13 significant digits, as the HB file stores them."""
    return np.array([float(f"{v:.12e}") for v in x])


def _hb_fixed_width(A: sp.csc_array, *, letter="E", scale=0, val_fmt="(4E20.13)") -> str:
    """An RSA file written as the format defines it: (12I6) (16I5) and 4 fields of 20 columns."""
    n = A.shape[0]
    ptr, ind, val = A.indptr + 1, A.indices + 1, A.data

    def lines(items, per, fmt):
        return ["".join(fmt(v) for v in items[k:k + per]) for k in range(0, len(items), per)]

    p = lines(ptr, 12, lambda v: f"{v:6d}")
    i = lines(ind, 16, lambda v: f"{v:5d}")
    v = lines(val, 4, lambda x: _fortran_e(x, letter, scale))
    head = [
        "invented stiffness, fixed width".ljust(72) + "TESTKEY ",
        f"{len(p) + len(i) + len(v):14d}{len(p):14d}{len(i):14d}{len(v):14d}{0:14d}",
        "RSA" + " " * 11 + f"{n:14d}{n:14d}{A.nnz:14d}{0:14d}",
        "(12I6)".ljust(16) + "(16I5)".ljust(16) + val_fmt.ljust(20),
    ]
    return "\n".join(head + p + i + v) + "\n"


@pytest.mark.parametrize("letter, scale, val_fmt", [
    ("E", 0, "(4E20.13)"), ("D", 0, "(4D20.13)"), ("E", 1, "(1P,4E20.13)"), ("D", 1, "(1P4D20.13)")])
def test_abutting_fields_read_as_matrix_market_by_scipy(tmp_path, letter, scale, val_fmt):
    """The same matrix written as a fixed-width RSA (fields abutting) and as Matrix Market:
    read_matrix on the RSA equals scipy.io.mmread on the .mtx, entry for entry."""
    L = _stiffness()
    L.data = _rounded(L.data)
    text = _hb_fixed_width(L, letter=letter, scale=scale, val_fmt=val_fmt)
    assert any("-" in line[:20] and len(line.split()) < 4 for line in text.splitlines()[-30:]), \
        "the test file must hold abutting fields"
    hb = tmp_path / "k.rsa"
    hb.write_text(text)
    mm = tmp_path / "k.mtx"
    scipy.io.mmwrite(mm, sp.coo_array(L), symmetry="general", precision=17)
    ref = sp.csr_array(scipy.io.mmread(mm))
    ref = sp.csr_array(ref + sp.triu(ref.T, k=1))   # the RSA holds the lower triangle
    K, notes = read_matrix(hb)
    assert notes[0] == f"read a 40 x 40 Harwell-Boeing RSA matrix ({L.nnz} stored entries)"
    assert not any("other columns" in s for s in notes)
    assert K.shape == ref.shape and (K != ref).nnz == 0
    with pytest.raises(Exception):     # the reason for this reader: scipy's splits on blanks
        scipy.io.hb_read(str(hb), spmatrix=False)


@pytest.mark.parametrize("text, fmt, expected", [
    ("0.4541668995389E+09", "E20.13", 0.4541668995389e9),
    ("-0.6645173262256D+06", "D20.13", -0.6645173262256e6),
    ("0.4541668995389+100", "E20.13", 0.4541668995389e100),     # letter left out, 3-digit exponent
    ("-0.45-03", "E10.3", -0.45e-3),
    ("12345", "E10.3", 12.345),                                  # implied decimals
    ("12345E+02", "E10.3", 1234.5),
    ("  1.5E 03", "E10.3", 1500.0),                              # blanks ignored
    ("", "E10.3", 0.0),                                          # blank field reads zero
    ("2.5", "F10.3", 2.5),
])
def test_fortran_real_input_rules(text, fmt, expected):
    """Each field read by the Fortran 77 input rules (ANSI X3.9-1978, 13.5.9, from memory)."""
    (field,) = FortranFormat(f"({fmt})").records[0]
    assert read_field(text.rjust(field.width), field) == expected


def test_scale_factor_applies_only_without_exponent():
    """kP on input divides a field without an exponent by 10**k (ANSI X3.9-1978 13.5.7.1, from memory)."""
    (field,) = FortranFormat("(2PF10.3)").records[0]
    assert read_field("    12.5  ", field) == 0.125
    assert read_field("  12.5E+0", field) == 12.5


def test_format_layouts():
    """Column layout of formats the collection uses (common practice: (12I6), (1P,5E16.8), groups, nX)."""
    f = FortranFormat("(1P,5E16.8)")
    assert [(x.start, x.width, x.scale) for x in f.records[0]] == [(16 * k, 16, 1) for k in range(5)]
    g = FortranFormat("(2(1X,I5),I3)")
    assert [(x.start, x.width) for x in g.records[0]] == [(1, 5), (7, 5), (12, 3)]
    assert FortranFormat("(26I3)").per_record == 26
    for bad in ("12I6", "(12Q6)", "(4E20)"):
        with pytest.raises(ValueError):
            FortranFormat(bad)


def test_bad_fixed_width_files_are_one_line_exit_2(tmp_path, capsys):
    """A garbled field, a cut file and an unreadable format: InputError naming the file
    and the line; the command prints one line and exits 2 (the project's bad-input rule)."""
    L = _stiffness()
    lines = _hb_fixed_width(L).splitlines()
    garbled = list(lines)
    k = len(garbled) - 3
    garbled[k] = garbled[k][:20] + "0.45416689x5389E+09" + garbled[k][39:]
    cases = {
        "garbled.rsa": ("\n".join(garbled) + "\n", f"line {k + 1}, columns 21-40"),
        "cut.rsa": ("\n".join(lines[:-4]) + "\n", "cut short"),
        "format.rsa": ("\n".join(lines[:3] + ["(12I6)".ljust(16) + "(16Q5)".ljust(16) + "(4E20.13)"]
                                 + lines[4:]) + "\n", "line 4: the index format"),
    }
    for name, (text, word) in cases.items():
        p = tmp_path / name
        p.write_text(text)
        with pytest.raises(InputError, match=word) as info:
            read_matrix(p)
        assert info.value.path == str(p)
        assert main(["diagnose", str(p)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and name in err[0] and "Traceback" not in err[0]


def test_scipy_written_file_read_by_its_words(tmp_path):
    """scipy.io.hb_write writes 24-character fields under (3E25.16): read by the words, said in a note,
    equal to what scipy.io.hb_read reads back (the outside reader of its own writer)."""
    A = sp.csc_array(np.array([[4.0, -1.5, 0.0], [-1.5, 4.0, -2.25], [0.0, -2.25, 4.0]]))
    p = tmp_path / "scipy.rua"
    scipy.io.hb_write(p, A)
    K, notes = read_matrix(p)
    assert (K != sp.csr_array(scipy.io.hb_read(p, spmatrix=False))).nnz == 0
    assert any("other columns" in s for s in notes)


def test_public_bcsstk24_reads():
    """bcsstk24.rsa, formats (12I6)(16I5)(4E20.13) with 17,591 lines of abutting fields
    (PROVENANCE.md): order 3562 and 159,910 entries (ssstats.csv), 2-norm 3.069198e13
    (suitesparse_site_matrix_stats.csv), symmetric."""
    path = REFERENCE_MATRICES / "bcsstk24.rsa"
    if not path.exists():
        pytest.skip(f"external check data not found at {path} (../shared is absent)")
    K, notes = read_matrix(path)
    assert K.shape == (3562, 3562) and K.nnz == 159_910
    assert abs(K - K.T).max() == 0
    top = sla.eigsh(K, k=1, which="LA", return_eigenvectors=False, tol=1e-10)[0]
    assert abs(top / 3.069198e13 - 1) < 5e-7   # the published figure has 7 digits
    assert not any("other columns" in s for s in notes)
