"""Gauge glyphs of the 3D views: a short bar along each grid, coloured by its discrepancy.

Each gauge is a bar along its grid, lifted off the surface along the normal, coloured by
measured - predicted at the reference step. Grids that share a centre (rosettes) are drawn as a
fan from the centre so that each grid keeps a spot of its own colour.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

BAR_FRACTION = 0.02                 # shortest bar: 2 % of the model size
FAN_FRACTION = 0.03                 # shortest grid of a rosette fan: 3 % of the model size
RADIUS_FRACTION = 0.0035            # bar radius: 0.35 % of the model size
FAN_ANCHOR = 0.65                   # marker point of a fanned grid, as a share of its bar length


@dataclass(frozen=True)
class Glyphs:
    """Gauge bars in model coordinates (one row per gauge, in gauge order).

    ``anchor`` is the marker point on the bar axis (label, visibility and colour checks);
    ``base`` is the same point on the surface, before the lift along the normal.
    """

    gauges: tuple[str, ...]
    start: NDArray[np.float64]        # (g, 3)
    end: NDArray[np.float64]          # (g, 3)
    anchor: NDArray[np.float64]       # (g, 3)
    base: NDArray[np.float64]         # (g, 3)
    normal: NDArray[np.float64]       # (g, 3)
    discrepancy: NDArray[np.float64]  # (g,) measured - predicted at the reference step [ue]; NaN: grey
    limit: float                      # symmetric colour limit [ue]
    radius: float
    size: float                       # model size (bounding-box diagonal)


def gauge_glyphs(corr: Any) -> Glyphs:
    """Bars, marker points and discrepancy colours of every gauge at the reference step."""
    place = corr.model.operator.placement
    pts = corr.model.operator.mesh.points
    size = float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0))) or 1.0
    ref = corr.reference
    centre, d, n = place.centre, place.direction, place.normal
    length = np.nan_to_num(corr.model.gauges["length"].to_numpy(dtype=float))
    key = np.round(centre / (1e-6 * size)).astype(np.int64)
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    fan = counts[inverse.ravel()] > 1
    L = np.maximum(length, np.where(fan, FAN_FRACTION, BAR_FRACTION) * size)
    radius = RADIUS_FRACTION * size
    lift = (radius + 0.002 * size) * n
    start = np.where(fan[:, None], centre, centre - 0.5 * L[:, None] * d) + lift
    end = np.where(fan[:, None], centre + L[:, None] * d, centre + 0.5 * L[:, None] * d) + lift
    base = np.where(fan[:, None], centre + FAN_ANCHOR * L[:, None] * d, centre)
    evaluated = corr.status.evaluated[ref]
    disc = np.where(evaluated, corr.measured[ref] - corr.predicted[ref], np.nan)
    finite = np.isfinite(disc)
    limit = float(np.max(np.abs(disc[finite]))) if finite.any() else 0.0
    return Glyphs(gauges=tuple(corr.gauges), start=start, end=end, anchor=base + lift, base=base,
                  normal=n, discrepancy=disc, limit=limit if limit > 0 else 1.0, radius=radius,
                  size=size)


def bars(glyphs: Glyphs, select: NDArray[np.bool_], thickness: float = 1.0) -> Any:
    """Tubes along the selected gauges' grids, radius times ``thickness``."""
    import pyvista as pv

    idx = np.flatnonzero(select)
    pts = np.empty((2 * len(idx), 3))
    pts[0::2], pts[1::2] = glyphs.start[idx], glyphs.end[idx]
    lines = np.c_[np.full(len(idx), 2), 2 * np.arange(len(idx)), 2 * np.arange(len(idx)) + 1]
    poly = pv.PolyData(pts, lines=lines.ravel())
    poly.point_data["discrepancy_ue"] = np.repeat(glyphs.discrepancy[idx], 2)
    return poly.tube(radius=thickness * glyphs.radius, n_sides=16, capping=True)
