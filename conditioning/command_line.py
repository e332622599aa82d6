"""The command line of ``conditioning``: its options, and the checks made before any work.

:func:`parse` turns ``argv`` into the options :mod:`conditioning.cli` runs
with; a bad command line, an option out of range or an output the inputs
cannot support raises :class:`UsageError` (one line, exit status 2) before
a file is read.
"""

from __future__ import annotations

import argparse
import importlib.util
import logging
import math
import os
import sys
from contextlib import contextmanager, redirect_stderr, redirect_stdout
from pathlib import Path
from typing import Iterator, Optional, Sequence

#: Engines of ``--engine`` (conditioning.engine.ENGINES, named here so that --help imports no numerics).
ENGINES = ("scipy", "petsc")
#: Most random load samples ``--samples`` takes (the project's choice: each sample is one more
#: column of the multi-column solve and of the extended-precision re-solves; 100 columns of a
#: 300,000-row model already take 240 MB a copy).
MAX_SAMPLES = 100
#: Largest ``--seed`` (numpy's generators take any non-negative integer; the project bounds it
#: to 63 bits so that the seed is exact in the JSON report for any reader).
MAX_SEED = 2**63 - 1
#: Largest ``--min-digits`` (the project's choice: binary64 carries about 16 decimal digits, a
#: requirement above 17 can never be met; a little room is left above that).
MAX_MIN_DIGITS = 20.0
#: Options naming input files (attribute, as the user wrote it): never written over by an output.
INPUT_OPTIONS = (("matrix", "MATRIX"), ("before", "BEFORE"), ("after", "AFTER"), ("dofs", "--dofs"),
                 ("coords", "--coords"), ("load", "--load"), ("solution", "--solution"), ("fix", "--fix"),
                 ("elements", "--elements"), ("mesh", "--mesh"), ("from_report", "--from-report"))
#: Options naming output files.
OUTPUT_OPTIONS = (("json", "--json"), ("html", "--html"), ("modes_vtk", "--modes-vtk"),
                  ("modes_csv", "--modes-csv"))


class UsageError(Exception):
    """A bad command line or an output the inputs cannot support (exit 2)."""


class _Parser(argparse.ArgumentParser):
    """argparse, but errors become :class:`UsageError` (one line, exit 2)."""

    def error(self, message):  # noqa: D401 - argparse API
        raise UsageError(message)


