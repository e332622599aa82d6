"""The report as JSON, for pipelines and other tools.

The layout is versioned by the ``schema`` key and documented field by field
in ``docs/report-format.md``. Rules applied on purpose:

* A number that is infinite or not-a-number is written as ``null`` and a
  sibling key ``<name>_nonfinite`` says which (``"inf"``, ``"-inf"``,
  ``"nan"``); in a list of numbers the sibling lists ``{"index", "value"}``.
  The file is then strict JSON (``json.dumps(..., allow_nan=False)``),
  which RFC 8259 parsers accept.
* A figure that does not exist (the condition number of a singular matrix)
  is ``null`` without a sibling.
* Mode vectors and per-row component labels are not written (use
  ``--modes-csv`` / ``--modes-vtk``); per-DOF digits are written rounded to
  0.01 digit. What ``conditioning explain --from-report`` needs is written
  compactly: the pivot share of every row and the rows that carry each mode
  (at least 0.05% of it) with their shares, to 4 significant figures.
* The report's geometry (node ids, positions, row map, K's node graph and
  diagonal) is not written: it restates the input files, and would make the
  file as large as the model.
"""

from __future__ import annotations

import dataclasses
import json
import math
import sys
from pathlib import Path
from typing import Any, Optional, Union

import numpy as np

from conditioning import results

#: Version of the JSON layout (:data:`conditioning.results.REPORT_SCHEMA`).
SCHEMA = results.REPORT_SCHEMA
COMPARE_SCHEMA = "conditioning-compare/1"

#: Fields that are not serialised (large, or only meaningful with the model).
_OMIT = {"vector", "part_of_row", "eigenvectors", "smallest_vector", "solution", "load_vector",
         "reference_hi", "reference_lo"}

#: Report fields never written: the input restated for the figures and mode
#: files (docs/report-format.md, "Not in the JSON").
_NOT_WRITTEN = {"geometry"}

#: Report fields :func:`report_to_dict` writes under its own layout.
_HANDLED = {"summary", "structure", "factorization", "condition", "spectrum", "restraints",
            "jumps", "pivots", "digits", "findings", "verdict", "status", "timings", "caution"}


def report_to_dict(report: results.Report) -> dict[str, Any]:
    """The report as plain JSON-ready data.

    Parameters
    ----------
    report : results.Report
        The diagnosis.

    Returns
    -------
    dict
        Keys as in ``docs/report-format.md``; only ``dict``, ``list``,
        ``str``, ``int``, finite ``float``, ``bool`` and ``None`` inside.
    """
    s = report.summary
    out: dict[str, Any] = {
        "schema": SCHEMA,
        "tool": _tool(),
        "source": s.source,
        "rows": int(s.rows),
        "verdict": report.verdict,
        "status": report.status,
        "summary": _plain(s),
        "structure": _structure(report.structure),
        "factorization": _plain(report.factorization),
        "condition": _plain(report.condition),
        "spectrum": _spectrum(report.spectrum),
        "near_singular_modes": _modes(report.spectrum),
        "suggested_restraints": [_plain(r) for r in report.restraints],
        "stiffness_jumps": [_plain(j) for j in report.jumps],
        "pivot_loss": _pivot_loss(report.pivots),
        "digits": _digits(report.digits),
        "digits_summary": _digits_summary(report.digits),
        "findings": [_plain(f) for f in report.findings],
        # snake_case as every other key; the stage names keep their spaces for people
        "timings": {name.replace(" ", "_"): _plain(t) for name, t in report.timings.items()},
        "caution": report.caution,
    }
    # Fields added to Report later are written under their own names, so a new
    # stage reaches the JSON (and the key-documentation test) without edits here.
    for f in dataclasses.fields(report):
        if f.name not in _HANDLED and f.name not in _NOT_WRITTEN:
            out[f.name] = _plain(getattr(report, f.name))
    return _finite(out)


def comparison_to_dict(comparison) -> dict[str, Any]:
    """A :class:`conditioning.compare.Comparison` as JSON-ready data."""
    out = {"schema": COMPARE_SCHEMA, "tool": _tool(), **_plain(comparison)}
    return _finite(out)


def dumps(data: dict[str, Any]) -> str:
    """Strict JSON text (no NaN/Infinity tokens), indented, ending in a newline."""
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


def write_json(report: results.Report, path_or_dash: Union[str, Path]) -> None:
    """Write the report as JSON to a file, or to standard output for ``"-"``."""
    _write(dumps(report_to_dict(report)), path_or_dash)


