"""Harwell-Boeing files read as the format defines them: fields by column.

A Harwell-Boeing file (``.rsa``, ``.rua``, ``.hb``, ...) states on its fourth
line the Fortran formats its pointer, index and value sections are written
in, for example ``(12I6)``, ``(16I5)`` and ``(4E20.13)``. A Fortran formatted
read takes each field from its columns, not from blanks between numbers, so a
file written with ``(4E20.13)`` may hold abutting fields such as
``0.4541668995389E+09-0.6645173262256E+06``; :func:`scipy.io.hb_read` splits
on blanks and refuses such files. This module builds the column layout of each
record from the header's format and reads every field from its columns, with
the Fortran input rules for a real field: a ``D`` exponent reads as ``E``, the
exponent letter may be left out (``0.45+09``), a field without a decimal point
has ``d`` implied decimal digits, a ``kP`` scale factor divides a field without
an exponent by 10**k, and blanks inside a field are ignored.

References
----------
I. S. Duff, R. G. Grimes, J. G. Lewis, "Users' Guide for the Harwell-Boeing
Sparse Matrix Collection (Release I)", Technical Report TR/PA/92/86, CERFACS,
1992: the header layout (line 2: card counts 5I14; line 3: type A3, 11X, then
4I14; line 4: formats 2A16, 2A20; line 5 when right-hand sides are stored) and
the column-pointer / row-index / value sections (from memory).
ANSI X3.9-1978 (Fortran 77), section 13.5: edit descriptors I, F, E, D, G, P,
X and the rules for numeric input fields (from memory).
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from conditioning.errors import InputError

#: Matrix types a stiffness matrix may be stored as (value, structure, storage).
_HB_TYPE = re.compile(r"^[RCPI][SUHZR][AE]$")

#: A Fortran real input field, blanks removed: mantissa, then an optional
#: exponent written as a letter (E, D, Q) with an optional sign, or a sign alone
#: (ANSI X3.9-1978, 13.5.9.2.1, from memory).
_REAL_FIELD = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+))(?:[EDQ]([+-]?\d+)|([+-]\d+))?$")
_INTEGER_FIELD = re.compile(r"^[+-]?\d+$")
_EDIT = re.compile(r"(\d*)(ES|EN|[IFEDGX])(\d*)(?:\.(\d+))?(?:E\d+)?")


@dataclass(frozen=True)
class Field:
    """One field of a record: columns ``[start, start + width)`` and how it reads."""

    start: int
    width: int
    kind: str        # "I" integer, "R" real (F, E, D, G, ES, EN)
    decimals: int    # implied decimal digits of a real field without a point
    scale: int       # kP scale factor in effect


class FortranFormat:
    """The record layout of one Fortran format such as ``(1P,4E20.13)``.

    Only the data edit descriptors a Harwell-Boeing section uses are taken:
    ``Iw``, ``Fw.d``, ``Ew.d[Ee]``, ``Dw.d``, ``Gw.d``, ``ESw.d``, ``ENw.d``,
    with repeat counts and parenthesised groups, ``nX``, ``kP`` and ``/``.
    When the format's fields are used up the reading goes on at the first
    record again; for the one-group formats of these files this is the
    Fortran rule of format reversion.
    """

    def __init__(self, text: str):
        self.text = text.strip()
        body = self.text.upper().replace(" ", "")
        if not (body.startswith("(") and ")" in body):
            raise ValueError(f"{text.strip()!r} is not a Fortran format (expected it in parentheses)")
        body = body[1:body.rindex(")")]
        self.records: list[list[Field]] = [[]]
        self._col = 0
        self._scale = 0
        self._walk(self._expand(body))
        self.records = [r for r in self.records if r]
        if not self.records:
            raise ValueError(f"{text.strip()!r} holds no data field")
        kinds = {f.kind for r in self.records for f in r}
        self.kind = kinds.pop() if len(kinds) == 1 else "mixed"

    @staticmethod
    def _expand(body: str) -> list[str]:
        """The format's items with repeated groups written out."""
        items: list[str] = []
        k = 0
        while k < len(body):
            c = body[k]
            if c == ",":
                k += 1
                continue
            if c == "/":
                items.append("/")
                k += 1
                continue
            m = re.match(r"(\d*)\(", body[k:])
            if m:
                depth, j = 0, k + len(m.group(0)) - 1
                for j in range(j, len(body)):
                    depth += {"(": 1, ")": -1}.get(body[j], 0)
                    if depth == 0:
                        break
                if depth:
                    raise ValueError("unbalanced parentheses")
                inner = FortranFormat._expand(body[k + len(m.group(0)):j])
                items.extend(inner * int(m.group(1) or 1))
                k = j + 1
                continue
            m = re.match(r"([+-]?\d*)P", body[k:])
            if m:
                items.append(m.group(0))
                k += len(m.group(0))
                continue
            m = _EDIT.match(body, k)
            if not m or not m.group(0):
                raise ValueError(f"edit descriptor {body[k:k + 8]!r} is not one of I, F, E, D, G, X, P")
            items.append(m.group(0))
            k = m.end()
        return items

    def _walk(self, items: list[str]) -> None:
        for item in items:
            if item == "/":
                self.records.append([])
                self._col = 0
                continue
            if item.endswith("P"):
                self._scale = int(item[:-1] or 0)
                continue
            m = _EDIT.fullmatch(item)
            repeat, letter, width, decimals = m.group(1), m.group(2), m.group(3), m.group(4)
            if letter == "X":
                self._col += int(repeat or width or 1)
                continue
            if not width or int(width) == 0:
                raise ValueError(f"edit descriptor {item!r} has no field width")
            kind = "I" if letter == "I" else "R"
            if kind == "R" and decimals is None:
                raise ValueError(f"edit descriptor {item!r} needs a number of decimals (w.d)")
            for _ in range(int(repeat or 1)):
                self.records[-1].append(Field(self._col, int(width), kind, int(decimals or 0), self._scale))
                self._col += int(width)

    @property
    def per_record(self) -> int:
        """Fields in the first record (the usual ``n`` of ``(nIw)``)."""
        return len(self.records[0])


