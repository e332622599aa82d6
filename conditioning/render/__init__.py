"""Every way results leave the tool: views of one :class:`~conditioning.results.Report`.

:mod:`conditioning.render.terminal`
    Rich view for the terminal (:class:`~conditioning.render.terminal.TerminalReport`,
    :func:`~conditioning.render.terminal.render_text`).
:mod:`conditioning.render.json_report`
    JSON for pipelines (:func:`~conditioning.render.json_report.report_to_dict`,
    :func:`~conditioning.render.json_report.write_json`), documented in
    ``docs/report-format.md``.
:mod:`conditioning.render.html`
    One self-contained HTML page with figures (:func:`~conditioning.render.html.write_html`).
:mod:`conditioning.render.modes_export`
    Near-singular modes as VTK XML (``.vtu``) and CSV.

Renderers only read the report (and, for figures and mode files, the model's
input data); they never compute a diagnosis.
"""
