"""The HTML report: self-contained, images are real PNGs, works without
matplotlib, and renders in a real headless browser (Debian's chromium) to a
non-blank page with no console errors.

Outside checks: the PNG signature and decoding (PNG specification, ISO/IEC
15948; decoded with matplotlib.image, i.e. Pillow); the HTML parsed with the
standard library's html.parser; the page rendered by chromium.
"""

from __future__ import annotations

import base64
import io
import os
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from conditioning.render.html import render_html, write_html
from test_report_fixtures import healthy_report, singular_report

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"   # PNG specification, section 5.2


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def _parse(page: str) -> _Collector:
    p = _Collector()
    p.feed(page)
    return p


def _images(page: str) -> list[bytes]:
    return [base64.b64decode(a["src"].split(",", 1)[1]) for t, a in _parse(page).tags
            if t == "img"]


def test_self_contained_no_network_no_script():
    report, model = singular_report()
    page = render_html(report)
    parsed = _parse(page)
    assert not any(t == "script" for t, _ in parsed.tags)
    for tag, attrs in parsed.tags:
        for key in ("src", "href"):
            if key in attrs:
                assert attrs[key].startswith("data:"), (tag, attrs[key][:40])
    assert not re.search(r"url\(\s*['\"]?(https?:)?//", page)


def test_verdict_findings_and_figures_present():
    pytest.importorskip("matplotlib")
    report, model = singular_report()
    page = render_html(report)
    text = " ".join(" ".join(_parse(page).text).split())
    assert report.verdict in text
    assert "free-modes" in text and "Restrain node 1" in text
    assert "must exist in the real structure" in text
    assert " ".join(report.caution.split()) in text
    images = _images(page)
    # spectrum + diagonal histogram + 3 mode shapes
    assert len(images) == 5
    import matplotlib.image as mpimg

    for png in images:
        assert png.startswith(PNG_SIGNATURE)
        pixels = mpimg.imread(io.BytesIO(png), format="png")
        assert pixels.ndim == 3 and pixels.shape[0] > 100 and pixels.shape[1] > 100
        assert float(np.std(pixels[..., :3])) > 0.01   # not a blank image


def test_digits_figure_with_healthy_model():
    pytest.importorskip("matplotlib")
    report, model = healthy_report()
    page = render_html(report)
    assert "Trustworthy digits per node" in page
    assert len(_images(page)) == 3   # spectrum, diagonal histogram, digits per node


def test_without_geometry_only_the_spectrum():
    import dataclasses

    pytest.importorskip("matplotlib")
    report, _ = singular_report()
    assert len(_images(render_html(dataclasses.replace(report, geometry=None)))) == 1


def test_without_matplotlib_says_which_plots_need_it(monkeypatch):
    """Hide matplotlib: None in sys.modules makes its import raise ImportError."""
    for name in ("matplotlib", "matplotlib.figure"):
        monkeypatch.setitem(sys.modules, name, None)
    report, model = singular_report()
    page = render_html(report)
    assert "<img" not in page
    assert "need matplotlib" in page and "fe-conditioning[report]" in page
    for title in ("Eigenvalue spectrum near zero", "Diagonal magnitudes by dof type",
                  "Mode 1: rigid-body", "Mode 3: rigid-body"):
        assert title in page


@pytest.mark.parametrize("name", ["footbridge_spring_bearings", "mast_soft_spring",
                                  "bracket_loose_pad"])
def test_no_paragraph_said_twice(name):
    """A sentence of prose (text from the standard library's html.parser)
    appears no more often than the distinct findings that say it: a jump's
    reasoning is not repeated in the jump table, the rule-of-thumb prediction
    is stated once, and findings that share their advice (three modes of one
    part) print it once."""
    from collections import Counter

    from conditioning import diagnose

    demo = Path(__file__).resolve().parents[1] / "matrices"
    report = diagnose(str(demo / f"{name}.mtx"), dofs=str(demo / f"{name}_dofs.csv"),
                      coords=str(demo / f"{name}_coords.csv"), load=str(demo / f"{name}_load.mtx"))
    text = " ".join(_parse(render_html(report)).text)
    prose = Counter(s.strip() for s in re.split(r"(?<=[.;])\s+", text)
                    if re.search(r"[a-z]{3,} [a-z]{3,} [a-z]{3,}", s))   # not lists of node ids
    own = {f"{f.message} {f.advice or ''}" for f in report.findings}
    for sentence, k in prose.items():
        assert k <= max(1, sum(sentence in t for t in own)), sentence
    assert text.count("Advice: Add supports") <= 1
    assert text.count("16 - log10") <= 2          # the prediction once: raw and scaled


def test_markup_is_escaped():
    import dataclasses

    report, _ = singular_report()
    report = dataclasses.replace(report, verdict="<script>alert(1)</script>")
    page = render_html(report)
    assert "<script>" not in page and "&lt;script&gt;" in page


# ----------------------------------------------------------- real browser
def _chromium() -> str:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    if os.path.exists("/usr/bin/chromium"):
        return "/usr/bin/chromium"
    pytest.skip("no chromium browser found (CI installs Debian's chromium: "
                "apt-get install -y chromium)")


