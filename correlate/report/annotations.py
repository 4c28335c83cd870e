"""Text on the 3D views: titles, gauge labels with leader lines, colour bars and their bands.

Labels are moved clear of each other and of the bars, with a leader line when moved far.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.report.camera import BOTTOM_BAND, TOP_BAND, project
from correlate.report.glyphs import Glyphs

LABEL_CHARS = 24
FONT = 13


def font(prop: Any, size: int, color: tuple[float, float, float] = (0.05, 0.05, 0.05)) -> None:
    """Use matplotlib's DejaVu Sans: VTK's built-in sans font draws '[' and ']' as parentheses."""
    from matplotlib import get_data_path

    prop.SetFontFamily(4)   # VTK_FONT_FILE
    prop.SetFontFile(str(Path(get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf"))
    prop.SetFontSize(size)
    prop.SetColor(*color)


def add_text(plotter: Any, text: str, x: int, y: int, size: int,
          color: tuple[float, float, float] = (0.05, 0.05, 0.05)) -> Any:
    """A 2D text actor at pixel (x, y) from the lower left corner."""
    from vtkmodules.vtkRenderingCore import vtkTextActor

    actor = vtkTextActor()
    actor.SetInput(text)
    font(actor.GetTextProperty(), size, color)
    actor.SetDisplayPosition(int(x), int(y))
    plotter.renderer.AddViewProp(actor)
    return actor


MAX_LABELS = 60  # gauge ids per view; more would cover the part


def label_text(gauge: str) -> str:
    text = gauge if len(gauge) <= LABEL_CHARS else gauge[: LABEL_CHARS - 3] + "..."
    return text.replace("$", "\\$")   # VTK renders $...$ as math text otherwise


def free(box: tuple[float, float, float, float], taken: list[tuple[float, float, float, float]],
          size: tuple[int, int]) -> bool:
    x0, y0, x1, y1 = box
    if x0 < 2 or y0 < BOTTOM_BAND or x1 > size[0] - 2 or y1 > size[1] - TOP_BAND:
        return False
    return all(x1 < a0 or x0 > a1 or y1 < b0 or y0 > b1 for a0, b0, a1, b1 in taken)


def add_labels(plotter: Any, glyphs: Glyphs, shown: NDArray[np.bool_],
                size: tuple[int, int]) -> list[Any]:
    """Gauge ids beside the bar ends, moved around to avoid each other and the marker points.

    At most MAX_LABELS per view: the prominent gauges (failing, flagged, not evaluated) first,
    then the largest discrepancies; the others keep their coloured bar without an id (every gauge
    is in the report's tables). A prominent gauge's label names its state, in bold with a dark
    frame, and a ring outlines the gauge itself.
    """
    idx = np.flatnonzero(shown)
    prominent = glyphs.prominent if len(glyphs.state) else np.zeros(len(shown), dtype=bool)
    if len(idx) > MAX_LABELS:
        d = np.abs(np.nan_to_num(glyphs.discrepancy[idx], nan=np.inf))
        keep = np.lexsort((-d, ~prominent[idx]))[:MAX_LABELS]
        idx = np.sort(idx[keep])
    actors: list[Any] = []
    if not len(idx):
        return actors
    anchors = project(plotter, glyphs.anchor[idx])
    ends = project(plotter, glyphs.end[idx])
    pad = 5.0
    leaders: list[tuple[tuple[float, float], tuple[float, float]]] = []
    along = np.linspace(0.0, 1.0, 9)
    bars = project(plotter, (glyphs.start[idx, None, :] + along[None, :, None]
                             * (glyphs.end - glyphs.start)[idx, None, :]).reshape(-1, 3))
    taken = [(x - pad, y - pad, x + pad, y + pad) for x, y in np.r_[anchors, bars]]
    rings = [tuple(a) for a, i in zip(anchors, idx, strict=True) if prominent[i]]
    taken += [(x - RING - pad, y - RING - pad, x + RING + pad, y + RING + pad) for x, y in rings]
    for k, i in enumerate(idx):
        text = label_text(glyphs.gauges[i])
        if prominent[i]:
            text += f" \u00b7 {label_text(glyphs.state[i])}"
        actor = add_text(plotter, text, 0, 0, FONT)
        prop = actor.GetTextProperty()
        prop.SetBackgroundColor(1.0, 1.0, 1.0)
        prop.SetBackgroundOpacity(0.9 if prominent[i] else 0.85)
        prop.SetFrame(True)
        prop.SetFrameColor(*((0.05, 0.05, 0.05) if prominent[i] else (0.4, 0.4, 0.4)))
        prop.SetFrameWidth(2 if prominent[i] else 1)
        prop.SetBold(bool(prominent[i]))
        bbox = [0.0, 0.0, 0.0, 0.0]
        actor.GetBoundingBox(plotter.renderer, bbox)
        w, h = bbox[1] - bbox[0] + 4, bbox[3] - bbox[2] + 4
        ex, ey = ends[k]
        away = ends[k] - anchors[k]
        sx = 1.0 if away[0] >= 0 else -1.0
        sy = 1.0 if away[1] >= 0 else -1.0
        choice = None
        for r in (6.0, 16.0, 28.0, 42.0, 60.0, 85.0, 115.0):
            for dx, dy in ((sx, sy), (sx, -sy), (-sx, sy), (-sx, -sy), (0, sy), (0, -sy)):
                x0 = ex + dx * r - (w if dx < 0 else 0) - (w / 2 if dx == 0 else 0)
                y0 = ey + dy * r - (h if dy < 0 else 0)
                box = (x0, y0, x0 + w, y0 + h)
                if free(box, taken, size):
                    choice = box
                    break
            if choice:
                break
        if choice is None:
            x0 = min(max(ex + 6, 2), size[0] - w - 2)
            y0 = min(max(ey + 6, BOTTOM_BAND), size[1] - TOP_BAND - h)
            choice = (x0, y0, x0 + w, y0 + h)
        taken.append(choice)
        actor.SetDisplayPosition(round(choice[0] + 2), round(choice[1] + 2))
        actors.append(actor)
        # a leader from the bar end to the nearest point of a label set further away
        near = (min(max(ex, choice[0]), choice[2]), min(max(ey, choice[1]), choice[3]))
        if np.hypot(near[0] - ex, near[1] - ey) > 10:
            leaders.append(((ex, ey), near))
    if leaders:
        actors.append(leader_lines(plotter, leaders))
    if rings:
        actors.append(ring_lines(plotter, rings, RING))
    return actors


RING = 13.0   # radius of the ring around a prominent gauge [px]


def ring_lines(plotter: Any, centres: list[tuple[float, float]], radius: float) -> Any:
    """A dark ring of ``radius`` pixels around each centre (one 2D actor, drawn over the part)."""
    t = np.linspace(0.0, 2 * np.pi, 33)
    segments = []
    for cx, cy in centres:
        x, y = cx + radius * np.cos(t), cy + radius * np.sin(t)
        segments += [((x[k], y[k]), (x[k + 1], y[k + 1])) for k in range(len(t) - 1)]
    actor = leader_lines(plotter, segments)
    actor.GetProperty().SetColor(0.05, 0.05, 0.05)
    actor.GetProperty().SetLineWidth(2.5)
    return actor


def nice_length(target: float) -> float:
    """The largest of 1, 2, 5 x 10^k not above ``target`` (a scale bar's length)."""
    if not target > 0:
        return 1.0
    power = 10.0 ** np.floor(np.log10(target))
    return float(max(m for m in (1.0, 2.0, 5.0, 10.0) if m * power <= target * (1 + 1e-9)) * power)


def scale_bar(plotter: Any, per_unit: float, unit: str, size: tuple[int, int]) -> list[Any]:
    """A scale bar in the top band, right: a round length of the model's unit, about a fifth of
    the width (parallel projection: one scale anywhere in the picture plane)."""
    W, H = size
    length = nice_length(0.2 * W / per_unit)
    pixels = length * per_unit
    x1, y = W - 24.0, H - 26.0
    x0 = x1 - pixels
    line = leader_lines(plotter, [((x0, y), (x1, y)), ((x0, y - 6), (x0, y + 6)),
                                  ((x1, y - 6), (x1, y + 6))])
    line.GetProperty().SetColor(0.05, 0.05, 0.05)
    line.GetProperty().SetLineWidth(3.0)
    text = add_text(plotter, f"{length:g} {unit}", 0, 0, 14)
    bbox = [0.0, 0.0, 0.0, 0.0]
    text.GetBoundingBox(plotter.renderer, bbox)
    text.SetDisplayPosition(round(x0 - (bbox[1] - bbox[0]) - 10), round(y - 7))
    return [line, text]


def band_shapes(size: tuple[int, int]) -> Any:
    """White rectangles over the top and bottom text bands of a picture of ``size``."""
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData

    W, H = size
    points, polys = vtkPoints(), vtkCellArray()
    for y0, y1 in ((0, BOTTOM_BAND - 8), (H - TOP_BAND + 8, H)):
        ids = [points.InsertNextPoint(x, y, 0.0) for x, y in ((0, y0), (W, y0), (W, y1), (0, y1))]
        polys.InsertNextCell(4)
        for i in ids:
            polys.InsertCellPoint(i)
    poly = vtkPolyData()
    poly.SetPoints(points)
    poly.SetPolys(polys)
    return poly


def bands(plotter: Any, size: tuple[int, int]) -> Any:
    """The text bands as one 2D actor; add it before the colour bars so that it lies under them
    (:func:`resize_bands` fits it to another picture size)."""
    actor = overlay(plotter, band_shapes(size), (1.0, 1.0, 1.0))
    actor.GetProperty().SetOpacity(0.92)
    return actor


def resize_bands(actor: Any, size: tuple[int, int]) -> None:
    actor.GetMapper().SetInputData(band_shapes(size))


def overlay(plotter: Any, poly: Any, color: tuple[float, float, float]) -> Any:
    """A 2D actor in display coordinates drawing ``poly`` in one colour, added to the plotter."""
    from vtkmodules.vtkRenderingCore import vtkActor2D, vtkPolyDataMapper2D

    mapper = vtkPolyDataMapper2D()
    mapper.SetInputData(poly)
    actor = vtkActor2D()
    actor.SetMapper(mapper)
    actor.GetProperty().SetColor(*color)
    plotter.renderer.AddViewProp(actor)
    return actor


def leader_lines(plotter: Any, segments: list[tuple[tuple[float, float], tuple[float, float]]]
                  ) -> Any:
    """Thin 2D lines in display coordinates (one actor for all)."""
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData

    points, lines = vtkPoints(), vtkCellArray()
    for a, b in segments:
        i = points.InsertNextPoint(a[0], a[1], 0.0)
        k = points.InsertNextPoint(b[0], b[1], 0.0)
        lines.InsertNextCell(2)
        lines.InsertCellPoint(i)
        lines.InsertCellPoint(k)
    poly = vtkPolyData()
    poly.SetPoints(points)
    poly.SetLines(lines)
    actor = overlay(plotter, poly, (0.25, 0.25, 0.25))
    actor.GetProperty().SetLineWidth(1.0)
    return actor


def nice_range(low: float, high: float) -> tuple[float, float, int]:
    """Limits widened to round tick values, and the number of ticks (for the colour bar)."""
    from matplotlib.ticker import MaxNLocator

    if not high - low > 1e-9 * max(1.0, abs(high)):
        return low - 1.0, high + 1.0, 5
    ticks = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]).tick_values(low, high)
    ticks = ticks[(ticks >= ticks[ticks <= low].max()) & (ticks <= ticks[ticks >= high].min())]
    return float(ticks[0]), float(ticks[-1]), len(ticks)


