"""The ``conditioning`` command: parse, diagnose, render, exit status.

A thin layer over :func:`conditioning.pipeline.diagnose`; no numerics here.

Exit status
-----------
=====  ==============================================================
0      healthy
1      warnings only: the results are usable with the stated digits
2      unusable input (unreadable or inconsistent files, bad options)
3      errors found: singular, a free mode, or fewer trustworthy
       digits than ``--min-digits`` (default 4)
4      internal error of the tool (a bug; ``-v`` shows the traceback)
130    interrupted (Ctrl-C)
141    standard output closed early (e.g. piped into ``head``)
=====  ==============================================================
"""

from __future__ import annotations

import argparse
import logging
import math
import os
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator, Optional, Sequence

from conditioning import results
from conditioning.errors import ConditioningError

log = logging.getLogger(__name__)

EXIT_HEALTHY, EXIT_WARNINGS, EXIT_INPUT, EXIT_ERRORS, EXIT_INTERNAL = 0, 1, 2, 3, 4
EXIT_INTERRUPTED = 130
EXIT_BROKEN_PIPE = 141

ProgressCallback = Callable[[str, Optional[float]], None]


class UsageError(Exception):
    """A bad command line or an output the inputs cannot support (exit 2)."""


class _Parser(argparse.ArgumentParser):
    """argparse, but errors become :class:`UsageError` (one line, exit 2)."""

    def error(self, message):  # noqa: D401 - argparse API
        raise UsageError(message)


# ------------------------------------------------------------------- parser
def _add_input_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("model context")
    dofs = g.add_mutually_exclusive_group()
    dofs.add_argument("--dofs", metavar="FILE",
                      help="CSV 'node,dof', one line per matrix row (dof: ux uy uz rx ry rz)")
    dofs.add_argument("--dofs-per-node", metavar="K", type=int, choices=(2, 3, 6),
                      help="shortcut for a regular map: 2 (ux,uy), 3 (ux,uy,uz), 6 (+rx,ry,rz)")
    g.add_argument("--coords", metavar="FILE", help="CSV 'node,x,y[,z]' of node positions")
    g.add_argument("--load", metavar="FILE", help="load vector (Matrix Market array or CSV)")
    g.add_argument("--solution", metavar="FILE",
                   help="displacements computed elsewhere, to be audited")
    g.add_argument("--fix", metavar="FILE",
                   help="CSV 'node,dof' of restrained DOFs to remove before the diagnosis")
    r = p.add_argument_group("diagnosis")
    r.add_argument("--min-digits", metavar="N", type=float, default=4.0,
                   help="fewer trustworthy digits than N is an error (exit 3); default 4")
    r.add_argument("--seed", metavar="N", type=int, default=0,
                   help="seed of the random load samples (default 0)")
    r.add_argument("--samples", metavar="N", type=int, default=3,
                   help="number of random load samples (default 3)")
    o = p.add_argument_group("output")
    o.add_argument("--quiet", "-q", action="store_true",
                   help="print only the verdict; no progress bars")
    o.add_argument("--verbose", "-v", action="count", default=0,
                   help="log what the stages do (-vv for more)")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``conditioning`` command."""
    parser = _Parser(prog="conditioning",
                     description="Can the stiffness matrix of a linear static finite element "
                                 "model be trusted?",
                     epilog="Exit status: 0 healthy; 1 warnings only; 2 unusable input or bad "
                            "options; 3 errors found (singular, a free or nearly free mode, or "
                            "fewer trustworthy digits than --min-digits); 4 internal error; "
                            "130 interrupted.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    d = sub.add_parser("diagnose", help="diagnose one stiffness export",
                       description="Diagnose one stiffness export (Matrix Market or "
                                   "Harwell-Boeing).")
    d.add_argument("matrix", metavar="MATRIX", help=".mtx, .mtx.gz, .mtx.bz2, .rsa, .rua, .hb")
    _add_input_options(d)
    out = [g for g in d._action_groups if g.title == "output"][0]
    out.add_argument("--json", metavar="FILE", help="write the report as JSON ('-': stdout)")
    out.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    out.add_argument("--modes-vtk", metavar="FILE.vtu",
                     help="near-singular modes as VTK point vectors (needs a DOF map and "
                          "coordinates)")
    out.add_argument("--modes-csv", metavar="FILE", help="near-singular modes as CSV")

    m = sub.add_parser("demo", help="diagnose the bundled (invented) demo models",
                       description="Diagnose each bundled demo model and show its report.")
    m.add_argument("--json", metavar="DIR", help="also write one JSON report per model in DIR")
    m.add_argument("--html", metavar="DIR", help="also write one HTML report per model in DIR")
    m.add_argument("--seed", metavar="N", type=int, default=0)
    m.add_argument("--samples", metavar="N", type=int, default=3)
    m.add_argument("--quiet", "-q", action="store_true", help="print only the verdicts")
    m.add_argument("--verbose", "-v", action="count", default=0)

    c = sub.add_parser("compare", help="what changed between two exports of the same model",
                       description="Compare two exports of the same model (before and after "
                                   "a fix); the exit status is that of AFTER.")
    c.add_argument("before", metavar="BEFORE")
    c.add_argument("after", metavar="AFTER")
    _add_input_options(c)
    out = [g for g in c._action_groups if g.title == "output"][0]
    out.add_argument("--json", metavar="FILE", help="write the comparison as JSON ('-': stdout)")
    return parser


# -------------------------------------------------------------- exit status
def exit_status(report: results.Report) -> int:
    """Exit status of a diagnosis: the report's status, mapped one to one.

    ``errors`` -> 3, ``warnings`` -> 1, ``healthy`` -> 0. The status is decided
    once, by :func:`conditioning.stages.findings.status_of` (a singular K, a free or
    nearly free mode and fewer digits than ``--min-digits`` are all error
    findings), so the JSON ``status`` and the exit status always agree.
    """
    return {"errors": EXIT_ERRORS, "warnings": EXIT_WARNINGS}.get(report.status, EXIT_HEALTHY)


def _min_digits_line(report: results.Report) -> Optional[str]:
    """The ``digits.below-minimum`` finding's message, shown under the verdict."""
    for finding in report.findings:
        if finding.code == "digits.below-minimum":
            return finding.message
    return None


