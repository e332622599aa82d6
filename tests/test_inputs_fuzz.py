"""Fuzzing the input layer: mangled files give a Model or an InputError, nothing else.

Valid files are written by scipy.io.mmwrite / hb_write (the outside writers)
and then mangled: lines dropped, duplicated or garbled, banner words and size
lines changed, the text cut short, random bytes (NUL included) inserted, the
result optionally gzip/bzip2-compressed and the compressed stream cut. The
property checked is the contract of conditioning.io.load.load_model (common
practice for file readers): either a valid Model (square float64 CSR, finite,
no stored zeros, sorted indices) or conditioning.errors.InputError naming the
file in one line; never another exception and never a crash of the
interpreter (scipy's Matrix Market reader crashes on some of these inputs
unguarded, see matrix_io._GuardedStream).
"""

from __future__ import annotations

import bz2
import gzip
import io

import numpy as np
import scipy.io
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conditioning.errors import InputError
from conditioning.io.load import load_model
from conditioning.model import Model

FUZZ = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])

HEADER_WORDS = ["matrix", "vector", "coordinate", "array", "real", "double", "integer", "complex",
                "pattern", "general", "symmetric", "skew-symmetric", "hermitian", "bogus", "", "%%MatrixMarket"]
TOKENS = ["nan", "inf", "-inf", "1e400", "-1e-320", "0", "0.0", "-0", "7", "3.5e", "1e+", "+", "-", ".",
          "99999999999999999999", "-3", "0x1f", "1,5", "\t", "\x00", "\xff", "%"]


def _chain(n: int) -> sp.coo_array:
    return sp.coo_array(2 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1))


def _mm_bytes(A, **kwargs) -> bytes:
    buf = io.BytesIO()
    scipy.io.mmwrite(buf, A, **kwargs)
    return buf.getvalue()


def _hb_bytes(A) -> bytes:
    buf = io.StringIO()
    scipy.io.hb_write(buf, sp.csc_array(A))
    return buf.getvalue().encode()


VALID = {
    "coordinate_symmetric": _mm_bytes(_chain(6), symmetry="symmetric", comment="invented test chain"),
    "coordinate_general": _mm_bytes(_chain(5), symmetry="general"),
    "coordinate_lower_general": _mm_bytes(sp.tril(_chain(5)), symmetry="general"),
    "array_symmetric": _mm_bytes(_chain(4).toarray(), symmetry="symmetric"),
    "integer": _mm_bytes(sp.coo_array(_chain(4).toarray().astype(np.int64)), field="integer", symmetry="symmetric"),
    "harwell_boeing": _hb_bytes(_chain(5)),
}


@st.composite
def mangled_files(draw) -> tuple[str, bytes]:
    kind = draw(st.sampled_from(sorted(VALID)))
    lines = VALID[kind].split(b"\n")
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["drop", "duplicate", "garble", "header", "size", "token", "truncate", "bytes"]))
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        if not lines:
            lines = [b""]
        if op == "drop" and len(lines) > 1:
            del lines[i]
        elif op == "duplicate":
            lines.insert(i, lines[i])
        elif op == "garble":
            lines[i] = draw(st.text(alphabet="0123456789 .-+eEdD%xnaif\t", max_size=24)).encode()
        elif op == "header":
            words = lines[0].split(b" ")
            j = draw(st.integers(0, max(len(words) - 1, 0)))
            words[j] = draw(st.sampled_from(HEADER_WORDS)).encode()
            lines[0] = b" ".join(words)
        elif op == "size":
            k = next((k for k, s in enumerate(lines) if s and not s.startswith(b"%")), 1)
            ints = draw(st.lists(st.integers(-3, 10**10), min_size=1, max_size=4))
            lines[min(k, len(lines) - 1)] = b" ".join(str(v).encode() for v in ints)
        elif op == "token":
            words = lines[i].split(b" ")
            j = draw(st.integers(0, max(len(words) - 1, 0)))
            words[j] = draw(st.sampled_from(TOKENS)).encode("latin-1")
            lines[i] = b" ".join(words)
        elif op == "truncate":
            blob = b"\n".join(lines)
            lines = blob[: draw(st.integers(0, len(blob)))].split(b"\n")
        else:
            blob = b"\n".join(lines)
            at = draw(st.integers(0, len(blob)))
            lines = (blob[:at] + draw(st.binary(min_size=1, max_size=8)) + blob[at:]).split(b"\n")
    blob = b"\n".join(lines)
    wrap = draw(st.sampled_from(["plain", "plain", "gzip", "bzip2"]))
    if wrap != "plain":
        blob = gzip.compress(blob) if wrap == "gzip" else bz2.compress(blob)
        if draw(st.booleans()):
            blob = blob[: draw(st.integers(0, len(blob)))]
    suffix = {"harwell_boeing": ".rua"}.get(kind, ".mtx") + {"gzip": ".gz", "bzip2": ".bz2"}.get(wrap, "")
    return suffix, blob


