"""Reading back what ``conditioning explain`` needs from a saved JSON report.

    (report.json of ``diagnose --json``, the model read again) => SavedReport

An earlier run's report holds, besides its findings, the figures that
explain one row without a factorization (docs/report-format.md): the
pivot share D_ii / K_ii of every row (``pivot_loss.kept_by_row``), the rows
that carry each near-singular mode (``near_singular_modes[].row_shares``),
the stiffness jumps and the suggested supports, and a fingerprint of the
matrix (``summary.fingerprint``). The report is refused, as an
:class:`~conditioning.errors.InputError` naming the file, when it is not
such a report, was written by a version without these figures, or belongs to
another matrix (rows, stored entries or fingerprint differ) or another DOF map.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any, Optional, Union

import numpy as np
from numpy.typing import NDArray

from conditioning.errors import InputError
from conditioning.model import DOF_NAMES, Model, matrix_fingerprint
from conditioning.results import REPORT_SCHEMA as SCHEMA
from conditioning.results import (CoincidentNodes, FarNode, GeometryChecks, Restraint, RowShares, StiffnessJump,
                                  TouchingParts)

_NONFINITE = {"inf": math.inf, "-inf": -math.inf, "nan": math.nan}
_RERUN = "run 'conditioning diagnose MATRIX --json FILE' again with this version"


@dataclass(frozen=True)
class SavedMode:
    """One near-singular mode as the saved report holds it."""

    index: int
    """1-based position in the report's ``near_singular_modes``."""
    kind: str
    """``rigid-body``, ``mechanism`` or ``dof-without-stiffness``."""
    eigenvalue: float
    """Eigenvalue of S (dimensionless)."""
    row_shares: Optional[RowShares]
    """Rows carrying the mode and their shares (4 significant figures); None
    when the earlier run kept no vector of the mode."""
    exact: bool = False
    """True when the earlier run found the eigenvalue zero at working precision."""


@dataclass(frozen=True)
class SavedReport:
    """What explaining a row needs from an earlier run's report, checked against the model."""

    path: str
    """The report file as the user named it."""
    ordering: Optional[str]
    """Fill-reducing ordering of the earlier run's factorization; None when none ran."""
    singular: bool
    """True when the earlier run found K singular at its factorization (it factored
    a shifted S, or left rows without stiffness out): no pivot is then defined."""
    kept_by_row: Optional[NDArray[np.float64]] = field(repr=False)
    """(n,) D_ii / K_ii of every row, 4 significant figures, NaN for rows not
    factored; None when the earlier run has no pivots (``no_pivots`` says why)."""
    no_pivots: str
    """Why ``kept_by_row`` is None, in words; empty otherwise."""
    modes: list[SavedMode]
    """The near-singular modes, in the report's order."""
    jumps: list[StiffnessJump]
    """The stiffness jumps, as the report lists them."""
    restraints: list[Restraint]
    """The suggested supports, as the report lists them."""
    geometry: Optional[GeometryChecks] = None
    """The coincident and far nodes of the earlier run (no element shapes);
    None when its report has no geometry checks."""


def read_saved_report(path: Union[str, Path], model: Model) -> SavedReport:
    """Read the JSON report at ``path`` and check that it belongs to ``model``.

    Parameters
    ----------
    path : str or Path
        A file written by ``conditioning diagnose --json`` (schema
        :data:`conditioning.results.REPORT_SCHEMA`).
    model : Model
        The model read again: its K (rows, stored entries, fingerprint) and
        DOF map must be those the report was made of.

    Returns
    -------
    SavedReport
        The earlier run's pivots, modes, jumps and supports.

    Raises
    ------
    InputError
        The file cannot be read or is not JSON; it is not a report of this
        tool's schema, or lacks the per-row figures (an older version wrote
        it); or it belongs to another matrix or DOF map.
    """
    where = str(path)
    data = _json(where)
    try:
        _check_schema(where, data)
        _check_model(where, data, model)
        return _saved(where, data, model.n)
    except InputError:
        raise
    except KeyError as exc:
        raise InputError(where, f"not a complete conditioning report (no key {exc})") from None
    except (AttributeError, TypeError, ValueError, IndexError) as exc:
        raise InputError(where, f"not a complete conditioning report ({exc})") from None


def _json(where: str) -> Any:
    try:
        with open(where, encoding="utf-8") as handle:
            return json.load(handle)
    except OSError as exc:
        raise InputError(where, exc.strerror or str(exc)) from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(where, f"not a JSON file ({exc})") from None


def _check_schema(where: str, data: Any) -> None:
    schema = data.get("schema") if isinstance(data, dict) else None
    if not isinstance(schema, str) or not schema.startswith("conditioning-report/"):
        raise InputError(where, "not a report of 'conditioning diagnose --json' (no schema "
                                "'conditioning-report/...')")
    if schema != SCHEMA:
        raise InputError(where, f"report schema {schema}; this version reads {SCHEMA}: {_RERUN}")
    summary = data.get("summary") or {}
    if not summary.get("fingerprint") or ((data.get("pivot_loss") or {}).get("kept_by_row") is None
                                          and data.get("pivot_loss") is not None):
        raise InputError(where, "written by an older version of conditioning, without the per-row figures "
                                f"explain needs (matrix fingerprint, every row's pivot, the rows of each mode): {_RERUN}")


