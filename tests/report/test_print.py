"""The report as a reviewer receives it: rendered and printed by headless Chromium.

The study is the demo campaign (the invented bracket) with a [document] table and one disposition
(G07 reversed, the analyst's reason), run by the command line as a user runs it: two flags still
wait for a disposition, so the verdict is provisional.

Rendered page (``--dump-dom``): the verdict state, the document block ("not given" where the study
is silent), the load mapping with the tared loads at the reference step (read off the readings
file by hand), and the flag table with the disposed flag kept.

Printed page (``--print-to-pdf`` on Letter, Chromium's default paper, and on A4): poppler's
``pdfinfo`` counts the pages, ``pdftotext`` reads each page's running header and footer ("page i
of n" and the document number), and ``pdftoppm`` turns each page into a PNG whose empty share is
measured with numpy: the content area between the page margins, less every band of blank pixel
rows taller than 8 mm (the gap a page break leaves; the space between lines and paragraphs is
narrower), must be at least half of the area on every page but the last.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

# pytest puts this folder on sys.path (rootdir conftest, no __init__.py): share the page parser
from test_document import _Page, _tables

from correlate.commands.cli import main

pytestmark = pytest.mark.browser

DOCUMENT = ('\n[document]\nnumber = "TR-0421 <invented>"\nrevision = "B"\n'
            'prepared = "A. Analyst (invented)"\nprepared_date = "2026-12-01"\n'
            'checked = "C. Checker (invented)"\n')
OVERRIDE = ('\n[[override]]\ngauge = "G07"\naction = "reverse"\n'
            'reason = "lead wires found swapped at the bridge module"\n'
            'by = "A. Analyst (invented)"\ndate = "2026-11-30"\n')
MARGIN_TOP_MM, MARGIN_BOTTOM_MM = 20.0, 18.0    # the @page margins of report.css
DPI = 50
GAP_MM = 8.0


def _chromium(tmp: Path, *args: str) -> str:
    exe = shutil.which("chromium")
    if exe is None:
        pytest.skip("chromium is not on PATH: apt-get install chromium")
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={tmp / 'chromium-profile'}", *args]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=180, check=False,
                          env={**os.environ, "HOME": str(tmp)})
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


def _poppler(tool: str, *args: str) -> str:
    exe = shutil.which(tool)
    if exe is None:
        pytest.skip(f"{tool} is not on PATH: apt-get install poppler-utils")
    done = subprocess.run([exe, *args], capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> dict:
    if shutil.which("chromium") is None:
        pytest.skip("chromium is not on PATH: apt-get install chromium")
    tmp = tmp_path_factory.mktemp("print")
    work = tmp / "demo"
    assert main(["--quiet", "demo", "--out", str(work)]) == 0
    study = work / "study.toml"
    study.write_text(study.read_text(encoding="utf-8") + DOCUMENT + OVERRIDE, encoding="utf-8")
    assert main(["--quiet", "run", str(study), "--out", str(work / "signed")]) == 0
    html = work / "signed" / "report.html"
    page = _Page()
    page.feed(_chromium(tmp, "--dump-dom", html.as_uri()))
    return {"tmp": tmp, "html": html, "page": page}


def _first_table(page: _Page, first_cell: str) -> list[list[str]]:
    hits = [t for t in page.tables if t and t[0] and t[0][0] == first_cell]
    assert hits, f"no table starting with {first_cell!r}"
    return hits[0]


def test_rendered_verdict_is_provisional_with_its_reasons(report) -> None:
    page = report["page"]
    states = [a.get("data-state") for tag, a in page.tags
              if tag == "div" and "verdict" in (a.get("class") or "").split()]
    assert states == ["provisional"]
    text = " ".join(" ".join(page.text).split())
    assert "Provisional: no verdict until the reasons below are settled." in text
    # the two flags left open are named; the criteria alone are stated beside them
    assert re.search(r"need a disposition before sign-off: G09, G15", text)
    assert "The criteria alone: the model meets the criteria." in text


def test_rendered_document_block_says_not_given(report) -> None:
    rows = dict(tuple(r) for r in _first_table(report["page"], "document number"))
    assert rows["document number"] == "TR-0421 <invented>"
    assert rows["revision"] == "B"
    assert rows["prepared by"] == "A. Analyst (invented), 2026-12-01"
    assert rows["checked by"] == "C. Checker (invented), date not given"
    assert rows["approved by"] == "not given"


def test_rendered_load_mapping_holds_the_tared_reference_loads(report) -> None:
    table = _tables(report["page"], "readings column", "unit", "FE case")[0]
    rows = {r[0]: r for r in table[1:]}
    # by hand from the demo's readings.csv: the reference step is step 7 (F_pull 10.0,
    # F_side 2.0), the tare the first row (0.4 and 0.05); references 10 and 2 from study.toml
    assert rows["F_pull_kN"][1:6] == ["kN", "pull", "10", "9.6", "0.96"]
    assert rows["F_side_kN"][1:6] == ["kN", "side", "2", "1.95", "0.975"]


def test_rendered_flag_table_keeps_the_disposed_flag(report) -> None:
    table = _tables(report["page"], "gauge", "applies to", "flag")[0]
    header, rows = table[0], {r[0]: dict(zip(table[0], r, strict=True)) for r in table[1:]}
    assert header[3:8] == ["reason", "disposition", "action", "by", "date"]
    g07 = rows["G07"]
    assert g07["flag"] == "reversed" and g07["action"] == "reverse"
    assert "lead wires found swapped at the bridge module" in g07["disposition"]
    assert g07["by"] == "A. Analyst (invented)" and g07["date"] == "2026-11-30"
    assert g07["state"] == "disposed (reverse)"
    # the ratio before and after the reversal: the sign changes, the size does not
    assert float(g07["value"]) == pytest.approx(-float(g07["value after"]), rel=1e-9, abs=0)
    for g in ("G09", "G15"):
        assert rows[g]["state"] == "open: needs a disposition"
    assert rows["G01"]["flag"] == "dead"


def _blank_share(png: Path) -> float:
    """Share of the page's content area taken by bands of blank rows taller than GAP_MM."""
    from matplotlib.image import imread

    img = imread(png)
    grey = img[..., :3].mean(axis=2) if img.ndim == 3 else img
    grey = grey * 255 if grey.max() <= 1.0 else grey
    px = DPI / 25.4
    top, bottom = round(MARGIN_TOP_MM * px), len(grey) - round(MARGIN_BOTTOM_MM * px)
    blank = (grey[top:bottom] > 245).all(axis=1)
    runs, run = [], 0
    for b in np.r_[blank, False]:
        if b:
            run += 1
        else:
            if run:
                runs.append(run)
            run = 0
    gaps = sum(r for r in runs if r > GAP_MM * px)
    return gaps / (bottom - top)


