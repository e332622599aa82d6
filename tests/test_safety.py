"""Never lose the engineer's files, never crash or hang on what a user can type (issue 23).

One test (or one parametrised family) per item of the issue, each failing
without its fix. What the checks stand on, outside the project: POSIX file
identity (``os.stat`` st_dev/st_ino, ``os.path.samefile``), the kernel's
``/dev/full`` (every write fails with ENOSPC) and FIFOs (``os.mkfifo``), the
shell's convention 128 + signal number for a run ended by a signal (common
practice), numpy's LAPACK for condition numbers, and the ECMA-48 control
characters (ESC = 0x1b) a terminal acts on.
"""

from __future__ import annotations

import errno
import gzip
import hashlib
import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from conditioning import cli
from conditioning.cli import main
from conditioning.errors import InputError
from conditioning.io.load import load_model
from conditioning.io.matrix_formats import read_matrix
from test_cli import _one_error_line

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "matrices"
MAST = ["mast_soft_spring.mtx", "mast_soft_spring_dofs.csv", "mast_soft_spring_coords.csv",
        "mast_soft_spring_load.mtx"]


def _digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture
def mast(tmp_path):
    """A private copy of the invented mast model (matrix, DOF map, coordinates, load)."""
    paths = {}
    for name, key in zip(MAST, ("matrix", "dofs", "coords", "load")):
        target = tmp_path / name
        target.write_bytes((DEMO / name).read_bytes())
        paths[key] = target
    return paths


def _mast_args(m) -> list[str]:
    return ["diagnose", str(m["matrix"]), "--dofs", str(m["dofs"]), "--coords", str(m["coords"]),
            "--load", str(m["load"])]


def _tridiagonal(n: int = 10) -> np.ndarray:
    T = 2 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)
    T[-1, -1] = 1.0
    return T


def _write_mm(path: Path, K: np.ndarray) -> Path:
    n = K.shape[0]
    entries = [(i, j, float(K[i, j])) for i in range(n) for j in range(i + 1) if K[i, j] != 0]
    lines = ["%%MatrixMarket matrix coordinate real symmetric", f"{n} {n} {len(entries)}"]
    lines += [f"{i + 1} {j + 1} {v!r}" for i, j, v in entries]
    path.write_text("\n".join(lines) + "\n")
    return path


# ------------------------------------------------------------------ 1 outputs never overwrite inputs
SPELLINGS = ["same", "symlink", "hardlink", "dotdot"]


def _spelled(path: Path, how: str) -> str:
    if how == "same":
        return str(path)
    if how == "symlink":
        link = path.parent / f"link-{path.name}"
        link.symlink_to(path.name)
        return str(link)
    if how == "hardlink":
        hard = path.parent / f"hard-{path.name}"
        os.link(path, hard)
        return str(hard)
    sub = path.parent / "sub"
    sub.mkdir(exist_ok=True)
    return str(sub / ".." / path.name)


@pytest.mark.parametrize("how", SPELLINGS)
@pytest.mark.parametrize("option, victim", [("--json", "matrix"), ("--html", "dofs"), ("--modes-csv", "coords"),
                                            ("--modes-vtk", "load")])
