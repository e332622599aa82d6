"""Reading stiffness matrices and vectors from Matrix Market, Harwell-Boeing and CSV.

The Matrix Market parsing is scipy's (:func:`scipy.io.mmread`,
:func:`scipy.io.mminfo`); Harwell-Boeing files are read field by field from
the header's Fortran formats (:mod:`conditioning.io.harwell_boeing`). This
module opens the file, checks that what was
read can be a stiffness matrix, turns every failure into an
:class:`~conditioning.errors.InputError` naming the file and the line, and
brings the matrix to the form every stage expects: ``float64``, full
symmetric storage, no explicitly stored zeros.

A plain triplet list (one ``i j value`` entry a line, separated by commas,
semicolons or white space, an optional header line, ``#`` or ``%`` comments),
as many programs export a stiffness matrix, is read too: 0-based when an
index 0 occurs, else 1-based, and the notes say which.

What the readers did to the data (mirroring a stored triangle, summing
duplicate entries, dropping stored zeros, converting integers) is returned
as plain-language notes for the report.

References
----------
.. [1] R. F. Boisvert, R. Pozo and K. A. Remington (1996), "The Matrix Market
       Exchange Formats: Initial Design", NIST Interagency Report 5935.
       (from memory)
.. [2] I. S. Duff, R. G. Grimes and J. G. Lewis (1992), "Users' Guide for the
       Harwell-Boeing Sparse Matrix Collection (Release I)", Technical Report
       TR/PA/92/86, CERFACS. (from memory)
"""

from __future__ import annotations

import bz2
import csv
import gzip
import io
import logging
import os
import re
import warnings
import zlib
from typing import Literal, Optional, Union

from pathlib import Path

import numpy as np
import scipy.io
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.errors import InputError
from conditioning.results import OneTriangleExport

logger = logging.getLogger(__name__)

PathLike = Union[str, "os.PathLike[str]"]
Stored = Literal["triangle", "general"]

#: File name endings read as Harwell-Boeing when the content does not decide.
HARWELL_BOEING_SUFFIXES = (".rsa", ".rua", ".rse", ".hb", ".rb", ".psa", ".pua", ".csa", ".cua")

_GZIP_MAGIC = b"\x1f\x8b"
_BZIP2_MAGIC = b"BZh"
_SNIFF_BYTES = 1 << 16
#: Largest order read from the dense (array) Matrix Market format.
_MAX_DENSE_ORDER = 20_000
#: A coordinate file may announce at most this many empty rows per stored entry
#: once the order exceeds ``_MAX_SPARSE_ORDER_FREE``: guards against garbled size lines.
_MAX_ROWS_PER_ENTRY = 10
_MAX_SPARSE_ORDER_FREE = 1_000_000
_FIRST_SHOWN = 3
#: A general matrix is read as one triangle with stray entries when the other
#: triangle holds at least one and at most this share of the off-diagonal
#: entries the first one holds (the project's own choice: 1 stray per 20
#: entries; a matrix stored in full has equal counts, share 1).
STRAY_SHARE = 0.05


# --------------------------------------------------------------------------- #
# Public functions
# --------------------------------------------------------------------------- #


def read_matrix(path: PathLike) -> tuple[sp.csr_array, list[str]]:
    """Read a stiffness matrix file into full symmetric CSR storage.

    Parameters
    ----------
    path : str or path-like
        Matrix Market file (``coordinate`` or ``array``; ``real``, ``double``
        or ``integer``; ``general`` or ``symmetric``), plain, gzip- or
        bzip2-compressed (recognised by content, whatever the name), or a
        Harwell-Boeing file (``RSA``, ``RUA``, integer variants).

    Returns
    -------
    K : (n, n) scipy.sparse.csr_array of float64
        The matrix with both triangles stored, duplicates summed, explicitly
        stored zeros removed and indices sorted. Units are the file's own.
    notes : list of str
        One sentence per thing the reader did to the data.

    Raises
    ------
    InputError
        The file is missing or empty, is neither Matrix Market nor
        Harwell-Boeing, is cut short or corrupt, is not square, holds complex
        or pattern-only values, non-finite values, indices out of range, is
        labelled skew-symmetric, or is labelled symmetric while storing both
        triangles.

    Notes
    -----
    A ``general`` file whose off-diagonal entries all lie in one triangle is
    taken to be the triangle of a symmetric matrix and mirrored; a note says
    so. One that holds a triangle plus a few entries of the other is returned
    as stored; :func:`mirror_one_triangle_export` recognises and mirrors it
    (:func:`conditioning.load_model` calls it). An asymmetric matrix is not
    refused here: the structure stage measures and reports the asymmetry.

    Examples
    --------
    >>> import io, tempfile, os
    >>> text = "%%MatrixMarket matrix coordinate real symmetric\\n2 2 3\\n1 1 2\\n2 1 -1\\n2 2 2\\n"
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = os.path.join(d, "k.mtx")
    ...     _ = open(p, "w").write(text)
    ...     K, notes = read_matrix(p)
    >>> K.toarray().tolist()
    [[2.0, -1.0], [-1.0, 2.0]]
    """
    name = str(path)
    head = _read_head(name)
    if _is_matrix_market(head):
        rows, cols, vals, n, stored, notes = _read_matrix_market(name, head)
    elif _looks_like_harwell_boeing(name, head):
        from conditioning.io.harwell_boeing import read_harwell_boeing
        rows, cols, vals, n, stored, notes = read_harwell_boeing(name, _read_all_bytes(name),
                                                                 _require_plausible_size)
    elif _looks_like_triplets(head):
        rows, cols, vals, n, stored, notes = _read_triplets(name)
    else:
        raise InputError(name, "not a Matrix Market, Harwell-Boeing or triplet (i j value) file; "
                               + _what_it_looks_like(head))
    if n == 0:
        raise InputError(name, "matrix has no rows (order 0)")
    K = assemble_symmetric(rows, cols, vals, n, stored=stored, source=name, notes=notes)
    logger.info("read %s: n = %d, %d stored entries (full storage)", name, n, K.nnz)
    return K, notes


