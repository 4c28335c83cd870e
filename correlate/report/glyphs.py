"""Gauge glyphs of the 3D views: each grid at its true length, clipped to its face.

Each gauge is a bar along its grid, lifted off the surface along the normal, coloured by
measured - predicted at the reference step. Grids that share a centre (rosettes) are drawn as a
fan from the centre so that each grid keeps a spot of its own colour. A bar is as long as the grid
(``length`` of the gauge map; a point gauge gets a short marker) and stops where the face it sits
on ends: a grid near an edge is never drawn past the part's edge.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.model_readings.channels import ChannelModel

RADIUS_FRACTION = 0.0045            # bar radius: 0.45 % of the model size (a grid reads as a
#                                     bar or a dot at the scale of the whole part)
POINT_MARKER = 4.0                  # a point gauge (no grid length): a bar of 4 radii
FAN_ANCHOR = 0.65                   # marker point of a fanned grid, as a share of its bar length
FACE_COS = np.cos(np.radians(30.0))  # a face ends where the normal turns by more (feature angle)
EDGE_TOL = 1e-3                     # past a face's edge by more than this share of the model size
SAMPLES = 24                        # samples along each half grid for the face test
BAR_ASPECT = 0.3                    # bar radius at most this share of the bar's length


@dataclass(frozen=True)
class Grids:
    """The grids the views draw, in channel order: each gauge that is no bridge arm, and every
    arm of a bridge in arm order. ``channel[k]`` is the compared channel grid k belongs to."""

    channel: NDArray[np.int64]        # (k,)
    label: tuple[str, ...]            # the gauge, or "bridge arm n: grid"
    grid: tuple[str, ...]             # the gauge-map row drawn
    arm: NDArray[np.int64]            # (k,) 1..4 for a bridge arm, 0 otherwise
    centre: NDArray[np.float64]       # (k, 3)
    direction: NDArray[np.float64]    # (k, 3)
    normal: NDArray[np.float64]       # (k, 3)
    length: NDArray[np.float64]       # (k,) grid length (NaN: a point gauge)


def drawn_grids(corr: Any) -> Grids:
    """Every grid of the gauge map as drawn (a bridge channel by each of its arms, each at its
    own place on the model: a bending bridge has arms on opposite faces)."""
    model = corr.model
    place = model.operator.placement
    parts = [(j, corr.gauges[j], corr.gauges[j], 0, place, model.gauges, j)
             for j in range(len(corr.gauges))]
    if isinstance(model, ChannelModel) and model.base is not None:
        base = model.base
        arm = base.gauges.get("arm", None)
        parts = []
        for j, weights in enumerate(model.arm_weights):
            if not model.is_bridge(j):
                parts.append((j, corr.gauges[j], corr.gauges[j], 0, place, model.gauges, j))
                continue
            for i, _ in weights:
                number = int(float(arm.iloc[i])) if arm is not None else 0
                grid = base.gauges["gauge"].iloc[i]
                parts.append((j, f"{corr.gauges[j]} arm {number}: {grid}", grid, number,
                              base.operator.placement, base.gauges, i))
    return Grids(channel=np.array([p[0] for p in parts], dtype=np.int64),
                 label=tuple(p[1] for p in parts), grid=tuple(p[2] for p in parts),
                 arm=np.array([p[3] for p in parts], dtype=np.int64),
                 centre=np.array([p[4].centre[p[6]] for p in parts], dtype=float).reshape(-1, 3),
                 direction=np.array([p[4].direction[p[6]] for p in parts],
                                    dtype=float).reshape(-1, 3),
                 normal=np.array([p[4].normal[p[6]] for p in parts], dtype=float).reshape(-1, 3),
                 length=np.array([float(p[5]["length"].iloc[p[6]]) for p in parts], dtype=float))


@dataclass(frozen=True)
class Glyphs:
    """Gauge bars in model coordinates (one row per drawn grid, :func:`drawn_grids`' order: a
    bridge channel by each of its arms, labelled with the bridge, the arm and the grid).

    ``anchor`` is the marker point on the bar axis (label, visibility and colour checks);
    ``base`` is the same point on the surface, before the lift along the normal. ``state`` is the
    gauge's status at the reference step (``pass``, ``fail`` or the flag that removed it).
    """

    gauges: tuple[str, ...]
    start: NDArray[np.float64]        # (g, 3)
    end: NDArray[np.float64]          # (g, 3)
    anchor: NDArray[np.float64]       # (g, 3)
    base: NDArray[np.float64]         # (g, 3)
    normal: NDArray[np.float64]       # (g, 3)
    discrepancy: NDArray[np.float64]  # (g,) measured - predicted at the reference step [ue]; NaN: flagged
    limit: float                      # symmetric colour limit [ue]
    radius: float                     # the largest bar radius (every bar is lifted by it)
    size: float                       # model size (bounding-box diagonal)
    state: tuple[str, ...] = ()
    radii: NDArray[np.float64] | None = None   # (g,) each bar's radius: at most 0.3 x its length

    @property
    def prominent(self) -> NDArray[np.bool_]:
        """Gauges a reviewer looks for first: failing, flagged or not evaluated (outlined, labelled)."""
        return np.array([s != "pass" for s in self.state], dtype=bool)


def face_extent(surface: Any, centre: NDArray, direction: NDArray, normal: NDArray,
                length: NDArray, size: float) -> NDArray[np.float64]:
    """Share (0 to 1) of each half grid that lies on the face under its centre.

    Samples along ``centre + t * length * direction`` (t from 0 to 1) are projected onto the
    surface; a sample is on the face while its closest surface point lies straight below it (the
    offset along that cell's normal, within :data:`EDGE_TOL` of the model size: past an edge the
    closest point is on the edge, off to the side) and that cell's normal is within 30 degrees of the
    gauge's normal. The share ends at the last sample before the first one off the face.

    Parameters
    ----------
    surface : pyvista.PolyData
        The part's outer surface.
    centre, direction, normal : ndarray, shape (k, 3)
        Grid centres on the surface, unit grid directions (the half grid's way) and unit normals.
    length : ndarray, shape (k,)
        Length of each half grid. [length unit]
    size : float
        Model size (bounding-box diagonal). [length unit]
    """
    t = np.linspace(0.0, 1.0, SAMPLES + 1)[1:]
    pts = (centre[:, None, :] + (t[None, :, None] * length[:, None, None])
           * direction[:, None, :]).reshape(-1, 3)
    if not len(pts):
        return np.ones(0)
    normals = surface.compute_normals(cell_normals=True, point_normals=False,
                                      auto_orient_normals=False, consistent_normals=False)
    cells, closest = surface.find_closest_cell(pts, return_closest_point=True)
    cells = np.atleast_1d(cells)
    cell_normal = np.asarray(normals.cell_data["Normals"])[cells]
    offset = pts - np.atleast_2d(closest)
    sideways = offset - (offset * cell_normal).sum(axis=1)[:, None] * cell_normal
    k = len(centre)
    on = ((np.linalg.norm(sideways, axis=1) <= EDGE_TOL * size)
          & (np.abs((cell_normal * np.repeat(normal, SAMPLES, axis=0)).sum(axis=1)) >= FACE_COS))
    on = on.reshape(k, SAMPLES)
    first_off = np.where(on.all(axis=1), SAMPLES, np.argmin(on, axis=1))
    # at least one sample step, so that a grid centred on an edge still shows as a stub
    return np.maximum(first_off, 1) / SAMPLES


def _states(corr: Any) -> tuple[str, ...]:
    status = np.asarray(corr.status.status[corr.reference]).astype(str)
    return tuple("pass" if s == "pass" else "fail" if s == "fail" else s for s in status)


def gauge_glyphs(corr: Any, surface: Any | None = None) -> Glyphs:
    """Bars, marker points and discrepancy colours of every gauge at the reference step.

    With ``surface`` (the part's outer surface) each bar is clipped to the face it sits on
    (:func:`face_extent`); without it the bars keep the grid length.
    """
    grids = drawn_grids(corr)
    pts = corr.model.operator.mesh.points
    size = float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0))) or 1.0
    ref = corr.reference
    centre, d, n = grids.centre, grids.direction, grids.normal
    radius = RADIUS_FRACTION * size
    length = grids.length
    length = np.where(np.isfinite(length) & (length > 0), length, POINT_MARKER * radius)
    key = np.round(centre / (1e-6 * size)).astype(np.int64)
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    fan = counts[inverse.ravel()] > 1
    # a fanned grid runs from the centre; a single one is centred on it (two halves)
    ahead = np.where(fan, length, 0.5 * length)
    behind = np.where(fan, 0.0, 0.5 * length)
    if surface is not None and len(centre):
        # both halves in one search (one locator and one set of normals for the surface)
        share = face_extent(surface, np.r_[centre, centre], np.r_[d, -d], np.r_[n, n],
                            np.r_[ahead, behind], size)
        ahead, behind = ahead * share[:len(d)], behind * share[len(d):]
    lift = (radius + 0.002 * size) * n
    start = centre - behind[:, None] * d + lift
    end = centre + ahead[:, None] * d + lift
    # a bar stays longer than it is thick, so that a short grid still shows its direction
    radii = np.minimum(radius, BAR_ASPECT * np.linalg.norm(end - start, axis=1))
    base = np.where(fan[:, None], centre + FAN_ANCHOR * ahead[:, None] * d, centre)
    evaluated = corr.status.evaluated[ref]
    disc = np.where(evaluated, corr.measured[ref] - corr.predicted[ref], np.nan)
    finite = np.isfinite(disc)
    limit = float(np.max(np.abs(disc[finite]))) if finite.any() else 0.0
    state = _states(corr)
    return Glyphs(gauges=grids.label, start=start, end=end, anchor=base + lift, base=base,
                  normal=n, discrepancy=disc[grids.channel], limit=limit if limit > 0 else 1.0,
                  radius=radius, size=size, state=tuple(state[j] for j in grids.channel),
                  radii=radii)


def bars(glyphs: Glyphs, select: NDArray[np.bool_], thickness: float = 1.0) -> Any:
    """Tubes along the selected gauges' grids, radius times ``thickness``."""
    import pyvista as pv

    idx = np.flatnonzero(select)
    pts = np.empty((2 * len(idx), 3))
    pts[0::2], pts[1::2] = glyphs.start[idx], glyphs.end[idx]
    lines = np.c_[np.full(len(idx), 2), 2 * np.arange(len(idx)), 2 * np.arange(len(idx)) + 1]
    poly = pv.PolyData(pts, lines=lines.ravel())
    poly.point_data["discrepancy_ue"] = np.repeat(glyphs.discrepancy[idx], 2)
    radii = glyphs.radii if glyphs.radii is not None else np.full(len(glyphs.gauges), glyphs.radius)
    poly.point_data["radius"] = np.repeat(thickness * radii[idx], 2)
    # the radius array sets each tube's radius (absolute); the discrepancy array colours it
    tubes = poly.tube(scalars="radius", absolute=True, n_sides=16, capping=True)
    tubes.set_active_scalars("discrepancy_ue")
    return tubes
