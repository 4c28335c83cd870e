"""3D views of the report: pictures not blank, gauges drawn in their colours, hidden gauges found.

The part: a 40 x 20 x 24 hexahedral block with a slot 2 wide and 18 deep cut through it, carrying a
linear strain field. One gauge sits on a slot wall 14 below the top: every straight line from it to
the outside crosses the part (the slot is 2 wide), so no view can show it. The other gauges sit on
the six outer faces.

Each picture is checked with a window test: the gauge's marker point is projected with a VTK camera
built from the view's recorded camera, and a 7 x 7 pixel window around it must hold the gauge's
discrepancy colour as matplotlib's colour map gives it.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import meshio
import numpy as np
import pytest

os.environ.setdefault("MESA_SHADER_CACHE_DISABLE", "true")

pytestmark = pytest.mark.render

XS = (0, 4, 8, 12, 16, 19, 21, 24, 28, 32, 36, 40)
YS = (0, 5, 10, 15, 20)
ZS = (0, 3, 6, 9, 12, 15, 18, 21, 24)
SLOT = (19.0, 21.0, 6.0)     # x from, x to, bottom of the slot (it runs through y, open at the top)
# gauge, centre, grid direction, measured = gain * model reading
GAUGES = [
    ("T1", (8, 10, 24), (1, 0, 0), 1.5),
    ("T2", (32, 10, 24), (0, 1, 0), 0.4),
    ("F1", (10, 0, 12), (1, 0, 0), 0.7),
    ("B1", (30, 20, 12), (0, 0, 1), 1.8),
    ("E1", (40, 10, 12), (0, 1, 0), 1.0),
    ("D1", (26, 10, 0), (1, 0, 0), 1.25),
    ("W1", (0, 10, 12), (0, 0, 1), 1.0),      # excluded by the study: drawn in the flagged colour
    ("S1", (19, 10, 10), (0, 1, 0), 1.0),     # on the slot wall, 14 below the top
]
SIZE = (900, 700)


def _slotted_block(path: Path) -> None:
    X, Y, Z = np.meshgrid(XS, YS, ZS, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), Z.ravel()].astype(float)
    nid = np.arange(len(pts)).reshape(X.shape)
    hexes = []
    for i in range(len(XS) - 1):
        for j in range(len(YS) - 1):
            for k in range(len(ZS) - 1):
                if XS[i] >= SLOT[0] and XS[i + 1] <= SLOT[1] and ZS[k] >= SLOT[2]:
                    continue
                hexes.append([nid[i + a, j + b, k + c] for (a, b, c) in
                              ((0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0),
                               (0, 0, 1), (1, 0, 1), (1, 1, 1), (0, 1, 1))])
    exx = 1e-3 * (0.6 + pts[:, 0] / 40.0)
    voigt = np.c_[exx, -0.3 * exx, -0.3 * exx, np.full(len(pts), 2e-4), np.zeros(len(pts)),
                  np.zeros(len(pts))]
    meshio.write(path, meshio.Mesh(pts, [("hexahedron", np.array(hexes))],
                                   point_data={"E": voigt}))


def _reading(centre, direction) -> float:
    d = np.asarray(direction, dtype=float)
    exx = 1e-3 * (0.6 + centre[0] / 40.0)
    t = np.diag([exx, -0.3 * exx, -0.3 * exx])
    t[0, 1] = t[1, 0] = 1e-4
    return float(d @ t @ d) * 1e6


@pytest.fixture(scope="module")
def rendered(tmp_path_factory: pytest.TempPathFactory):
    import correlate.comparison.correlation
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study
    from correlate.report.scene import render_views

    folder = tmp_path_factory.mktemp("render")
    _slotted_block(folder / "block.vtu")
    with open(folder / "gauges.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["gauge", "x", "y", "z", "dir_x", "dir_y", "dir_z", "length"])
        for g, c, d, _ in GAUGES:
            w.writerow([g, *c, *d, 2])
    with open(folder / "readings.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["step", "F", *[g for g, *_ in GAUGES]])
        for step, load in enumerate((0.0, 5.0, 10.0)):
            w.writerow([step, load, *[round(gain * _reading(c, d) * load / 10.0, 3)
                                      for _, c, d, gain in GAUGES]])
    (folder / "study.toml").write_text(
        'title = "slotted block"\n[model]\nfile = "block.vtu"\nlength_unit = "mm"\n'
        '[[case]]\nname = "pull"\nstrain = "E"\n'
        '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.3\nangle_tol = 1.0\n'
        '[readings]\nfile = "readings.csv"\n'
        '[[load]]\ncolumn = "F"\ncase = "pull"\nreference = 10.0\n'
        '[[override]]\ngauge = "W1"\naction = "exclude"\nreason = "debonded"\n')
    with pytest.MonkeyPatch.context() as mp:
        # failure diagnosis is slow and tested in its own module; the views do not use it
        mp.setattr(correlate.comparison.correlation, "diagnose_failures",
                   lambda *a, **k: correlate.comparison.correlation.pd.DataFrame(
                       columns=["gauge", "explanation", "detail"]))
        corr = correlate_study(read_study(folder / "study.toml"))
    out = folder / "views"
    out.mkdir()
    return corr, render_views(corr, out, size=SIZE), out


def _pixels(view, points: np.ndarray) -> np.ndarray:
    """(column, row) of model points in a view's picture, by VTK's own camera matrices."""
    from vtkmodules.vtkRenderingCore import vtkCamera

    cam = vtkCamera()
    cam.ParallelProjectionOn()
    cam.SetPosition(*view.position)
    cam.SetFocalPoint(*view.focal_point)
    cam.SetViewUp(*view.view_up)
    cam.SetParallelScale(view.parallel_scale)
    cam.SetClippingRange(1e-3, 1e4)
    W, H = view.size
    m = cam.GetCompositeProjectionTransformMatrix(W / H, -1.0, 1.0)
    M = np.array([[m.GetElement(i, j) for j in range(4)] for i in range(4)])
    h = np.c_[points, np.ones(len(points))] @ M.T
    ndc = h[:, :2] / h[:, 3:]
    return np.c_[(ndc[:, 0] + 1) * W / 2, H - (ndc[:, 1] + 1) * H / 2]


def _image(path: Path) -> np.ndarray:
    from matplotlib.image import imread

    return (imread(path)[..., :3] * 255).round()


def test_views_have_the_requested_size_and_are_not_blank(rendered) -> None:
    _, result, out = rendered
    assert result.views[0].name == "iso"
    assert 2 <= len(result.views) <= 7
    for view in result.views:
        img = _image(out / view.file)
        # the requested width; the height crops the space the part leaves (at most the requested)
        assert img.shape == (view.size[1], SIZE[0], 3)
        assert view.size[0] == SIZE[0] and view.size[1] <= SIZE[1]
        painted = (img < 250).any(axis=2).mean()
        assert painted > 0.15
        packed = img[..., 0] * 65536 + img[..., 1] * 256 + img[..., 2]
        assert len(np.unique(packed)) > 50


def test_each_visible_gauge_shows_its_discrepancy_colour(rendered) -> None:
    from matplotlib import colormaps

    from correlate.report.scene import FLAGGED

    corr, result, out = rendered
    ref = 2                                             # the 10 kN step: largest readings
    ev = corr.status.evaluated[ref]
    diff = corr.measured[ref] - corr.predicted[ref]
    limit = np.max(np.abs(diff[ev]))
    # reference: matplotlib's RdBu_r at the symmetric limits; the flagged colour for the excluded
    # gauge (drawn prominent, not faded)
    rgb = colormaps["RdBu_r"]((diff + limit) / (2 * limit))[:, :3] * 255
    rgb[~ev] = np.array(FLAGGED) * 255
    assert (~ev).sum() == 1 and not ev[corr.gauges.index("W1")]
    checked = 0
    for view in result.views:
        img = _image(out / view.file)
        idx = [corr.gauges.index(g) for g in view.visible]
        for j, (c, r) in zip(idx, _pixels(view, result.glyphs.anchor[idx]), strict=True):
            c, r = round(c), round(r)
            window = img[r - 3:r + 4, c - 3:c + 4].reshape(-1, 3)
            # 8 of 255 per channel: a 256-entry colour table and 8-bit pixels
            close = np.abs(window - rgb[j]).max(axis=1) <= 8
            assert close.any(), (view.name, corr.gauges[j], rgb[j], window[len(window) // 2])
            checked += 1
    assert checked >= len(corr.gauges) - 1


def test_gauge_deep_in_the_slot_is_not_visible(rendered) -> None:
    corr, result, _ = rendered
    assert result.not_visible == ("S1",)
    assert not any("S1" in v.visible for v in result.views)
    seen = {g for v in result.views for g in v.visible}
    assert seen == set(corr.gauges) - {"S1"}


def test_marker_points_lie_on_their_gauges(rendered) -> None:
    corr, result, _ = rendered
    place = corr.model.operator.placement
    g = result.glyphs
    # the marker is the grid centre lifted along the outward normal by radius + 0.2 % of the size
    lift = g.radius + 0.002 * g.size
    np.testing.assert_allclose(g.anchor, place.centre + lift * place.normal, rtol=0, atol=1e-9)
    # the slot gauge sits on the wall x = 19 facing +x
    s1 = corr.gauges.index("S1")
    np.testing.assert_allclose(place.normal[s1], [1.0, 0.0, 0.0], rtol=0, atol=1e-9)