def read_vector(path: PathLike, n: int, what: str) -> NDArray[np.float64]:
    """Read a load or displacement vector of length ``n``.

    Parameters
    ----------
    path : str or path-like
        Matrix Market file (``array``, or ``coordinate`` n x 1 / 1 x n, plain
        or compressed) or a CSV file with one value per line and an optional
        header line. Blank lines and lines starting with ``#`` are skipped.
    n : int
        Number of matrix rows the vector must match.
    what : str
        Name used in messages (``"load"``, ``"solution"``).

    Returns
    -------
    (n,) ndarray of float64
        The vector, in the model's units (force for a load, length or
        rotation for a displacement).

    Raises
    ------
    InputError
        Missing or empty file, a length other than ``n``, a non-numeric cell
        (with its line number) or non-finite values.
    """
    name = str(path)
    head = _read_head(name)
    if _is_matrix_market(head):
        vec = _read_matrix_market_vector(name, head, n, what)
    else:
        vec = _read_csv_vector(name, n, what)
    _require_finite_vector(name, vec, what)
    return vec


_COMMENT_LINE = re.compile(r"^[ \t]*#[^\r\n]*", re.MULTILINE)


def read_csv_rows(path: PathLike) -> list[tuple[int, list[str]]]:
    """Rows of a comma-separated text file with their 1-based line numbers.

    Blank lines and lines whose first cell starts with ``#`` are skipped and
    cells are stripped of surrounding blanks.

    Returns
    -------
    list of (int, list of str)
        ``(line_number, cells)`` for every data or header line.

    Raises
    ------
    InputError
        Missing, empty or non-text file.
    """
    name = str(path)
    data = _read_all_bytes(name)
    nul = data.find(b"\x00")
    if nul >= 0:
        raise InputError(name, f"contains a NUL byte at byte {nul + 1}: binary data, not a CSV text file")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(name, f"not UTF-8 text (undecodable byte at position {exc.start + 1})") from None
    rows: list[tuple[int, list[str]]] = []
    # Comment lines are skipped before the csv module reads them: its field size limit
    # (131,072 characters) would otherwise refuse a long comment. Line numbers are kept.
    text = _COMMENT_LINE.sub("", text)
    try:
        for line_no, cells in enumerate(csv.reader(io.StringIO(text)), start=1):
            cells = [c.strip() for c in cells]
            if not any(cells) or cells[0].startswith("#"):
                continue
            rows.append((line_no, cells))
    except csv.Error as exc:
        raise InputError(name, f"cannot be read as CSV: {exc}") from None
    if not rows:
        raise InputError(name, "file is empty (no data lines)")
    return rows


def assemble_symmetric(rows, cols, vals, n: int, *, stored: Stored, source: str,
                       notes: list[str]) -> sp.csr_array:
    """Build full symmetric CSR storage from (row, col, value) triplets.

    Parameters
    ----------
    rows, cols : (m,) integer arrays
        0-based indices, all in ``[0, n)``.
    vals : (m,) real array
    n : int
        Matrix order.
    stored : {"triangle", "general"}
        ``"triangle"``: the triplets are one triangle of a symmetric matrix
        (Matrix Market ``symmetric`` or Harwell-Boeing ``RSA``); entries may
        lie on either side of the diagonal but no pair may be stored twice.
        ``"general"``: every entry is stored; when all off-diagonal entries
        lie in one triangle the matrix is mirrored.
    source : str
        File name used in errors.
    notes : list of str
        Appended to in place.

    Returns
    -------
    (n, n) scipy.sparse.csr_array of float64
        Duplicates summed, explicit zeros removed, indices sorted.
    """
    rows = np.asarray(rows, dtype=np.int64)
    cols = np.asarray(cols, dtype=np.int64)
    vals = np.asarray(vals)
    if np.iscomplexobj(vals):
        raise InputError(source, "holds complex values; a stiffness matrix must be real")
    vals = vals.astype(np.float64, copy=False)
    _require_finite_entries(source, rows, cols, vals)
    off = rows != cols
    lower, upper = int(np.count_nonzero(rows > cols)), int(np.count_nonzero(rows < cols))
    if stored == "triangle":
        _require_single_triangle(source, rows[off], cols[off])
        mirror = True
    else:
        mirror = (lower == 0) != (upper == 0)
        if mirror:
            side = "lower" if lower else "upper"
            notes.append(f"the input is not labelled symmetric but stores only the {side} triangle "
                         f"({lower + upper} off-diagonal entries); mirrored to a symmetric matrix")
    if mirror:
        rows, cols, vals = (np.concatenate([rows, cols[off]]), np.concatenate([cols, rows[off]]),
                            np.concatenate([vals, vals[off]]))
    K = sp.coo_array((vals, (rows, cols)), shape=(n, n)).tocsr()
    duplicates = int(rows.size - K.nnz)
    if duplicates:
        notes.append(f"{duplicates} duplicate entries (same row and column) summed, "
                     "as finite element assembly does")
    zeros = int(K.nnz - np.count_nonzero(K.data))
    if zeros:
        K.eliminate_zeros()
        notes.append(f"{zeros} explicitly stored zero entries removed from the sparsity "
                     "structure (counted in full symmetric storage)")
    K.sort_indices()
    return K


