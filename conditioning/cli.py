"""The ``conditioning`` command: parse, diagnose, render, exit status.

A thin layer: :mod:`conditioning.command_line` defines and checks the options,
:func:`conditioning.pipeline.diagnose` makes the report, :mod:`conditioning.render`
shows it; no numerics and no rule of the diagnosis here. Exit status: 0 healthy;
1 warnings only (usable with the stated digits); 2 unusable input or bad options;
3 errors found (singular, a free mode, or fewer trustworthy digits than
``--min-digits``); 4 internal error (a bug; ``-v`` shows the traceback);
130 interrupted (Ctrl-C); 141 standard output closed early (``| head``); 143 terminated
(SIGTERM). Outputs: :mod:`conditioning.io.outputs`; printing: :mod:`conditioning.render.safe_text`.
"""

from __future__ import annotations

import logging
import os
import sys
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import TYPE_CHECKING, Iterator, Optional, Sequence

from conditioning import results
from conditioning.command_line import UsageError, configure_logging, parse, written_by_rank_zero
from conditioning.errors import ConditioningError
from conditioning.io.outputs import write_atomically as _write_one
from conditioning.render.safe_text import one_line, safe_console as _console
from conditioning.signals import EXIT_TERMINATED, Terminated, terminate_on_sigterm

if TYPE_CHECKING:  # the pipeline is imported late, so that --help stays fast
    from conditioning.pipeline import ProgressCallback

EXIT_HEALTHY, EXIT_WARNINGS, EXIT_INPUT, EXIT_ERRORS, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_BROKEN_PIPE = 0, 1, 2, 3, 4, 130, 141


def exit_status(report: results.Report) -> int:
    """The report's status mapped one to one: ``errors`` -> 3, ``warnings`` -> 1, ``healthy`` -> 0
    (decided once, by the findings stage, so the JSON ``status`` and the exit status agree)."""
    return {"errors": EXIT_ERRORS, "warnings": EXIT_WARNINGS}.get(report.status, EXIT_HEALTHY)


@contextmanager
def _progress(enabled: bool) -> Iterator[Optional[ProgressCallback]]:
    """A ``progress(stage, fraction)`` callback drawing rich bars on stderr (None when disabled)."""
    if not enabled:
        yield None
        return
    from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    bars = Progress(SpinnerColumn(), TextColumn("{task.description:<16}"), BarColumn(),
                    TimeElapsedColumn(), console=_console(stderr=True), transient=True)
    tasks: dict[str, int] = {}

    def progress(stage: str, fraction: Optional[float] = None) -> None:
        if stage not in tasks:
            if tasks:  # a new stage: the previous one is done
                bars.update(list(tasks.values())[-1], total=1, completed=1)
            tasks[stage] = bars.add_task(stage, total=None if fraction is None else 1.0)
        if fraction is not None:
            bars.update(tasks[stage], total=1.0, completed=max(0.0, min(1.0, float(fraction))))

    with bars:
        yield progress


def _load(path: str, args, progress: Optional[ProgressCallback]):
    from conditioning.io.load import load_model
    if progress:
        progress("reading", None)
    extra = {k: v for k, v in vars(args).items() if k in ("elements", "mesh")}
    return load_model(path, dofs=args.dofs, dofs_per_node=args.dof_names or args.dofs_per_node, coords=args.coords,
                      load=args.load, solution=args.solution, fix=args.fix, **extra)


def diagnose_model(model, **kwargs) -> results.Report:
    """:func:`conditioning.pipeline.diagnose` (imported late so ``--help`` stays fast)."""
    from conditioning.pipeline import diagnose

    return diagnose(model, **kwargs)


def _diagnosed(path: str, args, progress) -> results.Report:
    return diagnose_model(_load(path, args, progress), seed=args.seed, samples=args.samples,
                          min_digits=args.min_digits, progress=progress, engine=args.engine)


def _write(report: results.Report, *, json=None, html=None, modes_vtk=None, modes_csv=None) -> None:
    """Every file output the command line asked for, each a view of the report, each
    written to a temporary file beside its target and renamed into place when complete."""
    from conditioning.render import html as html_view, json_report, modes_export

    for path, write in ((json, json_report.write_json), (html, html_view.write_html),
                        (modes_vtk, modes_export.write_modes_vtu), (modes_csv, modes_export.write_modes_csv)):
        if path:
            _write_one(write, report, path)


