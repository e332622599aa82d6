"""The report in the terminal (rich): verdict, what to do, key figures, details.

:class:`TerminalReport` is a rich renderable over a
:class:`~conditioning.results.Report`: ``console.print(TerminalReport(r))``.
It only reads the report. Every figure is tagged with how it was obtained
(estimate, bound, computed, measured, certified, exact), from the ``method``
fields the stages filled in; the methods themselves, rules and references
are shown with ``verbose`` (``-v``) and are always in the JSON and HTML.

Budget (tests/test_terminal_budget.py): a small model's whole report fits in
60 lines at 100 columns with the action in the first 15, and no table row
wraps at 80 columns.
"""

from __future__ import annotations

import io
from typing import Iterable, Optional

from rich.console import Console, ConsoleOptions, Group, RenderResult
from rich.rule import Rule
from rich.table import Table
from rich.text import Text

from conditioning import results
from conditioning.render.safe_text import SafeConsole
from conditioning.render._format import (NEGATIVE_PIVOTS_HOW, confirmed, fmt_digits, fmt_motion, fmt_number, how_obtained,
                                         fmt_mode_eigenvalue, ids_phrase, mode_count_lines, pivots_are_lower_bounds, rows_phrase,
                                         scaling_sentence, summarise_ids, total_of, unit_word,
                                         zero_diagonal_text)

_STATUS_STYLE = {"healthy": "bold green", "warnings": "bold yellow", "errors": "bold red"}
_SEVERITY_STYLE = {"error": "bold red", "warning": "yellow", "note": "cyan"}


class TerminalReport:
    """Rich view of a report: the verdict, what to do, the key figures, then the details.

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
    verbose : bool
        Also show how each figure was obtained in full (methods, rules,
        references), the input notes and each finding's advice; these are
        always in the JSON and HTML reports.
    """

    def __init__(self, report: results.Report, *, max_ids: int = 8,
                 extra_verdict: Optional[str] = None, verbose: bool = False):
        self.report = report
        self.max_ids = max_ids
        self.extra_verdict = extra_verdict
        self.verbose = verbose

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        r, v, ids = self.report, self.verbose, self.max_ids
        yield verdict_line(r)
        if self.extra_verdict:
            yield Text(self.extra_verdict, style="bold red")
        yield from _section("What to do", _actions(r, ids))
        yield from _section("Key figures", _key_figures(r))
        yield from _section("Model", _model(r, ids, v))
        yield from _section("Near-singular modes", _modes(r, ids, v))
        yield from _section("Stiffness jumps", _jumps(r, ids))
        if v:
            yield from _section("Condition number", _condition_methods(r))
            yield from _section("Digits lost at pivots", _pivots(r))
        yield from _section("Digits of the displacements", _digits(r, ids, v))
        yield from _section("Findings", _findings(r, ids, v))
        yield Rule(style="dim")
        yield Text(r.caution, style="italic")


def render_text(report: results.Report, *, width: int = 100, **kwargs) -> str:
    """The terminal report as plain text (no colour codes), e.g. for a README."""
    console = SafeConsole(file=io.StringIO(), width=width, record=True, color_system=None)
    console.print(TerminalReport(report, **kwargs))
    return console.export_text()


def verdict_line(report: results.Report) -> Text:
    """The one-line verdict, coloured by status."""
    text = Text("Verdict: ", style="bold")
    text.append(report.verdict, style=_STATUS_STYLE.get(report.status, "bold"))
    return text


# ----------------------------------------------------------------- sections
def below_minimum_message(report: results.Report) -> Optional[str]:
    """The ``digits.below-minimum`` and ``digits.node-below-minimum`` findings' messages, shown
    under the verdict (one a line); None without either."""
    lines = [f.message for f in report.findings
             if f.code in ("digits.below-minimum", "digits.node-below-minimum")]
    return "\n".join(lines) if lines else None


def command_view(report: results.Report, *, quiet: bool = False, verbose: bool = False):
    """What ``conditioning diagnose`` prints: the whole report, or with
    ``quiet`` the verdict line; either way the below-minimum-digits message
    under the verdict when there is one. A rich renderable."""
    extra = below_minimum_message(report)
    if not quiet:
        return TerminalReport(report, extra_verdict=extra, verbose=verbose)
    # A plain string, as the message was always printed (rich markup applies).
    return Group(verdict_line(report), *([extra] if extra else []))


def demo_case_view(name: str, description: str, report: results.Report, *, quiet: bool = False,
                   verbose: bool = False):
    """One case of ``conditioning demo``: a rule with its name, the invented
    model's description in italics, then the report (``quiet``: the verdict)."""
    parts = [Rule(name)] + ([Text(description, style="italic")] if description else [])
    return Group(*parts, verdict_line(report) if quiet else TerminalReport(report, verbose=verbose))


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


class _FittedTable(Table):
    """A table whose columns keep their full width except the last one, which is cut
    with an ellipsis: a row never wraps onto a second line, even at 80 columns."""

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        used = 0
        for column in self.columns[:-1]:
            column.min_width = max([len(str(c)) for c in column._cells] + [len(str(column.header))])
            used += column.min_width + self.padding[1] + self.padding[3]
        # Cap the last column, or rich may drop a whole earlier column to fit a long cell.
        self.columns[-1].max_width = max(options.max_width - used, 8)
        yield from super().__rich_console__(console, options)


def _table(*columns: str, right: Iterable[int] = ()) -> Table:
    """A borderless table whose rows never wrap (see :class:`_FittedTable`)."""
    t = _FittedTable(box=None, pad_edge=False, show_edge=False)
    right = set(right)
    for i, name in enumerate(columns):
        t.add_column(name, justify="right" if i in right else "left", no_wrap=True, overflow="ellipsis")
    return t