def mirror_one_triangle_export(K: sp.csr_array, notes: list[str]
                               ) -> tuple[sp.csr_array, Optional[OneTriangleExport]]:
    """Mirror a matrix stored as one triangle plus a few stray entries of the other.

    Parameters
    ----------
    K : (n, n) scipy.sparse.csr_array of float64
        The matrix as stored (no explicit zeros), e.g. from :func:`read_matrix`.
    notes : list of str
        Appended to in place when the matrix is mirrored.

    Returns
    -------
    K : (n, n) scipy.sparse.csr_array of float64
        ``K`` itself when it is not of that shape; otherwise ``K`` with every
        off-diagonal entry whose mirror position is empty mirrored there.
        Pairs stored on both sides (a stray that repeats an entry of the
        triangle) are kept as stored, so a stray that disagrees with its
        mirror stays visible as asymmetry. Units are K's.
    export : OneTriangleExport or None
        Which triangle, how many entries, and where the strays are; None when
        ``K`` is not of that shape.

    Notes
    -----
    The shape: one triangle holds M off-diagonal entries, the other m with
    ``1 <= m <= STRAY_SHARE * M``. A symmetric matrix stored in full has
    m = M; a pure triangle (m = 0) is already mirrored by the reader.

    Examples
    --------
    Lower triangle of tridiag(-1, 2, -1), n = 30, plus one stray K[0, 1]:

    >>> import numpy as np, scipy.sparse as sp
    >>> L = sp.diags([-np.ones(29), 2 * np.ones(30)], [-1, 0]).tolil()
    >>> L[0, 1] = -1.0
    >>> K, export = mirror_one_triangle_export(sp.csr_array(L), [])
    >>> export.triangle, export.triangle_entries, export.stray_rows.tolist(), export.stray_paired.tolist()
    ('lower', 29, [0], [True])
    >>> float(abs(K - K.T).max())
    0.0
    """
    K = sp.csr_array(K)
    n = K.shape[0]
    coo = K.tocoo()
    off = coo.row != coo.col
    rows, cols, vals = coo.row[off].astype(np.int64), coo.col[off].astype(np.int64), coo.data[off]
    below = rows > cols
    lower, upper = int(np.count_nonzero(below)), int(rows.size - np.count_nonzero(below))
    many, few = max(lower, upper), min(lower, upper)
    if few == 0 or few > STRAY_SHARE * many:
        return K, None
    triangle = "lower" if lower > upper else "upper"
    stray = ~below if triangle == "lower" else below
    paired = np.isin(cols * n + rows, rows * n + cols)
    mirror = sp.coo_array((vals[~paired], (cols[~paired], rows[~paired])), shape=K.shape)
    mirrored = sp.csr_array(K + mirror.tocsr())
    mirrored.sort_indices()
    other = "upper" if triangle == "lower" else "lower"
    notes.append(f"the input is not labelled symmetric and stores the {triangle} triangle "
                 f"({many} off-diagonal entries) plus {few} stray {'entry' if few == 1 else 'entries'} "
                 f"in the {other} triangle; read as a one-triangle export: unpaired entries mirrored, "
                 "entries stored on both sides kept as stored")
    export = OneTriangleExport(
        triangle=triangle, triangle_entries=many,
        stray_rows=rows[stray].astype(np.intp), stray_cols=cols[stray].astype(np.intp),
        stray_paired=paired[stray])
    logger.info("one-triangle export: %s triangle, %d stray entries", triangle, few)
    return mirrored, export


# --------------------------------------------------------------------------- #
# Opening files
# --------------------------------------------------------------------------- #