def _run_diagnose(args) -> int:
    from conditioning.render.html import missing_figures_note
    from conditioning.render.terminal import command_view

    with _progress(not args.quiet and sys.stderr.isatty()) as progress:
        report = _diagnosed(args.matrix, args, progress)
    _console(stderr=args.json == "-").print(command_view(report, quiet=args.quiet, verbose=args.verbose > 0))
    _write(report, json=args.json, html=args.html, modes_vtk=args.modes_vtk, modes_csv=args.modes_csv)
    if args.html and missing_figures_note():
        print(f"conditioning: note: {missing_figures_note()}", file=sys.stderr)
    return exit_status(report)


def _run_demo(args) -> int:
    """Every bundled demo model, diagnosed and shown; 0 once all ran (several are broken on purpose)."""
    from conditioning.demo.scenarios import scenarios
    from conditioning.render.terminal import demo_case_view, demo_summary

    console, rows = _console(), []
    for folder in filter(None, (args.json, args.html)):
        Path(folder).mkdir(parents=True, exist_ok=True)
    for name, case in scenarios().items():
        with _progress(not args.quiet and sys.stderr.isatty()) as progress:
            report = diagnose_model(case.model, seed=args.seed, samples=args.samples, progress=progress)
        console.print(demo_case_view(name, case.description, report, quiet=args.quiet, verbose=args.verbose > 0))
        rows.append((name, report, exit_status(report)))
        _write(report, json=args.json and Path(args.json) / f"{name}.json",
               html=args.html and Path(args.html) / f"{name}.html")
    if not args.quiet:
        console.print(demo_summary(rows))
    return EXIT_HEALTHY


def _run_compare(args) -> int:
    from conditioning.compare import compare_reports
    from conditioning.render.json_report import write_comparison_json
    from conditioning.render.terminal import ComparisonView, verdict_line

    with _progress(not args.quiet and sys.stderr.isatty()) as progress:
        before, after = (_diagnosed(path, args, progress) for path in (args.before, args.after))
    comparison = compare_reports(before, after)
    _console(stderr=args.json == "-").print(verdict_line(after) if args.quiet else ComparisonView(comparison))
    if args.json:
        _write_one(write_comparison_json, comparison, args.json)
    return exit_status(after)


def _run_explain(args) -> int:  # what is at one row, in the numbering it was asked in
    from conditioning.pipeline import explain, explain_from_report
    from conditioning.render.terminal import explanation_view
    model, row, base = _load(args.matrix, args, None), args.row - args.row_base, args.row_base
    _console().print(explanation_view(explain_from_report(model, row, args.from_report, row_base=base) if args.from_report
                                     else explain(model, row, row_base=base, seed=args.seed, engine=args.engine)[1]))
    return EXIT_HEALTHY


def _fail(message: str, status: int = EXIT_INPUT) -> int:
    print(f"conditioning: error: {one_line(' '.join(str(message).split()))}", file=sys.stderr)
    return status


def main(argv: Optional[Sequence[str]] = None) -> int:
    """Run the command; returns the exit status (see the module docstring).

    ``demo`` returns 0 when every demo model was diagnosed, whatever the
    models' own statuses (listed in its closing table).
    """
    verbose = 0
    try:
        args = parse(argv)
        configure_logging(verbose := args.verbose, quiet=args.quiet)
        with terminate_on_sigterm(), written_by_rank_zero(args):
            return {"diagnose": _run_diagnose, "demo": _run_demo, "compare": _run_compare,
                    "explain": _run_explain}[args.command](args)
    except SystemExit as exc:  # --help, --version
        return int(exc.code or 0) if not isinstance(exc.code, str) else EXIT_INPUT
    except BrokenPipeError:  # the reader went away (| head): stop quietly, as other filters do
        with suppress(OSError, ValueError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_BROKEN_PIPE
    except (UsageError, ConditioningError) as exc:
        return _fail(str(exc))
    except OSError as exc:
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        return _fail(f"{where}{exc.strerror or exc}")
    except MemoryError:
        return _fail("out of memory: the model does not fit in this machine's memory "
                     "(see docs/benchmarks.md for sizes that fit)")
    except KeyboardInterrupt:
        print("conditioning: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Terminated:
        print("conditioning: terminated (SIGTERM); no output file was left half-written", file=sys.stderr)
        return EXIT_TERMINATED
    except Exception as exc:  # a bug: one line, the traceback only with -v
        if verbose:
            logging.getLogger(__name__).exception("internal error")
        return _fail(f"internal error ({type(exc).__name__}: {exc}); please report it, "
                     "run with -v for the traceback", EXIT_INTERNAL)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