def _where(r: results.Report, ids, max_ids: int) -> str:
    """``"node 3"``, ``"nodes 5, 6, 7, 8"``, ``"all 42 nodes"``, or rows without a DOF map."""
    return ids_phrase(ids, unit_word(r), total_of(r), max_ids)


# ------------------------------------------------------------- what to do
def _actions(r: results.Report, max_ids: int):
    """The changes to the model the findings call for, in the engineer's words."""
    lines: list[Text] = []
    restraints = r.restraints
    conditional = "only if the mode is free (not decided: see the support proof): "
    seen: set[str] = set()
    # Coincident nodes that K does not join and a free mode moves apart: merging them is the first fix.
    merge = [f for f in r.findings if f.code in ("geometry.coincident-nodes", "geometry.touching-parts")
             and f.severity == "error"]
    for f in merge:
        first = f.advice.split(". ")[0].rstrip(".") + "."
        lines.append(Text(f"- {first}", style="bold"))
        seen.add(_action_text(r, f, max_ids))
    if restraints:
        second = [res for res in restraints if res.reason.startswith(_SECOND_CHOICE)]
        if second:
            lines.append(Text(f"Second choice, only if the part is meant to stand apart: add "
                              f"{'this support' if len(restraints) == 1 else 'these supports'} "
                              "(one minimal choice; each must exist in the real structure):"))
        elif all(res.reason.startswith(conditional) for res in restraints):
            lines.append(Text("Not decided whether a support is missing; if the modes are free, "
                              f"{'this support' if len(restraints) == 1 else 'these supports'} would "
                              "remove them (one minimal choice):"))
        else:
            lines.append(Text(f"Add {'this support' if len(restraints) == 1 else 'these supports'} "
                              "(one minimal choice; each must exist in the real structure):"))
        for res in restraints[:max_ids]:
            dof = f" {res.dof}" if res.dof and res.dof != "-" else ""
            line = Text(f"  {unit_word(r)} {res.node}{dof}", style="bold")
            reason = res.reason.split(": ", 1)[1] if res.reason.startswith(_SECOND_CHOICE) else res.reason
            line.append(f"  {reason.removeprefix(conditional)}")
            lines.append(line)
        if len(restraints) > max_ids:
            lines.append(Text(f"  and {len(restraints) - max_ids:,} more (all in the JSON report)"))
    for f in _by_severity(r.findings):
        if f.severity == "note" or f.code in _COVERED or (f.code in _COVERED_BY_RESTRAINTS and restraints):
            continue
        text = _action_text(r, f, max_ids)
        if text and text not in seen:
            seen.add(text)
            lines.append(Text(f"- {text}"))
    if not lines:
        return Text("Nothing to fix: K can be trusted to the digits above." if r.status == "healthy"
                    else "No change to the model is called for; see the findings below.")
    return Group(*lines)


#: How a suggested support that merging coincident nodes would make needless begins its reason.
_SECOND_CHOICE = "second choice to "
#: Findings whose action is another finding's (they point at the cause, not at a change).
_COVERED = {"digits.below-minimum", "digits.node-below-minimum", "condition.ill-conditioned", "stiffness.stiff-link-eigenvalue",
            "spectrum.inertia-mismatch", "digits.refinement-not-converged"}
#: Findings the suggested supports answer.
_COVERED_BY_RESTRAINTS = {"support.rigid-body-mode"}


def _action_text(r: results.Report, f: results.Finding, max_ids: int) -> str:
    """One action for a finding: where, then what to change (the finding's advice)."""
    if f.code in ("stiffness.jump", "stiffness.penalty-swallowed"):
        jump = next((j for j in r.jumps if list(j.nodes) == list(f.nodes)), None)
        if jump is not None and jump.advice_value is not None:
            return (f"Lower the stiffness at {_where(r, jump.nodes, max_ids)} to about "
                    f"{fmt_number(jump.advice_value)} (now {fmt_number(jump.ratio, 2)} times the "
                    f"typical stiffness; it can cost {_jump_cost(jump)} digits).")
    if f.code == "support.mechanism":
        mode = next((m for m in (r.spectrum.modes if r.spectrum is not None else [])
                     if m.kind == "mechanism" and list(m.nodes) == list(f.nodes)), None)
        support = r.spectrum.support if r.spectrum is not None else None
        if mode is not None and not mode.exact and (mode.undecided or (
                support is not None and support.outcome == "proved supported")):
            # Held by a proved stiffness, or not decided: the finding's own advice.
            return f"{_where(r, f.nodes, max_ids).capitalize()}: {f.advice[:1].lower()}{f.advice[1:]}"
        meet = (f"; its rigid groups meet at {_where(r, mode.meeting, max_ids)}: look there"
                if mode is not None and mode.meeting else ": look there")
        return (f"{_where(r, f.nodes, max_ids).capitalize()} move as a mechanism{meet} for a "
                "missing brace, a hinge too many, or a member attached at one node only.")
    if f.code == "pivot.digits-lost":
        if (r.spectrum is not None and r.spectrum.modes) or r.jumps:
            return ""  # a symptom of the modes or jumps listed above, not a change of its own
        if r.spectrum is not None and r.spectrum.support is not None and \
                r.spectrum.support.outcome == "proved supported":
            return ""  # proved supported, no mode: the conditioning's cost, met where the order put it
        label = f.message.split(" at the pivot of ", 1)[-1].split(":", 1)[0]
        return (f"{label[0].upper() + label[1:]} is nearly unsupported once the rest is eliminated: "
                "check its supports and the members that hold it.")
    if f.code.startswith("geometry.element-") and r.geometry_checks is not None:
        problem = f.code.rsplit("-", 1)[1]
        broken = {"inverted", "collapsed"}
        ids = sorted(e.element for e in r.geometry_checks.flagged_elements
                     if problem in e.problems or (problem == "shape" and not broken & set(e.problems)))
        if ids:
            more = f" and {len(ids) - max_ids:,} more" if len(ids) > max_ids else ""
            return f"Element{'s' if len(ids) > 1 else ''} {', '.join(map(str, ids[:max_ids]))}{more}: {f.advice}"
    where = _where(r, f.nodes, max_ids) if f.nodes else ""
    advice = f.advice or f.message
    if where and len(advice) > 1 and advice[0].isupper() and advice[1].islower():
        advice = advice[0].lower() + advice[1:]  # it continues the sentence after the colon
    return f"{where[0].upper() + where[1:]}: {advice}" if where else advice


