"""The report in the terminal (rich), verdict first.

:class:`TerminalReport` is a rich renderable over a
:class:`~conditioning.results.Report`: ``console.print(TerminalReport(r))``.
It only reads the report; every figure is shown with how it was obtained
(estimate, bound, measured, certified, exact), taken from the ``method``
fields the stages filled in.
"""

from __future__ import annotations

import io
from typing import Iterable, Optional

from rich.console import Console, ConsoleOptions, Group, RenderResult
from rich.rule import Rule
from rich.table import Table
from rich.text import Text

from conditioning import results
from conditioning.render._format import (confirmed, fmt_digits, fmt_motion, fmt_number, how_obtained,
                                         mode_count_lines, scaling_sentence, summarise_ids,
                                         zero_diagonal_text)

_STATUS_STYLE = {"healthy": "bold green", "warnings": "bold yellow", "errors": "bold red"}
_SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "note": "cyan"}


class TerminalReport:
    """Rich view of a report.

    Parameters
    ----------
    report : results.Report
        The diagnosis to show.
    max_ids : int
        Node ids shown per list before it is summarised as "and N more"
        (the JSON report keeps every id).
    extra_verdict : str, optional
        A line the command adds under the verdict (e.g. the ``--min-digits``
        test failing).
    """

    def __init__(self, report: results.Report, *, max_ids: int = 8,
                 extra_verdict: Optional[str] = None):
        self.report = report
        self.max_ids = max_ids
        self.extra_verdict = extra_verdict

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        r = self.report
        yield verdict_line(r)
        if self.extra_verdict:
            yield Text(self.extra_verdict, style="bold red")
        yield from _section("Model", _model(r))
        yield from _section("Structure", _structure(r, self.max_ids))
        yield from _section("Condition number", _condition(r))
        yield from _section("Near-singular modes", _modes(r, self.max_ids))
        yield from _section("Suggested restraints", _restraints(r, self.max_ids))
        yield from _section("Stiffness jumps", _jumps(r, self.max_ids))
        yield from _section("Diagonal decay", _decay(r))
        yield from _section("Digits of the displacements", _digits(r, self.max_ids))
        yield from _section("Findings", _findings(r, self.max_ids))
        yield Rule(style="dim")
        yield Text(r.caution, style="italic")


def render_text(report: results.Report, *, width: int = 100, **kwargs) -> str:
    """The terminal report as plain text (no colour codes), e.g. for a README."""
    console = Console(file=io.StringIO(), width=width, record=True, color_system=None)
    console.print(TerminalReport(report, **kwargs))
    return console.export_text()


def verdict_line(report: results.Report) -> Text:
    """The one-line verdict, coloured by status."""
    text = Text("Verdict: ", style="bold")
    text.append(report.verdict, style=_STATUS_STYLE.get(report.status, "bold"))
    return text


# ----------------------------------------------------------------- sections
def below_minimum_message(report: results.Report) -> Optional[str]:
    """The ``digits.below-minimum`` finding's message, shown under the verdict; None without one."""
    for finding in report.findings:
        if finding.code == "digits.below-minimum":
            return finding.message
    return None


def command_view(report: results.Report, *, quiet: bool = False):
    """What ``conditioning diagnose`` prints: the whole report, or with
    ``quiet`` the verdict line; either way the below-minimum-digits message
    under the verdict when there is one. A rich renderable."""
    extra = below_minimum_message(report)
    if not quiet:
        return TerminalReport(report, extra_verdict=extra)
    # A plain string, as the message was always printed (rich markup applies).
    return Group(verdict_line(report), *([extra] if extra else []))


def demo_case_view(name: str, description: str, report: results.Report, *, quiet: bool = False):
    """One case of ``conditioning demo``: a rule with its name, the invented
    model's description in italics, then the report (``quiet``: the verdict)."""
    parts = [Rule(name)] + ([Text(description, style="italic")] if description else [])
    return Group(*parts, verdict_line(report) if quiet else TerminalReport(report))


def demo_summary(rows: Iterable[tuple[str, results.Report, int]]):
    """The closing table of ``conditioning demo``: one line per model with its
    rows, the exit status ``diagnose`` would return, and the verdict."""
    table = Table(title="Demo models (invented data)", box=None, pad_edge=False)
    for column in ("model", "rows", "exit status", "verdict"):
        table.add_column(column)
    for name, report, status in rows:
        table.add_row(name, f"{report.summary.rows:,}", str(status), report.verdict)
    return Group(Rule(), table)


