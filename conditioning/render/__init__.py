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

Renderers read the report alone: figures and mode files draw its
``geometry`` (:class:`~conditioning.results.ModelGeometry`, the input data
restated). They import nothing but :mod:`conditioning.results`,
:mod:`conditioning.errors`, each other and rich/matplotlib/numpy, and never
compute a diagnosis (``tests/test_render_imports.py`` holds them to it).
"""