class _GuardedStream(io.RawIOBase):
    """Read-only byte stream handed to scipy's Matrix Market reader.

    scipy 1.17's reader (fast_matrix_market) crashes the interpreter on a NUL
    byte after a number and on a number cut off at the very end of the data
    (observed here with ``1 1 1\\x00`` and ``12 6 -2e`` at end of file), so
    this stream replaces NUL bytes by ``?`` (remembering the first offset),
    ends the data with a newline, and records decompression errors instead of
    raising them through the C++ reader. It may also serve a rewritten first
    line (the banner) in place of the file's own.
    """

    def __init__(self, raw, first_line: bytes | None = None):
        super().__init__()
        self._raw = raw
        self._skip_first_line = first_line is not None
        self._pending = first_line or b""
        self._last = b"\n"
        self._ended = False
        self.offset = 0
        self.nul_offset: int | None = None
        self.error: BaseException | None = None

    def readable(self) -> bool:
        return True

    def _pull(self, size: int) -> bytes:
        try:
            if self._skip_first_line:
                # drop the file's own banner (and any blank lines or BOM before it)
                self._skip_first_line = False
                original = self._raw.readline()
                while original and not original.strip(b"\xef\xbb\xbf \t\r\n"):
                    self.offset += len(original)
                    original = self._raw.readline()
                self.offset += len(original)
            data = self._raw.read(size)
        except (OSError, EOFError, zlib.error, ValueError) as exc:
            self.error = exc
            data = b""
        if data:
            if self.nul_offset is None and b"\x00" in data:
                self.nul_offset = self.offset + data.index(b"\x00")
            self.offset += len(data)
            return data.replace(b"\x00", b"?")
        if not self._ended:
            self._ended = True
            if not self._last.endswith(b"\n"):
                return b"\n"
        return b""

    def readinto(self, buf) -> int:
        if not self._pending:
            self._pending = self._pull(max(len(buf), 1 << 16))
        k = min(len(buf), len(self._pending))
        buf[:k] = self._pending[:k]
        if k:
            self._last = self._pending[k - 1:k]
        self._pending = self._pending[k:]
        return k


def _open_binary(name: str):
    """Open a file for reading, decompressing gzip or bzip2 by content."""
    try:
        with open(name, "rb") as probe:
            magic = probe.read(3)
        if magic.startswith(_GZIP_MAGIC):
            return gzip.open(name, "rb")
        if magic.startswith(_BZIP2_MAGIC):
            return bz2.open(name, "rb")
        return open(name, "rb")
    except FileNotFoundError:
        raise InputError(name, "file not found") from None
    except IsADirectoryError:
        raise InputError(name, "is a directory, not a file") from None
    except OSError as exc:
        raise InputError(name, f"cannot be opened: {exc.strerror or exc}") from None


def _compression(name: str) -> str:
    with _open_binary(name) as fh:
        kind = type(fh).__name__
    return {"GzipFile": "gzip", "BZ2File": "bzip2"}.get(kind, "")


def _read_head(name: str) -> bytes:
    """The first bytes of the (decompressed) file; InputError when unreadable or empty."""
    with _open_binary(name) as fh:
        try:
            head = fh.read(_SNIFF_BYTES)
        except (OSError, EOFError, zlib.error, ValueError) as exc:
            raise _corrupt_compressed(name, exc) from None
    if not head.strip():
        raise InputError(name, "file is empty")
    return head


def _read_all_bytes(name: str) -> bytes:
    """The whole (decompressed) file, read in blocks and refused once beyond :func:`text_read_cap`."""
    blocks = [block for block in _blocks(name, text_read_cap()) if block]
    data = b"".join(blocks)
    del blocks
    if not data.strip():
        raise InputError(name, "file is empty")
    return data


#: Bytes read at a time from an input file.
_READ_BLOCK = 1 << 22
#: Memory the CSV readers (DOF map, coordinates, restraints, load columns) may take per byte
#: of (decompressed) text: they hold every line as Python strings, measured here at about
#: 35 bytes per byte of text (1 million lines, 20.8 MB); the project's choice: 40.
TEXT_BYTES_PER_BYTE = 40
#: The same for the triplet reader, which turns each block of lines into arrays before
#: reading the next: measured 9.2 bytes per byte of text at its peak, assembly included
#: (1 million entries, 20.8 MB); the project's choice: 12.
TRIPLET_BYTES_PER_BYTE = 12
#: Memory reading one Matrix Market coordinate entry takes at its peak, in bytes: measured
#: about 50 for 1 million entries of a general 1000 x 1000 matrix (scipy's arrays, the
#: assembly into CSR); a symmetric file mirrors every entry, so twice that is allowed.
MM_BYTES_PER_ENTRY = 100


def read_memory_limit() -> int:
    """Bytes the readers may use: the memory limit of the run (``CONDITIONING_MEMORY_LIMIT``, else
    70% of the available memory; :func:`conditioning.engine.memory.memory_limit`)."""
    from conditioning.engine.memory import memory_limit

    return memory_limit()


