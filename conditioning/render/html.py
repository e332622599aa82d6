"""The report as one self-contained HTML page.

Inline CSS, figures as base64 PNG ``data:`` URIs, no script and no network
access, so the file can be mailed or archived as it is. The page reads the
:class:`~conditioning.results.Report` alone; plots of K's diagonal, the node
positions and the mode shapes draw its ``geometry`` (the input data, drawn
as given). Figures need matplotlib (the ``report`` extra); without it the
page lists the figures it could not draw and how to get them.
"""

from __future__ import annotations

import base64
import html
import logging
import re
from pathlib import Path
from typing import Callable, Optional, Union

from conditioning import results
from conditioning.render import plots
from conditioning.render._format import (NEGATIVE_PIVOTS_HOW, fmt_digits, fmt_mode_eigenvalue, fmt_motion, fmt_number, how_obtained,
                                         mode_count_lines, pivots_are_lower_bounds, scaling_sentence, summarise_ids,
                                         zero_diagonal_text)

log = logging.getLogger(__name__)

#: Mode shapes drawn at most (the rest are listed in the tables and JSON).
MAX_MODE_PLOTS = 12

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:2em auto;
max-width:1000px;color:#1c2833;line-height:1.45;padding:0 1em}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.15em;border-bottom:1px solid #d5d8dc;
margin-top:1.8em}
.verdict{font-size:1.25em;font-weight:600;padding:.6em .9em;border-radius:6px;margin:1em 0}
.healthy{background:#e9f7ef;color:#196f3d}.warnings{background:#fef5e7;color:#9a7d0a}
.errors{background:#fdedec;color:#922b21}
table{border-collapse:collapse;margin:.5em 0;font-size:.92em}
td,th{border-bottom:1px solid #eaecee;padding:.25em .7em;text-align:left;vertical-align:top}
th{background:#f4f6f7}td.num{text-align:right;font-variant-numeric:tabular-nums}
.sev-error{color:#922b21;font-weight:600}.sev-warning{color:#9a7d0a;font-weight:600}
.sev-note{color:#1f618d}.how{color:#566573;font-size:.88em}
figure{margin:1em 0}figcaption{color:#566573;font-size:.88em}img{max-width:100%}
.missing{background:#f4f6f7;padding:.6em .9em;border-left:4px solid #aab7b8}
.caution{margin-top:2em;font-style:italic;color:#566573}
"""


def render_html(report: results.Report) -> str:
    """The report as a self-contained HTML document.

    Parameters
    ----------
    report : results.Report
        The diagnosis. Its ``geometry`` gives the diagonal histogram, the
        digits over the node positions and the mode shapes; without one
        only the spectrum is drawn.

    Returns
    -------
    str
        The HTML text (UTF-8).
    """
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<link rel="icon" href="data:,">',
        f"<title>conditioning report: {_e(report.summary.source)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>Stiffness matrix report: {_e(report.summary.source)}</h1>",
        f'<div class="verdict {_e(report.status)}">{_e(report.verdict)}</div>',
        _findings(report),
        _summary(report),
        _condition(report),
        _modes(report),
        _restraints(report),
        _jumps(report),
        _pivots(report),
        _digits(report),
        _figures(report),
        f'<p class="caution">{_e(report.caution)}</p>',
        "</body></html>",
    ]
    return "\n".join(p for p in parts if p)


def write_html(report: results.Report, path: Union[str, Path]) -> None:
    """Write :func:`render_html` to ``path`` (UTF-8)."""
    Path(path).write_text(render_html(report), encoding="utf-8")


def missing_figures_note() -> Optional[str]:
    """Why a page has no figures (matplotlib, the ``report`` extra, is not
    installed), in one line; None when figures can be drawn."""
    try:
        plots.require_matplotlib()
    except ImportError:
        return ("matplotlib is not installed, so the HTML report has no figures "
                "(pip install 'fe-conditioning[report]')")
    return None


# ------------------------------------------------------------------ helpers
def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _table(head: Optional[list[str]], rows: list[list[str]], numeric: set[int] = frozenset()) -> str:
    out = ["<table>"]
    if head:
        out.append("<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>")
    for row in rows:
        cells = "".join(f'<td class="num">{_e(c)}</td>' if i in numeric else f"<td>{_e(c)}</td>"
                        for i, c in enumerate(row))
        out.append(f"<tr>{cells}</tr>")
    out.append("</table>")
    return "".join(out)


def _findings(r: results.Report) -> str:
    if not r.findings:
        return "<h2>Findings</h2><p>No findings.</p>"
    items = []
    order = {"error": 0, "warning": 1, "note": 2}
    previous_advice = None
    for f in sorted(r.findings, key=lambda f: order.get(f.severity, 3)):
        listed = summarise_ids(f.nodes, 12)
        # a message that names its nodes itself ("it moves nodes 201, ...") gets no second list
        named = listed in f.message or re.search(r"\bnodes? \d", f.message)
        nodes = f" (nodes {_e(listed)})" if f.nodes and not named else ""
        if not f.advice:
            advice = ""
        elif f.advice == previous_advice:   # three modes of one part: one advice
            advice = "<br>Advice: as above."
        else:
            advice = f"<br>Advice: {_e(f.advice)}"
        previous_advice = f.advice
        items.append(f'<li><span class="sev-{_e(f.severity)}">{_e(f.severity)}</span> '
                     f'<code>{_e(f.code)}</code> {_e(f.message)}{nodes}{advice}</li>')
    return "<h2>Findings</h2><ul>" + "".join(items) + "</ul>"


def _summary(r: results.Report) -> str:
    s, st = r.summary, r.structure
    rows = [["rows (DOFs)", f"{s.rows:,}"],
            ["nonzeros in K", f"{s.stored_entries:,} (both triangles; a symmetric file stores one)"],
            ["nodes", "no DOF map given" if s.nodes is None else f"{s.nodes:,}"
             + (f" ({s.dim}D)" if s.dim else "")],
            ["dof types", ", ".join(s.dof_types) or "-"],
            ["load / solution", f"{'given' if s.has_load else 'not given'} / "
                                f"{'given' if s.has_solution else 'not given'}"],
            ["connected parts", str(st.parts)],
            ["diagonal-only rows (not counted as parts)", f"{len(st.placeholder_rows):,}"],
            ["DOFs without stiffness", str(len(st.empty_rows))],
            ["zero diagonal", zero_diagonal_text(st, 12)],
            ["negative diagonal", f"{len(st.negative_diagonal):,}" if len(st.negative_diagonal) else "none"],
            ["asymmetry", "none" if st.asymmetry.row is None else fmt_number(st.asymmetry.relative)]]
    if s.restrained:
        rows.append(["restrained (removed)", f"{s.restrained:,}"])
    rows += [["note", n] for n in s.notes]
    return "<h2>Model</h2>" + _table(None, rows)


def _condition(r: results.Report) -> str:
    c = r.condition
    if c is None:
        return "<h2>Condition number</h2><p>Not computed.</p>"
    rows = []
    for name, value, method in (("2-norm, raw K", c.estimate, c.estimate_method),
                                ("2-norm, scaled D^-1/2 K D^-1/2", c.scaled_estimate,
                                 c.scaled_method),
                                ("1-norm, raw K", c.one_norm_estimate, c.one_norm_method)):
        rows.append([name, "singular" if value is None else fmt_number(value),
                     "-" if value is None else how_obtained(method), method])
    text = ""
    constraint_rows = r.structure.constraint_rows.size if r.structure is not None else 0
    if constraint_rows:
        text = (f"<p>{constraint_rows:,} constraint rows (a zero diagonal block) have no diagonal to scale by and "
                "are left unscaled (scale 1, a convention): both figures depend on the units of those rows and "
                "are not the stiffness's condition number.</p>")
    elif c.scaling_gain_digits is not None:
        text = f"<p>{_e(scaling_sentence(c.scaling_gain_digits))}</p>"
    return ("<h2>Condition number</h2>"
            + _table(["figure", "value", "how obtained", "method"], rows, {1}) + text)


def _mode_kind(m) -> str:
    """The mode's kind as the terminal shows it: free, not decided by the support proof, or nearly free."""
    if getattr(m, "exact", True):
        return m.kind
    return f"{m.kind} (not decided)" if getattr(m, "undecided", False) else f"{m.kind} (nearly free)"


def _modes(r: results.Report) -> str:
    sp = r.spectrum
    if sp is None:
        return ""
    dg = r.digits
    exported = ""
    if dg is not None and dg.headline_solve == "exported":
        exported = ("<p>These modes are of the model with the swallowed DOFs held: a prediction after the suggested "
                    "change. The exported K: "
                    + (_e(f"{dg.exported_zero_modes:,} scaled eigenvalue(s) zero at working precision "
                          f"({dg.exported_zero_modes_method})") if dg.exported_zero_modes is not None
                       else _e(dg.exported_zero_modes_method or "mode count not computed"))
                    + ".</p>")
    head = (exported + "<p>" + "<br>".join(_e(line) for line in mode_count_lines(sp, bool(r.jumps)))
            + f'<br>rule: {_e(sp.gap_rule)}. <span class="how">{_e(sp.method)}</span></p>')
    if not sp.modes:
        return "<h2>Near-singular modes</h2>" + head
    rows = [[str(k), _mode_kind(m),
             fmt_mode_eigenvalue(m.eigenvalue, getattr(m, "exact", False)),
             fmt_mode_eigenvalue(m.relative_eigenvalue, getattr(m, "exact", False)),
             m.description or (fmt_motion(m.motion) if m.motion else f"{len(m.groups)} groups" if m.groups else "-"),
             str(m.part), summarise_ids(m.nodes, 12)] for k, m in enumerate(sp.modes, start=1)]
    return ("<h2>Near-singular modes</h2>" + head
            + _table(["#", "kind", "eigenvalue", "relative", "motion", "part", "nodes"], rows,
                     {0, 2, 3}))


def _restraints(r: results.Report) -> str:
    if not r.restraints:
        return ""
    unit = "node" if r.summary.nodes is not None else "row"
    rows = [[f"{unit} {x.node}", x.dof, x.reason] for x in r.restraints]
    return ("<h2>Suggested restraints</h2>" + _table([unit, "dof", "why"], rows)
            + "<p>A restraint must exist in the real structure (or the part must be "
              "connected).</p>")


def _jumps(r: results.Report) -> str:
    if not r.jumps:
        return ""
    # a jump's reasoning is usually a finding's advice already: say it once, in the findings
    advised = {f.advice for f in r.findings if f.advice}
    rows = [[j.kind, summarise_ids(j.nodes, 12), fmt_number(j.ratio), ("none (scaled)" if j.kind == "diagonal-outlier" else "see digits" if j.kind == "stiff-region" else "all" if j.swallowed else f"{j.digits_cost:.1f}"),
             fmt_number(j.advice_value), "see the findings" if j.reasoning in advised else j.reasoning]
            for j in r.jumps]
    return "<h2>Stiffness jumps</h2>" + _table(
        ["kind", "nodes", "ratio", "digits cost", "suggested value", "reasoning"], rows, {2, 3, 4})


def _negative_pivots_sentence(r: results.Report, count: int) -> str:
    """The negative-pivot count with how it was obtained, and the eigenvalue count beside it."""
    sp = r.spectrum
    eig = (f" K's negative eigenvalues: {sp.negative_eigenvalues:,} ({sp.negative_method})."
           if sp is not None and sp.negative_eigenvalues else "")
    if r.pivots.symmetric:
        return (f"{count:,} negative pivot(s) ({NEGATIVE_PIVOTS_HOW}: the elimination pivoted on the diagonal, "
                f"so the pivots' signs are those of K's eigenvalues): K is not positive definite.{eig} ")
    return (f"{count:,} negative pivot(s) of a row-pivoted LU: their signs are not those of an L D L^T and "
            f"count no eigenvalues.{eig} ")


def _pivots(r: results.Report) -> str:
    d = r.pivots
    if d is None and "pivots" in r.skipped:  # e.g. an engine without pivots: said, not hidden
        return f"<h2>Digits lost at the pivots</h2><p>Not measured: {_e(r.skipped['pivots'])}</p>"
    if d is None or not d.worst:
        return ""
    negative = {e.row for e in d.negative_pivots}
    low = pivots_are_lower_bounds(r)
    rows = [[e.label, "negative pivot" if e.row in negative else (">= " if low else "") + fmt_digits(e.digits),
             fmt_number(e.kept)] for e in d.worst[:10]]
    largest = (_negative_pivots_sentence(r, max(d.negative_count, len(negative))) if negative
               else f"At least {d.max_digits:.1f} digits lost at a pivot "
                    "(K is singular: along its free modes all digits are lost). " if low
               else f"At most {d.max_digits:.1f} digits lost at a pivot. ")
    where = "DOF" if r.summary.nodes is not None else "row"
    return ("<h2>Digits lost at pivots</h2>"
            + f"<p>{largest}"
              f'<span class="how">{_e(d.method)}</span></p>'
            + _table([where, "digits lost", "stiffness kept at the pivot"], rows, {1, 2}))


def _digits(r: results.Report) -> str:
    dg = r.digits
    if dg is None:
        return ""
    if dg.skipped:
        return f"<h2>Digits of the displacements</h2><p>Not measured: {_e(dg.skipped)}</p>"
    rows = []
    for s in dg.samples:
        worst = ", ".join(f"{w.node} ({fmt_digits(w.digits)})" for w in s.worst_nodes[:8])
        shown = fmt_digits(s.trustworthy_digits)
        if getattr(s, "at_ceiling", False):
            shown = f">= {shown}"
        rows.append([s.sample, shown, fmt_digits(s.digits_lost),
                     s.method, "yes" if s.converged else f"no ({s.stop_reason})",
                     fmt_number(s.normwise_bound) if s.bound_trusted else "withdrawn",
                     worst or "-"])
    rule = (f"Rule-of-thumb prediction (16 - log10 kappa): raw {fmt_digits(dg.predicted_raw)}, "
            f"scaled {fmt_digits(dg.predicted_scaled)} digits. ")
    # the summary usually states the prediction already: once is enough
    pred = f"<p>{'' if '16 - log10' in dg.summary else rule}{_e(dg.summary)}</p>"
    # Whose solve each figure describes, and what the invented loads are.
    solves: dict[str, list[str]] = {}
    for s in dg.samples:
        if getattr(s, "solve", ""):
            solves.setdefault(s.solve, []).append(s.sample)
    whose = "".join(f"<p>Whose solve ({_e(', '.join(names))}): {_e(solve)}.</p>" for solve, names in solves.items())
    if dg.headline_reason:
        whose += f"<p>{_e(dg.headline_reason)}.</p>"
    invented = any(s.sample.startswith("random-") or s.sample.startswith("worst-case") for s in dg.samples)
    if invented:
        whose += ("<p>random-k: invented loads, random forces on every DOF; worst-case: an invented load along "
                  "the weakest mode of the scaled K. They show what another load could lose; the key figure is "
                  "the worst over the load and these, relative to the largest displacement.</p>")
    return ("<h2>Digits of the displacements</h2>"
            + _table(["sample", "trustworthy digits", "digits lost", "method", "converged",
                      "reference error bound", "worst nodes (digits)"], rows, {1, 2}) + whose + pred)


def _figures(r: results.Report) -> str:
    wanted: list[tuple[str, str, Callable[[], Optional[bytes]]]] = []
    if r.spectrum is not None and len(r.spectrum.smallest):
        wanted.append(("Eigenvalue spectrum near zero",
                       "Smallest eigenvalues of the scaled matrix, log scale"
                       + ("; the dashed line marks the gap that separates the near-singular modes."
                          if r.spectrum.gap is not None else "."),
                       lambda: plots.spectrum_png(r.spectrum)))
    geometry = r.geometry
    if geometry is not None:
        wanted.append(("Diagonal magnitudes by dof type",
                       "Histogram of log10 |K_ii|; dotted lines mark penalty-like outliers.",
                       lambda: plots.diagonal_histogram_png(geometry, r.jumps)))
        sample = _digits_sample(r)
        if sample is not None:
            wanted.append(("Trustworthy digits per node",
                           "Worst component of each node; over the node positions when given.",
                           lambda: plots.digits_png(geometry, sample)))
        checks = r.geometry_checks
        if checks is not None and (checks.far or checks.flagged_elements
                                   or any(c.joined == "no" for c in checks.coincident)):
            wanted.append(("Geometry checks",
                           "K's node graph in grey; orange rings: coincident nodes K does not join; red "
                           "crosses: nodes far from every node they are coupled to; red outlines: elements "
                           "of poor shape, with their ids.",
                           lambda: plots.geometry_png(geometry, checks)))
        if r.spectrum is not None and r.spectrum.modes:
            for k, mode in enumerate(r.spectrum.modes[:MAX_MODE_PLOTS], start=1):
                # the key once, under the first mode plot
                wanted.append((f"Mode {k}: {mode.kind}",
                               "Displaced shape (grey: undeformed, red: mode, scaled to 15% of "
                               "the model size); circled and numbered: the nodes that locate the "
                               "mode; grey triangles: supports (nodes without DOFs); squares: nodes "
                               "missing a DOF the others have; green triangles: the suggested supports"
                               + ("; a 3D model from four sides, far lines paler in the first view."
                                  if geometry.dim == 3 else ".") if k == 1 else
                               "Displaced shape, drawn as mode 1.",
                               lambda mode=mode, k=k: plots.mode_shape_png(geometry, mode, k, r.restraints)))
    if not wanted:
        return ""
    try:
        plots.require_matplotlib()
    except ImportError:
        names = "".join(f"<li>{_e(t)}</li>" for t, _, _ in wanted)
        return ('<h2>Figures</h2><div class="missing">These figures need matplotlib, which is '
                "not installed (install the optional extra: "
                "<code>pip install 'fe-conditioning[report]'</code>):"
                f"<ul>{names}</ul></div>")
    out = ["<h2>Figures</h2>"]
    for title, caption, draw in wanted:
        try:
            png = draw()
        except Exception as exc:  # a figure must never cost the whole report
            log.warning("figure %r could not be drawn: %s", title, exc)
            out.append(f'<p class="missing">{_e(title)}: could not be drawn '
                       f"({_e(type(exc).__name__)}: {_e(exc)}).</p>")
            continue
        if png is None:
            continue
        data = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img alt="{_e(title)}" src="data:image/png;base64,{data}">'
                   f"<figcaption><b>{_e(title)}.</b> {_e(caption)}</figcaption></figure>")
    if r.spectrum is not None and len(r.spectrum.modes) > MAX_MODE_PLOTS:
        out.append(f"<p>Only the first {MAX_MODE_PLOTS} of {len(r.spectrum.modes)} modes are "
                   "drawn; export all with --modes-vtk or --modes-csv.</p>")
    return "\n".join(out)


def _digits_sample(r: results.Report) -> Optional[results.DigitsSample]:
    if r.digits is None:
        return None
    with_per_dof = [s for s in r.digits.samples if s.per_dof_digits is not None]
    for s in with_per_dof:
        if s.sample == "load":
            return s
    return with_per_dof[0] if with_per_dof else None