def _add_input_options(p: argparse.ArgumentParser) -> argparse._ArgumentGroup:
    """The model context, diagnosis and output options of diagnose and compare;
    returns the output group, for the command's own outputs."""
    g = p.add_argument_group("model context")
    dofs = g.add_mutually_exclusive_group()
    dofs.add_argument("--dofs", metavar="FILE",
                      help="CSV 'node,dof', one line per matrix row (dof: ux uy uz rx ry rz)")
    dofs.add_argument("--dofs-per-node", metavar="K", type=int, choices=(2, 3, 6),
                      help="shortcut for a regular map: 2 (ux,uy), 3 (ux,uy,uz), 6 (+rx,ry,rz)")
    dofs.add_argument("--dof-names", metavar="LIST", type=lambda v: tuple(x.strip() for x in v.split(",")),
                      help="a regular map naming each node's DOFs in row order, e.g. ux,uy,rz (2D frame)")
    g.add_argument("--coords", metavar="FILE", help="CSV 'node,x,y[,z]' of node positions")
    g.add_argument("--mesh", metavar="FILE",
                   help="a mesh file (Gmsh .msh, VTK/VTU, XDMF; needs meshio) for coordinates and elements "
                        "instead of --coords and --elements")
    g.add_argument("--elements", metavar="FILE",
                   help="CSV 'element,node,node,...' of element connectivity (kind from the node count): "
                        "element shapes checked, real cells in --modes-vtk; needs --coords")
    g.add_argument("--load", metavar="FILE", help="load vector, or load cases as columns (Matrix Market array or CSV)")
    g.add_argument("--solution", metavar="FILE", help="displacements computed elsewhere, to be audited (one column per load case)")
    g.add_argument("--fix", metavar="FILE",
                   help="CSV 'node,dof' of restrained DOFs to remove before the diagnosis")
    r = p.add_argument_group("diagnosis")
    r.add_argument("--min-digits", metavar="N", type=float, default=4.0,
                   help=f"fewer trustworthy digits than N is an error (exit 3); 0 to {MAX_MIN_DIGITS:g}, "
                        "default 4")
    r.add_argument("--seed", metavar="N", type=int, default=0,
                   help="seed of the random load samples: 0 to 2**63-1 (default 0)")
    r.add_argument("--samples", metavar="N", type=int, default=3,
                   help=f"number of random load samples: 0 to {MAX_SAMPLES} (default 3)")
    r.add_argument("--engine", choices=ENGINES, default="scipy",
                   help="sparse direct solver: scipy (SuperLU, default) or petsc (MUMPS and SLEPc; run "
                        "under mpiexec, environment from scripts/setup-petsc-engine.sh)")
    o = p.add_argument_group("output")
    o.add_argument("--quiet", "-q", action="store_true", help="print only the verdict; no progress bars")
    o.add_argument("--verbose", "-v", action="count", default=0,
                   help="log what the stages do (-vv for more)")
    return o


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``conditioning`` command."""
    parser = _Parser(prog="conditioning",
                     description="Can the stiffness matrix of a linear static finite element "
                                 "model be trusted?",
                     epilog="Exit status: 0 healthy; 1 warnings only; 2 unusable input or bad "
                            "options; 3 errors found (singular, a free or nearly free mode, or "
                            "fewer trustworthy digits than --min-digits); 4 internal error; "
                            "130 interrupted; 141 standard output closed early; 143 terminated "
                            "(SIGTERM). Environment: CONDITIONING_MEMORY_LIMIT (bytes, e.g. 8G, "
                            "512M, 1e9; blank or unset: 70% of the available memory).")
    from conditioning import __version__

    parser.add_argument("--version", action="version", version=f"conditioning {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    d = sub.add_parser("diagnose", help="diagnose one stiffness export",
                       description="Diagnose one stiffness export (Matrix Market or Harwell-Boeing).")
    d.add_argument("matrix", metavar="MATRIX", help=".mtx, .mtx.gz, .mtx.bz2, .rsa, .rua, .hb")
    out = _add_input_options(d)
    out.add_argument("--json", metavar="FILE", help="write the report as JSON ('-': stdout)")
    out.add_argument("--html", metavar="FILE", help="write a self-contained HTML report")
    out.add_argument("--modes-vtk", metavar="FILE.vtu",
                     help="near-singular modes as VTK point vectors (needs a DOF map and coordinates)")
    out.add_argument("--modes-csv", metavar="FILE", help="near-singular modes as CSV")
    m = sub.add_parser("demo", help="diagnose the bundled (invented) demo models",
                       description="Diagnose each bundled demo model and show its report.")
    m.add_argument("--json", metavar="DIR", help="also write one JSON report per model in DIR")
    m.add_argument("--html", metavar="DIR", help="also write one HTML report per model in DIR")
    m.add_argument("--seed", metavar="N", type=int, default=0, help="0 to 2**63-1 (default 0)")
    m.add_argument("--samples", metavar="N", type=int, default=3, help=f"0 to {MAX_SAMPLES} (default 3)")
    m.add_argument("--quiet", "-q", action="store_true", help="print only the verdicts")
    m.add_argument("--verbose", "-v", action="count", default=0)
    c = sub.add_parser("compare", help="what changed between two exports of the same model",
                       description="Compare two exports of the same model (before and after a fix); "
                                   "the exit status is that of AFTER.")
    c.add_argument("before", metavar="BEFORE")
    c.add_argument("after", metavar="AFTER")
    _add_input_options(c).add_argument("--json", metavar="FILE",
                                       help="write the comparison as JSON ('-': stdout)")
    e = sub.add_parser("explain", help="what is at one matrix row (a row a solver warned about)",
                       description="Explain one row of a stiffness export: its node and DOF, couplings, "
                                   "stiffness jumps, pivot, share of the near-singular modes, what would help.")
    e.add_argument("matrix", metavar="MATRIX", help=".mtx, .mtx.gz, .mtx.bz2, .rsa, .rua, .hb")
    e.add_argument("--row", metavar="N", type=int, required=True,
                   help="the row (equation) number: from --row-base to the matrix's last row")
    e.add_argument("--row-base", metavar="B", type=int, choices=(0, 1), default=1,
                   help="1 (default): the first row is 1; 0: the first row is 0")
    e.add_argument("--from-report", metavar="FILE",
                   help="take the pivot, modes, jumps and supports from the JSON report of an earlier "
                        "'diagnose --json' run of this matrix: no factorization")
    _add_input_options(e)
    return parser


class _OncePerMessage(logging.Filter):
    """Each distinct message is shown once per run (the same warning from every sample is one line)."""

    def __init__(self):
        super().__init__()
        self._seen: set[tuple[str, int, str]] = set()

    def filter(self, record: logging.LogRecord) -> bool:
        key = (record.name, record.levelno, record.getMessage())
        if key in self._seen:
            return False
        self._seen.add(key)
        return True


class _ShownFormatter(logging.Formatter):
    """Log records as written, but with control characters shown escaped (names in them are the user's)."""

    def format(self, record: logging.LogRecord) -> str:
        from conditioning.render.safe_text import shown

        return shown(super().format(record))


def configure_logging(verbose: int, quiet: bool = False) -> None:
    """-v: INFO, -vv: DEBUG; default WARNING; --quiet: ERROR only."""
    level = logging.WARNING if verbose <= 0 else logging.INFO if verbose == 1 else logging.DEBUG
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_ShownFormatter("%(levelname)s %(name)s: %(message)s"))
    handler.addFilter(_OncePerMessage())
    root = logging.getLogger("conditioning")
    root.handlers[:] = [handler]
    root.setLevel(logging.ERROR if quiet and verbose <= 0 else level)
    # numpy's floating-point RuntimeWarnings (an overflow met on extreme but valid input) are the
    # stages' business: their figures say what could not be computed. -vv shows the warnings, once each.
    logging.captureWarnings(True)
    py_warnings = logging.getLogger("py.warnings")
    py_warnings.handlers[:] = [handler]
    py_warnings.propagate = False
    py_warnings.setLevel(logging.WARNING if verbose >= 2 else logging.CRITICAL)


