"""3D views that show the part and the gauges: whole-part framing, axis triad, true grid lengths.

The demo's views (the invented bracket shipped with the package) must each show the whole part: the
projection of every surface point, by VTK's own camera matrices rebuilt from the recorded camera,
lies inside the picture between its title and colour-bar bands, and fills the picture's width or
the height between the bands (the empty space is cropped). The axis triad's three colours, as
pyvista's document theme defines them, appear in its square at the bottom right.

The grids: drawn at their true length, and stopped where the face they sit on ends (a grid centred
2 mm from the edge of a 10 mm face is drawn 2 mm to that side, by hand).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

# pytest puts this folder on sys.path (rootdir conftest, no __init__.py): share the helpers
from test_document import GAUGES as BLOCK_GAUGES
from test_document import build_correlation
from test_render import _image, _pixels

os.environ.setdefault("MESA_SHADER_CACHE_DISABLE", "true")

DEMO = Path(__file__).resolve().parents[2] / "correlate" / "data" / "demo" / "study.toml"


def _demo_correlation():
    """The demo study correlated in-process; the failure diagnosis (slow, tested in its own module)
    is left out, which changes no view but the colours of two gauges."""
    import correlate.comparison.correlation as correlation
    from correlate.readers.study import read_study

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(correlation, "diagnose_failures",
                   lambda *a, **k: correlation.pd.DataFrame(
                       columns=["gauge", "explanation", "detail"]))
        return correlation.correlate_study(read_study(DEMO))


@pytest.fixture(scope="module")
def demo_views(tmp_path_factory: pytest.TempPathFactory):
    from correlate.report.scene import render_views

    out = tmp_path_factory.mktemp("demo_views")
    corr = _demo_correlation()
    return corr, render_views(corr, out), out


@pytest.mark.render
def test_every_demo_view_shows_the_whole_part(demo_views) -> None:
    from correlate.report.camera import BOTTOM_BAND, TOP_BAND

    _, result, out = demo_views
    assert len(result.views) >= 4
    points = np.asarray(result.surface.points)
    for view in result.views:
        W, H = view.size
        img = _image(out / view.file)
        assert img.shape == (H, W, 3)
        xy = _pixels(view, points)          # (column, row from the top) of every surface point
        left, right = xy[:, 0].min(), xy[:, 0].max()
        top, bottom = xy[:, 1].min(), xy[:, 1].max()
        assert left >= 0 and right <= W, (view.name, left, right, W)
        assert top >= TOP_BAND and bottom <= H - BOTTOM_BAND, (view.name, top, bottom, H)
        # cropped: the part spans at least 85 % of the width or of the height between the bands
        # (the margin is 4 % of its larger extent on each side)
        fill = max((right - left) / W, (bottom - top) / (H - TOP_BAND - BOTTOM_BAND))
        assert fill >= 0.85, (view.name, fill)


@pytest.mark.render
def test_every_demo_view_has_an_axis_triad(demo_views) -> None:
    import pyvista as pv
    from matplotlib.colors import rgb_to_hsv

    from correlate.report.scene import TRIAD

    _, result, out = demo_views
    theme = pv.themes.DocumentTheme().axes
    hues = [rgb_to_hsv(np.array(c.float_rgb))[0] for c in (theme.x_color, theme.y_color,
                                                           theme.z_color)]
    for view in result.views:
        img = _image(out / view.file)
        square = rgb_to_hsv(img[-(TRIAD + 8):, -(TRIAD + 12):].reshape(-1, 3) / 255)
        coloured = square[:, 1] > 0.3
        # hue within 0.02 of the axis colour: lighting changes brightness and saturation of the
        # arrow shafts and cones, not their hue (red wraps around at hue 0 and 1)
        counts = [int((coloured & (np.abs((square[:, 0] - h + 0.5) % 1.0 - 0.5) <= 0.02)).sum())
                  for h in hues]
        # an axis pointing at the camera shows as a dot: two of the three are arrows
        assert sorted(counts)[1] >= 30 and min(counts) >= 1, (view.name, counts)


def test_grid_stops_at_the_edge_of_its_face() -> None:
    import pyvista as pv

    from correlate.report.glyphs import SAMPLES, face_extent

    box = pv.Box(bounds=(0.0, 60.0, 0.0, 30.0, 0.0, 10.0), level=4).triangulate()
    size = float(np.linalg.norm([60.0, 30.0, 10.0]))
    # on the 10 mm face x = 60: centred 2 mm below the top edge, half grids of 3 mm up and down
    centre = np.array([[60.0, 15.0, 8.0], [60.0, 15.0, 8.0], [30.0, 15.0, 10.0]])
    direction = np.array([[0.0, 0.0, 1.0], [0.0, 0.0, -1.0], [1.0, 0.0, 0.0]])
    normal = np.array([[1.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    share = face_extent(box, centre, direction, normal, np.array([3.0, 3.0, 3.0]), size)
    # by hand: up, the face ends 2 mm from the centre (2/3 of the half grid, to one sample step);
    # down and on the middle of the top face, the whole half grid
    assert share[0] == pytest.approx(2.0 / 3.0, abs=1.0 / SAMPLES)
    assert share[0] <= 2.0 / 3.0
    np.testing.assert_array_equal(share[1:], [1.0, 1.0])


def test_grids_are_drawn_at_their_true_length(tmp_path: Path) -> None:
    from correlate.report.glyphs import gauge_glyphs
    from correlate.report.scene import model_surface

    corr = build_correlation(tmp_path)
    surface, _ = model_surface(corr)
    glyphs = gauge_glyphs(corr, surface)
    drawn = np.linalg.norm(glyphs.end - glyphs.start, axis=1)
    # the gauge map of test_document: G1 3 mm, the others 1.5 mm, all clear of the block's edges;
    # rosette R1 fans from its centre, each arm one grid long (exact: whole sample shares)
    for j, (g, *_rest) in enumerate(BLOCK_GAUGES):
        assert drawn[j] == pytest.approx(3.0 if g == "G1" else 1.5, rel=1e-12, abs=0), g
    fan = [j for j, (g, *_r) in enumerate(BLOCK_GAUGES) if g.startswith("R1")]
    lift = glyphs.radius + 0.002 * glyphs.size
    np.testing.assert_allclose(glyphs.start[fan] - lift * glyphs.normal[fan],
                               corr.model.operator.placement.centre[fan], rtol=0, atol=1e-9)
    # a bar is never thicker than it is long (a short grid keeps its direction)
    assert (glyphs.radii <= 0.3 * drawn + 1e-12).all()