def tick_format(low: float, high: float, ticks: int = 5) -> str:
    """Enough decimals to tell the tick labels apart (at most three)."""
    step = (high - low) / max(ticks - 1, 1)
    digits = 0 if step <= 0 else int(np.clip(np.ceil(-np.log10(step)), 0, 3))
    return f"%.{digits}f"


BAR_WIDTH = 0.30               # colour bar width, share of the picture width
BAR_BOTTOM, BAR_HEIGHT, BAR_TITLE = 22, 81, 107   # colour bar and its title in the bottom band [px]


def scalar_bar(plotter: Any, mapper: Any, title: str, x: float, ticks: int = 5) -> list[Any]:
    """A horizontal colour bar in the bottom band, tick labels under it, its title above it.

    The title is a separate text actor: VTK's own scalar-bar title overlaps the tick labels of a
    horizontal bar. :func:`place_scalar_bar` keeps it in the band when the picture height changes.
    """
    width, height = plotter.window_size
    low, high = mapper.GetScalarRange()
    bar = plotter.add_scalar_bar(
        title=" " * (1 + len(plotter.scalar_bars)), mapper=mapper, vertical=False,
        position_x=x, position_y=BAR_BOTTOM / height, width=BAR_WIDTH,
        height=BAR_HEIGHT / height, n_labels=ticks, fmt=tick_format(low, high, ticks),
        color="black", label_font_size=14, font_family="arial", render=False)
    bar.SetTextPositionToPrecedeScalarBar()
    bar.SetBarRatio(0.45)
    font(bar.GetLabelTextProperty(), 14)
    bar.GetLabelTextProperty().SetBold(False)
    bar.GetLabelTextProperty().SetShadow(False)
    label = add_text(plotter, title, int(x * width) + 2, BAR_TITLE + 4, 15)
    return [bar, label]


def place_scalar_bar(bar: Any, x: float, size: tuple[int, int]) -> None:
    """Keep a colour bar at fixed pixels in the bottom band of a picture of ``size``."""
    bar.SetPosition(x, BAR_BOTTOM / size[1])
    bar.SetPosition2(BAR_WIDTH, BAR_HEIGHT / size[1])