def _jump_cost(j: results.StiffnessJump) -> str:
    if j.kind == "diagonal-outlier":
        return "none (scaled)"  # a spring to ground raises only the raw figure
    if j.kind == "stiff-region":
        return "see digits"
    return "all" if j.swallowed else f"up to {j.digits_cost:.1f}"


# ------------------------------------------------------------- key figures
def _negative_how(method: str) -> str:
    """The negative count's method, short: LAPACK, pivot signs, Lanczos."""
    if "LAPACK" in method:
        return "counted: all eigenvalues (LAPACK)"
    if "inertia" in method and "no inertia" not in method:
        return "counted: pivot signs (Sylvester's law)"
    if "Lanczos" in method or "LOBPCG" in method:
        return "lower bound: eigenvalues found (Lanczos)"
    return method
def _key_figures(r: results.Report):
    t = _table("figure", "value", "how obtained", right=(1,))
    c = r.condition
    # When the exported K itself was measured (a penalty swallowed the structure),
    # the condition figures are of the held-DOF model: a prediction after the change.
    after = r.digits is not None and r.digits.headline_solve == "exported"
    if c is not None:
        t.add_row("condition, raw, after" if after else "condition number, raw K", _kappa(c.estimate, c.singular),
                  ("prediction; " if after else "") + _how(c.estimate, c.estimate_method))
        constrained = r.structure is not None and r.structure.constraint_rows.size > 0
        t.add_row("condition, scaled, after" if after else "condition number, scaled",
                  _kappa(c.scaled_estimate, c.singular),
                  ("prediction; " if after else "") + _how(c.scaled_estimate, c.scaled_method)
                  + ("; constraint rows unscaled" if constrained else
                     f"; {c.scaling_gain_digits:.1f} digits of raw are row scale"
                     if c.scaling_gain_digits is not None and c.scaling_gain_digits >= 1 else ""))
    sp = r.spectrum
    if after and r.digits.exported_zero_modes is not None:
        t.add_row("modes, exported K", f"{r.digits.exported_zero_modes:,} zero",
                  "LAPACK; zero at working precision")
    if sp is not None:
        t.add_row("near-singular modes, after" if after else "near-singular modes", _mode_count(sp),
                  ("prediction; " if after else "") + _mode_how(sp)
                  + ("; no inertia count" if "inertia check" in r.skipped else ""))
    links = [j for j in r.jumps if j.kind == "coupling"]
    if links:
        worst = max(links, key=lambda j: j.digits_cost)
        t.add_row("stiffness jumps", str(len(links)), f"estimated; worst {_jump_cost(worst)} digits")
    regions = [j for j in r.jumps if j.kind == "stiff-region"]
    if regions:
        t.add_row("stiff regions", str(len(regions)), "rows not grounded; cost in the digits below")
    grounded = sum(1 for j in r.jumps if j.kind == "diagonal-outlier")
    if grounded:
        t.add_row("springs to ground", str(grounded), "cost no digits (scaling removes them)")
    if sp is not None and sp.negative_eigenvalues:
        t.add_row("negative eigenvalues", f"{'>= ' if not sp.negative_exact else ''}{sp.negative_eigenvalues:,}",
                  _negative_how(sp.negative_method))
    p = r.pivots
    if p is None and "pivots" in r.skipped:
        t.add_row("digits lost at a pivot", "-", _not_measured(r, "pivots"))
    if p is not None and p.worst:
        if p.negative_pivots and p.symmetric:
            t.add_row("negative pivots", f"{p.negative_count:,}",
                      f"{NEGATIVE_PIVOTS_HOW}; first at {p.negative_pivots[0].label}")
        elif p.negative_pivots:
            pass   # a row-pivoted LU's pivot signs count nothing: the negative eigenvalues row says how many
        else:
            if pivots_are_lower_bounds(r):
                t.add_row("digits lost at a pivot", f">= {fmt_digits(p.max_digits)}",
                          f"at {p.worst[0].label}; K singular"
                          + (", shifted" if r.factorization.shift != 0.0 else ""))
            else:
                t.add_row("digits lost at a pivot, after" if after else "digits lost at a pivot",
                          fmt_digits(p.max_digits), ("prediction; " if after else "") + f"at {p.worst[0].label}")
    dg = r.digits
    if dg is not None and dg.samples and not dg.skipped:
        # The tool's own solves and a supplied solution are different questions:
        # a vector that does not fit K must not pass for the conditioning's toll.
        own = [s for s in dg.samples if not s.audited and s.solver_kind == dg.headline_solve] or dg.samples
        worst = min(own, key=lambda s: s.trustworthy_digits)
        n = len(own)
        invented = sum(1 for s in own if _invented(s))
        over = (f"{n} ({invented} invented)" if invented and n > invented else
                f"{n} invented" if invented else f"{n} load case{'s' if n != 1 else ''}")
        if dg.headline_solve == "exported":
            kappa = dg.exported_condition_at_least
            if kappa is not None:
                t.add_row("condition, exported K", f">= {fmt_number(kappa)}",
                          "bound; beyond float64 (1/eps 4.5e+15)" if kappa * 2.0**-52 >= 1.0 else "bound")
            t.add_row("trustworthy digits", _digits_shown(worst),
                      f"exported K; {_how_digits(worst.method)}; worst of {n}")
            held = [s for s in dg.samples if not s.audited and s.solver_kind != "exported"]
            if held:
                best = min(held, key=lambda s: s.trustworthy_digits)
                t.add_row("  after the change", _digits_shown(best), "prediction: swallowed DOFs held")
        else:
            t.add_row("trustworthy digits", _digits_shown(worst),
                      f"pivoted LU; {_how_digits(worst.method)}; worst of {n}" if dg.headline_solve == "pivoted"
                      else f"{_how_digits(worst.method)}; worst of {over}")
        if dg.headline_solve == "pivoted":
            sym = [s for s in dg.samples if not s.audited and s.solver_kind == "symmetric"]
            if sym:
                low = min(sym, key=lambda s: s.trustworthy_digits)
                t.add_row("  symmetric solve", _digits_shown(low), f"{_how_digits(low.method)}; no pivoting")
        supplied = [s for s in dg.samples if s.audited]
        if supplied and len(supplied) < len(dg.samples):
            bad = min(supplied, key=lambda s: s.trustworthy_digits)
            misfits = sum(1 for a in dg.audits if not a.fits)
            t.add_row("supplied solution", _digits_shown(bad),
                      f"{_how_digits(bad.method)}; "
                      + (f"{misfits} of {len(supplied)} not fitting K" if misfits else f"worst of {len(supplied)}"))
    elif dg is not None and dg.skipped:
        t.add_row("trustworthy digits", "-", "not measured (see below)")
    elif dg is None and "digits" in r.skipped:
        t.add_row("trustworthy digits", "-", _not_measured(r, "digits"))
    return t if t.row_count else None


