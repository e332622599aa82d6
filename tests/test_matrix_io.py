"""Reading stiffness matrices and vectors: conditioning.io.matrix_formats.

Outside references: the public reference matrices in ../shared (their orders
and entry counts in computed_stats.csv, cross-checked there against the
SuiteSparse collection index ssstats.csv), scipy.io.mmread / mmwrite /
hb_write as the independent reader and writer, and the Matrix Market format
definition (R. F. Boisvert, R. Pozo, K. A. Remington (1996), "The Matrix
Market Exchange Formats: Initial Design", NIST IR 5935 (from memory)): the
banner words, the size line, 1-based indices, "symmetric" storing one
triangle.
"""

from __future__ import annotations

import bz2
import gzip
import hashlib

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from conditioning.errors import InputError
from conditioning.io.matrix_formats import read_matrix, read_vector
from conftest import computed_stats, reference_matrix_path

BANNER_SYM = "%%MatrixMarket matrix coordinate real symmetric\n"
BANNER_GEN = "%%MatrixMarket matrix coordinate real general\n"


def second_difference(n: int) -> sp.csr_array:
    """tridiag(-1, 2, -1), the stiffness of a fixed-fixed chain of unit springs."""
    return sp.csr_array(sp.diags_array([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)],
                                       offsets=[-1, 0, 1]))