def read_field(text: str, field: Field) -> float | int:
    """The value of one Fortran input field (blanks ignored; an empty field reads 0).

    Raises ValueError when the field is not a number of the field's kind.
    """
    s = text.replace(" ", "").upper()
    if not s:
        return 0
    if field.kind == "I":
        if not _INTEGER_FIELD.match(s):
            raise ValueError(s)
        return int(s)
    m = _REAL_FIELD.match(s)
    if not m:
        raise ValueError(s)
    mantissa, exp_letter, exp_sign = m.groups()
    exponent = exp_letter or exp_sign
    # Without a decimal point the last d digits are decimals; without an
    # exponent a kP scale factor divides by 10**k (ANSI X3.9-1978, 13.5.9.2.1
    # and 13.5.7.1, from memory). Both go into the decimal exponent, so the
    # value is rounded once, by float().
    shift = (0 if "." in mantissa else -field.decimals) + (int(exponent) if exponent else -field.scale)
    return float(f"{mantissa}E{shift}") if shift else float(mantissa)


class _Cursor:
    """Reads items of one section record by record, each field from its columns.

    A line whose blank-separated words are exactly the fields it should hold,
    all numbers, but whose columns read otherwise (or not at all), was written
    with other widths than its format states; :func:`scipy.io.hb_write`, for
    one, writes 24-character fields under ``(3E25.16)``. Such a line is read
    by its words, and ``off_format`` counts it. A line that reads by its
    columns and by its words to the same numbers is simply read.
    """

    def __init__(self, name: str, lines: list[str], start: int):
        self.name, self.lines, self.line = name, lines, start
        self.off_format = 0

    def read(self, count: int, fmt: FortranFormat, what: str) -> list:
        out: list = []
        record = 0
        while len(out) < count:
            if self.line >= len(self.lines):
                raise InputError(self.name, f"the {what} section ends at the end of the file after "
                                            f"{len(out):,} of {count:,} values (fewer values or indices "
                                            "than the header announces; cut short?)")
            text = self.lines[self.line]
            fields = fmt.records[record % len(fmt.records)][:count - len(out)]
            by_columns, problem = [], None
            for f in fields:
                cell = text[f.start:f.start + f.width]
                try:
                    by_columns.append(read_field(cell, f))
                except ValueError:
                    problem = (f"line {self.line + 1}, columns {f.start + 1}-{f.start + f.width}: "
                               f"{cell.strip()!r} is not a number as the {what} format {fmt.text} reads it "
                               "(non-numeric data in the pointer, index or value section)")
                    break
            words = text.split()
            by_words = None
            if len(words) == len(fields) and (problem or len(words) > 1):
                try:
                    by_words = [read_field(w, f) for w, f in zip(words, fields)]
                except ValueError:
                    by_words = None
            if by_words is not None and (problem or by_words != by_columns):
                out.extend(by_words)
                self.off_format += 1
            elif problem:
                raise InputError(self.name, problem)
            else:
                out.extend(by_columns)
            self.line += 1
            record += 1
        return out


def _hb_int(name: str, line: str, lo: int, hi: int, line_no: int, what: str) -> int:
    field = line[lo:hi].strip()
    try:
        return int(field) if field else 0
    except ValueError:
        raise InputError(name, f"line {line_no}: {what} (columns {lo + 1}-{hi}) is not an integer: {field!r}") from None


def _format(name: str, text: str, what: str, want: str) -> FortranFormat:
    try:
        fmt = FortranFormat(text)
    except ValueError as exc:
        raise InputError(name, f"line 4: the {what} format {text.strip()!r} cannot be read: {exc}") from None
    if want == "I" and fmt.kind != "I":
        raise InputError(name, f"line 4: the {what} format {fmt.text} is not an integer format (such as (16I5))")
    return fmt