def text_read_cap(bytes_per_byte: int = TEXT_BYTES_PER_BYTE) -> int:
    """Largest (decompressed) text file read: the memory limit over ``bytes_per_byte``
    (at least 1 MiB)."""
    return max(read_memory_limit() // bytes_per_byte, 1 << 20)


def require_memory_for_entries(name: str, entries: int) -> None:
    """Refuse, before reading, a Matrix Market file whose size line announces more entries than
    the memory limit can hold (:data:`MM_BYTES_PER_ENTRY` each); the reader itself refuses a file
    holding more entries than its size line announces."""
    need, limit = int(entries) * MM_BYTES_PER_ENTRY, read_memory_limit()
    if need > limit:
        raise InputError(name, f"the size line announces {int(entries):,} entries: reading them needs about "
                               f"{need / 2**30:.3g} GiB, more than the memory limit ({limit / 2**30:.3g} GiB; "
                               "CONDITIONING_MEMORY_LIMIT, else 70% of the available memory)")


def _too_large(name: str, cap: int) -> InputError:
    return InputError(name, f"holds more than {cap / 2**20:,.0f} MiB of text (decompressed): reading it would "
                            f"need more than the memory limit ({read_memory_limit() / 2**30:.3g} GiB; "
                            "CONDITIONING_MEMORY_LIMIT, else 70% of the available memory)")


def _text_chunks(name: str):
    """``(number of the first line, text)`` of successive blocks of whole lines of a text file
    (decompressed), UTF-8; refused once beyond :func:`text_read_cap` or when not UTF-8."""
    line_no, offset, carry = 1, 0, b""
    for block in _blocks(name, text_read_cap(TRIPLET_BYTES_PER_BYTE)):
        data = carry + block
        if block:
            cut = data.rfind(b"\n") + 1
            if cut == 0:   # no line ends in this block yet: read on
                carry = data
                continue
            chunk, carry = data[:cut], data[cut:]
        else:
            chunk, carry = data, b""
        if chunk:
            try:
                text = chunk.decode("utf-8")
            except UnicodeDecodeError as exc:
                raise InputError(name, f"not UTF-8 text (undecodable byte at position "
                                       f"{offset + exc.start + 1})") from None
            yield line_no, text
            line_no += chunk.count(b"\n")
            offset += len(chunk)


def _blocks(name: str, cap: int):
    """Successive blocks of the (decompressed) file, the last one empty; refused once
    more than ``cap`` bytes arrive (one line naming the file)."""
    total = 0
    with _open_binary(name) as fh:
        while True:
            try:
                block = fh.read(_READ_BLOCK)
            except (OSError, EOFError, zlib.error, ValueError) as exc:
                raise _corrupt_compressed(name, exc) from None
            total += len(block)
            if total > cap:
                raise _too_large(name, cap)
            yield block
            if not block:
                return


def _corrupt_compressed(name: str, exc: BaseException) -> InputError:
    kind = _compression(name) or "compressed"
    return InputError(name, f"truncated or corrupt {kind} data ({type(exc).__name__}: {exc})")


# --------------------------------------------------------------------------- #
# Matrix Market
# --------------------------------------------------------------------------- #


def _is_matrix_market(head: bytes) -> bool:
    return head.lstrip(b"\xef\xbb\xbf \t\r\n").lower().startswith(b"%%matrixmarket")


def _banner(name: str, head: bytes) -> tuple[str, str, str, bytes]:
    """Check the banner words; return (format, field, symmetry, canonical banner line)."""
    line = head.lstrip(b"\xef\xbb\xbf \t\r\n").split(b"\n", 1)[0].decode("latin-1")
    words = line.lower().split()
    if len(words) != 5:
        raise InputError(name, f"line 1: the Matrix Market banner needs 5 words "
                               f"('%%MatrixMarket matrix coordinate real symmetric'), found {line.strip()!r}")
    _, obj, fmt, field, symmetry = words
    if obj != "matrix":
        raise InputError(name, f"line 1: object {obj!r} is not supported; a stiffness matrix file says 'matrix'")
    if fmt not in ("coordinate", "array"):
        raise InputError(name, f"line 1: format {fmt!r} is neither 'coordinate' nor 'array'")
    if field in ("complex", "hermitian"):
        raise InputError(name, "line 1: the file holds complex values; a stiffness matrix must be real")
    if field == "pattern":
        raise InputError(name, "line 1: the file is pattern-only (positions without values); "
                               "a stiffness matrix needs its values")
    if field not in ("real", "double", "integer"):
        raise InputError(name, f"line 1: field {field!r} is not 'real' or 'integer'")
    if symmetry == "skew-symmetric":
        raise InputError(name, "line 1: the matrix is labelled skew-symmetric; a stiffness matrix is symmetric")
    if symmetry == "hermitian":
        raise InputError(name, "line 1: the matrix is labelled hermitian; a stiffness matrix is real symmetric")
    if symmetry not in ("general", "symmetric"):
        raise InputError(name, f"line 1: symmetry {symmetry!r} is not 'general' or 'symmetric'")
    field = "real" if field == "double" else field
    # A symmetric coordinate file is read as general so the stored triangle
    # stays visible (pairs stored twice must be caught, not silently doubled).
    read_as = "general" if fmt == "coordinate" else symmetry
    canonical = f"%%MatrixMarket matrix {fmt} {field} {read_as}\n".encode()
    return fmt, field, symmetry, canonical


def _scipy_mm(name: str, canonical: bytes, reader):
    """Run a scipy Matrix Market reader on the guarded stream; wrap every failure."""
    raw = _open_binary(name)
    stream = _GuardedStream(raw, canonical)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            result = reader(io.BufferedReader(stream, buffer_size=1 << 16))
        failure = None
    except Exception as exc:  # noqa: BLE001 - every scipy failure becomes an InputError
        result, failure = None, exc
    finally:
        raw.close()
    if stream.error is not None:
        raise _corrupt_compressed(name, stream.error)
    if stream.nul_offset is not None:
        raise InputError(name, f"contains a NUL byte at byte {stream.nul_offset + 1} of the "
                               "(decompressed) data: binary data, not a text Matrix Market file")
    if failure is not None:
        raise _translate_mm_error(name, failure)
    return result


def _translate_mm_error(name: str, exc: Exception) -> InputError:
    text = " ".join(str(exc).split()) or type(exc).__name__
    m = re.match(r"Line (\d+): (.*)", text)
    where, msg = (f"line {m.group(1)}: ", m.group(2)) if m else ("", text)
    m_trunc = re.match(r"Truncated file\. Expected another (\d+) (?:lines|values)", msg)
    if m_trunc:
        missing = int(m_trunc.group(1))
        return InputError(name, f"{where}fewer entries than the size line says: the file ends "
                                f"{missing} {'entry' if missing == 1 else 'entries'} short (cut short?)")
    if "out of bounds" in msg:
        which = "row" if "Row" in msg else "column" if "Column" in msg else "an"
        return InputError(name, f"{where}{which} index out of range (indices run from 1 to the size line's order)")
    if "Header dimension line" in msg or "can't be negative" in msg or (not where and "Invalid integer" in msg):
        return InputError(name, f"{where}the size line must hold rows, columns and (coordinate format) "
                                f"the number of entries, as non-negative integers ({msg})")
    if "Too many lines" in msg or "Too many values" in msg:
        return InputError(name, f"{where}more entries than the size line announces")
    if "Invalid floating-point" in msg:
        return InputError(name, f"{where}value is not a number")
    if "Invalid integer" in msg:
        return InputError(name, f"{where}expected an integer (index or size)")
    if "too big" in msg or isinstance(exc, MemoryError):
        return InputError(name, f"{where}matrix too large to hold in memory ({msg})")
    return InputError(name, f"{where}cannot be read as Matrix Market: {msg}")


def _mm_size(name: str, canonical: bytes) -> tuple[int, int, int]:
    info = _scipy_mm(name, canonical, scipy.io.mminfo)
    return int(info[0]), int(info[1]), int(info[2])


#: Fewest bytes one coordinate entry line can take ("1 1 1" and a newline).
MIN_ENTRY_BYTES = 6
#: A coordinate file may announce more entries than its matrix has positions (repeated
#: entries, summed) only below this many entries: room for small element-by-element
#: exports, far below what would strain memory (the project's choice).
MAX_REPEATS_FREE = 1_000_000


def _require_plausible_size(name: str, fmt: str, n: int, entries: int) -> None:
    if fmt == "array" and n > _MAX_DENSE_ORDER:
        raise InputError(name, f"dense (array) format of order {n} is too large to read "
                               f"(limit {_MAX_DENSE_ORDER}); write the matrix in coordinate format")
    if fmt == "coordinate" and n > _MAX_SPARSE_ORDER_FREE and n > _MAX_ROWS_PER_ENTRY * max(entries, 1):
        raise InputError(name, f"size line announces order {n} but only {entries} entries; "
                               "check the size line (rows columns entries)")
    if fmt == "coordinate" and entries > max(n * n, MAX_REPEATS_FREE):
        # An n x n matrix has n^2 positions: a file announcing more entries repeats
        # positions on average, which no assembled (or element-by-element) export of a
        # real model does; a compressed file of repeated lines could otherwise expand
        # to any size before the reader's own checks.
        raise InputError(name, f"the size line announces {entries:,} entries for a {n:,} x {n:,} matrix, "
                               f"more than its {n * n:,} positions: check the size line (rows columns entries)")
    if fmt == "coordinate" and not _compression(name):
        # Every entry line holds at least "i j v" and a newline: 6 bytes. A size
        # line claiming more entries than the file can hold is a broken header,
        # said as such rather than as a failed allocation.
        size = Path(name).stat().st_size
        if entries > size // MIN_ENTRY_BYTES:
            raise InputError(name, f"the size line claims {entries:,} entries, but the file ({size:,} bytes) "
                                   f"can hold at most {size // MIN_ENTRY_BYTES:,}: check the size line "
                                   "(rows columns entries)")


def _read_matrix_market(name: str, head: bytes):
    fmt, field, symmetry, canonical = _banner(name, head)
    nrows, ncols, entries = _mm_size(name, canonical)
    if nrows != ncols:
        raise InputError(name, f"matrix is {nrows} x {ncols}; a stiffness matrix must be square")
    n = nrows
    _require_plausible_size(name, fmt, n, entries)
    require_memory_for_entries(name, n * n if fmt == "array" else entries)
    data = _scipy_mm(name, canonical, lambda s: scipy.io.mmread(s, spmatrix=False))
    stored_count = f" ({entries} stored entries)" if fmt == "coordinate" else ""
    notes = [f"read a {n} x {n} Matrix Market {fmt} {field} {symmetry} matrix{stored_count}"
             + (f" ({_compression(name)}-compressed)" if _compression(name) else "")]
    if field == "integer":
        notes.append("integer values converted to float64")
    if fmt == "array":
        dense = np.asarray(data)
        if dense.shape != (n, n):
            raise InputError(name, f"array data has shape {dense.shape}, expected {n} x {n}")
        rows, cols = np.nonzero(dense)
        return rows, cols, dense[rows, cols], n, "general", notes
    coo = data
    stored: Stored = "triangle" if symmetry == "symmetric" else "general"
    return coo.row, coo.col, coo.data, n, stored, notes


def _read_matrix_market_vector(name: str, head: bytes, n: int, what: str) -> NDArray[np.float64]:
    fmt, field, _, canonical = _banner(name, head)
    nrows, ncols, entries = _mm_size(name, canonical)
    if (nrows, ncols) not in ((n, 1), (1, n)):
        raise InputError(name, f"the {what} vector is {nrows} x {ncols}; it must be {n} x 1 "
                               f"to match the matrix's {n} rows")
    require_memory_for_entries(name, n if fmt == "array" else entries)
    data = _scipy_mm(name, canonical, lambda s: scipy.io.mmread(s, spmatrix=False))
    if fmt == "array":
        vec = np.asarray(data, dtype=np.float64).ravel()
    else:
        vec = np.asarray(data.toarray(), dtype=np.float64).ravel()
    if np.iscomplexobj(vec):
        raise InputError(name, f"the {what} vector holds complex values")
    return vec


# --------------------------------------------------------------------------- #
# Harwell-Boeing
# --------------------------------------------------------------------------- #

_HB_TYPE = re.compile(r"^[RCPI][SUHZR][AE]$")


def _hb_lines(head: bytes) -> list[str]:
    return head.decode("latin-1").splitlines()[:5]


# --------------------------------------------------------------------------- #
# Plain triplet lists
# --------------------------------------------------------------------------- #

_SEPARATORS = re.compile(r"[,;\s]+")
_INTEGER = re.compile(r"[+-]?\d+$")
_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eEdD][+-]?\d+)?$")