def _check_model(where: str, data: dict, model: Model) -> None:
    """The report's matrix and DOF map against the model's; the first difference found."""
    s = data["summary"]
    ours = (model.n, int(model.K.nnz))
    theirs = (int(s["rows"]), int(s["stored_entries"]))
    if theirs != ours:
        raise InputError(where, f"the report is of a matrix with {theirs[0]} rows and {theirs[1]} stored entries, "
                                f"not of this one ({ours[0]} rows, {ours[1]} stored entries)")
    if s["fingerprint"] != matrix_fingerprint(model.K):
        raise InputError(where, "the report is of another matrix of the same size (its fingerprint differs): "
                                "the export changed since the report was written")
    nodes = None if model.dofs is None else int(model.dofs.nodes.size)
    types = [] if model.dofs is None else [DOF_NAMES[t] for t in model.dofs.dof_types]
    if (s["nodes"], list(s["dof_types"])) != (nodes, types):
        raise InputError(where, f"the report was made with {_dof_map(s['nodes'], s['dof_types'])}, this run has "
                                f"{_dof_map(nodes, types)}: give the DOF map of the earlier run")


def _dof_map(nodes: Optional[int], types: list[str]) -> str:
    return "no DOF map" if nodes is None else f"a DOF map of {nodes} nodes ({', '.join(types)})"


def _saved(where: str, data: dict, n: int) -> SavedReport:
    fac, pivots = data["factorization"], data["pivot_loss"]
    kept = None
    if pivots is not None:
        kept = np.asarray(_numbers(pivots, "kept_by_row"), dtype=np.float64)
        if kept.shape != (n,):
            raise ValueError(f"pivot_loss.kept_by_row has {kept.size} entries for {n} rows")
    skipped = data.get("skipped") or {}
    no_pivots = "" if kept is not None else (
        skipped.get("pivots") or skipped.get("factorization") or "the earlier run made no pivots")
    singular = fac is not None and (_number(fac, "shift") != 0.0 or bool(data["structure"]["empty_rows"]))
    return SavedReport(
        path=where, ordering=None if fac is None else str(fac["ordering"]), singular=singular,
        kept_by_row=kept, no_pivots=no_pivots, modes=[_mode(m, n) for m in data["near_singular_modes"]],
        jumps=[_rebuild(StiffnessJump, j) for j in data["stiffness_jumps"]],
        restraints=[_rebuild(Restraint, r) for r in data["suggested_restraints"]],
        geometry=_geometry(data.get("geometry_checks")))


def _geometry(d: Optional[dict]) -> Optional[GeometryChecks]:
    """The node checks of a saved report (what explain's advice uses)."""
    if not d:
        return None
    return GeometryChecks(method=str(d.get("method", "")),
                          coincident=[_rebuild(CoincidentNodes, c) for c in d.get("coincident", [])],
                          far=[_rebuild(FarNode, f) for f in d.get("far", [])],
                          touching=[_rebuild(TouchingParts, t) for t in d.get("touching", [])])


def _mode(m: dict, n: int) -> SavedMode:
    shares = m.get("row_shares")
    if m["has_vector"] and shares is None:
        raise ValueError(f"mode {m['index']} has a vector but no row_shares")
    if shares is not None:
        rows = np.asarray(shares["rows"], dtype=np.intp)
        if rows.size and (rows.min() < 0 or rows.max() >= n or np.any(np.diff(rows) <= 0)):
            raise ValueError(f"mode {m['index']}: row_shares.rows not ascending rows of 0..{n - 1}")
        shares = RowShares(rows=rows, shares=np.asarray(shares["shares"], dtype=np.float64),
                           smallest=float(shares["smallest"]))
        if shares.shares.shape != rows.shape:
            raise ValueError(f"mode {m['index']}: row_shares.rows and row_shares.shares differ in length")
    return SavedMode(index=int(m["index"]), kind=str(m["kind"]), eigenvalue=_number(m, "eigenvalue"),
                     row_shares=shares, exact=bool(m.get("exact", False)))


def _rebuild(cls, d: dict):
    """A flat result dataclass from its JSON object (non-finite numbers restored)."""
    return cls(**{f.name: _number(d, f.name) for f in fields(cls) if f.name in d})


def _number(d: dict, key: str) -> Any:
    """d[key], or the non-finite number its ``<key>_nonfinite`` sibling names."""
    value = d[key]
    return _NONFINITE[d[f"{key}_nonfinite"]] if value is None and f"{key}_nonfinite" in d else value


def _numbers(d: dict, key: str) -> list:
    """The list d[key] with the entries its ``<key>_nonfinite`` sibling names restored."""
    values = [math.nan if v is None else float(v) for v in d[key]]
    for entry in d.get(f"{key}_nonfinite", []):
        values[int(entry["index"])] = _NONFINITE[entry["value"]]
    return values


__all__ = ["SavedMode", "SavedReport", "read_saved_report"]
