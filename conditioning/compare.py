"""What changed between two diagnoses of the same model (before and after a fix).

:func:`compare_reports` reads two :class:`~conditioning.results.Report`
objects and returns a :class:`Comparison`: near-singular modes removed and
added, the condition figures before and after, the digits per sample, and
findings resolved and new. It only reads the reports; nothing is recomputed.

Matching rules
--------------
* A mode is identified by its kind and the nodes that locate it; modes with
  the same identity are counted as a multiset, so a free part that went from
  6 rigid-body modes to 1 shows 5 removed.
* A finding is identified by its code and nodes (the message wording may
  change between versions).
* Digits are matched by sample name (``load``, ``random-1``, ...); the
  random samples are comparable when both runs used the same seed.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass
from typing import Optional

from conditioning import results


@dataclass(frozen=True)
class ModeChange:
    """A near-singular mode present in only one of the two reports."""

    kind: str
    """``rigid-body``, ``mechanism`` or ``dof-without-stiffness``."""
    nodes: list[int]
    """Nodes that locate the mode (as in the report)."""
    count: int
    """How many modes of this kind and nodes were removed (or added)."""


@dataclass(frozen=True)
class FigureChange:
    """One condition figure before and after."""

    name: str
    """``estimate`` (2-norm, raw), ``scaled_estimate`` or ``one_norm_estimate``."""
    before: Optional[float]
    """Value before (dimensionless); None when singular or not computed."""
    after: Optional[float]
    digits_change: Optional[float]
    """log10(before / after): positive when the fix improved the figure by
    that many orders of magnitude; None when either side is missing."""


@dataclass(frozen=True)
class DigitsChange:
    """Trustworthy digits of one sample before and after (measured figures)."""

    sample: str
    before: Optional[float]
    after: Optional[float]
    change: Optional[float]
    """after - before (digits); None when the sample ran on one side only."""


@dataclass(frozen=True)
class FindingChange:
    severity: str
    code: str
    message: str
    nodes: list[int]


@dataclass(frozen=True)
class Comparison:
    """Differences between a BEFORE and an AFTER report of the same model."""

    before_source: str
    after_source: str
    before_rows: int
    after_rows: int
    before_verdict: str
    after_verdict: str
    before_status: str
    after_status: str
    modes_before: int
    """Near-singular modes found before."""
    modes_after: int
    modes_removed: list[ModeChange]
    modes_added: list[ModeChange]
    condition: list[FigureChange]
    digits: list[DigitsChange]
    findings_resolved: list[FindingChange]
    findings_new: list[FindingChange]
    findings_kept: list[FindingChange]
    notes: list[str]
    """Caveats, e.g. that the row counts differ."""


def compare_reports(before: results.Report, after: results.Report) -> Comparison:
    """Compare two reports of the same model.

    Parameters
    ----------
    before, after : results.Report
        Diagnoses of the export before and after a change.

    Returns
    -------
    Comparison
        Modes removed and added, condition figures, digits per sample and
        findings resolved, new and kept.
    """
    removed, added = _mode_changes(before, after)
    resolved, new, kept = _finding_changes(before, after)
    notes = []
    if before.summary.rows != after.summary.rows:
        notes.append(f"the exports have different sizes ({before.summary.rows:,} and "
                     f"{after.summary.rows:,} rows): check that they are the same model")
    return Comparison(
        before_source=before.summary.source, after_source=after.summary.source,
        before_rows=before.summary.rows, after_rows=after.summary.rows,
        before_verdict=before.verdict, after_verdict=after.verdict,
        before_status=before.status, after_status=after.status,
        modes_before=_mode_count(before), modes_after=_mode_count(after),
        modes_removed=removed, modes_added=added,
        condition=_condition_changes(before, after), digits=_digits_changes(before, after),
        findings_resolved=resolved, findings_new=new, findings_kept=kept, notes=notes)


# ------------------------------------------------------------------ helpers
def _mode_count(r: results.Report) -> int:
    return 0 if r.spectrum is None else len(r.spectrum.modes)


def _mode_keys(r: results.Report) -> Counter:
    modes = [] if r.spectrum is None else r.spectrum.modes
    return Counter((m.kind, tuple(sorted(int(n) for n in m.nodes))) for m in modes)


def _mode_changes(before, after) -> tuple[list[ModeChange], list[ModeChange]]:
    b, a = _mode_keys(before), _mode_keys(after)
    removed = [ModeChange(k, list(n), c) for (k, n), c in sorted((b - a).items())]
    added = [ModeChange(k, list(n), c) for (k, n), c in sorted((a - b).items())]
    return removed, added


def _finding_key(f: results.Finding):
    return (f.code, tuple(sorted(int(n) for n in f.nodes)))


def _finding_changes(before, after):
    b = Counter(_finding_key(f) for f in before.findings)
    a = Counter(_finding_key(f) for f in after.findings)
    gone, came, both = b - a, a - b, b & a

    def take(findings, wanted: Counter) -> list[FindingChange]:
        wanted = Counter(wanted)
        out = []
        for f in findings:
            key = _finding_key(f)
            if wanted[key] > 0:
                wanted[key] -= 1
                out.append(FindingChange(f.severity, f.code, f.message, list(f.nodes)))
        return out

    return take(before.findings, gone), take(after.findings, came), take(after.findings, both)


def _condition_changes(before, after) -> list[FigureChange]:
    out = []
    for name in ("estimate", "scaled_estimate", "one_norm_estimate"):
        vb = None if before.condition is None else getattr(before.condition, name)
        va = None if after.condition is None else getattr(after.condition, name)
        change = None
        if vb is not None and va is not None and vb > 0 and va > 0 \
                and math.isfinite(vb) and math.isfinite(va):
            change = math.log10(vb / va)
        out.append(FigureChange(name, vb, va, change))
    return out


def _samples(r: results.Report) -> dict[str, float]:
    if r.digits is None:
        return {}
    return {s.sample: s.trustworthy_digits for s in r.digits.samples}


def _digits_changes(before, after) -> list[DigitsChange]:
    b, a = _samples(before), _samples(after)
    names = list(b) + [k for k in a if k not in b]
    out = []
    for name in names:
        vb, va = b.get(name), a.get(name)
        change = va - vb if vb is not None and va is not None else None
        out.append(DigitsChange(name, vb, va, change))
    return out