def test_an_output_never_overwrites_an_input(mast, how, option, victim, capsys):
    before = {k: _digest(p) for k, p in mast.items()}
    target = _spelled(mast[victim], how)
    assert os.path.samefile(target, mast[victim])   # the outside oracle: the same file
    assert main(_mast_args(mast) + [option, target]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert target in line and str(mast[victim]) in line and option in line
    assert {k: _digest(p) for k, p in mast.items()} == before


def test_two_outputs_to_one_file_and_compare_json(mast, tmp_path, capsys):
    report = tmp_path / "r.json"
    assert main(_mast_args(mast) + ["--json", str(report), "--html", str(tmp_path / "sub2" / ".." / "r.json")]) == 2
    assert "--json" in _one_error_line(capsys.readouterr().err)
    (tmp_path / "sub2").mkdir()
    assert main(_mast_args(mast) + ["--json", str(report), "--html", str(tmp_path / "sub2" / ".." / "r.json")]) == 2
    capsys.readouterr()
    assert not report.exists()          # refused before any work: nothing written
    before = _digest(mast["matrix"])
    assert main(["compare", str(mast["matrix"]), str(mast["matrix"]), "--json", str(mast["matrix"])]) == 2
    assert "BEFORE" in _one_error_line(capsys.readouterr().err)
    assert _digest(mast["matrix"]) == before


# ------------------------------------------------------------------ 2 reports written atomically
def test_a_full_disk_leaves_the_earlier_report_intact(mast, tmp_path, monkeypatch, capsys):
    """A fake writer that writes half a report, then fails as a full disk does (ENOSPC)."""
    from conditioning.render import json_report

    report = tmp_path / "report.json"
    report.write_text('{"earlier": "good report"}\n')

    def half_then_full(data, path):
        with open(path, "w") as fh:
            fh.write('{"schema": ')
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(json_report, "write_json", half_then_full)
    assert main(_mast_args(mast) + ["--json", str(report), "--quiet"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(report) in line and "No space left on device" in line and "unchanged" in line
    assert json.loads(report.read_text()) == {"earlier": "good report"}
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []   # no partial file


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="needs the kernel's /dev/full (Linux)")
def test_dev_full_is_one_line_naming_it(mast, capsys):
    """/dev/full: every write fails with ENOSPC (the kernel's own disk-full device)."""
    assert main(_mast_args(mast) + ["--json", "/dev/full", "--quiet"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "/dev/full" in line and "No space left on device" in line


def test_a_completed_report_replaces_the_earlier_one(mast, tmp_path, capsys):
    report = tmp_path / "report.json"
    report.write_text("old")
    assert main(_mast_args(mast) + ["--json", str(report), "--quiet"]) == 3
    assert json.loads(report.read_text())["schema"]
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".partial")] == []


# ------------------------------------------------------------------ 3 terminal injection
HOSTILE = ["[/]", "\x1b[2J\x1b]0;owned\x07x", "[link=http://example.invalid]click[/link]", "[bold red]red"]


def test_hostile_case_names_reach_the_terminal_inert(mast, tmp_path, capsys):
    rng = np.random.default_rng(1)
    cases = tmp_path / "cases.csv"
    rows = [",".join(f"{v:.4f}" for v in rng.standard_normal(len(HOSTILE))) for _ in range(16)]
    cases.write_text(",".join(HOSTILE) + "\n" + "\n".join(rows) + "\n")
    args = _mast_args(mast)
    args[args.index("--load") + 1] = str(cases)
    assert main(args) == 3                       # a verdict, not exit 4
    out = capsys.readouterr().out
    assert "\x1b" not in out                     # ESC (ECMA-48) never reaches the terminal
    assert "[/]" in out and "[bold red]red" in out and "[link=http://example.invalid]click[/link]" in out
    assert "\\x1b[2J" in out                     # shown escaped


def test_hostile_file_name_in_the_error_line(tmp_path, capsys):
    assert main(["diagnose", str(tmp_path / "k\x1b[2J[/].mtx")]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "\x1b" not in line and "\\x1b[2J[/]" in line


# ------------------------------------------------------------------ 4 exit 4 on bad input
ZERO_MATRICES = {
    "one zero entry": "%%MatrixMarket matrix coordinate real symmetric\n2 2 1\n1 1 0\n",
    "no entries": "%%MatrixMarket matrix coordinate real symmetric\n2 2 0\n",
    "explicit zeros": "%%MatrixMarket matrix coordinate real general\n2 2 2\n1 1 0.0\n2 1 -0\n",
    "array of zeros": "%%MatrixMarket matrix array real general\n2 2\n0\n0\n0\n0\n",
}


@pytest.mark.parametrize("form", sorted(ZERO_MATRICES))
def test_an_all_zero_matrix_is_one_line(tmp_path, form, capsys):
    path = tmp_path / "zero.mtx"
    path.write_text(ZERO_MATRICES[form])
    assert main(["diagnose", str(path)]) == 2
    assert "zero" in _one_error_line(capsys.readouterr().err)


def test_an_all_zero_array_is_an_input_error():
    with pytest.raises(InputError, match="zero"):
        load_model(np.zeros((3, 3)))


def test_node_ids_beyond_int64_and_no_false_duplicate(mast, tmp_path, capsys):
    dofs = mast["dofs"].read_text().splitlines()
    header, body = dofs[0], dofs[1:]
    first_node = body[0].split(",")[0]
    big = tmp_path / "big.csv"
    big.write_text("\n".join([header] + [line.replace(f"{first_node},", "99999999999999999999,", 1)
                                         if line.startswith(f"{first_node},") else line for line in body]) + "\n")
    args = _mast_args(mast)
    args[args.index("--dofs") + 1] = str(big)
    del args[args.index("--coords"):args.index("--coords") + 2]
    assert main(args) == 2
    assert "99999999999999999999" in _one_error_line(capsys.readouterr().err)
    # Nodes 2**62 and -2**62 differ by 2**63, so 6 * node is the same modulo 2**64 (exact integer
    # arithmetic): a key node * 6 + dof in int64 wraps onto the same value for both. Two nodes, no duplicate.
    a, b = 2**62, -2**62
    assert (6 * a - 6 * b) % 2**64 == 0 and a != b
    model = load_model(np.eye(4) * 2, dofs=[(a, "ux"), (a, "uy"), (b, "ux"), (b, "uy")])
    assert set(model.dofs.node.tolist()) == {a, b}


@pytest.mark.parametrize("value, status", [("abc", 2), ("-1", 2), ("0", 2), ("1e9", None), ("", None), ("  ", None),
                                           ("2G", None)])
def test_memory_limit_setting(monkeypatch, value, status, capsys):
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", value)
    code = main(["diagnose", str(DEMO / "footbridge.mtx"), "--quiet"])
    err = capsys.readouterr().err
    if status is None:
        assert code in (0, 1, 3) and "error" not in err
    else:
        assert code == status
        assert "CONDITIONING_MEMORY_LIMIT" in _one_error_line(err)


@pytest.mark.parametrize("argv, word", [
    (["--seed", "-5"], "--seed"), (["--seed", str(2**70)], "--seed"),
    (["--samples", "100000000"], "--samples"), (["--samples", "-1"], "--samples"),
    (["--min-digits", "nan"], "--min-digits"), (["--min-digits", "1e300"], "--min-digits"),
])
def test_numeric_options_are_bounded(argv, word, capsys):
    assert main(["diagnose", str(DEMO / "footbridge.mtx"), *argv]) == 2
    assert word in _one_error_line(capsys.readouterr().err)
    for command in (["demo"],):
        if word in ("--seed", "--samples"):
            assert main([*command, *argv]) == 2
            assert word in _one_error_line(capsys.readouterr().err)


def test_help_documents_the_bounds(capsys):
    with pytest.raises(SystemExit):
        cli.parse(["diagnose", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "0 to 100" in text and "2**63-1" in text and "0 to 20" in text


# ------------------------------------------------------------------ 5 bounded memory while reading
def test_a_gzip_bomb_is_refused_from_its_size_line(tmp_path, monkeypatch, capsys):
    """874 KB of gzip announcing 100 million entries of a 1000 x 1000 matrix: refused before reading."""
    bomb = tmp_path / "bomb.mtx.gz"
    with gzip.open(bomb, "wb") as fh:
        fh.write(b"%%MatrixMarket matrix coordinate real general\n1000 1000 100000000\n")
        block = b"1 1 1\n" * 100_000
        for _ in range(1000):
            fh.write(block)
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "256M")
    start = time.perf_counter()
    assert main(["diagnose", str(bomb)]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(bomb) in line and "100,000,000 entries" in line
    assert time.perf_counter() - start < 20      # refused from the header, not after reading


def test_a_gzip_bomb_is_refused_under_the_default_memory_limit(tmp_path, capsys):
    """Without CONDITIONING_MEMORY_LIMIT: 3 million entries announced for a 1000 x 1000
    matrix (one million positions) is refused from the size line, before any reading."""
    bomb = tmp_path / "bomb.mtx.gz"
    with gzip.open(bomb, "wb") as fh:
        fh.write(b"%%MatrixMarket matrix coordinate real general\n1000 1000 3000000\n")
        fh.write(b"1 1 1\n" * 3_000_000)
    assert main(["diagnose", str(bomb)]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(bomb) in line and "more than its 1,000,000 positions" in line


def test_a_small_export_with_repeated_entries_is_still_read(tmp_path):
    """Repeated entries are summed (the Matrix Market convention scipy.io.mmread follows)."""
    path = tmp_path / "repeated.mtx"
    path.write_text("%%MatrixMarket matrix coordinate real symmetric\n2 2 6\n"
                    "1 1 1\n1 1 1\n2 2 1\n2 2 1\n2 1 -0.5\n2 1 -0.5\n")
    K = load_model(str(path)).K.toarray()
    assert np.array_equal(K, [[2.0, -1.0], [-1.0, 2.0]])


def test_more_entries_than_announced_is_refused(tmp_path, capsys):
    path = tmp_path / "extra.mtx"
    path.write_text("%%MatrixMarket matrix coordinate real general\n2 2 2\n1 1 1\n2 2 1\n1 1 1\n")
    assert main(["diagnose", str(path)]) == 2
    assert "more entries than the size line" in _one_error_line(capsys.readouterr().err)


@pytest.mark.parametrize("kind", ["triplets", "dofs"])
def test_text_beyond_the_memory_limit_is_refused_naming_the_file(tmp_path, monkeypatch, kind, capsys):
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "8M")   # text caps: 8M / 12 -> 1 MiB floor, 8M / 40 -> 1 MiB
    big = tmp_path / ("k.txt.gz" if kind == "triplets" else "d.csv.gz")
    with gzip.open(big, "wt") as fh:
        if kind == "dofs":
            fh.write("node,dof\n")
        for k in range(400_000):
            fh.write(f"{k % 50 + 1} {k % 50 + 1} 2.0\n" if kind == "triplets" else f"{k + 1},ux\n")
    args = ["diagnose", str(big)] if kind == "triplets" else ["diagnose", str(DEMO / "footbridge.mtx"), "--dofs", str(big)]
    assert main(args) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(big) in line and "memory limit" in line


def test_a_plain_csv_beyond_the_limit_is_refused_before_it_is_read(tmp_path, monkeypatch, capsys):
    """The fast path of the DOF map reader (one read of the whole file) is bounded too."""
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "8M")   # CSV cap: the 1 MiB floor
    dofs = tmp_path / "d.csv"
    dofs.write_text("node,dof\n" + "".join(f"{k + 1},ux\n" for k in range(200_000)))   # 2.2 MB
    assert main(["diagnose", str(DEMO / "footbridge.mtx"), "--dofs", str(dofs)]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(dofs) in line and "memory limit" in line


def test_out_of_memory_while_reading_names_the_file(monkeypatch, capsys):
    import conditioning.io.load as load

    def exhausted(path):
        raise MemoryError

    monkeypatch.setattr(load, "read_matrix", exhausted)
    assert main(["diagnose", str(DEMO / "footbridge.mtx")]) == 2
    assert str(DEMO / "footbridge.mtx") in _one_error_line(capsys.readouterr().err)


# ------------------------------------------------------------------ 6 FIFO, /dev/stdin, devices
def test_a_fifo_is_refused_without_hanging(tmp_path, capsys):
    fifo = tmp_path / "k.mtx"
    os.mkfifo(fifo)
    assert main(["diagnose", str(fifo)]) == 2       # returns at once: a FIFO is never opened
    assert "pipe" in _one_error_line(capsys.readouterr().err)
    assert main(["diagnose", str(DEMO / "footbridge.mtx"), "--load", "/dev/zero"]) == 2
    assert "/dev/zero" in _one_error_line(capsys.readouterr().err)


def test_a_pipe_on_stdin_is_refused_in_one_line():
    run = subprocess.run([sys.executable, "-m", "conditioning", "diagnose", "/dev/stdin"],
                         input=(DEMO / "footbridge.mtx").read_bytes(), capture_output=True, timeout=120)
    assert run.returncode == 2
    assert "pipe" in _one_error_line(run.stderr.decode())


# ------------------------------------------------------------------ 7 SIGTERM
_SLOW_RUN = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from conditioning import cli
    ready = Path(sys.argv[1])
    stage = sys.argv[2]
    if stage == "diagnose":
        real = cli.diagnose_model
        def slow(model, **kw):
            ready.write_text("running")
            time.sleep(60)
        cli.diagnose_model = slow
    else:
        from conditioning.render import json_report
        def slow_write(report, path):
            with open(path, "w") as fh:
                fh.write('{"schema": ')
                fh.flush()
            ready.write_text("writing")
            time.sleep(60)
        json_report.write_json = slow_write
    sys.exit(cli.main(sys.argv[3:]))
""")


@pytest.mark.parametrize("stage", ["diagnose", "write"])
def test_sigterm_is_one_line_exit_143_and_leaves_no_partial_file(mast, tmp_path, stage):
    ready, report = tmp_path / "ready", tmp_path / "report.json"
    report.write_text('{"earlier": true}\n')
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_RUN, str(ready), stage, *_mast_args(mast),
                             "--json", str(report), "--quiet"], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while not ready.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert ready.exists(), proc.communicate()[1].decode()
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 128 + signal.SIGTERM          # 143: the shell's convention
    lines = err.decode().strip().splitlines()
    assert len(lines) == 1 and "terminated" in lines[0] and "Traceback" not in err.decode()
    assert json.loads(report.read_text()) == {"earlier": True}
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".partial")] == []


# ------------------------------------------------------------------ 8 extreme but valid values
def test_entries_near_overflow_give_a_finite_raw_condition(tmp_path, capsys):
    T = _tridiagonal()
    path = _write_mm(tmp_path / "huge.mtx", T * 8e307)     # entries 1.6e308 and -8e307
    report = tmp_path / "r.json"
    assert main(["diagnose", str(path), "--json", str(report), "--quiet"]) in (0, 1)
    condition = json.loads(report.read_text())["condition"]
    kappa_2 = np.linalg.cond(T)                             # LAPACK (SVD) via numpy; kappa is scale-free
    assert condition["estimate"] == pytest.approx(kappa_2, rel=1e-8)
    assert condition["one_norm_estimate"] is not None
    assert condition["one_norm_estimate"] <= np.linalg.cond(T, 1) * (1 + 1e-10)   # a lower bound
    assert condition["one_norm_estimate"] >= np.linalg.cond(T, 1) / 3
    assert "RuntimeWarning" not in capsys.readouterr().err


@pytest.mark.parametrize("case", ["huge load", "subnormal matrix"])
def test_extreme_values_say_what_could_not_be_computed(mast, tmp_path, case, capsys):
    report = tmp_path / "r.json"
    if case == "huge load":
        n = 16
        load = tmp_path / "load.csv"
        # (k + 1) * 2**1000, about 1e301: a power-of-two multiple of the load 1..16 measured below.
        load.write_text("\n".join(repr(math.ldexp(k + 1, 1000)) for k in range(n)) + "\n")
        args = ["diagnose", str(mast["matrix"]), "--load", str(load)]
    else:
        args = ["diagnose", str(_write_mm(tmp_path / "tiny.mtx", _tridiagonal() * 1e-310))]
    main(args + ["--json", str(report), "--quiet"])
    err = capsys.readouterr().err
    assert "RuntimeWarning" not in err and "Traceback" not in err
    assert err.count("refinement stopped") <= 1
    data = json.loads(report.read_text())
    for sample in data["digits"]:
        assert not (sample["converged"] and sample["stop_reason"].startswith("correction is not finite"))
    if case == "huge load":
        # Digits are relative, and a power-of-two scaling is exact: the same figure as for 1..16.
        scaled = tmp_path / "scaled.csv"
        scaled.write_text("\n".join(repr(float(k + 1)) for k in range(16)) + "\n")
        again = tmp_path / "again.json"
        main(["diagnose", str(mast["matrix"]), "--load", str(scaled), "--json", str(again), "--quiet"])
        first = {s["sample"]: s["trustworthy_digits"] for s in data["digits"]}
        second = {s["sample"]: s["trustworthy_digits"] for s in json.loads(again.read_text())["digits"]}
        assert first["load"] == second["load"]
    else:
        assert any("subnormal" in note for note in data["summary"]["notes"])
        # The tridiagonal T has kappa_2 = 175 (LAPACK via numpy); the rule of thumb 16 - log10 kappa
        # (common practice), with 3 digits to spare, is what a measured figure must reach.
        floor = 16 - math.log10(np.linalg.cond(_tridiagonal())) - 3
        assert min(s["trustworthy_digits"] for s in data["digits"]) >= floor


# ------------------------------------------------------------------ 9 false rejections
def test_an_error_quoting_a_huge_line_stays_short(tmp_path, capsys):
    path = tmp_path / "k.txt"
    path.write_text("1 1 2\n2 2 2\n" + "3 " * 1_000_000 + "\n")   # a 2 MB garbled line
    assert main(["diagnose", str(path)]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert line.startswith(f"conditioning: error: {path}") and len(line) < 1200


def test_a_three_line_triplet_list_is_read(tmp_path):
    path = tmp_path / "k.txt"
    path.write_text("1 1 2\n2 1 -1\n2 2 2\n")
    K, _ = read_matrix(path)
    np.testing.assert_array_equal(K.toarray(), [[2.0, -1.0], [-1.0, 2.0]])


def test_a_long_comment_line_in_a_csv_is_skipped(mast, tmp_path, capsys):
    dofs = mast["dofs"].read_text().splitlines()
    long = tmp_path / "dofs.csv"
    long.write_text("\n".join([dofs[0], "# " + "x" * 200_000] + dofs[1:]) + "\n")   # csv's limit: 131,072
    args = _mast_args(mast)
    args[args.index("--dofs") + 1] = str(long)
    assert main(args + ["--quiet"]) == 3
    assert "error" not in capsys.readouterr().err


@pytest.mark.parametrize("name", ["random-1", "worst-case", "Random-2"])
def test_a_case_named_like_a_tool_sample_is_refused(mast, tmp_path, name, capsys):
    cases = tmp_path / "cases.csv"
    cases.write_text(f"dead,{name}\n" + "\n".join("1.0,2.0" for _ in range(16)) + "\n")
    args = _mast_args(mast)
    args[args.index("--load") + 1] = str(cases)
    assert main(args) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert str(cases) in line and name in line