def _data_lines(text: str, start: int = 1) -> list[tuple[int, list[str]]]:
    """``(line number, fields)`` of each line that is not blank or a comment (``start``: the first line's number)."""
    out = []
    for k, line in enumerate(text.split("\n"), start=start):
        stripped = line.strip()
        if not stripped or stripped[0] in "#%" or stripped.startswith("//"):
            continue
        out.append((k, [f for f in _SEPARATORS.split(stripped) if f]))
    return out


def _is_entry(fields: list[str]) -> bool:
    return (len(fields) == 3 and bool(_INTEGER.match(fields[0])) and bool(_INTEGER.match(fields[1]))
            and bool(_NUMBER.match(fields[2])))


def _is_header(fields: list[str]) -> bool:
    """A header such as ``row,col,value``: three words, none a number."""
    return len(fields) == 3 and not any(_NUMBER.match(f) for f in fields)


def _looks_like_triplets(head: bytes) -> bool:
    """True when at least half the first data lines (a header aside) are ``i j value``.

    Most, not all: a list with one mistyped line is still a list, and its
    reader then names that line.
    """
    if b"\0" in head:
        return False
    lines = _data_lines(head.decode("utf-8", errors="replace"))[:21]
    if lines and _is_header(lines[0][1]):
        lines = lines[1:]
    lines = lines[:-1] if len(lines) > 1 else lines   # the sniffed block may cut the last line
    entries = sum(_is_entry(f) for _, f in lines)
    return entries > 0 and 2 * entries >= len(lines)