def write_comparison_json(comparison, path_or_dash: Union[str, Path]) -> None:
    """Write a comparison as JSON to a file, or to standard output for ``"-"``."""
    _write(dumps(comparison_to_dict(comparison)), path_or_dash)


# ------------------------------------------------------------------ helpers
def _write(text: str, path_or_dash: Union[str, Path]) -> None:
    if str(path_or_dash) == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    Path(path_or_dash).write_text(text, encoding="utf-8")


def _tool() -> dict[str, str]:
    from conditioning import __version__

    return {"name": "conditioning", "version": __version__}


def _structure(st: results.StructureResult) -> dict[str, Any]:
    d = _plain(st)
    d["rows"] = d.pop("n")
    return d


def _spectrum(sp: Optional[results.SpectrumResult]) -> Optional[dict[str, Any]]:
    if sp is None:
        return None
    d = _plain(sp)
    d.pop("modes", None)
    return d


def _modes(sp: Optional[results.SpectrumResult]) -> list[dict[str, Any]]:
    if sp is None:
        return []
    out = []
    for i, mode in enumerate(sp.modes, start=1):
        d = {"index": i, **_plain(mode)}
        d["has_vector"] = mode.vector is not None
        if mode.row_shares is not None:
            d["row_shares"]["shares"] = _significant(mode.row_shares.shares)
        out.append(d)
    return out


def _pivot_loss(pl: Optional[results.PivotLoss]) -> Optional[dict[str, Any]]:
    d = _plain(pl)
    if pl is not None and pl.kept_by_row is not None:
        d["kept_by_row"] = _significant(pl.kept_by_row)
    return d


#: Significant figures of the per-row figures kept for explaining a row later:
#: enough to fix the digits lost at a pivot to 0.0002, and a share to 0.05%
#: of itself (the project's choice: both are shown to 0.1).
PER_ROW_FIGURES = 4


def _significant(values) -> list[float]:
    """Floats rounded to PER_ROW_FIGURES significant figures (non-finite kept)."""
    return [float(f"{v:.{PER_ROW_FIGURES}g}") if math.isfinite(v) else v
            for v in np.asarray(values, dtype=np.float64).tolist()]


def _digits(dg: Optional[results.DigitsResult]) -> list[dict[str, Any]]:
    if dg is None:
        return []
    out = []
    for sample in dg.samples:
        d = _plain(sample)
        per_dof = sample.per_dof_digits
        d["per_dof_digits"] = (None if per_dof is None
                               else [_round(v, 2) for v in np.asarray(per_dof, float).tolist()])
        out.append(d)
    return out


def _digits_summary(dg: Optional[results.DigitsResult]) -> Optional[dict[str, Any]]:
    if dg is None:
        return None
    d = _plain(dg)
    d.pop("samples", None)
    return d


def _round(v: float, nd: int) -> float:
    return round(v, nd) if math.isfinite(v) else v


def _plain(obj: Any) -> Any:
    """Dataclasses, numpy scalars and arrays to plain Python (non-finite kept)."""
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _plain(getattr(obj, f.name))
                for f in dataclasses.fields(obj) if f.name not in _OMIT}
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj)
    return str(obj)


def _nonfinite_word(v: float) -> str:
    if math.isnan(v):
        return "nan"
    return "inf" if v > 0 else "-inf"


def _finite(obj: Any) -> Any:
    """Replace non-finite floats by null with a ``<name>_nonfinite`` sibling."""
    if isinstance(obj, dict):
        out: dict[str, Any] = {}
        for key, value in obj.items():
            if isinstance(value, float) and not math.isfinite(value):
                out[key] = None
                out[f"{key}_nonfinite"] = _nonfinite_word(value)
            elif isinstance(value, list) and any(
                    isinstance(v, float) and not math.isfinite(v) for v in value):
                out[key] = [None if isinstance(v, float) and not math.isfinite(v)
                            else _finite(v) for v in value]
                out[f"{key}_nonfinite"] = [
                    {"index": i, "value": _nonfinite_word(v)} for i, v in enumerate(value)
                    if isinstance(v, float) and not math.isfinite(v)]
            else:
                out[key] = _finite(value)
        return out
    if isinstance(obj, list):
        return [None if isinstance(v, float) and not math.isfinite(v) else _finite(v)
                for v in obj]
    return obj