def _not_measured(r: results.Report, stage: str) -> str:
    """Why a stage's figure is missing, short: the whole sentence is in the findings and the JSON."""
    if "factorization" in r.skipped:
        return "not measured: no factorization (memory)"
    return f"not measured: {r.skipped[stage].split(':')[0]}"


def _kappa(value: Optional[float], singular: bool) -> str:
    return fmt_number(value) if value is not None else ("singular" if singular else "-")


def _how(value: Optional[float], method: str) -> str:
    return how_obtained(method) if value is not None else "-"


def _mode_count(sp: results.SpectrumResult) -> str:
    if not sp.modes:
        return "none"
    kinds: dict[str, int] = {}
    for m in sp.modes:
        kinds[m.kind] = kinds.get(m.kind, 0) + 1
    return ", ".join(f"{n} {k}" for k, n in kinds.items())


def _mode_how(sp: results.SpectrumResult) -> str:
    parts = [how_obtained(sp.method)]
    if sp.gap is not None:
        parts.append(f"gap {fmt_number(sp.gap, 2)}")
    if sp.inertia_agrees is not None:
        parts.append("inertia agrees" if sp.inertia_agrees else "inertia DISAGREES")
    return ", ".join(parts)


# ----------------------------------------------------------------- details
def _model(r: results.Report, max_ids: int, verbose: bool):
    """One sentence for the model and one for the structure checks; with ``verbose`` the full tables."""
    if verbose:
        return Group(_model_grid(r), Rule("Structure", align="left", style="dim"), _structure_grid(r, max_ids))
    s, st = r.summary, r.structure
    # "(2D; ux, uy, rz)", "(ux, uy, rz)" without coordinates, "(2D)" without DOF names
    inside = "; ".join(x for x in ((f"{s.dim}D" if s.dim else ""), ", ".join(s.dof_types)) if x)
    rows = f"{s.rows:,} row{'s' if s.rows != 1 else ''}"
    where = (f"{rows} on {s.nodes:,} node{'s' if s.nodes != 1 else ''}" + (f" ({inside})" if inside else "")
             if s.nodes is not None else f"{s.rows:,} rows, no DOF map (reported by row; --dofs or "
                                          "--dofs-per-node give node numbers)")
    given = [name for name, on in (("load", s.has_load), ("solution", s.has_solution)) if on]
    lines = [Text(f"{s.source}: {where}; {s.stored_entries:,} nonzeros; "
                  + (f"{' and '.join(given)} given" if given else "no load given")
                  + (f"; {s.restrained:,} restrained rows removed" if s.restrained else "") + ".")]
    lines.append(Text(_structure_line(st, max_ids, r.geometry)))
    geometry = _geometry_line(r.geometry_checks)
    if geometry:
        lines.append(Text(geometry))
    return Group(*lines)


def _geometry_line(c: Optional[results.GeometryChecks]) -> str:
    """One sentence on the geometry checks, when they found something or read elements."""
    if c is None or not (c.coincident or c.far or c.elements is not None):
        return ""
    loose = sum(1 for g in c.coincident if g.joined == "no")
    partly = len(c.coincident) - loose
    parts = [f"{loose:,} coincident node group{'s' if loose != 1 else ''} K does not join" if loose else
             "no coincident nodes K does not join"]
    if partly:
        parts.append(f"{partly:,} partly tied (hinges or releases)")
    parts.append(f"{len(c.far):,} node{'s' if len(c.far) != 1 else ''} far from every node coupled to it"
                 if c.far else "no node far from its coupled nodes")
    if c.elements is not None:
        flagged = len({e.element for e in c.flagged_elements})
        kinds = ", ".join(f"{v:,} {k}" for k, v in c.element_kinds.items())
        parts.append(f"{c.elements:,} elements ({kinds}), "
                     + (f"{flagged:,}{'+' if flagged >= 50 else ''} of poor shape" if flagged else "none of poor shape"))
    return "Geometry: " + "; ".join(parts) + "."