def _section(title: str, body):
    if body is None:
        return
    yield Rule(title, align="left", style="dim")
    yield body


def _grid() -> Table:
    table = Table.grid(padding=(0, 2))
    table.add_column(style="bold", no_wrap=True)
    table.add_column()
    return table


def _model(r: results.Report):
    s = r.summary
    g = _grid()
    g.add_row("source", s.source)
    g.add_row("rows (DOFs)", f"{s.rows:,}")
    g.add_row("nonzeros in K", f"{s.stored_entries:,} (both triangles; a symmetric file stores one)")
    if s.nodes is not None:
        g.add_row("nodes", f"{s.nodes:,}" + (f" ({s.dim}D)" if s.dim else ""))
    else:
        g.add_row("nodes", "no DOF map: rows are reported by number; node-level findings "
                           "need --dofs or --dofs-per-node")
    if s.dof_types:
        g.add_row("dof types", ", ".join(s.dof_types))
    g.add_row("load / solution", f"{'given' if s.has_load else 'not given'} / "
                                 f"{'given' if s.has_solution else 'not given'}")
    if s.restrained:
        g.add_row("restrained", f"{s.restrained:,} rows and columns removed (--fix)")
    for note in s.notes:
        g.add_row("note", note)
    return g


def _structure(r: results.Report, max_ids: int):
    st = r.structure
    g = _grid()
    sizes = sorted((int(x) for x in st.part_sizes[: st.parts]), reverse=True)  # counted parts come first
    g.add_row("connected parts", f"{st.parts}" + (
        f" (rows per part: {summarise_ids(sizes, max_ids)})" if st.parts > 1 else ""))
    if st.placeholder_rows.size:
        g.add_row("diagonal-only rows", f"{st.placeholder_rows.size:,} (rows "
                  f"{summarise_ids([x + 1 for x in st.placeholder_rows], max_ids)}), not counted as parts")
    for name, rows in (("DOFs without stiffness", st.empty_rows),
                       ("negative diagonal", st.negative_diagonal)):
        rows = list(rows)
        g.add_row(name, "none" if not rows else
                  f"{len(rows):,} (rows {summarise_ids([x + 1 for x in rows], max_ids)})")
        if name.startswith("DOFs"):
            g.add_row("zero diagonal", zero_diagonal_text(st, max_ids))
    a = st.asymmetry
    g.add_row("asymmetry", "none (symmetric)" if a.row < 0 else
              f"largest relative {fmt_number(a.relative)} at row {a.row + 1}, "
              f"column {a.col + 1}")
    return g


def _condition(r: results.Report):
    c = r.condition
    if c is None:
        return Text("not computed", style="dim")
    t = Table(box=None, pad_edge=False, show_edge=False)
    t.add_column("figure")
    t.add_column("value", justify="right")
    t.add_column("how obtained")
    sing = "singular" if c.singular else "-"
    rows = (("2-norm, raw K", c.estimate, c.estimate_method),
            ("2-norm, scaled D^-1/2 K D^-1/2", c.scaled_estimate, c.scaled_method),
            ("1-norm, raw K", c.one_norm_estimate, c.one_norm_method))
    notes = []
    for i, (name, value, method) in enumerate(rows, start=1):
        how = how_obtained(method) if value is not None else "-"
        t.add_row(name, fmt_number(value) if value is not None else sing, f"{how} [{i}]")
        notes.append(Text(f"[{i}] {method}", style="dim"))
    parts = [t]
    if c.singular:
        parts.append(Text("K is singular at working precision: it has a null space "
                          "(see the near-singular modes).", style="red"))
    if c.scaling_gain_digits is not None:
        parts.append(Text(scaling_sentence(c.scaling_gain_digits)))
    return Group(*parts, *notes)