def read_harwell_boeing(name: str, data: bytes, require_plausible_size) -> tuple:
    """Triplets of a Harwell-Boeing file, 0-based, as the matrix readers return them.

    Parameters
    ----------
    name : str
        The file's name, for messages.
    data : bytes
        The (decompressed) file content; never modified.
    require_plausible_size : callable
        ``(name, "coordinate", n, entries)`` -> None, raising InputError for a
        header that cannot be right (the matrix readers' shared check).

    Returns
    -------
    rows, cols : (nnz,) int64 arrays
    vals : (nnz,) float64 array
    n : int
    stored : {"triangle", "general"}
        ``"triangle"`` for a symmetric type (``xSA``), whose one stored
        triangle is mirrored by the caller.
    notes : list of str

    Raises
    ------
    InputError
        A header that is not Harwell-Boeing, a type a stiffness matrix cannot
        have (complex, pattern-only, skew, hermitian, rectangular, elemental),
        an unreadable Fortran format, a field that is not a number (its line
        and columns named), a file cut short, pointers that do not run from 1
        to nnz+1 in order, or a row index out of range.
    """
    lines = data.decode("latin-1").splitlines()
    if len(lines) < 4:
        raise InputError(name, f"Harwell-Boeing header needs 4 lines, the file has {len(lines)}")
    mxtype = lines[2][:3].upper()
    if not _HB_TYPE.match(mxtype):
        raise InputError(name, f"line 3: {lines[2][:3]!r} is not a Harwell-Boeing matrix type such as RSA")
    value, structure, storage = mxtype
    if value == "C":
        raise InputError(name, "line 3: the file holds complex values; a stiffness matrix must be real")
    if value == "P":
        raise InputError(name, "line 3: the file is pattern-only (no values); a stiffness matrix needs its values")
    if structure == "Z":
        raise InputError(name, "line 3: the matrix is labelled skew-symmetric; a stiffness matrix is symmetric")
    if structure == "H":
        raise InputError(name, "line 3: the matrix is labelled hermitian; a stiffness matrix is real symmetric")
    if storage == "E":
        raise InputError(name, "line 3: elemental (unassembled) storage is not supported; assemble the matrix first")
    nrows = _hb_int(name, lines[2], 14, 28, 3, "number of rows")
    ncols = _hb_int(name, lines[2], 28, 42, 3, "number of columns")
    nnz = _hb_int(name, lines[2], 42, 56, 3, "number of entries")
    rhs_lines = _hb_int(name, lines[1], 56, 70, 2, "right-hand-side line count")
    if structure == "R" or nrows != ncols:
        raise InputError(name, f"line 3: matrix is {nrows} x {ncols}; a stiffness matrix must be square")
    if nrows < 0 or nnz < 0:
        raise InputError(name, f"line 3: the order ({nrows}) and the number of entries ({nnz}) must not be negative")
    require_plausible_size(name, "coordinate", nrows, nnz)
    fmt_line = lines[3].ljust(72)
    ptr_fmt = _format(name, fmt_line[0:16], "pointer", "I")
    ind_fmt = _format(name, fmt_line[16:32], "index", "I")
    val_fmt = _format(name, fmt_line[32:52], "value", "any")
    notes = [f"read a {nrows} x {ncols} Harwell-Boeing {mxtype} matrix ({nnz} stored entries)"]
    start = 4
    if rhs_lines:
        start = 5
        notes.append("right-hand sides stored in the file ignored")
    cursor = _Cursor(name, lines, start)
    ptr = np.asarray(cursor.read(ncols + 1, ptr_fmt, "pointer"), dtype=np.int64)
    ind = np.asarray(cursor.read(nnz, ind_fmt, "index"), dtype=np.int64)
    vals = np.asarray(cursor.read(nnz, val_fmt, "value"), dtype=np.float64)
    if ptr[0] != 1 or ptr[-1] != nnz + 1 or np.any(np.diff(ptr) < 0):
        raise InputError(name, f"the column pointers must rise from 1 to {nnz + 1} (the entries announced "
                               f"on line 3 plus one); they run from {ptr[0]} to {ptr[-1]}"
                               + ("" if not np.any(np.diff(ptr) < 0) else ", and fall somewhere")
                               + " (fewer entries than the header says; cut short?)" * bool(ptr[-1] < nnz + 1))
    if ind.size and (ind.min() < 1 or ind.max() > nrows):
        bad = int(ind[(ind < 1) | (ind > nrows)][0])
        raise InputError(name, f"row index out of range: {bad} (indices run from 1 to {nrows})")
    if value == "I":
        notes.append("integer values converted to float64")
    if cursor.off_format:
        notes.append(f"{cursor.off_format:,} lines hold their numbers in other columns than the header's "
                     f"formats {ptr_fmt.text} {ind_fmt.text} {val_fmt.text} say; read by the blanks between "
                     "the numbers")
    cols = np.repeat(np.arange(ncols, dtype=np.int64), np.diff(ptr))
    stored = "triangle" if structure == "S" else "general"
    return ind - 1, cols, vals, nrows, stored, notes