def _model_grid(r: results.Report):
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


def _structure_grid(r: results.Report, max_ids: int):
    st = r.structure
    g = _grid()
    sizes = sorted((int(x) for x in st.part_sizes[: st.parts]), reverse=True)  # counted parts come first
    g.add_row("connected parts", f"{st.parts}" + (
        f" (rows per part: {summarise_ids(sizes, max_ids)})" if st.parts > 1 else ""))
    if st.placeholder_rows.size:
        g.add_row("diagonal-only rows", f"{st.placeholder_rows.size:,} "
                  f"({rows_phrase(st.placeholder_rows, max_ids)}), not counted as parts")
    for name, rows in (("DOFs without stiffness", st.empty_rows),
                       ("negative diagonal", st.negative_diagonal)):
        rows = list(rows)
        g.add_row(name, "none" if not rows else
                  f"{len(rows):,} ({rows_phrase(rows, max_ids)})")
        if name.startswith("DOFs"):
            g.add_row("zero diagonal", zero_diagonal_text(st, max_ids))
    a = st.asymmetry
    g.add_row("asymmetry", "none (symmetric)" if a.row is None else
              f"largest relative {fmt_number(a.relative)} at row {a.row + 1}, "
              f"column {a.col + 1}")
    return g


def _dof_phrase(rows, max_ids: int, geometry: Optional[results.ModelGeometry]) -> str:
    """Rows by node and DOF when the report has a DOF map (``"node 4 ux, ..."``), else by row."""
    if geometry is None or geometry.row_node is None or geometry.row_dof is None:
        return rows_phrase(rows, max_ids)
    labels = [f"node {int(geometry.row_node[r])} {results.DOF_NAMES[int(geometry.row_dof[r])]}"
              for r in list(rows)[:max_ids]]
    more = len(rows) - len(labels)
    return ", ".join(labels) + (f" and {more:,} more" if more > 0 else "")


def _structure_line(st: results.StructureResult, max_ids: int,
                    geometry: Optional[results.ModelGeometry] = None) -> str:
    sizes = sorted((int(x) for x in st.part_sizes[: st.parts]), reverse=True)  # counted parts come first
    parts = [f"{st.parts} connected part{'s' if st.parts != 1 else ''}"
             + (f" (rows per part: {summarise_ids(sizes, max_ids)})" if st.parts > 1 else "")]
    if st.placeholder_rows.size:
        parts.append(f"{_count(st.placeholder_rows.size, 'diagonal-only row')} "
                     f"({_dof_phrase(st.placeholder_rows, max_ids, geometry)}), not counted as parts")
    bad = [(name, rows) for name, rows in (("without stiffness", st.empty_rows),
                                           ("with a negative diagonal", st.negative_diagonal),
                                           ("with a zero diagonal and coupling", st.zero_diagonal))
           if len(rows)]
    for name, rows in bad:
        parts.append(f"{_count(len(rows), 'row')} {name} ({_dof_phrase(rows, max_ids, geometry)})")
    if not bad:
        parts.append("no row without stiffness, no zero or negative diagonal")
    a = st.asymmetry
    parts.append("symmetric" if a.row is None else
                 f"not symmetric: largest relative difference {fmt_number(a.relative)} at row "
                 f"{a.row + 1}, column {a.col + 1}")
    return "Structure: " + "; ".join(parts) + "."


def _count(n: int, word: str) -> str:
    return f"{n:,} {word}{'' if n == 1 else 's'}"


def _condition_methods(r: results.Report):
    c = r.condition
    if c is None:
        return Text("not computed", style="dim")
    lines = [Text(f"{name}: {method}", style="dim") for name, method in
             (("2-norm, raw K", c.estimate_method), ("2-norm, scaled D^-1/2 K D^-1/2", c.scaled_method),
              ("1-norm, raw K", c.one_norm_method))]
    if c.one_norm_estimate is not None:
        lines.insert(0, Text(f"1-norm, raw K: {fmt_number(c.one_norm_estimate)} "
                             f"({how_obtained(c.one_norm_method)})"))
    if c.scaling_gain_digits is not None:
        lines.append(Text(scaling_sentence(c.scaling_gain_digits)))
    return Group(*lines)


#: Modes listed in the terminal before "and N more" (all are in the JSON and the mode files).
MAX_MODE_ROWS = 10


