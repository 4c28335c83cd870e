"""The HTML report and its VTK files, on a tiny invented study with hostile text.

The study: a 60 x 30 x 10 tet block carrying a linear strain field (the same shape as the interface
check's block), seven gauges and a rosette, read at loads 0, 4, 8, 4, 0 against a case solved for
10. Readings are the analytic model reading times a per-gauge gain, so some gauges pass and some
fail. Titles, ids and test fields carry HTML, quotes, Unicode, a '$' and a 500-character id.
"""

from __future__ import annotations

import csv
import os
from html.parser import HTMLParser
from pathlib import Path

import meshio
import numpy as np
import pandas as pd
import pytest

os.environ.setdefault("MESA_SHADER_CACHE_DISABLE", "true")

LONG_ID = "L" + "x" * 498 + "Z"                        # 500 characters
HTML_ID = "<b>G&5</b>\"q'"
UNICODE_ID = "Dehnung-ü-λ-测"
DOLLAR_ID = "S$1$"
TITLE = "<script>alert(1)</script> \"double\" 'single' & Ünïcødé λ 测试"
EVIL_LAB = "<img src=x onerror=alert(2)>"
REFERENCE_LOAD = 10.0
LOADS = (0.0, 4.0, 8.0, 4.0, 0.0)
NU = 0.33
EXY_ENG = 2e-4          # engineering shear of the case


def _field(points: np.ndarray) -> np.ndarray:
    """The case's strain tensors (tensor shear) at points: exx linear in x."""
    exx = 1e-3 * (0.5 + points[:, 0] / 60.0)
    t = np.zeros((len(points), 3, 3))
    t[:, 0, 0] = exx
    t[:, 1, 1] = -NU * exx
    t[:, 2, 2] = -NU * exx
    t[:, 0, 1] = t[:, 1, 0] = EXY_ENG / 2
    return t


def _block(path: Path, gradient: np.ndarray | None = None) -> None:
    """The tet block with the strain field, or with displacement u = gradient @ x."""
    xs, ys, zs = np.linspace(0, 60, 7), np.linspace(0, 30, 4), np.linspace(0, 10, 3)
    X, Y, Z = np.meshgrid(xs, ys, zs, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), Z.ravel()]
    nid = np.arange(len(pts)).reshape(X.shape)
    tets = []
    for i in range(len(xs) - 1):
        for j in range(len(ys) - 1):
            for k in range(len(zs) - 1):
                c = [nid[i + a, j + b, k + d] for d in (0, 1) for b in (0, 1) for a in (0, 1)]
                for t in ((0, 1, 3, 7), (0, 1, 5, 7), (0, 2, 3, 7), (0, 2, 6, 7), (0, 4, 5, 7),
                          (0, 4, 6, 7)):
                    q = [c[m] for m in t]
                    if np.linalg.det(pts[q[1:]] - pts[q[0]]) < 0:
                        q[2], q[3] = q[3], q[2]
                    tets.append(q)
    t = _field(pts)
    voigt = np.c_[t[:, 0, 0], t[:, 1, 1], t[:, 2, 2], 2 * t[:, 0, 1], 2 * t[:, 1, 2], 2 * t[:, 0, 2]]
    data = {"E": voigt} if gradient is None else {"U": pts @ gradient.T}
    meshio.write(path, meshio.Mesh(pts, [("tetra", np.array(tets))], point_data=data))


# gauge id, centre, grid direction, gain of the measured reading against the model
GAUGES = [
    ("G1", (20, 15, 10), (1, 0, 0), 1.02),
    (HTML_ID, (40, 15, 10), (0, 1, 0), 1.0),
    (UNICODE_ID, (30, 0, 5), (1, 0, 0), 1.6),
    (LONG_ID, (50, 30, 5), (1, 0, 0), 0.5),
    (DOLLAR_ID, (10, 5, 10), (1, 0, 0), 1.0),
    ("R1a", (30, 20, 10), (1, 0, 0), 1.0),
    ("R1b", (30, 20, 10), (1, 1, 0), 1.3),
    ("R1c", (30, 20, 10), (0, 1, 0), 1.0),
]
EXCLUDED = DOLLAR_ID