def _modes(r: results.Report, max_ids: int):
    sp = r.spectrum
    if sp is None:
        return Text("not computed", style="dim")
    lines = [Text(line, style="red" if "DISAGREES" in line else "")
             for line in mode_count_lines(sp, bool(r.jumps))]
    if sp.negative_eigenvalues:
        lines.append(Text(f"{sp.negative_eigenvalues} negative eigenvalue(s) of K: the "
                          "stiffness is indefinite", style="red"))
    lines.append(Text(f"method: {sp.method}", style="dim"))
    lines.append(Text(f"rule: {sp.gap_rule}", style="dim"))
    if sp.modes:
        t = Table(box=None, pad_edge=False)
        t.add_column("#", justify="right")
        t.add_column("kind")
        t.add_column("eigenvalue (scaled)", justify="right")
        t.add_column("relative", justify="right")
        t.add_column("motion")
        t.add_column("part", justify="right")
        t.add_column("nodes")
        groups = sp.mode_groups if sum(g.count for g in sp.mode_groups) == len(sp.modes) else [
            results.ModeGroup(m.kind, m.part, 1, m.exact, "", m.nodes, [i], m.eigenvalue)
            for i, m in enumerate(sp.modes, start=1)]  # a report whose modes were edited without regrouping
        for g in groups:
            # One row per group of modes (kind, part): hundreds of modes of one kind fit on one line.
            m = sp.modes[g.modes[0] - 1]
            kind = g.kind if g.exact else f"{g.kind} (nearly free)"
            if g.count == 1:
                motion = m.description or (fmt_motion(m.motion) if m.motion else (
                    f"groups: {len(m.groups)}" if m.groups else "-"))
                t.add_row(str(g.modes[0]), kind, fmt_number(m.eigenvalue), fmt_number(m.relative_eigenvalue),
                          motion, str(g.part), summarise_ids(m.nodes, max_ids))
            else:
                t.add_row(f"{g.modes[0]}-{g.modes[-1]}", f"{g.count:,} x {kind}", f"<= {fmt_number(g.eigenvalue_max)}",
                          "", g.motion or "-", str(g.part) if g.part else "several", summarise_ids(g.nodes, max_ids))
        lines.append(t)
    return Group(*lines)


#: Restraints listed before the rest are counted (all are in the JSON report).
RESTRAINTS_SHOWN = 20


def _restraints(r: results.Report, max_ids: int):
    if not r.restraints:
        return None
    g = _grid()
    for res in r.restraints[:RESTRAINTS_SHOWN]:
        g.add_row(f"node {res.node} {res.dof}", res.reason)
    rest = r.restraints[RESTRAINTS_SHOWN:]
    if rest:
        g.add_row(f"and {len(rest):,} more", f"at nodes {summarise_ids(sorted({x.node for x in rest}), max_ids)} "
                  "(all in the JSON report)")
    note = Text("A restraint must exist in the real structure (or the part must be "
                "connected); do not add one only to silence the solver.", style="italic")
    return Group(g, note)


def _jumps(r: results.Report, max_ids: int):
    if not r.jumps:
        return Text("none found")
    t = Table(box=None, pad_edge=False)
    t.add_column("kind")
    t.add_column("nodes")
    t.add_column("ratio", justify="right")
    t.add_column("digits cost", justify="right")
    t.add_column("suggested stiffness", justify="right")
    for j in r.jumps[:max_ids]:
        t.add_row(j.kind, summarise_ids(j.nodes, max_ids), fmt_number(j.ratio),
                  "all" if j.swallowed else f"about {j.digits_cost:.1f}", fmt_number(j.advice_value))
    parts = [t]
    if len(r.jumps) > max_ids:
        parts.append(Text(f"and {len(r.jumps) - max_ids:,} more (all in the JSON report)"))
    parts.append(Text("The reasoning behind each suggested stiffness is in the findings "
                      "below and in the JSON report.", style="dim"))
    return Group(*parts)


def _decay(r: results.Report):
    d = r.decay
    if d is None or not d.worst:
        return None
    g = _grid()
    negative = {e.row for e in getattr(d, "negative_pivots", [])}
    if negative:
        g.add_row("negative", f"{len(negative)} negative pivot(s): K is not positive definite")
    else:
        g.add_row("largest", f"{d.max_digits:.1f} digits lost at a pivot")
    for e in d.worst[:5]:
        g.add_row(e.label, f"negative pivot, K_ii/D_ii = {fmt_number(e.ratio)}" if e.row in negative
                  else f"K_ii/D_ii = {fmt_number(e.ratio)}, about {e.digits:.1f} digits")
    return Group(g, Text(f"method: {d.method}", style="dim"))