def _run_chromium(args: list[str], profile: Path) -> subprocess.CompletedProcess:
    base = [_chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
            "--no-first-run", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--disable-dev-shm-usage", f"--user-data-dir={profile}"]
    return subprocess.run(base + args, capture_output=True, text=True, timeout=120)


def _console_messages(stderr: str) -> list[str]:
    """Page console lines in chromium's --enable-logging output
    (``...:INFO:CONSOLE:1] "message", source: ...``)."""
    return [ln for ln in stderr.splitlines() if ":CONSOLE" in ln or "Uncaught" in ln]


def test_console_error_detection_works(tmp_path):
    """Control for the check below: a page with a deliberate script error is
    caught by the same scan of chromium's log."""
    page = tmp_path / "broken.html"
    page.write_text("<html><body><p>x</p><script>console.error('deliberate');"
                    "undefinedFunction();</script></body></html>")
    run = _run_chromium(["--enable-logging=stderr", "--v=0", "--dump-dom", page.as_uri()],
                        tmp_path / "profile")
    found = _console_messages(run.stderr)
    assert any("deliberate" in ln for ln in found)
    assert any("Uncaught ReferenceError" in ln for ln in found)


def test_renders_in_headless_chromium(tmp_path):
    """Screenshot of the page in chromium: not blank (many distinct colours,
    the verdict's red background present) and no console errors."""
    pytest.importorskip("matplotlib")
    report, model = singular_report()
    page = tmp_path / "report.html"
    write_html(report, page)
    shot = tmp_path / "shot.png"
    run = _run_chromium(["--enable-logging=stderr", "--v=0", f"--screenshot={shot}",
                         "--window-size=1200,2000", page.as_uri()], tmp_path / "profile")
    assert shot.is_file(), run.stderr[-2000:]
    console = _console_messages(run.stderr)
    assert not console, console
    import matplotlib.image as mpimg

    pixels = mpimg.imread(str(shot))[..., :3]
    assert pixels.shape[:2] == (2000, 1200)
    assert float(np.std(pixels)) > 0.05
    colours = np.unique((pixels.reshape(-1, 3) * 255).astype(np.uint8), axis=0)
    assert len(colours) > 50
    # the verdict box of an "errors" report is #fdedec (253, 237, 236)
    assert np.any(np.all((pixels * 255).round() == (253, 237, 236), axis=-1))


def test_dom_in_chromium_keeps_the_figures(tmp_path):
    """--dump-dom: the browser parsed the page and kept every inline image."""
    pytest.importorskip("matplotlib")
    report, model = singular_report()
    page = tmp_path / "report.html"
    write_html(report, page)
    run = _run_chromium(["--dump-dom", page.as_uri()], tmp_path / "profile")
    assert run.returncode == 0, run.stderr[-2000:]
    assert run.stdout.count("data:image/png;base64,") == 5
    assert report.verdict in run.stdout


def test_every_section_of_a_full_report():
    """Condition figures with their methods, jumps, digits lost at pivots and digits all reach
    the page (text checked after the standard library's HTML parser)."""
    report, model = healthy_report()
    text = " ".join(" ".join(_parse(render_html(report)).text).split())
    for needle in ("Condition number", "Hager-Higham 1-norm estimate (a lower bound)",
                   "Stiffness jumps", "diagonal-outlier", "Digits lost at pivots", "node 4 uy",
                   "Digits of the displacements", "double-double refinement", "withdrawn"):
        assert needle in text, needle


def test_a_failing_figure_does_not_cost_the_page(monkeypatch):
    pytest.importorskip("matplotlib")
    from conditioning.render import plots

    def broken(*a, **k):
        raise ValueError("no luck")
    monkeypatch.setattr(plots, "diagonal_histogram_png", broken)
    report, model = singular_report()
    page = render_html(report)
    assert "could not be drawn (ValueError: no luck)" in page
    assert len(_images(page)) == 4     # the other figures are still there


def test_undecided_mode_reads_not_decided_as_in_the_terminal():
    """A mode the support proof left undecided (NearSingularMode.undecided) is 'not decided'
    in the HTML mode table, as the terminal prints it, never 'nearly free' (issue 22;
    the reference is the terminal view of the same report: one wording across views,
    common practice)."""
    import dataclasses

    from conditioning.render.terminal import render_text

    report, _ = singular_report()
    modes = [dataclasses.replace(m, exact=False, undecided=True) for m in report.spectrum.modes]
    groups = [dataclasses.replace(g, exact=False) for g in report.spectrum.mode_groups]
    report = dataclasses.replace(report, spectrum=dataclasses.replace(report.spectrum, modes=modes,
                                                                      mode_groups=groups))
    terminal = render_text(report, width=100)
    assert "(not decided)" in terminal and "(nearly free)" not in terminal
    page = render_html(report)
    modes_section = page[page.index("<h2>Near-singular modes</h2>"):]
    modes_section = modes_section[:modes_section.index("</table>")]
    assert "(not decided)" in modes_section
    assert "nearly free" not in modes_section