def model_reading(centre, direction) -> float:
    """d . eps . d at the centre for the reference case [ue] (a grid on a linear field reads its
    centre value; transverse sensitivity 0)."""
    d = np.asarray(direction, dtype=float)
    d = d / np.linalg.norm(d)
    return float(d @ _field(np.array([centre], dtype=float))[0] @ d) * 1e6


def write_study(folder: Path) -> Path:
    """Write the hostile study (block, gauge map, readings, study.toml); return the study path."""
    _block(folder / "block.vtu")
    with open(folder / "gauges.csv", "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["gauge", "x", "y", "z", "dir_x", "dir_y", "dir_z", "length", "rosette"])
        for g, c, d, _ in GAUGES:
            w.writerow([g, *c, *d, 3 if g == "G1" else 1.5, "R1" if g.startswith("R1") else ""])
    rng = np.random.default_rng(7)
    with open(folder / "readings.csv", "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["step", "F_kN", *[g for g, *_ in GAUGES]])
        for step, load in enumerate(LOADS):
            row = [gain * model_reading(c, d) * load / REFERENCE_LOAD + 3.0 + rng.normal(0, 0.5)
                   for _, c, d, gain in GAUGES]
            w.writerow([step, load, *np.round(row, 3)])
    title = TITLE.replace("\\", "\\\\").replace('"', '\\"')
    (folder / "study.toml").write_text(
        f'title = "{title}"\n'
        '[model]\nfile = "block.vtu"\nlength_unit = "mm"\nstress_unit = "MPa"\n'
        'revision = "B <rev>"\nsolver = "in-house"\nelement = "tet4"\n'
        '[[case]]\nname = "pull"\nstrain = "E"\ncomponents = ["xx", "yy", "zz", "xy", "yz", "xz"]\n'
        'shear = "engineering"\n'
        "[material]\nE = 70000.0\nnu = 0.33\n"
        '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.5\nangle_tol = 1.0\n'
        '[readings]\nfile = "readings.csv"\nzero = "first"\n'
        f'[[load]]\ncolumn = "F_kN"\ncase = "pull"\nreference = {REFERENCE_LOAD}\n'
        "[criteria]\nrelative = 0.10\nabsolute_ue = 50.0\n"
        '[test]\narticle = "bracket"\nserial = "SN-001"\n'
        f'lab = "{EVIL_LAB}"\ndate = "2026-11-30"\n'
        "[report]\nsteps = [1]\n"
        f'[[override]]\ngauge = "{DOLLAR_ID}"\naction = "exclude"\nreason = "lead wire <cut>"\n',
        encoding="utf-8")
    return folder / "study.toml"


DIAGNOSES = pd.DataFrame({
    "gauge": [UNICODE_ID, UNICODE_ID], "explanation": ["grid angle", "position"],
    "detail": ["turned 12 deg", "moved 2 mm"], "rms_before_ue": [1.0, 1.0],
    "rms_after_ue": [0.1, 0.2], "plausible": [False, False], "parameter": [12.0, 2.0]})


def build_correlation(folder: Path):
    """Run the study; the failure diagnosis (slow, tested in its own module) is replaced by a
    fixed table, which the report must show joined with '; '."""
    import correlate.comparison.correlation
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(correlate.comparison.correlation, "diagnose_failures",
                   lambda *a, **k: DIAGNOSES.iloc[:0].copy())
        corr = correlate_study(read_study(write_study(folder)))
    corr.diagnoses = DIAGNOSES.copy()
    return corr


class _Page(HTMLParser):
    """Collect elements, attributes and the text of table cells."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.stack: list[str] = []
        self.tables: list[list[list[str]]] = []
        self.h1 = ""
        self.text: list[str] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))
        self.stack.append(tag)
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None and self.tables:
            self.tables[-1][-1].append("".join(self._cell))
            self._cell = None
        if self.stack and self.stack[-1] == tag:
            self.stack.pop()

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)
        if self.stack and self.stack[-1] == "h1":
            self.h1 += data


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory):
    from correlate.report import write_report

    folder = tmp_path_factory.mktemp("report")
    corr = build_correlation(folder)
    out = folder / "out"
    out.mkdir()
    write_report(corr, out)
    page = _Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    return corr, out, page


def _tables(page: _Page, *header: str) -> list[list[list[str]]]:
    """The tables whose header row starts with ``header``."""
    return [t for t in page.tables if t and t[0][:len(header)] == list(header)]


def _table(page: _Page, *header: str) -> list[list[str]]:
    return _tables(page, *header)[0]


def test_reference_table_lists_every_gauge_worst_first(report) -> None:
    corr, _, page = report
    rows = _table(page, "gauge", "predicted [ue]")[1:]
    assert [r[0] for r in rows if r[0] in corr.gauges] == [r[0] for r in rows]
    assert sorted(r[0] for r in rows) == sorted(corr.gauges)
    # worst first: |difference| from the measured and predicted arrays (excluded gauge last)
    ref = int(np.argmax(np.abs(np.asarray(LOADS))))
    diff = corr.measured[ref] - corr.predicted[ref]
    evaluated = [g != EXCLUDED for g in corr.gauges]
    expected = [corr.gauges[j] for j in np.argsort(-np.abs(diff)) if evaluated[j]] + [EXCLUDED]
    assert [r[0] for r in rows] == expected


def test_reference_table_shows_the_analytic_model_reading(report) -> None:
    _, _, page = report
    rows = {r[0]: r for r in _table(page, "gauge", "predicted [ue]")[1:]}
    for g, c, d, _ in GAUGES:
        # closed form d.eps.d of the linear field at 8/10 of the case; printed to 0.1 ue
        expected = model_reading(c, d) * LOADS[2] / REFERENCE_LOAD
        assert float(rows[g][1]) == pytest.approx(expected, abs=0.051)


def test_every_resource_is_inline(report) -> None:
    _, out, page = report
    assert not any(tag in ("script", "link", "iframe", "object", "embed") for tag, _ in page.tags)
    refs = [(tag, k, v) for tag, attrs in page.tags for k, v in attrs.items()
            if k in ("src", "href", "srcset", "poster", "data")]
    assert refs, "the report should hold pictures"
    for tag, key, value in refs:
        assert value is not None
        assert value.startswith(("data:image/png;base64,", "#")), (tag, key)
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "@import" not in html
    assert "url(" not in html
    pngs = sorted(p.name for p in out.glob("*.png"))
    assert len([1 for tag, a in page.tags if tag == "img"]) == len(pngs)


def test_untrusted_text_is_escaped_and_intact(report) -> None:
    _, _, page = report
    assert page.h1.strip() == TITLE
    assert not any(tag == "script" for tag, _ in page.tags)
    # the lab field is text, not an element: every img is one of ours
    assert all(a.get("src", "").startswith("data:") for tag, a in page.tags if tag == "img")
    assert EVIL_LAB in "".join(page.text)
    cells = {c for t in page.tables for r in t for c in r}
    for g in (LONG_ID, HTML_ID, UNICODE_ID, DOLLAR_ID):
        assert g in cells
    assert len(LONG_ID) == 500


def test_diagnoses_are_joined(report) -> None:
    _, _, page = report
    rows = {r[0]: r for r in _table(page, "gauge", "predicted [ue]")[1:]}
    assert rows[UNICODE_ID][-1] == "grid angle: turned 12 deg; position: moved 2 mm"


def test_requested_step_has_its_own_table(report) -> None:
    _, _, page = report
    tables = _tables(page, "gauge", "predicted [ue]")
    assert len(tables) == 2
    rows = {r[0]: r for r in tables[1][1:]}
    g, c, d, _ = GAUGES[0]
    # step 1 is load 4: the analytic model reading at 4/10 of the case, printed to 0.1 ue
    assert float(rows[g][1]) == pytest.approx(model_reading(c, d) * 0.4, abs=0.051)


def test_flags_rosettes_and_caution(report) -> None:
    _, _, page = report
    flags = _table(page, "gauge", "applies to", "flag")
    assert any(r[0] == EXCLUDED and "lead wire <cut>" in r[4] for r in flags[1:])
    ros = _table(page, "rosette", "source")
    assert {r[1] for r in ros[1:] if r[0] == "R1"} == {"measured", "predicted"}
    text = " ".join(" ".join(page.text).split())
    assert ("These results support, but do not replace, engineering judgement, the applicable "
            "codes and licensed practice.") in text


def test_gauges_vtp_holds_the_reference_step(report) -> None:
    import pyvista as pv

    corr, out, _ = report
    poly = pv.read(out / "gauges.vtp")
    ref = 2
    place = corr.model.operator.placement
    # written as float64: exact round trip
    np.testing.assert_allclose(poly.points, place.centre, rtol=0, atol=1e-9)
    np.testing.assert_allclose(poly["predicted_ue"], corr.predicted[ref], rtol=0, atol=1e-9)
    np.testing.assert_allclose(poly["measured_ue"], corr.measured[ref], rtol=0, atol=1e-9)
    np.testing.assert_allclose(poly["difference_ue"], corr.measured[ref] - corr.predicted[ref],
                               rtol=0, atol=1e-9)
    np.testing.assert_allclose(poly["grid_direction"], place.direction, rtol=0, atol=1e-12)
    np.testing.assert_allclose(poly["normal"], place.normal, rtol=0, atol=1e-12)
    assert list(poly["gauge"]) == list(corr.gauges)
    status = list(poly["status"])
    assert status[corr.gauges.index(EXCLUDED)] == "excluded"
    codes = np.asarray(poly["status_code"])
    assert codes.tolist() == [0 if s == "pass" else 1 if s == "fail" else 2 for s in status]
    # the gains make G1 (2 %) pass and the Unicode gauge (60 %) fail under 10 % / 50 ue
    assert status[corr.gauges.index("G1")] == "pass"
    assert status[corr.gauges.index(UNICODE_ID)] == "fail"
    assert "status_legend" in poly.field_data


def test_surface_vtp_holds_the_analytic_strain(report) -> None:
    import pyvista as pv

    _, out, _ = report
    surf = pv.read(out / "surface.vtp")
    assert surf.n_cells > 0
    t = _field(np.asarray(surf.points)) * (LOADS[2] / REFERENCE_LOAD) * 1e6
    # reference: numpy's symmetric eigen-solver on the analytic tensor; float64 round trip
    np.testing.assert_allclose(surf["max_principal_ue"], np.linalg.eigvalsh(t)[:, -1], rtol=0,
                               atol=1e-6)
    np.testing.assert_allclose(surf["exx_ue"], t[:, 0, 0], rtol=0, atol=1e-6)
    np.testing.assert_allclose(surf["gxy_ue"], 2 * t[:, 0, 1], rtol=0, atol=1e-6)
    # the outer surface of the block: every point on one of its six faces
    p = np.asarray(surf.points)
    on_face = (np.isclose(p[:, 0], 0) | np.isclose(p[:, 0], 60) | np.isclose(p[:, 1], 0)
               | np.isclose(p[:, 1], 30) | np.isclose(p[:, 2], 0) | np.isclose(p[:, 2], 10))
    assert on_face.all()


def _correlate(folder: Path, gauges: str, readings: str, study: str):
    """Write a gauge map, readings and a study beside the model already in ``folder``; correlate."""
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study

    (folder / "gauges.csv").write_text(gauges)
    (folder / "readings.csv").write_text(readings)
    (folder / "study.toml").write_text(study)
    return correlate_study(read_study(folder / "study.toml"))


def test_surface_from_displacement_is_the_exact_strain(tmp_path: Path) -> None:
    """A displacement case: the surface carries the small strain of each cell (linear field)."""
    from correlate.report.scene import model_surface

    rng = np.random.default_rng(11)
    G = rng.normal(0.0, 5e-4, (3, 3))
    _block(tmp_path / "block.vtu", gradient=G)
    corr = _correlate(
        tmp_path, "gauge,x,y,z,dir_x,dir_y,dir_z\nA,20,15,10,1,0,0\nB,30,0,5,1,0,0\n"
        "C,40,15,10,0,1,0\n", "step,F,A,B,C\n0,0,0,0,0\n1,5,130,-40,61\n2,10,270,-95,118\n",
        'title = "displacement"\n[model]\nfile = "block.vtu"\nlength_unit = "mm"\n'
        '[[case]]\nname = "c"\ndisplacement = "U"\n[gauges]\nfile = "gauges.csv"\n'
        '[readings]\nfile = "readings.csv"\n[[load]]\ncolumn = "F"\ncase = "c"\nreference = 4.0\n')
    surface, note = model_surface(corr)
    # reference: small strain sym(G) of u = G x, times the factor 10 / 4 of the 10 kN step; a
    # linear tetrahedron differentiates a linear field exactly (rounding only)
    eps = 0.5 * (G + G.T) * 2.5 * 1e6
    assert "displacement" in note
    np.testing.assert_allclose(surface.cell_data["exx_ue"], eps[0, 0], rtol=0, atol=1e-6)
    np.testing.assert_allclose(surface.cell_data["gyz_ue"], 2 * eps[1, 2], rtol=0, atol=1e-6)
    np.testing.assert_allclose(surface.cell_data["max_principal_ue"], np.linalg.eigvalsh(eps)[-1],
                               rtol=0, atol=1e-6)


def test_surface_of_a_series_case_interpolates_between_fe_steps(tmp_path: Path) -> None:
    """A series case (one FE state per load): the surface at the reference step is the field
    interpolated linearly in load between the neighbouring FE steps, as the run pairs readings."""
    from builders import solid_mesh

    from correlate.report.scene import model_surface

    mesh = solid_mesh("hexahedron", n=(4, 3, 2))
    base = np.zeros((len(mesh.points), 6))
    base[:, 0], base[:, 1], base[:, 2] = 1e-3, -0.3e-3, -0.3e-3
    times = (0.25, 0.5, 0.75, 1.0)
    cwd = os.getcwd()
    os.chdir(tmp_path)        # meshio writes the .h5 beside the working folder (library notes)
    try:
        with meshio.xdmf.TimeSeriesWriter("series.xdmf") as w:
            w.write_points_cells(mesh.points, [("hexahedron", mesh.blocks[0][1])])
            for t in times:
                w.write_data(t, point_data={"E": base * t ** 1.5})
    finally:
        os.chdir(cwd)
    corr = _correlate(
        tmp_path, "gauge,x,y,z,dir_x,dir_y,dir_z\nA,1,1.5,2,1,0,0\nB,3,1.5,2,0,1,0\n"
        "C,2,0,1,1,0,0\n", "step,F,A,B,C\n0,0,0,0,0\n1,3,170,-45,160\n2,9,830,-260,870\n",
        'title = "series"\n[model]\nfile = "series.xdmf"\nlength_unit = "mm"\n'
        '[[case]]\nname = "ramp"\nstrain = "E"\ntime_index = "all"\n'
        'match = { column = "F", value_at_time_1 = 10.0 }\n'
        '[gauges]\nfile = "gauges.csv"\n[readings]\nfile = "readings.csv"\n')
    assert corr.steps.loads[corr.reference, 0] == 9.0
    surface, _ = model_surface(corr)
    # by hand: 9 kN is t = 0.9, between the FE steps at t = 0.75 and 1.0 (weights 0.4, 0.6)
    exx = (0.4 * 0.75 ** 1.5 + 0.6 * 1.0 ** 1.5) * 1000.0
    # rtol 1e-12: the same two weights in float64, only rounding differs
    np.testing.assert_allclose(surface["exx_ue"], exx, rtol=1e-12, atol=0)
    np.testing.assert_allclose(surface["eyy_ue"], -0.3 * exx, rtol=1e-12, atol=0)