def _check_model(model: Model) -> None:
    K = model.K
    assert isinstance(K, sp.csr_array)
    assert K.ndim == 2 and K.shape[0] == K.shape[1] > 0
    assert K.dtype == np.float64
    assert np.all(np.isfinite(K.data))
    assert np.count_nonzero(K.data) == K.nnz
    assert K.has_sorted_indices


@FUZZ
@given(case=mangled_files())
def test_mangled_matrix_gives_model_or_input_error(tmp_path_factory, case):
    suffix, blob = case
    path = tmp_path_factory.getbasetemp() / f"fuzz{suffix}"
    path.write_bytes(blob)
    try:
        model = load_model(path)
    except InputError as exc:
        assert exc.path == str(path)
        assert "\n" not in str(exc)
    else:
        _check_model(model)
    assert path.read_bytes() == blob  # the user's file is never modified


CONTEXT_VALID = {
    "dofs": b"node,dof\n1,ux\n1,uy\n2,ux\n2,uy\n",
    "coords": b"node,x,y,z\n1,0,0,0\n2,1.5,0,0\n",
    "fix": b"node,dof\n1,ux\n",
    "load": b"load\n1\n0\n-2.5\n0\n",
}


@st.composite
def mangled_context(draw) -> tuple[str, bytes]:
    which = draw(st.sampled_from(sorted(CONTEXT_VALID)))
    lines = CONTEXT_VALID[which].split(b"\n")
    for _ in range(draw(st.integers(1, 3))):
        i = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from(["drop", "duplicate", "garble", "bytes"]))
        if op == "drop" and len(lines) > 1:
            del lines[i]
        elif op == "duplicate":
            lines.insert(i, lines[i])
        elif op == "garble":
            lines[i] = draw(st.text(alphabet="0123456789,.-e uxyzrnodf#\"", max_size=16)).encode()
        else:
            lines[i] = lines[i] + draw(st.binary(min_size=1, max_size=4))
    return which, b"\n".join(lines)


@settings(max_examples=150, deadline=None)
@given(case=mangled_context())
def test_mangled_context_file_gives_model_or_input_error(tmp_path_factory, case):
    which, blob = case
    base = tmp_path_factory.getbasetemp()
    path = base / f"fuzz_{which}.csv"
    path.write_bytes(blob)
    good = {name: base / f"good_{name}.csv" for name in ("dofs", "coords")}
    for name, p in good.items():
        p.write_bytes(CONTEXT_VALID[name])
    kwargs = {"dofs": good["dofs"], "coords": good["coords"], which: path}
    try:
        model = load_model(_chain(4).toarray(), **kwargs)
    except InputError as exc:
        assert exc.path == str(path)
        assert "\n" not in str(exc)
    else:
        _check_model(model)


# --------------------------------------------------------------------------- #
# Output paths, case names and option values (issue 23)
# --------------------------------------------------------------------------- #

import os  # noqa: E402
from pathlib import Path  # noqa: E402

from conditioning.command_line import MAX_MIN_DIGITS, MAX_SAMPLES, MAX_SEED, UsageError, parse  # noqa: E402
from conditioning.errors import OutputError, SettingError  # noqa: E402
from conditioning.io.outputs import check_outputs  # noqa: E402


@st.composite
def spelled_paths(draw, names):
    """A path to one of ``names`` (or a new name) in a folder, spelled in one of the ways a shell
    allows: plain, ``./``, ``sub/../``, ``sub/./../``, through a symlink or a hard link."""
    name = draw(st.sampled_from(names + ["new.json", "other.html"]))
    how = draw(st.sampled_from(["plain", "dot", "dotdot", "dotdotdot", "symlink", "hardlink"]))
    return name, how


def _spell(folder, name, how, k):
    target = folder / name
    if how == "plain":
        return str(target)
    if how == "dot":
        return str(folder / "." / name)
    if how == "dotdot":
        return str(folder / "sub" / ".." / name)
    if how == "dotdotdot":
        return str(folder / "sub" / "." / ".." / name)
    if how == "symlink":
        link = folder / f"s{k}-{name}"
        if not link.is_symlink():
            link.symlink_to(name)
        return str(link)
    if not target.exists():
        return str(target)
    hard = folder / f"h{k}-{name}"
    if not hard.exists():
        os.link(target, hard)
    return str(hard)


def _same(a: str, b: str) -> bool:
    """The outside oracle: os.path.samefile for existing files, the real path otherwise."""
    if os.path.exists(a) and os.path.exists(b):
        return os.path.samefile(a, b)
    return os.path.realpath(a) == os.path.realpath(b)