def sha256(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# --------------------------------------------------------------------------- #
# The 49 public reference matrices
# --------------------------------------------------------------------------- #


def test_reference_matrices_load_with_published_sizes():
    """Every file in ../shared/reference-matrices loads with n and nnz of computed_stats.csv.

    PROVENANCE.md: ``n`` is the order, ``stored_entries`` the entries in the
    file (one triangle, explicit zeros included), ``nnz_full_incl_explicit_zeros``
    and ``nnz_full_nonzero`` the entries of the full symmetric matrix with and
    without stored zeros (cross-checked there with ssstats.csv columns nnz and
    nentries). The reader drops stored zeros, so K.nnz must equal
    nnz_full_nonzero and the note must give the difference.
    """
    rows = computed_stats()
    assert len(rows) == 49
    failures = []
    for row in rows:
        path = reference_matrix_path(row["file"])
        K, notes = read_matrix(path)
        n, stored = int(row["n"]), int(row["stored_entries"])
        zeros = int(row["nnz_full_incl_explicit_zeros"]) - int(row["nnz_full_nonzero"])
        if K.shape != (n, n) or K.nnz != int(row["nnz_full_nonzero"]):
            failures.append(f"{row['file']}: shape {K.shape}, nnz {K.nnz}")
        if f"({stored} stored entries)" not in notes[0]:
            failures.append(f"{row['file']}: first note {notes[0]!r} lacks {stored} stored entries")
        zero_notes = [s for s in notes if "explicitly stored zero" in s]
        if zeros and not (zero_notes and zero_notes[0].startswith(f"{zeros} ")):
            failures.append(f"{row['file']}: {zeros} stored zeros not noted: {notes}")
        if not zeros and zero_notes:
            failures.append(f"{row['file']}: spurious zero note {zero_notes}")
        if K.dtype != np.float64 or not K.has_sorted_indices:
            failures.append(f"{row['file']}: dtype {K.dtype}, sorted {K.has_sorted_indices}")
    assert not failures, "\n".join(failures)


@pytest.mark.parametrize("name", ["bcsstk01", "nos1", "bcsstm13", "s1rmq4m1"])
def test_reference_matrix_values_equal_scipy_mmread(name):
    """Values equal scipy.io.mmread's own symmetric expansion (zeros dropped).

    nos1 is an ``integer`` file, bcsstm13 stores zero diagonal entries,
    s1rmq4m1 is gzip-compressed with stored zeros (PROVENANCE.md, notes).
    """
    path = reference_matrix_path(name)
    K, _ = read_matrix(path)
    ref = sp.csr_array(scipy.io.mmread(path), dtype=np.float64)
    ref.eliminate_zeros()
    assert K.shape == ref.shape
    assert (K != ref).nnz == 0
    assert K.nnz == ref.nnz


def test_reference_matrix_file_not_modified():
    """Reading never writes to the user's file (common practice)."""
    path = reference_matrix_path("bcsstk16")
    before = sha256(path)
    read_matrix(path)
    assert sha256(path) == before


# --------------------------------------------------------------------------- #
# Round trips through scipy's writers
# --------------------------------------------------------------------------- #


def test_round_trip_mmwrite_symmetric(tmp_path):
    """scipy.io.mmwrite writes a symmetric matrix as 'symmetric' (lower triangle); read it back."""
    K0 = second_difference(7)
    p = tmp_path / "chain.mtx"
    scipy.io.mmwrite(p, K0, symmetry="symmetric")
    assert scipy.io.mminfo(p)[5] == "symmetric"
    K, notes = read_matrix(p)
    assert (K != K0).nnz == 0
    assert notes == ["read a 7 x 7 Matrix Market coordinate real symmetric matrix (13 stored entries)"]


def test_round_trip_general_one_triangle_is_mirrored(tmp_path):
    """A 'general' file holding only the lower triangle is mirrored, and the note says so."""
    K0 = second_difference(5)
    p = tmp_path / "lower.mtx"
    scipy.io.mmwrite(p, sp.tril(K0), symmetry="general")
    K, notes = read_matrix(p)
    assert (K != K0).nnz == 0
    assert any("not labelled symmetric but stores only the lower triangle (4 off-diagonal entries); "
               "mirrored" in s for s in notes)
    scipy.io.mmwrite(tmp_path / "upper.mtx", sp.triu(K0), symmetry="general")
    K, notes = read_matrix(tmp_path / "upper.mtx")
    assert (K != K0).nnz == 0
    assert any("upper triangle" in s for s in notes)


def test_general_full_storage_not_mirrored(tmp_path):
    """A general file with both triangles is taken as stored, asymmetry included (not refused)."""
    A = np.array([[4.0, 1.0], [2.0, 5.0]])
    p = tmp_path / "asym.mtx"
    scipy.io.mmwrite(p, sp.coo_array(A), symmetry="general")
    K, notes = read_matrix(p)
    np.testing.assert_array_equal(K.toarray(), A)
    assert not any("mirrored" in s for s in notes)


def test_round_trip_array_format(tmp_path):
    """Dense 'array' format, general and symmetric, as scipy.io.mmwrite writes it."""
    K0 = second_difference(4).toarray()
    for symmetry in ("general", "symmetric"):
        p = tmp_path / f"dense_{symmetry}.mtx"
        scipy.io.mmwrite(p, K0, symmetry=symmetry)
        assert scipy.io.mminfo(p)[3:6:2] == ("array", symmetry)
        K, notes = read_matrix(p)
        np.testing.assert_array_equal(K.toarray(), K0)
        assert K.nnz == 10  # the zeros of the dense array are not structural entries
        assert f"array real {symmetry}" in notes[0]


def test_round_trip_integer_field(tmp_path):
    """An 'integer' field file is read as float64 with a note."""
    K0 = sp.coo_array(np.array([[3, -1], [-1, 3]], dtype=np.int64))
    p = tmp_path / "int.mtx"
    scipy.io.mmwrite(p, K0, field="integer", symmetry="symmetric")
    K, notes = read_matrix(p)
    assert K.dtype == np.float64
    np.testing.assert_array_equal(K.toarray(), [[3.0, -1.0], [-1.0, 3.0]])
    assert "integer values converted to float64" in notes


def test_round_trip_compressed_by_content(tmp_path):
    """gzip and bzip2 files are recognised by their magic bytes, whatever the name."""
    K0 = second_difference(6)
    plain = tmp_path / "k.mtx"
    scipy.io.mmwrite(plain, K0, symmetry="symmetric")
    data = plain.read_bytes()
    for name, blob, kind in [("k.mtx.gz", gzip.compress(data), "gzip"), ("k.mtx.bz2", bz2.compress(data), "bzip2"),
                             ("k_gzip_no_suffix.dat", gzip.compress(data), "gzip")]:
        p = tmp_path / name
        p.write_bytes(blob)
        K, notes = read_matrix(p)
        assert (K != K0).nnz == 0
        assert f"({kind}-compressed)" in notes[0]


def test_round_trip_harwell_boeing_unsymmetric(tmp_path):
    """scipy.io.hb_write writes RUA; read it back (bcsstk01, full storage)."""
    A = sp.csc_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    p = tmp_path / "bcsstk01.rua"
    scipy.io.hb_write(p, A)
    K, notes = read_matrix(p)
    assert (K != A).nnz == 0
    assert notes[0] == "read a 48 x 48 Harwell-Boeing RUA matrix (400 stored entries)"


def _rsa_text(tmp_path, A, *, d_exponents=False, trim=True) -> str:
    """An RSA file (lower triangle) from scipy's RUA writer, header type changed to RSA."""
    p = tmp_path / "tmp.rua"
    scipy.io.hb_write(p, sp.csc_array(sp.tril(A)))
    lines = p.read_text().splitlines()
    lines[2] = "RSA" + lines[2][3:]
    if d_exponents:
        lines[4:] = [s.replace("E", "D") for s in lines[4:]]
    if trim:  # collection files are often stored without trailing blanks
        lines = [s.rstrip() for s in lines]
    return "\n".join(lines) + "\n"


def test_harwell_boeing_symmetric_rsa(tmp_path):
    """RSA stores the lower triangle (Duff, Grimes, Lewis 1992 users' guide, from memory);
    the triangle is mirrored, also with Fortran D exponents and trimmed header lines."""
    A = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    for d_exp in (False, True):
        p = tmp_path / f"bcsstk01_{d_exp}.rsa"
        p.write_text(_rsa_text(tmp_path, A, d_exponents=d_exp))
        K, notes = read_matrix(p)
        assert (K != A).nnz == 0
        assert notes[0] == "read a 48 x 48 Harwell-Boeing RSA matrix (224 stored entries)"


def test_duplicate_entries_summed(tmp_path):
    """Duplicate coordinate entries are summed as in finite element assembly (common practice)."""
    p = tmp_path / "dup.mtx"
    p.write_text(BANNER_SYM + "2 2 4\n1 1 1.5\n1 1 2.5\n2 1 -1\n2 2 3\n")
    K, notes = read_matrix(p)
    np.testing.assert_array_equal(K.toarray(), [[4.0, -1.0], [-1.0, 3.0]])
    assert any(s.startswith("1 duplicate entries") for s in notes)


def test_crlf_case_and_upper_triangle_in_symmetric_file(tmp_path):
    """Banner words are case-insensitive; a symmetric file may store its triangle above the diagonal."""
    p = tmp_path / "crlf.mtx"
    p.write_bytes(b"%%MatrixMarket MATRIX Coordinate REAL Symmetric\r\n% c\r\n2 2 3\r\n1 1 2\r\n1 2 -1\r\n2 2 2\r\n")
    K, _ = read_matrix(p)
    np.testing.assert_array_equal(K.toarray(), [[2.0, -1.0], [-1.0, 2.0]])


# --------------------------------------------------------------------------- #
# Bad input: one InputError naming the file
# --------------------------------------------------------------------------- #

BAD_MATRIX_TEXT = {
    "empty": ("", "file is empty"),
    "blank": ("\n  \n", "file is empty"),
    "not_matrix_market": ("hello world\n1 2 3\n", "not a Matrix Market, Harwell-Boeing or triplet"),
    "banner_words": ("%%MatrixMarket matrix coordinate real\n2 2 1\n1 1 1\n", "line 1: the Matrix Market banner needs 5 words"),
    "vector_object": ("%%MatrixMarket vector coordinate real general\n2\n1 1\n", "object 'vector'"),
    "bad_format": ("%%MatrixMarket matrix sparse real general\n2 2 1\n1 1 1\n", "format 'sparse'"),
    "not_square": (BANNER_GEN + "3 2 1\n2 1 1\n", "matrix is 3 x 2; a stiffness matrix must be square"),
    "complex": ("%%MatrixMarket matrix coordinate complex symmetric\n1 1 1\n1 1 1 0\n", "complex values"),
    "pattern": ("%%MatrixMarket matrix coordinate pattern symmetric\n1 1 1\n1 1\n", "pattern-only"),
    "skew": ("%%MatrixMarket matrix coordinate real skew-symmetric\n2 2 1\n2 1 1\n", "skew-symmetric"),
    "hermitian": ("%%MatrixMarket matrix coordinate complex hermitian\n1 1 1\n1 1 1 0\n", "complex values"),
    "nan_inf": (BANNER_SYM + "3 3 3\n1 1 nan\n2 2 2\n3 3 -inf\n",
                "2 entries are NaN or Inf (first at row 1, column 1; row 3, column 3)"),
    "row_out_of_range": (BANNER_SYM + "3 3 2\n1 1 1\n4 3 1\n", "line 4: row index out of range"),
    "column_out_of_range": (BANNER_GEN + "3 3 2\n1 1 1\n3 7 1\n", "line 4: column index out of range"),
    "zero_index": (BANNER_GEN + "3 3 1\n0 1 1\n", "line 3: row index out of range"),
    "fewer_entries": (BANNER_SYM + "3 3 5\n1 1 1\n2 2 2\n3 3 3\n",
                      "fewer entries than the size line says: the file ends 2 entries short"),
    "more_entries": (BANNER_SYM + "2 2 1\n1 1 1\n2 2 2\n", "line 4: more entries than the size line announces"),
    "non_numeric_value": (BANNER_SYM + "2 2 2\n1 1 1\n2 2 two\n", "line 4: value is not a number"),
    "non_integer_index": (BANNER_SYM + "2 2 1\n1.5 1 1\n", "line 3: expected an integer"),
    "integer_overflow": ("%%MatrixMarket matrix coordinate integer general\n1 1 1\n1 1 99999999999999999999999\n",
                         "line 3:"),
    "both_triangles": (BANNER_SYM + "2 2 3\n1 1 2\n2 1 -1\n1 2 -1\n", "stores both (2, 1) and (1, 2)"),
    "nul_byte": (BANNER_GEN + "2 2 1\n1 1 1\x00\n", "NUL byte"),
    "garbled_size": (BANNER_SYM + "300000000 300000000 1\n1 1 1\n", "size line announces order 300000000"),
    "dense_too_large": ("%%MatrixMarket matrix array real general\n90000 90000\n1\n", "dense (array) format"),
    "dense_short": ("%%MatrixMarket matrix array real general\n2 2\n1\n2\n3\n", "fewer entries than the size line says"),
    "size_line_short": (BANNER_SYM + "2 2\n1 1 1\n", "the size line must hold rows, columns"),
    "size_line_negative": (BANNER_SYM + "-2 -2 1\n1 1 1\n", "line 2: the size line must hold"),
    "order_zero": (BANNER_SYM + "0 0 0\n", "no rows"),
    "hb_complex": ("title".ljust(72) + "key\n" + "1".rjust(14) * 4 + "\nCSA" + " " * 11 + "1".rjust(14) * 3
                   + "0".rjust(14) + "\n(1I1) (1I1) (1E9.1)\n", "line 3: the file holds complex values"),
    "hb_pattern": ("title".ljust(72) + "key\n" + "1".rjust(14) * 4 + "\nPSA" + " " * 11 + "1".rjust(14) * 3
                   + "0".rjust(14) + "\n(1I1) (1I1)\n", "pattern-only"),
    "hb_elemental": ("title".ljust(72) + "key\n" + "1".rjust(14) * 4 + "\nRSE" + " " * 11 + "1".rjust(14) * 3
                     + "1".rjust(14) + "\n(1I1) (1I1) (1E9.1)\n", "elemental"),
    "hb_rectangular": ("title".ljust(72) + "key\n" + "1".rjust(14) * 4 + "\nRRA" + " " * 11 + "2".rjust(14)
                       + "1".rjust(14) * 2 + "0".rjust(14) + "\n(1I1) (1I1) (1E9.1)\n", "must be square"),
}


@pytest.mark.parametrize("case", sorted(BAD_MATRIX_TEXT))
def test_bad_matrix_raises_input_error_naming_file(tmp_path, case):
    """Each malformed file gives one InputError line with the file name and the problem."""
    text, expected = BAD_MATRIX_TEXT[case]
    p = tmp_path / f"{case}.mtx"
    p.write_bytes(text.encode("latin-1"))
    before = sha256(p)
    with pytest.raises(InputError) as info:
        read_matrix(p)
    message = str(info.value)
    assert info.value.path == str(p)
    assert message.startswith(f"{p}: ")
    assert "\n" not in message
    assert expected in message
    assert sha256(p) == before


@pytest.mark.parametrize("tail", [b"12 6 -2e", b"12 6 -2e+", b"12 6 1.0\x01", b"1 1 1\x00"])
def test_inputs_that_crash_unguarded_scipy_reader(tmp_path, tail):
    """scipy 1.17.1's Matrix Market reader (fast_matrix_market) segfaults when these
    tails end the data (observed here, in a subprocess); through read_matrix they
    give a matrix or an InputError. The test fails by crashing pytest if unguarded."""
    p = tmp_path / "tail.mtx"
    p.write_bytes(b"%%MatrixMarket matrix coordinate real general\n48 48 1\n" + tail)
    try:
        K, _ = read_matrix(p)
    except InputError as exc:
        assert exc.path == str(p)
    else:
        assert K.shape == (48, 48)


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(InputError, match="file not found") as info:
        read_matrix(tmp_path / "nowhere.mtx")
    assert info.value.path == str(tmp_path / "nowhere.mtx")
    with pytest.raises(InputError, match="is a directory"):
        read_matrix(tmp_path)


def _bcsstk01_bytes() -> bytes:
    return reference_matrix_path("bcsstk01").read_bytes()


@pytest.mark.parametrize("kind", ["gzip", "bzip2"])
def test_truncated_compressed_file(tmp_path, kind):
    """A compressed file cut in half is reported as truncated or corrupt, not as a parse error."""
    blob = gzip.compress(_bcsstk01_bytes()) if kind == "gzip" else bz2.compress(_bcsstk01_bytes())
    p = tmp_path / ("cut.mtx.gz" if kind == "gzip" else "cut.mtx.bz2")
    p.write_bytes(blob[: len(blob) // 2])
    with pytest.raises(InputError, match=f"truncated or corrupt {kind} data") as info:
        read_matrix(p)
    assert info.value.path == str(p)


def test_corrupt_gzip_checksum(tmp_path):
    """Bytes changed inside the deflate stream: CRC or data error, reported as corrupt gzip."""
    blob = bytearray(gzip.compress(_bcsstk01_bytes()))
    blob[len(blob) // 2: len(blob) // 2 + 8] = b"garbage!"
    p = tmp_path / "corrupt.mtx.gz"
    p.write_bytes(bytes(blob))
    with pytest.raises(InputError, match="truncated or corrupt gzip data"):
        read_matrix(p)


def test_harwell_boeing_truncated_and_garbled(tmp_path):
    """RSA files cut short or with a garbled number are refused with the file named."""
    A = sp.csr_array(scipy.io.mmread(reference_matrix_path("bcsstk01")))
    lines = _rsa_text(tmp_path, A).splitlines()
    cut = tmp_path / "cut.rsa"
    cut.write_text("\n".join(lines[:-5]) + "\n")
    with pytest.raises(InputError, match="cut short") as info:
        read_matrix(cut)
    assert info.value.path == str(cut)
    lines[10] = lines[10][:5] + "xx" + lines[10][7:]
    garbled = tmp_path / "garbled.rsa"
    garbled.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="non-numeric data"):
        read_matrix(garbled)


def test_harwell_boeing_index_out_of_range(tmp_path):
    """A row index beyond the order announced on line 3 is refused."""
    p = tmp_path / "chain.rua"
    scipy.io.hb_write(p, sp.csc_array(np.array([[2.0, -1.0], [-1.0, 2.0]])))
    lines = p.read_text().splitlines()
    assert lines[5].split() == ["1", "2", "1", "2"]  # row indices, scipy's writer layout
    lines[5] = lines[5][:-1] + "9"
    bad = tmp_path / "bad.rua"
    bad.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="row index out of range") as info:
        read_matrix(bad)
    assert info.value.path == str(bad)


# --------------------------------------------------------------------------- #
# Vectors
# --------------------------------------------------------------------------- #


def test_read_vector_formats(tmp_path):
    """Matrix Market array and coordinate n x 1 (absent entries are zero) and one-column CSV."""
    f = np.array([0.0, -1.5, 2e3])
    scipy.io.mmwrite(tmp_path / "f_array.mtx", f.reshape(-1, 1))
    np.testing.assert_array_equal(read_vector(tmp_path / "f_array.mtx", 3, "load"), f)
    scipy.io.mmwrite(tmp_path / "f_coo.mtx", sp.coo_array(f.reshape(-1, 1)))
    assert scipy.io.mminfo(tmp_path / "f_coo.mtx")[3] == "coordinate"
    np.testing.assert_array_equal(read_vector(tmp_path / "f_coo.mtx", 3, "load"), f)
    (tmp_path / "f.csv").write_text("load\n0\n-1.5\n\n2e3\n")
    np.testing.assert_array_equal(read_vector(tmp_path / "f.csv", 3, "load"), f)
    (tmp_path / "g.csv").write_text("# forces in N\n0\n-1.5\n2000\n")
    np.testing.assert_array_equal(read_vector(tmp_path / "g.csv", 3, "load"), f)


@pytest.mark.parametrize("text, expected", [
    ("1\n2\n", "the solution vector has 2 values but the matrix has 3 rows"),
    ("u\n1\n2\nabc\n", "line 4: value 'abc' is not a number"),
    ("1\n2,3\n4\n", "line 2: expected one value per line"),
    ("1\nnan\n3\n", "NaN or Inf values (first at rows 2)"),
    ("", "file is empty"),
    ("%%MatrixMarket matrix array real general\n3 2\n1\n2\n3\n4\n5\n6\n", "it must be 3 x 1"),
])
def test_read_vector_bad(tmp_path, text, expected):
    p = tmp_path / "u.csv"
    p.write_text(text)
    with pytest.raises(InputError) as info:
        read_vector(p, 3, "solution")
    assert info.value.path == str(p)
    assert expected in str(info.value)


def test_size_line_claiming_more_entries_than_the_file_holds(tmp_path):
    """A size line claiming 10^12 entries in a file of a few lines: one line saying so,
    not a failed allocation (a Matrix Market entry line takes at least 6 bytes)."""
    from conditioning.errors import InputError
    from conditioning.io.matrix_formats import read_matrix

    path = tmp_path / "claims.mtx"
    path.write_text("%%MatrixMarket matrix coordinate real general\n1000000 1000000 1000000000000\n"
                    "1 1 1.0\n2 2 1.0\n3 3 1.0\n")
    with pytest.raises(InputError, match="claims 1,000,000,000,000 entries"):
        read_matrix(str(path))