@pytest.mark.parametrize("paper", [None, "A4"], ids=["letter", "a4"])
def test_printed_pages_are_numbered_and_never_half_empty(report, paper: str | None) -> None:
    tmp, html = report["tmp"], report["html"]
    name = paper or "letter"
    source = html
    if paper:
        # the stylesheet forces no paper size (the printer's is used): ask for A4 here
        source = html.with_name(f"report_{name}.html")
        source.write_text(html.read_text(encoding="utf-8").replace(
            "</head>", f"<style>@page {{ size: {paper}; }}</style></head>"), encoding="utf-8")
    pdf = tmp / f"report_{name}.pdf"
    _chromium(tmp, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", source.as_uri())
    info = _poppler("pdfinfo", str(pdf))
    pages = int(re.search(r"^Pages:\s+(\d+)", info, re.M).group(1))
    size = re.search(r"^Page size:\s+([\d.]+) x ([\d.]+) pts", info, re.M)
    # Letter is 612 x 792 pt, A4 595 x 842 pt
    assert (round(float(size.group(1))), round(float(size.group(2)))) == (
        (595, 842) if paper == "A4" else (612, 792))
    assert 4 <= pages <= 20
    for i in range(1, pages + 1):
        text = _poppler("pdftotext", "-f", str(i), "-l", str(i), "-layout", str(pdf), "-")
        assert f"page {i} of {pages}" in text, (name, i)
        assert "Document TR-0421 <invented>, revision B" in text, (name, i)
    stem = tmp / f"page_{name}"
    _poppler("pdftoppm", "-r", str(DPI), "-png", str(pdf), str(stem))
    pngs = sorted(tmp.glob(f"page_{name}-*.png"), key=lambda p: int(p.stem.rsplit("-", 1)[1]))
    assert len(pngs) == pages
    shares = [_blank_share(p) for p in pngs]
    assert all(s <= 0.5 for s in shares[:-1]), (name, [round(s, 2) for s in shares])


@pytest.mark.parametrize("which,width", [("report", 1280), ("report", 800), ("sweep", 800)])
def test_a_laptop_or_tablet_window_needs_no_sideways_scrolling(report, which, width) -> None:
    """At a laptop's 1280 px window, or a tablet's 800 px, no table makes the whole page scroll
    sideways (the gauge map's long headings wrap; a table still too wide for the window scrolls
    in its own box: the gauge map, the gauges, flags, rosettes, chain and budget tables, and
    the sweep page's table of variants).
    Chromium lays the page out; a script added to a copy of it writes the document's scroll
    width and client width, read back from the rendered DOM."""
    tmp, html = report["tmp"], report["html"]
    if which == "sweep":
        html = html.parents[1] / "sweep" / "sweep.html"
    probe = html.with_name(f"{which}_probe.html")
    probe.write_text(html.read_text(encoding="utf-8").replace("</body>", (
        "<script>window.addEventListener('load', () => { const d = document.documentElement;"
        " const p = document.createElement('pre'); p.id = 'widths';"
        " p.textContent = d.scrollWidth + ' ' + d.clientWidth; document.body.appendChild(p);"
        " });</script></body>")), encoding="utf-8")
    dom = _chromium(tmp, f"--window-size={width},900", "--virtual-time-budget=5000",
                    "--dump-dom", probe.as_uri())
    scroll, client = map(int, re.search(r'<pre id="widths">(\d+) (\d+)</pre>', dom).groups())
    assert width - 80 <= client <= width
    assert scroll <= client, f"the page is {scroll - client} px wider than the window"
    wide = "gaugemap" if which == "report" else "variants"
    assert f'<div class="wide"><table class="{wide}">' in dom


def test_the_printed_sweep_page_keeps_each_section_with_its_figures(report) -> None:
    """The demo's sweep.html on Letter: the identification's figures shrink to fit under its
    table (the first page used to be half empty, its figures pushed to the next), and no page
    but the last is more than half blank (measured as for the report)."""
    tmp = report["tmp"]
    html = report["html"].parents[1] / "sweep" / "sweep.html"
    pdf = tmp / "sweep.pdf"
    _chromium(tmp, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", html.as_uri())
    pages = int(re.search(r"^Pages:\s+(\d+)", _poppler("pdfinfo", str(pdf)), re.M).group(1))
    first = _poppler("pdftotext", "-f", "1", "-l", "1", "-layout", str(pdf), "-")
    assert "1. Parameters identified" in first and "2. Variants ranked" not in first
    stem = tmp / "sweep_page"
    _poppler("pdftoppm", "-r", str(DPI), "-png", str(pdf), str(stem))
    pngs = sorted(tmp.glob("sweep_page-*.png"), key=lambda p: int(p.stem.rsplit("-", 1)[1]))
    assert len(pngs) == pages and pages <= 3
    shares = [_blank_share(p) for p in pngs]
    assert all(s <= 0.5 for s in shares[:-1]), [round(s, 2) for s in shares]