# ----------------------------------------------------------------- progress
@contextmanager
def _progress(enabled: bool) -> Iterator[Optional[ProgressCallback]]:
    """A ``progress(stage, fraction)`` callback drawing rich bars on stderr."""
    if not enabled:
        yield None
        return
    from rich.console import Console
    from rich.progress import (BarColumn, Progress, SpinnerColumn, TextColumn,
                               TimeElapsedColumn)

    bars = Progress(SpinnerColumn(), TextColumn("{task.description:<16}"), BarColumn(),
                    TimeElapsedColumn(), console=Console(stderr=True), transient=True)
    tasks: dict[str, int] = {}
    current: list[str] = []

    def progress(stage: str, fraction: Optional[float] = None) -> None:
        if stage not in tasks:
            if current:
                prev = tasks[current[-1]]
                bars.update(prev, total=1, completed=1)
            tasks[stage] = bars.add_task(stage, total=None if fraction is None else 1.0)
            current.append(stage)
        task = tasks[stage]
        if fraction is not None:
            bars.update(task, total=1.0, completed=max(0.0, min(1.0, float(fraction))))

    with bars:
        yield progress


def _show_progress(args) -> bool:
    return not args.quiet and sys.stderr.isatty()


# ------------------------------------------------------------------ running
def _load(path: str, args, progress: Optional[ProgressCallback]):
    from conditioning.io.load import load_model

    if progress:
        progress("reading", None)
    return load_model(path, dofs=args.dofs, dofs_per_node=args.dofs_per_node,
                      coords=args.coords, load=args.load, solution=args.solution, fix=args.fix)


def _diagnose(model, args, progress):
    return diagnose_model(model, seed=args.seed, samples=args.samples,
                          min_digits=args.min_digits, progress=progress)


def _console(to_stderr: bool):
    from rich.console import Console

    return Console(stderr=to_stderr)


def _check_outputs(args) -> None:
    """Refuse, before the work, options out of range and outputs the inputs
    cannot support."""
    if getattr(args, "samples", 0) < 0:
        raise UsageError(f"--samples {args.samples}: must be 0 or more")
    if getattr(args, "min_digits", 0.0) < 0 or not math.isfinite(getattr(args, "min_digits", 0.0)):
        raise UsageError(f"--min-digits {args.min_digits}: must be a number of digits >= 0")
    for opt in ("modes_vtk", "modes_csv", "html", "json"):
        value = getattr(args, opt, None)
        if value and value != "-":
            parent = Path(value).expanduser().resolve().parent
            if not parent.is_dir():
                raise UsageError(f"--{opt.replace('_', '-')} {value}: folder {parent} "
                                 "does not exist")
    if getattr(args, "modes_vtk", None):
        if args.dofs is None and args.dofs_per_node is None:
            raise UsageError("--modes-vtk needs a DOF map (--dofs or --dofs-per-node)")
        if args.coords is None:
            raise UsageError("--modes-vtk needs node coordinates (--coords)")


def _run_diagnose(args) -> int:
    from conditioning.render.terminal import TerminalReport, verdict_line

    _check_outputs(args)
    with _progress(_show_progress(args)) as progress:
        model = _load(args.matrix, args, progress)
        report = _diagnose(model, args, progress)
    console = _console(to_stderr=args.json == "-")
    extra = _min_digits_line(report)
    if args.quiet:
        console.print(verdict_line(report))
        if extra:
            console.print(extra)
    else:
        console.print(TerminalReport(report, extra_verdict=extra))
    _write_outputs(report, args)
    return exit_status(report)


def _write_outputs(report, args) -> None:
    if args.json:
        from conditioning.render.json_report import write_json

        write_json(report, args.json)
    if args.html:
        from conditioning.render.html import write_html

        write_html(report, args.html)
        _note_missing_matplotlib()
    if args.modes_vtk:
        from conditioning.render.modes_export import write_modes_vtu

        write_modes_vtu(report, args.modes_vtk)
    if args.modes_csv:
        from conditioning.render.modes_export import write_modes_csv

        write_modes_csv(report, args.modes_csv)


