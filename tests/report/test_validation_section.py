"""The report's validation section: there with [uncertainty], absent without; its table and figure.

The small block study of ``tests/builders.py`` with readings scaled from the model's, so that the
states are known from ASME V&V 20-2009's rule (|E| > k u_val: model error; else k u_val above
the allowed difference: uncertainty dominated; else consistent), with u_val computed by the GUM's
eq. 10 (JCGM 100:2008) from the study's own terms. The page is parsed with the standard library's
html.parser (the outside reference for what a browser builds); the 3D views are left out (tested
in test_render/test_views).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from builders import block_readings, default_gauges, write_block_study
from matplotlib.image import imread
from test_document import _Page

GAIN = 1.06   # the invented test reads 6 % above the model
DAQ = 3.0     # the only term besides the relative gauge factor below


def _report(folder: Path, extra: str) -> tuple[object, _Page, Path]:
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study
    from correlate.report import write_report

    gauges = default_gauges().iloc[[0, 3, 6, 8]].reset_index(drop=True)
    rows = block_readings(gauges)
    for g in gauges["gauge"]:
        rows[g] = rows[g] * GAIN
    study = write_block_study(folder, readings_rows=rows, gauges=gauges, ctype="hexahedron",
                              extra_toml=extra)
    corr = correlate_study(read_study(study))
    out = folder / "out"
    out.mkdir()
    with pytest.MonkeyPatch.context() as mp:
        import correlate.report.document as document

        mp.setattr(document, "_render", lambda corr, folder: (None, "views left out"))
        write_report(corr, out)
    page = _Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    return corr, page, out


def test_section_gives_each_gauge_its_state_sorted_by_u_val(tmp_path):
    corr, page, out = _report(tmp_path, f"[uncertainty]\ngauge_factor = 0.01\ndaq_ue = {DAQ}\n")
    ref = corr.reference
    m, p = corr.measured[ref], corr.predicted[ref]
    E = p - m
    u_val = np.hypot(0.01 * np.abs(m), DAQ)                 # GUM eq. 10, two terms
    allowed = np.maximum(0.10 * np.abs(p), 20.0)           # the builder's [criteria]
    state = np.where(np.abs(E) > 2 * u_val, "model error",
                     np.where(2 * u_val > allowed, "uncertainty dominated", "consistent"))
    budget = [t for t in page.tables if t and "resolved model error [ue]" in t[0]]
    assert len(budget) == 1
    body = budget[0][1:]
    by_gauge = {r[0]: r for r in body}
    assert {g: by_gauge[g][8] for g in corr.gauges} == dict(zip(corr.gauges, state, strict=True))
    shown = [float(r[5]) for r in body]
    assert shown == sorted(shown, reverse=True)             # sorted by u_val, largest first
    # one decimal in the table: within 0.05 ue of the GUM value
    np.testing.assert_allclose([float(by_gauge[g][5]) for g in corr.gauges], u_val, rtol=0,
                               atol=0.051)
    text = " ".join(" ".join(page.text).split())
    assert "Validation statement beside the verdict" in text and "11. Validation uncertainty" in text
    image = imread(out / "validation.png")
    assert image.shape[0] > 300 and image.shape[1] > 500 and image.std() > 0.01  # not blank


def test_no_section_without_the_table(tmp_path):
    _, page, out = _report(tmp_path, "")
    text = " ".join(page.text)
    assert "Validation uncertainty" not in text and "Validation statement" not in text
    assert not (out / "validation.png").exists()