def _read_triplets(name: str):
    """Triplets of a plain ``i j value`` list, 0-based, as the readers return them.

    Read in chunks of whole lines (:func:`_text_chunks`), each turned into
    arrays before the next is read, so that the Python objects alive at a time
    stay bounded whatever the file's size; the file's decompressed size is
    itself bounded by :func:`text_read_cap`.
    """
    row_parts, col_parts, val_parts = [], [], []
    first, count, header_seen = None, 0, None
    for start, text in _text_chunks(name):
        lines = _data_lines(text, start)
        if header_seen is None and lines:
            header_seen = _is_header(lines[0][1])
            lines = lines[1:] if header_seen else lines
        for i, (k, fields) in enumerate(lines, start=count):
            if not _is_entry(fields):
                raise InputError(name, f"line {k}: {' '.join(fields)!r} is not 'row column value' "
                                       "(two integer indices and a number)"
                                       + (", as the lines before it are" if i else ", as the lines after it are"))
        if not lines:
            continue
        if first is None:
            first = lines[0]
        table = np.array([f for _, f in lines])
        try:
            row_parts.append(table[:, 0].astype(np.int64))
            col_parts.append(table[:, 1].astype(np.int64))
        except OverflowError:
            raise InputError(name, "looks like a triplet list, but an index is too large for a matrix "
                                   f"(above {np.iinfo(np.int64).max:,}): check the indices") from None
        val_parts.append(np.char.replace(np.char.replace(table[:, 2], "D", "E"), "d", "e").astype(np.float64))
        count += len(lines)
        del table, lines
    if first is None:
        raise InputError(name, "holds a header but no entries")
    rows, cols, vals = np.concatenate(row_parts), np.concatenate(col_parts), np.concatenate(val_parts)
    del row_parts, col_parts, val_parts
    f0 = first[1]
    if f0[2].lstrip("+").isdigit() and int(f0[2]) == count - 1 and f0[0] == f0[1] and int(f0[0]) > 0 \
            and _indices_within(rows[1:], cols[1:], int(f0[0])):   # an MM size line: n n entries
        raise InputError(name, f"looks like a Matrix Market file without its banner line: line "
                               f"{first[0]} '{' '.join(f0)}' reads as a size line (rows, columns, "
                               "entries); add '%%MatrixMarket matrix coordinate real general' above it")
    low = int(min(rows.min(), cols.min()))
    if low < 0:
        raise InputError(name, f"looks like a triplet list, but an index is negative ({low})")
    base = 0 if low == 0 else 1
    rows, cols = rows - base, cols - base
    n = int(max(rows.max(), cols.max())) + 1
    if n > _MAX_SPARSE_ORDER_FREE and n > _MAX_ROWS_PER_ENTRY * count:
        raise InputError(name, f"read as a triplet list, its largest index makes the matrix of order {n:,} "
                               f"from only {count:,} entries: check the indices")
    notes = [f"read as a triplet list (row column value), {n} x {n} from {count} entries; "
             + ("0-based indices (an index 0 occurs)" if base == 0 else
                "1-based indices (no index 0 occurs" + (")" if low == 1 else
                                                        f"; the smallest is {low})"))]
    return rows, cols, vals, n, "general", notes