def _note_missing_matplotlib() -> None:
    from conditioning.render.plots import require_matplotlib

    try:
        require_matplotlib()
    except ImportError:
        print("conditioning: note: matplotlib is not installed, so the HTML report has no "
              "figures (pip install 'fe-conditioning[report]')", file=sys.stderr)


def _run_demo(args) -> int:
    from rich.rule import Rule

    from conditioning.demo.scenarios import scenarios
    from conditioning.render.terminal import TerminalReport, verdict_line

    console = _console(to_stderr=False)
    for folder in (args.json, args.html):
        if folder:
            Path(folder).mkdir(parents=True, exist_ok=True)
    from rich.table import Table
    from rich.text import Text

    cases = scenarios()
    summary = Table(title="Demo models (invented data)", box=None, pad_edge=False)
    for column in ("model", "rows", "exit status", "verdict"):
        summary.add_column(column)
    for case in (cases.values() if isinstance(cases, dict) else cases):
        name = str(getattr(case, "name", "demo"))
        description = getattr(case, "description", None) or ""
        with _progress(_show_progress(args)) as progress:
            report = diagnose_model(case.model, seed=args.seed, samples=args.samples,
                                    progress=progress)
        console.print(Rule(name))
        if description:
            console.print(Text(description, style="italic"))
        console.print(verdict_line(report) if args.quiet else TerminalReport(report))
        summary.add_row(name, f"{report.summary.rows:,}", str(exit_status(report)),
                        report.verdict)
        if args.json:
            from conditioning.render.json_report import write_json

            write_json(report, Path(args.json) / f"{name}.json")
        if args.html:
            from conditioning.render.html import write_html

            write_html(report, Path(args.html) / f"{name}.html")
    if not args.quiet:
        console.print(Rule())
        console.print(summary)
    return EXIT_HEALTHY


def diagnose_model(model, **kwargs) -> results.Report:
    """:func:`conditioning.pipeline.diagnose` (imported late so ``--help`` stays fast)."""
    from conditioning.pipeline import diagnose

    return diagnose(model, **kwargs)


def _run_compare(args) -> int:
    from conditioning.compare import compare_reports
    from conditioning.render.terminal import ComparisonView

    _check_outputs(args)
    with _progress(_show_progress(args)) as progress:
        before = _diagnose(_load(args.before, args, progress), args, progress)
        after = _diagnose(_load(args.after, args, progress), args, progress)
    comparison = compare_reports(before, after)
    console = _console(to_stderr=args.json == "-")
    if args.quiet:
        from conditioning.render.terminal import verdict_line

        console.print(verdict_line(after))
    else:
        console.print(ComparisonView(comparison))
    if args.json:
        from conditioning.render.json_report import write_comparison_json

        write_comparison_json(comparison, args.json)
    return exit_status(after)


def _configure_logging(verbose: int, quiet: bool = False) -> None:
    """-v: INFO, -vv: DEBUG; default WARNING; --quiet: ERROR only."""
    level = logging.WARNING if verbose <= 0 else logging.INFO if verbose == 1 else logging.DEBUG
    if quiet and verbose <= 0:
        level = logging.ERROR
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger("conditioning")
    root.handlers[:] = [handler]
    root.setLevel(level)


def _fail(message: str) -> None:
    print(f"conditioning: error: {' '.join(str(message).split())}", file=sys.stderr)


def main(argv: Optional[Sequence[str]] = None) -> int:
    """Run the command; returns the exit status (see the module docstring).

    ``demo`` returns 0 when every demo model was diagnosed, whatever the
    models' own statuses (listed in its closing table): several demo models
    are broken on purpose.
    """
    parser = build_parser()
    verbose = 0
    try:
        args = parser.parse_args(argv)
        verbose = args.verbose
        _configure_logging(verbose, quiet=args.quiet)
        run = {"diagnose": _run_diagnose, "demo": _run_demo, "compare": _run_compare}
        return run[args.command](args)
    except SystemExit as exc:  # --help, --version
        return int(exc.code or 0) if not isinstance(exc.code, str) else EXIT_INPUT
    except BrokenPipeError:
        # The reader went away (| head): stop quietly, as other filters do.
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
        except (OSError, ValueError):
            pass
        return EXIT_BROKEN_PIPE
    except (UsageError, ConditioningError) as exc:
        _fail(str(exc))
        return EXIT_INPUT
    except OSError as exc:
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        _fail(f"{where}{exc.strerror or exc}")
        return EXIT_INPUT
    except MemoryError:
        _fail("out of memory: the model does not fit in this machine's memory "
              "(see docs/benchmarks.md for sizes that fit)")
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("conditioning: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # a bug: one line, the traceback only with -v
        if verbose:
            log.exception("internal error")
        _fail(f"internal error ({type(exc).__name__}: {exc}); please report it, "
              "run with -v for the traceback")
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