def parse(argv: Optional[Sequence[str]] = None) -> argparse.Namespace:
    """The parsed and checked command line (``sys.argv[1:]`` when ``argv`` is None).

    Raises
    ------
    UsageError
        On a bad command line or option (argparse's message, or ours).
    SystemExit
        For ``--help`` (status 0).
    """
    args = build_parser().parse_args(argv)
    check_numbers(args)
    if args.command != "demo":
        check_options(args)
    return args


def check_numbers(args) -> None:
    """Bounds of the numeric options every command shares, and the memory setting (exit 2, one line)."""
    seed = getattr(args, "seed", 0)
    if not 0 <= seed <= MAX_SEED:
        raise UsageError(f"--seed {seed}: must be an integer from 0 to 2**63-1")
    samples = getattr(args, "samples", 0)
    if not 0 <= samples <= MAX_SAMPLES:
        raise UsageError(f"--samples {samples}: must be from 0 to {MAX_SAMPLES}")
    min_digits = getattr(args, "min_digits", 0.0)
    if not (math.isfinite(min_digits) and 0.0 <= min_digits <= MAX_MIN_DIGITS):
        raise UsageError(f"--min-digits {min_digits}: must be a number of digits from 0 to {MAX_MIN_DIGITS:g}")
    from conditioning.engine.memory import memory_limit_setting

    memory_limit_setting()  # SettingError (one line, exit 2) when CONDITIONING_MEMORY_LIMIT is not understood


def check_files(args) -> None:
    """Inputs must be regular files; no output may be an input or another output (exit 2, one line)."""
    from conditioning.io.outputs import check_outputs, require_regular_file

    inputs = [(label, getattr(args, attr, None)) for attr, label in INPUT_OPTIONS]
    for _, path in inputs:
        if path is not None:
            require_regular_file(path)
    check_outputs(inputs, [(label, getattr(args, attr, None)) for attr, label in OUTPUT_OPTIONS])


def check_options(args) -> None:
    """Refuse, before the work, options out of range and outputs the inputs cannot support."""
    if getattr(args, "row", 0) < getattr(args, "row_base", 0):
        raise UsageError(f"--row {args.row}: rows are numbered from {args.row_base} (--row-base)")
    if getattr(args, "samples", 0) < 0:
        raise UsageError(f"--samples {args.samples}: must be 0 or more")
    if getattr(args, "min_digits", 0.0) < 0 or not math.isfinite(getattr(args, "min_digits", 0.0)):
        raise UsageError(f"--min-digits {args.min_digits}: must be a number of digits >= 0")
    for opt in ("modes_vtk", "modes_csv", "html", "json"):
        value = getattr(args, opt, None)
        parent = Path(value).expanduser().resolve().parent if value and value != "-" else None
        if parent is not None and not parent.is_dir():
            raise UsageError(f"--{opt.replace('_', '-')} {value}: folder {parent} does not exist")
    if getattr(args, "modes_vtk", None) and args.dofs is None and args.dofs_per_node is None \
            and args.dof_names is None:
        raise UsageError("--modes-vtk needs a DOF map (--dofs, --dofs-per-node or --dof-names)")
    if getattr(args, "mesh", None) and getattr(args, "coords", None):
        raise UsageError("--mesh gives the coordinates: leave out --coords")
    if getattr(args, "elements", None) and getattr(args, "coords", None) is None and not getattr(args, "mesh", None):
        raise UsageError("--elements needs node coordinates (--coords)")
    if getattr(args, "modes_vtk", None) and args.coords is None and not getattr(args, "mesh", None):
        raise UsageError("--modes-vtk needs node coordinates (--coords)")
    check_files(args)
    missing = [m for m in ("petsc4py", "slepc4py") if importlib.util.find_spec(m) is None]
    if getattr(args, "engine", "scipy") == "petsc" and missing:
        raise UsageError(f"--engine petsc needs {' and '.join(missing)}, not importable here; "
                         "build the engine's environment with scripts/setup-petsc-engine.sh VENV")


@contextmanager
def written_by_rank_zero(args) -> Iterator[None]:
    """Under ``--engine petsc`` every rank of ``mpiexec`` computes the same report:
    rank 0 prints it and writes the files, the other ranks' output goes to
    os.devnull (their exit status is the same)."""
    if getattr(args, "engine", "scipy") != "petsc":
        yield
        return
    from petsc4py import PETSc

    if PETSc.COMM_WORLD.rank == 0:
        yield
        return
    for opt in ("json", "html", "modes_vtk", "modes_csv"):
        setattr(args, opt, None)
    with open(os.devnull, "w") as null, redirect_stdout(null), redirect_stderr(null):
        yield