@settings(max_examples=200, deadline=None)
@given(outs=st.lists(spelled_paths(["k.mtx", "d.csv", "l.csv"]), min_size=1, max_size=4))
def test_output_paths_never_name_an_input_or_each_other(tmp_path_factory, outs):
    folder = tmp_path_factory.mktemp("paths")
    (folder / "sub").mkdir()
    inputs = []
    for label, name in (("MATRIX", "k.mtx"), ("--dofs", "d.csv"), ("--load", "l.csv")):
        (folder / name).write_text(name)
        inputs.append((label, str(folder / name)))
    outputs = [(f"--out{k}", _spell(folder, name, how, k)) for k, (name, how) in enumerate(outs)]
    collide = any(_same(out, other) for k, (_, out) in enumerate(outputs)
                  for _, other in inputs + outputs[:k])
    try:
        check_outputs(inputs, outputs)
    except OutputError as exc:
        assert collide, exc
        assert "\n" not in str(exc) and "the same file" in str(exc)
    else:
        assert not collide
    for _, path in inputs:   # inputs are never modified by the check
        assert Path(path).read_text() == Path(path).name


@settings(max_examples=200, deadline=None)
@given(name=st.text(min_size=1, max_size=30))
def test_any_case_name_reaches_the_console_inert(name):
    """Whatever a user puts in a case name, the console neither crashes, nor interprets markup,
    nor lets a control character through (ECMA-48 C0/C1, DEL, the Unicode bidi controls)."""
    from rich.table import Table
    from rich.text import Text

    from conditioning.render.safe_text import CONTROL, SafeConsole, shown_line

    console = SafeConsole(file=io.StringIO(), width=400, record=True, color_system=None)
    table = Table()
    table.add_column("sample")
    table.add_row(name)
    console.print(table)
    console.print(f"for sample '{name}'")
    console.print(Text(f"for sample '{name}'"))
    out = console.export_text()
    assert not CONTROL.search(out)
    # rich itself drops BEL, BS, VT, FF and CR (rich.control.strip_control_codes); every other
    # character of the name is shown, a control one escaped, markup as written.
    from rich.control import strip_control_codes

    visible = shown_line(strip_control_codes(name)).replace("\\n", " ").replace("\\t", " ")
    flat = out.replace("\n", "")
    for piece in visible.split():   # every piece of the name (rich may fold blanks and wrap)
        assert piece in flat


@settings(max_examples=6, deadline=None)
@given(name=st.text(alphabet=st.sampled_from(list("[]/=ab \x1b\x07\u202e,\"")), min_size=1, max_size=12))
def test_any_case_name_gives_a_verdict_or_one_line(tmp_path_factory, name):
    """A whole run with a hostile case name: a verdict (exit 3 for this mast) or one line, exit 2."""
    import contextlib

    from conditioning.cli import main

    folder = tmp_path_factory.mktemp("names")
    load = folder / "cases.csv"
    header = name.replace("\n", " ")
    load.write_text(f"\"{header.replace(chr(34), chr(34) * 2)}\",other\n" + "1.0,2.0\n" * 16, encoding="utf-8")
    demo = Path(__file__).resolve().parents[1] / "matrices"
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()) as out, contextlib.redirect_stderr(err):
        code = main(["diagnose", str(demo / "mast_soft_spring.mtx"), "--load", str(load), "--samples", "0"])
    assert code in (2, 3), err.getvalue()
    assert "\x1b" not in out.getvalue() + err.getvalue()
    if code == 2:
        assert len(err.getvalue().strip().splitlines()) == 1


@settings(max_examples=300, deadline=None)
@given(seed=st.integers(-2**70, 2**70), samples=st.integers(-10**9, 10**9),
       digits=st.floats(allow_nan=True, allow_infinity=True),
       limit=st.one_of(st.none(), st.text(max_size=12),
                       st.from_regex(r"\A-?[0-9]{0,4}(\.[0-9]{1,3})?([eE][+-]?[0-9]{1,3})?[kKmMgGtT]?i?[bB]?\Z")))
def test_option_values_parse_or_refuse_in_one_line(seed, samples, digits, limit):
    if limit is not None and "\x00" in limit:
        return   # an environment variable cannot hold NUL
    saved = os.environ.pop("CONDITIONING_MEMORY_LIMIT", None)
    try:
        if limit is not None:
            os.environ["CONDITIONING_MEMORY_LIMIT"] = limit
        args = parse(["diagnose", "k.mtx", "--seed", str(seed), "--samples", str(samples),
                      "--min-digits", repr(digits)])
    except (UsageError, SettingError) as exc:
        assert "\n" not in str(exc)
        return
    finally:
        os.environ.pop("CONDITIONING_MEMORY_LIMIT", None)
        if saved is not None:
            os.environ["CONDITIONING_MEMORY_LIMIT"] = saved
    if True:
        assert 0 <= args.seed <= MAX_SEED and 0 <= args.samples <= MAX_SAMPLES
        assert 0 <= args.min_digits <= MAX_MIN_DIGITS