def _modes(r: results.Report, max_ids: int, verbose: bool):
    sp = r.spectrum
    if sp is None:
        return Text("not computed", style="dim") if verbose else None
    lines = []
    counts = mode_count_lines(sp, bool(r.jumps))
    if verbose or len(counts) > 2 or sp.negative_eigenvalues or sp.inertia_agrees is False:
        lines += [Text(line, style="red" if "DISAGREES" in line else "") for line in counts]
    if sp.negative_eigenvalues:
        constrained = r.structure is not None and r.structure.constraint_rows.size > 0
        lines.append(Text(f"{'' if sp.negative_exact else 'at least '}{sp.negative_eigenvalues:,} negative "
                          "eigenvalue(s) of K: " + (f"a constrained system with {r.structure.constraint_rows.size:,} "
                                                    "constraint rows" if constrained else "the stiffness is indefinite"),
                          style="red"))
        for m in ([] if constrained else sp.negative_modes[:2]):
            lines.append(Text(f"  eigenvalue {m.eigenvalue:.3g} (scaled): carried by {unit_word(r)}s "
                              + ", ".join(f"{v} ({100 * s:.0f}%)" for v, s in zip(m.nodes[:6], m.shares))))
    support = getattr(sp, "support", None)
    if support is not None:
        figure = (f"lambda_min(S) >= {support.lower_bound_scaled:.2e} proved"
                  if support.lower_bound_scaled is not None else
                  f"smallest scaled eigenvalue {min(support.eigenvalues, key=abs, default=0.0):.2e}")
        lines.append(Text(f"Supports: {support.outcome} ({figure}; resolution of the stored K "
                          f"{support.resolution:.1e})"))
        if verbose:
            lines.append(Text(f"proof: {support.method}", style="dim"))
    if verbose:
        lines.append(Text(f"method: {sp.method}", style="dim"))
        lines.append(Text(f"rule: {sp.gap_rule}", style="dim"))
    if sp.modes:
        t = _table("#", "kind", "eigenvalue", "motion", "part", unit_word(r) + "s", right=(0, 2, 4))
        groups = sp.mode_groups if sum(g.count for g in sp.mode_groups) == len(sp.modes) else [
            results.ModeGroup(m.kind, m.part, 1, m.exact, "", m.nodes, [i], m.eigenvalue)
            for i, m in enumerate(sp.modes, start=1)]  # a report whose modes were edited without regrouping
        # One row per group of modes (kind, part): hundreds of modes of one kind fit on one line.
        for g in groups[:MAX_MODE_ROWS]:
            m = sp.modes[g.modes[0] - 1]
            kind = g.kind if g.exact else f"{g.kind} (not decided)" if all(
                r.spectrum.modes[i - 1].undecided for i in g.modes) else f"{g.kind} (nearly free)"
            if g.count == 1:
                motion = m.description or (fmt_motion(m.motion) if m.motion else (
                    f"{len(m.groups)} rigid groups" if m.groups else "-"))
                t.add_row(str(g.modes[0]), kind, fmt_mode_eigenvalue(m.eigenvalue, g.exact), motion, str(g.part),
                          ids_phrase(m.nodes, None, total_of(r), max(max_ids // 2, 1), bare=True))
            else:
                t.add_row(f"{g.modes[0]}-{g.modes[-1]}", f"{g.count:,} x {kind}",
                          fmt_mode_eigenvalue(g.eigenvalue_max, True) if g.exact else f"<= {fmt_number(g.eigenvalue_max)}",
                          g.motion or "-",
                          str(g.part) if g.part else "several",
                          ids_phrase(g.nodes, None, total_of(r), max(max_ids // 2, 1), bare=True))
        lines.append(t)
        if len(groups) > MAX_MODE_ROWS:
            lines.append(Text(f"and {len(groups) - MAX_MODE_ROWS:,} more rows of modes (all in the JSON "
                              "report and the mode files)"))
    return Group(*lines) if lines else None


#: Nodes of a stiff region shown in the jumps table (the project's choice: the
#: table stays within 80 columns).
REGION_NODES_SHOWN = 4


def _jumps(r: results.Report, max_ids: int):
    if not r.jumps:
        return None
    t = _table("kind", unit_word(r) + "s", "ratio", "digits cost", "suggested", right=(2, 3, 4))
    for j in r.jumps[:max_ids]:
        # A region lists all its nodes: its first few here, every one in the finding and the JSON.
        shown = min(max_ids, REGION_NODES_SHOWN) if j.kind == "stiff-region" else max_ids
        t.add_row(j.kind, summarise_ids(j.nodes, shown), fmt_number(j.ratio, 2),
                  _jump_cost(j), fmt_number(j.advice_value))
    parts = [t]
    if len(r.jumps) > max_ids:
        parts.append(Text(f"and {len(r.jumps) - max_ids:,} more (all in the JSON report)"))
    return Group(*parts)


def _pivots(r: results.Report):
    d = r.pivots
    if d is None and "pivots" in r.skipped:  # e.g. an engine without pivots: said, not hidden
        return Text(f"not measured: {r.skipped['pivots']}", style="dim")
    if d is None or not d.worst:
        return None
    g = _grid()
    negative = {e.row for e in getattr(d, "negative_pivots", [])}
    if negative:
        g.add_row("negative", f"{max(d.negative_count, len(negative)):,} negative pivot(s): K is not positive definite"
                  + ("" if d.symmetric else " (row-pivoted LU: their signs do not count eigenvalues)"))
    elif pivots_are_lower_bounds(r):
        g.add_row("largest", f"at least {d.max_digits:.1f} digits lost at a pivot (K singular: "
                  "along its free modes all digits are lost)")
    else:
        g.add_row("largest", f"{d.max_digits:.1f} digits lost at a pivot")
    about = "at least" if pivots_are_lower_bounds(r) else "about"
    for e in d.worst[:5]:
        g.add_row(e.label, "negative pivot" if e.row in negative
                  else f"{about} {e.digits:.1f} digits lost ({fmt_number(e.kept)} of its stiffness kept)")
    return Group(g, Text(f"method: {d.method}", style="dim"))


def _digits(r: results.Report, max_ids: int, verbose: bool):
    dg = r.digits
    if dg is None:
        return Text("not measured", style="dim") if verbose else None
    if dg.skipped:
        return Group(Text(f"not measured: {dg.skipped}", style="yellow"),
                     *[line for a in (dg.audits or [dg.audit]) for line in _audit_lines(a)])
    show_bound = verbose or any(not s.converged or not s.bound_trusted for s in dg.samples)
    columns = ["sample", "digits", "lost", "how obtained"]
    if show_bound:
        columns += ["converged", "reference error bound"]
    t = _table(*columns, right=(1, 2) + ((5,) if show_bound else ()))
    for s in dg.samples:
        row = [s.sample, _digits_shown(s), fmt_digits(s.digits_lost), _how_digits(s.method)]
        if show_bound:
            row += ["yes" if s.converged else f"no: {s.stop_reason}",
                    fmt_number(s.normwise_bound) if s.bound_trusted and s.normwise_bound is not None
                    else "withdrawn"]
        t.add_row(*row)
    lines = [t]
    own = [s for s in dg.samples if not s.audited and s.solver_kind == dg.headline_solve]
    invented = [s for s in dg.samples if _invented(s) and s.solver_kind != "pivoted"]
    # The engineer's load cases first: their nodes are the ones that matter;
    # an invented load's only when no load was given.
    cases = [s for s in own if not _invented(s)]
    worst = min(cases or dg.samples, key=lambda s: s.trustworthy_digits)
    if worst.worst_nodes:
        whose = f"of the load '{worst.sample}'" if cases else f"of the invented load '{worst.sample}'"
        lines.append(Text(f"Worst {unit_word(r)}s {whose} (digits of the worst "
                          f"component against its own size): {_worst_nodes(worst, max_ids)}"))
    if invented:
        names = sorted({"random-k" if s.sample.startswith("random-") else s.sample for s in invented})
        lines.append(Text(
            "Invented loads, to show what another load could lose: "
            + "; ".join(("random-k: random forces on every DOF" if n == "random-k" else
                         "worst-case: along the weakest mode of the scaled K") for n in names)
            + (f". The key figure is the worst of all {len(own)}, relative to the largest displacement."
               if dg.headline_solve != "exported" else "."),
            style="dim"))
    symmetric = [s for s in dg.samples if not s.audited and s.solver_kind == "symmetric"]
    pivoted = [s for s in dg.samples if not s.audited and s.solver_kind == "pivoted"]
    supplied = "; 'solution': the supplied vector as read" if any(s.audited for s in dg.samples) else ""
    ordering = r.factorization.ordering if r.factorization is not None else "its own"
    own_solve = f"the tool's float64 solve (SuperLU, pivots on the diagonal, {ordering} ordering)"
    exported = [s for s in dg.samples if s.solver_kind == "exported"]
    if exported:
        lines.append(Text("Whose solve: '(exported K)': a float64 LU with partial pivoting of the exported K as "
                          "stored (what any float64 solver of it gets), the key figure; the others: "
                          f"{own_solve} of the model with the swallowed DOFs held, a prediction after the "
                          f"suggested change{supplied}.", style="dim"))
    elif pivoted:
        lines.append(Text(f"Whose solve: {own_solve}; '(pivoted LU)': LU with partial pivoting of the same "
                          f"scaled K, as a direct solver of an indefinite K pivots: the key figure is "
                          f"its{supplied}.", style="dim"))
    elif symmetric:
        lines.append(Text(f"Whose solve: {own_solve}{supplied}."
                          + (f" {dg.headline_reason}." if dg.headline_reason else ""), style="dim"))
    if any(getattr(s, "at_ceiling", False) for s in dg.samples):
        lines.append(Text(">= : the error is below what the reference can resolve; the true "
                          "figure is at least this.", style="dim"))
    if verbose:
        if dg.summary:
            lines.append(Text(dg.summary))
        elif dg.predicted_scaled is not None:
            lines.append(Text(f"Rule-of-thumb prediction (16 - log10 kappa scaled): "
                              f"{fmt_digits(dg.predicted_scaled)} digits."))
        lines.extend(_confirmation_lines(dg.samples))
        if dg.certification:
            lines.append(Text(f"Verified eigenvalue bound: {dg.certification}.", style="dim"))
    for audit in (dg.audits or [dg.audit]):
        lines.extend(_audit_lines(audit))
    return Group(*lines)


#: The solve a digits figure describes when the sample does not say.
_OWN_SOLVE = "the tool's float64 direct solve (SuperLU, symmetric mode, its own ordering)"


def _invented(s: results.DigitsSample) -> bool:
    """A load the tool invented (``random-k``, ``worst-case``), not the engineer's."""
    return not s.audited and (s.sample.startswith("random-") or s.sample.startswith("worst-case"))


def _worst_nodes(s: results.DigitsSample, max_ids: int) -> str:
    """``"7, 8, 9 (3.5); 10 (3.6)"``: the worst nodes, those with the same digits together."""
    shown = s.worst_nodes[: max(max_ids // 3, 1)]
    if not shown:
        return "-"
    groups: list[tuple[str, list[int]]] = []
    for w in shown:
        text = fmt_digits(w.digits)
        if groups and groups[-1][0] == text:
            groups[-1][1].append(w.node)
        else:
            groups.append((text, [w.node]))
    out = "; ".join(f"{', '.join(str(n) for n in nodes)} ({text})" for text, nodes in groups)
    more = len(s.worst_nodes) - len(shown)
    return out + (f" and {more:,} more" if more > 0 else "")


def _audit_lines(audit: Optional[results.SolutionAudit]) -> list[Text]:
    """How the supplied solution fits K and f, in one or two lines."""
    if audit is None:
        return []
    who = "Supplied solution" + (f" of '{audit.case}'" if audit.case is not None else "")
    if audit.free_mode_share is not None:
        return [Text(f"{who}: K is singular; its component along the free modes is "
                     f"{fmt_number(audit.free_mode_share)} of it, so it keeps {fmt_digits(audit.trustworthy_digits)} "
                     f"digits (bound); backward error {fmt_number(audit.backward_error)}.")]
    fit = "fits" if audit.fits else "does NOT fit"
    as_written = audit.fits and audit.fits_as_written and audit.written_text is not None
    if as_written:
        fit = f"fits K and f at the precision it was written in ({audit.written_text})"
    else:
        fit += " K and f"
    text = (f"{who} {fit}: backward error {fmt_number(audit.backward_error)} against "
            + (f"{fmt_number(audit.written_backward_error)} that rounding to it allows; " if as_written else
               f"{fmt_number(audit.allowed_backward_error)} for the tool's own solve; ")
            + f"{fmt_digits(audit.trustworthy_digits)} trustworthy digits ({audit.method}).")
    if audit.written_text is not None and not as_written:
        text += f" Its values: {audit.written_text}."
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
    "double-double refinement": "refinement, measured",
    "arbitrary precision": "arb. precision, measured",
    "certified (verified eigenvalue bound)": "certified (eig. bound)",
    "certified (ball arithmetic)": "certified (ball)",
}


def _how_digits(method: str) -> str:
    if method in _SHORT_METHOD:
        return _SHORT_METHOD[method]
    tag = how_obtained(method)
    return method if tag in method else f"{method}, {tag}"


def _findings(r: results.Report, max_ids: int, verbose: bool):
    if not r.findings:
        return Text("no findings")
    rows = []
    unit = unit_word(r)
    for f, alike in _alike_grouped(_by_severity(r.findings)):
        line = Text()
        line.append(f"{f.severity:<7} ", style=_SEVERITY_STYLE.get(f.severity, ""))
        line.append(f"[{f.code}] ", style="dim")
        line.append(f.message)
        phrase = ids_phrase(f.nodes, unit, total_of(r), max_ids)
        if f.nodes and summarise_ids(f.nodes, max_ids) not in f.message and phrase not in f.message:
            line.append(f" ({phrase})")
        if alike:
            others = sorted({v for g in alike for v in g.nodes})
            line.append(f" The same at {len(alike):,} more place{'s' if len(alike) != 1 else ''} "
                        f"({ids_phrase(others, unit, total_of(r), max_ids)}; each in the JSON report).")
        rows.append(line)
        if verbose and f.advice:
            rows.append(Text(f"        advice: {f.advice}"))
    return Group(*rows)


def _alike_grouped(findings: list[results.Finding]) -> list[tuple[results.Finding, list[results.Finding]]]:
    """Findings with their look-alikes: same severity and code, and the same
    message once the finding's own node list is taken out (31 penalty links
    with one ratio read as one line, not 31); the first one is shown whole."""
    def key(f: results.Finding):
        listed = ", ".join(str(v) for v in f.nodes)
        return f.severity, f.code, f.message.replace(listed, "#") if f.nodes else f.message

    groups: dict = {}
    for f in findings:
        groups.setdefault(key(f), []).append(f)
    return [(g[0], g[1:]) for g in groups.values()]


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
    console = SafeConsole(file=io.StringIO(), width=width, record=True, color_system=None)
    console.print(ComparisonView(comparison))
    return console.export_text()


def explanation_view(e: results.RowExplanation) -> Group:
    """What is at one row (``conditioning explain``), as the command prints it."""
    asked = e.row + e.row_base
    lines = [Rule(f"Row {asked} ({'1' if e.row_base == 1 else '0'}-based numbering): {e.label}")]
    where = f"node {e.node}, DOF {e.dof}" if e.node is not None else "no DOF map given: rows are their own nodes"
    lines.append(Text(f"Where: {where}; matrix row {e.row + 1} counted from 1, {e.row} counted from 0."))
    if e.from_report is not None:
        lines.append(Text(f"From the earlier run's report {e.from_report}: its pivot, near-singular modes, stiffness "
                          "jumps and suggested supports; the diagonal and couplings from the matrix. No "
                          "factorization was made for this explanation."))
    lines.append(Text(f"Diagonal K_ii = {fmt_number(e.diagonal)}: {_times(e.diagonal, e.neighbour_diagonal)} the "
                      f"median of its coupled rows of the same DOF type, {_times(e.diagonal, e.type_diagonal)} "
                      "the median of its DOF type."))
    t = _table("coupled to", "K_ij", "|K_ij|/sqrt(K_ii K_jj)", right=(1, 2))
    for c in e.couplings:
        t.add_row(c.label, fmt_number(c.value), f"{c.strength:.3f}")
    lines.append(t if e.couplings else Text("Coupled to no other row."))
    for j in e.jumps:
        cost = ("no digits for a direct solve" if j.kind == "diagonal-outlier"
                else "its cost shows in the measured digits" if j.kind == "stiff-region"
                else f"about {fmt_digits(j.digits_cost)} digits")
        lines.append(Text(f"Stiffness jump ({j.kind}, ratio {fmt_number(j.ratio)}, {cost}): "
                          f"nodes {', '.join(map(str, j.nodes))}."))
    if e.most_digits is not None:
        here = (f"{fmt_digits(e.pivot_digits)} digits of K_ii lost at its pivot in this tool's order"
                if e.pivot_digits is not None else "its pivot in this tool's order is not available")
        lines.append(Text(f"Pivot: {here}; any elimination order loses between 0 (eliminated first) and "
                          f"{fmt_digits(e.most_digits)} (eliminated last) digits here. {e.pivot_method}.",
                          style="dim" if e.most_digits < 4 else None))
    elif e.pivot_digits is not None:
        lines.append(Text(f"Pivot: {fmt_digits(e.pivot_digits)} digits of K_ii lost at its pivot (share kept "
                          f"{fmt_number(e.pivot_kept)}), the {e.pivot_method}.",
                          style="dim" if e.pivot_digits < 4 else None))
    else:
        lines.append(Text(f"Pivot: {e.pivot_method}.", style="yellow"))
    for s in e.mode_shares:
        lines.append(Text(f"Near-singular mode {s.mode} ({s.kind}, eigenvalue "
                          f"{fmt_mode_eigenvalue(s.eigenvalue, s.exact)}): "
                          f"{100 * s.share:.1f}% of its motion is at this row."))
    lines.extend(Text(f"What would help: {a}", style="bold") for a in e.advice)
    return Group(*lines)


def _times(value: float, reference: Optional[float]) -> str:
    """``"0.5 times"``, or ``"- (none to compare with)"``."""
    return f"{value / reference:.2g} times" if reference else "- (none to compare with)"