def _digits(r: results.Report, max_ids: int):
    dg = r.digits
    if dg is None:
        return Text("not measured", style="dim")
    if dg.skipped:
        return Group(Text(f"not measured: {dg.skipped}", style="yellow"), *_audit_lines(dg.audit))
    t = Table(box=None, pad_edge=False)
    t.add_column("sample", no_wrap=True)
    t.add_column("trustworthy digits", justify="right")
    t.add_column("digits lost", justify="right")
    t.add_column("how obtained")
    t.add_column("converged")
    t.add_column("reference error bound", justify="right")
    worst = _grid()
    for s in dg.samples:
        bound = (fmt_number(s.normwise_bound) if s.bound_trusted and s.normwise_bound is not None
                 else "withdrawn")
        t.add_row(s.sample, _digits_shown(s), fmt_digits(s.digits_lost),
                  _how_digits(s.method), "yes" if s.converged else f"no: {s.stop_reason}",
                  bound)
        if s.worst_nodes:
            shown = ", ".join(f"{w.node} ({fmt_digits(w.digits)})"
                              for w in s.worst_nodes[:max_ids // 2 or 1])
            more = len(s.worst_nodes) - (max_ids // 2 or 1)
            worst.add_row(s.sample, shown + (f" and {more:,} more" if more > 0 else ""))
    lines = [t]
    if any(getattr(s, "at_ceiling", False) for s in dg.samples):
        lines.append(Text(">= : the error is below what the reference can resolve; the true "
                          "figure is at least this.", style="dim"))
    if worst.row_count:
        unit = "node" if r.summary.nodes is not None else "row"
        lines.append(Text(f"Worst {unit}s, {unit} (digits of its worst component against its own size):"))
        lines.append(worst)
    if dg.summary:
        lines.append(Text(dg.summary))
    else:
        pred = []
        if dg.predicted_raw is not None:
            pred.append(f"from the raw condition number {fmt_digits(dg.predicted_raw)}")
        if dg.predicted_scaled is not None:
            pred.append(f"from the scaled one {fmt_digits(dg.predicted_scaled)}")
        if pred:
            lines.append(Text("Rule-of-thumb prediction (16 - log10 kappa): "
                              + ", ".join(pred) + " digits."))
        if dg.factorization_flops:
            lines.append(Text(f"The factorization took about "
                              f"{fmt_number(dg.factorization_flops)} operations; digits are "
                              "lost to conditioning, not to the operation count.", style="dim"))
    lines.extend(_confirmation_lines(dg.samples))
    if dg.certification:
        lines.append(Text(f"Verified eigenvalue bound: {dg.certification}.", style="dim"))
    lines.extend(_audit_lines(dg.audit))
    return Group(*lines)


def _audit_lines(audit: Optional[results.SolutionAudit]) -> list[Text]:
    """How the supplied solution fits K and f, in one or two lines."""
    if audit is None:
        return []
    if audit.free_mode_share is not None:
        return [Text(f"Supplied solution: K is singular; its component along the free modes is "
                     f"{fmt_number(audit.free_mode_share)} of it, so it keeps {fmt_digits(audit.trustworthy_digits)} "
                     f"digits (bound); backward error {fmt_number(audit.backward_error)}.")]
    fit = "fits" if audit.fits else "does NOT fit"
    text = (f"Supplied solution {fit} K and f: backward error {fmt_number(audit.backward_error)} against "
            f"{fmt_number(audit.allowed_backward_error)} for the tool's own solve; "
            f"{fmt_digits(audit.trustworthy_digits)} trustworthy digits ({audit.method}).")
    if audit.digits_written is not None:
        text += f" Its values were written with {audit.digits_written} significant figures."
    return [Text(text, style=None if audit.fits else "bold red")]


def _confirmation_lines(samples) -> list[Text]:
    """One line for the confirmed samples, one for the others; a failed or
    skipped re-solve is never counted as a confirmation."""
    lines = []
    for group, word in (([s for s in samples if s.confirmation and confirmed(s)],
                         "Independent confirmation"),
                        ([s for s in samples if s.confirmation and not confirmed(s)],
                         "Not independently confirmed")):
        if not group:
            continue
        more = (f" (likewise {len(group) - 1} more sample(s): "
                f"{', '.join(s.sample for s in group[1:])}; all in the JSON report)"
                if len(group) > 1 else "")
        lines.append(Text(f"{word}, {group[0].sample}: {group[0].confirmation}{more}",
                          style="dim" if word.startswith("Ind") else "yellow"))
    return lines


def _digits_shown(s: results.DigitsSample) -> str:
    """Trustworthy digits; ``>= 13.6`` when the reference cannot resolve more."""
    text = fmt_digits(s.trustworthy_digits)
    return f">= {text}" if getattr(s, "at_ceiling", False) else text


#: Short labels for the digits table (the full method is in the JSON and HTML).
_SHORT_METHOD = {
    "certified (verified eigenvalue bound)": "certified (eig. bound)",
    "certified (ball arithmetic)": "certified (ball)",
}


def _how_digits(method: str) -> str:
    if method in _SHORT_METHOD:
        return _SHORT_METHOD[method]
    tag = how_obtained(method)
    return method if tag in method else f"{method}, {tag}"


def _findings(r: results.Report, max_ids: int):
    if not r.findings:
        return Text("no findings")
    rows = []
    for f in _by_severity(r.findings):
        line = Text()
        line.append(f"{f.severity:<7} ", style=_SEVERITY_STYLE.get(f.severity, ""))
        line.append(f"[{f.code}] ", style="dim")
        line.append(f.message)
        listed = summarise_ids(f.nodes, max_ids)
        if f.nodes and listed not in f.message:
            line.append(f" (nodes {listed})")
        rows.append(line)
        if f.advice:
            rows.append(Text(f"        advice: {f.advice}"))
    return Group(*rows)


def _by_severity(findings: Iterable[results.Finding]) -> list[results.Finding]:
    order = {"error": 0, "warning": 1, "note": 2}
    return sorted(findings, key=lambda f: order.get(f.severity, 3))


# --------------------------------------------------------------- comparison
class ComparisonView:
    """Rich view of a :class:`conditioning.compare.Comparison`."""

    def __init__(self, comparison, *, max_ids: int = 8):
        self.c = comparison
        self.max_ids = max_ids

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        c = self.c
        head = Text("Before: ", style="bold")
        head.append(c.before_verdict, style=_STATUS_STYLE.get(c.before_status, ""))
        yield head
        head = Text("After:  ", style="bold")
        head.append(c.after_verdict, style=_STATUS_STYLE.get(c.after_status, ""))
        yield head
        for note in c.notes:
            yield Text(f"note: {note}", style="yellow")
        yield from _section("Near-singular modes", self._modes())
        yield from _section("Condition number", self._condition())
        yield from _section("Digits of the displacements", self._digits())
        yield from _section("Findings", self._findings())

    def _modes(self):
        c = self.c
        lines = [Text(f"{c.modes_before} before, {c.modes_after} after")]
        for word, changes, style in (("removed", c.modes_removed, "green"),
                                     ("added", c.modes_added, "red")):
            for m in changes:
                lines.append(Text(f"{word}: {m.count} x {m.kind} (nodes "
                                  f"{summarise_ids(m.nodes, self.max_ids)})", style=style))
        return Group(*lines)

    def _condition(self):
        t = Table(box=None, pad_edge=False)
        t.add_column("figure")
        t.add_column("before", justify="right")
        t.add_column("after", justify="right")
        t.add_column("orders of magnitude better", justify="right")
        names = {"estimate": "2-norm, raw K", "scaled_estimate": "2-norm, scaled",
                 "one_norm_estimate": "1-norm, raw K (lower bound)"}
        for f in self.c.condition:
            t.add_row(names.get(f.name, f.name),
                      "singular" if f.before is None else fmt_number(f.before),
                      "singular" if f.after is None else fmt_number(f.after),
                      "-" if f.digits_change is None else f"{f.digits_change:+.1f}")
        return t

    def _digits(self):
        if not self.c.digits:
            return Text("not measured in either report", style="dim")
        t = Table(box=None, pad_edge=False)
        t.add_column("sample")
        t.add_column("before", justify="right")
        t.add_column("after", justify="right")
        t.add_column("change", justify="right")
        for d in self.c.digits:
            t.add_row(d.sample, fmt_digits(d.before), fmt_digits(d.after),
                      "-" if d.change is None else f"{d.change:+.1f}")
        return t

    def _findings(self):
        lines = []
        for word, items, style in (("resolved", self.c.findings_resolved, "green"),
                                   ("new", self.c.findings_new, "red"),
                                   ("still there", self.c.findings_kept, "")):
            for f in items:
                text = f"{word}: {f.severity} [{f.code}] {f.message}"
                listed = summarise_ids(f.nodes, self.max_ids)
                if f.nodes and listed not in f.message:
                    text += f" (nodes {listed})"
                lines.append(Text(text, style=style))
        return Group(*lines) if lines else Text("no findings in either report")


def render_comparison_text(comparison, *, width: int = 100) -> str:
    """The comparison as plain text."""
    console = Console(file=io.StringIO(), width=width, record=True, color_system=None)
    console.print(ComparisonView(comparison))
    return console.export_text()