def _indices_within(rows, cols, n: int) -> bool:
    """True when every later entry's indices lie in 1..n: the first line can be a size line
    ``n n entries`` only then (``1 1 2`` over ``2 1 -1`` is an entry, not the size of a 1 x 1 matrix)."""
    return bool(rows.size == 0 or (rows.min() >= 1 and cols.min() >= 1 and rows.max() <= n and cols.max() <= n))


def _what_it_looks_like(head: bytes) -> str:
    """One phrase on what an unrecognised file seems to be, for the error."""
    if b"\0" in head:
        return "it holds binary data"
    lines = _data_lines(head.decode("utf-8", errors="replace"))[:20]
    if not lines:
        return "it holds no data lines"
    widths = {len(f) for _, f in lines[1:] or lines}
    numeric = all(_NUMBER.match(x) for _, f in lines[1:] or lines for x in f)
    if numeric and widths == {3}:
        return "it looks like a triplet list, but the indices are not all integers"
    if numeric and len(widths) == 1:
        w = widths.pop()
        return (f"it looks like a table of {w} numbers a line; a triplet list has 3 "
                "(row column value), a dense matrix needs a Matrix Market 'array' header")
    return f"line {lines[0][0]} starts {' '.join(lines[0][1])[:40]!r}"


def _looks_like_harwell_boeing(name: str, head: bytes) -> bool:
    lines = _hb_lines(head)
    if len(lines) >= 4 and _HB_TYPE.match(lines[2][:3].upper()):
        return True
    lowered = name.lower()
    for suffix in (".gz", ".bz2"):
        lowered = lowered.removesuffix(suffix)
    return lowered.endswith(HARWELL_BOEING_SUFFIXES)


# --------------------------------------------------------------------------- #
# Checks
# --------------------------------------------------------------------------- #


def _require_finite_entries(source: str, rows, cols, vals) -> None:
    bad = np.flatnonzero(~np.isfinite(vals))
    if bad.size:
        first = "; ".join(f"row {int(rows[k]) + 1}, column {int(cols[k]) + 1}" for k in bad[:_FIRST_SHOWN])
        raise InputError(source, f"{bad.size} {'entry is' if bad.size == 1 else 'entries are'} NaN or Inf (first at {first})")


def _require_single_triangle(source: str, rows, cols) -> None:
    """A symmetric-labelled file must not store both (i, j) and (j, i) (off-diagonal entries given)."""
    below = rows > cols
    if below.all() or not below.any():
        return  # the usual case: one triangle only
    n = int(max(rows.max(), cols.max())) + 1
    lower_keys = np.sort(rows[below] * n + cols[below])
    mirrored = cols[~below] * n + rows[~below]  # upper entries moved to the lower triangle
    pos = np.minimum(np.searchsorted(lower_keys, mirrored), lower_keys.size - 1)
    hits = np.flatnonzero(lower_keys[pos] == mirrored)
    if hits.size:
        i, j = int(cols[~below][hits[0]]) + 1, int(rows[~below][hits[0]]) + 1
        raise InputError(source, f"labelled symmetric (one triangle stored) but stores both ({i}, {j}) and "
                                 f"({j}, {i}); relabel it 'general' or keep one triangle")


def _require_finite_vector(name: str, vec: NDArray[np.float64], what: str) -> None:
    bad = np.flatnonzero(~np.isfinite(vec))
    if bad.size:
        first = ", ".join(str(int(k) + 1) for k in bad[:_FIRST_SHOWN])
        raise InputError(name, f"the {what} vector has {bad.size} NaN or Inf values (first at rows {first})")


# --------------------------------------------------------------------------- #
# CSV vectors
# --------------------------------------------------------------------------- #


def parse_float(name: str, cell: str, line_no: int, what: str) -> float:
    """``float(cell)`` or an InputError naming the line."""
    try:
        return float(cell)
    except ValueError:
        raise InputError(name, f"line {line_no}: {what} {cell!r} is not a number") from None


def _read_csv_vector(name: str, n: int, what: str) -> NDArray[np.float64]:
    rows = read_csv_rows(name)
    if rows and not is_number(rows[0][1][0]):
        rows = rows[1:]  # header line
    values = []
    for line_no, cells in rows:
        if len([c for c in cells if c]) != 1:
            raise InputError(name, f"line {line_no}: expected one value per line, found {len(cells)} cells")
        values.append(parse_float(name, next(c for c in cells if c), line_no, "value"))
    if len(values) != n:
        raise InputError(name, f"the {what} vector has {len(values)} values but the matrix has {n} rows")
    return np.asarray(values, dtype=np.float64)


def is_number(cell: str) -> bool:
    """True when the text cell reads as a float (a data line, not a header)."""
    try:
        float(cell)
    except ValueError:
        return False
    return True
