"""Cameras of the 3D views: which directions to look from, framing, projection and visibility.

Each camera fits the whole part with a small margin and the picture is cropped to it (its height
follows the part's projected shape). A gauge counts as visible in a view when its marker point faces the camera (normal within 75 degrees
of the view direction), projects inside the picture, and the depth buffer of the bare surface holds
nothing nearer to the camera than the point (tolerance 1 % of the model size).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.report.glyphs import Glyphs

FACING_COS = np.cos(np.radians(75.0))
DEPTH_TOL = 0.01                    # occlusion tolerance, share of the model size
CLUSTER_COS = np.cos(np.radians(30.0))
TOP_BAND, BOTTOM_BAND = 50, 150     # pixels kept free for the title and the colour bars


def unit(v: NDArray) -> NDArray:
    return v / np.linalg.norm(v)


def cluster_normals(normals: NDArray[np.float64]) -> list[NDArray[np.int64]]:
    """Group unit normals within 30 degrees of a group's mean; largest group first."""
    sums: list[NDArray] = []
    members: list[list[int]] = []
    for i, v in enumerate(normals):
        cos = [float(np.dot(unit(s), v)) for s in sums]
        k = int(np.argmax(cos)) if cos else -1
        if k >= 0 and cos[k] >= CLUSTER_COS:
            sums[k] = sums[k] + v
            members[k].append(i)
        else:
            sums.append(v.copy())
            members.append([i])
    order = sorted(range(len(members)), key=lambda k: -len(members[k]))
    return [np.array(members[k]) for k in order]


def iso_direction(normals: NDArray) -> NDArray:
    """Octant diagonal (camera side) that faces the most gauges; ties prefer +z, then -y, +x."""
    best, score = None, -1.0
    for sz in (1, -1):
        for sy in (-1, 1):
            for sx in (1, -1):
                v = unit(np.array([sx, sy, sz], dtype=float))
                s = float(np.clip(normals @ v, 0, None).sum()) if len(normals) else 0.0
                if s > score + 1e-9:
                    best, score = v, s
    return best  # type: ignore[return-value]


MARGIN = 0.04                       # free space around the part, share of its larger extent
MIN_PART_HEIGHT = 260               # pixels between the bands, at least (room for the labels)


def view_frame(towards_camera: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    """Unit vectors (towards the camera, picture right, picture up); +z up unless looking along z."""
    w = unit(np.asarray(towards_camera, dtype=float))
    up = np.array([0.0, 0.0, 1.0]) if abs(w[2]) < 0.95 else np.array([0.0, 1.0, 0.0])
    right = unit(np.cross(up, w))
    return w, right, np.cross(w, right)


def fit_camera(points: NDArray, towards_camera: NDArray, width: int, max_height: int,
               ) -> tuple[tuple[NDArray, NDArray, NDArray, float], tuple[int, int]]:
    """Parallel camera that fits the whole part, and the picture size that crops empty space.

    The part's projection (all ``points``, not the corners of its 3D box) fills the picture width
    with a margin of :data:`MARGIN` of its larger extent; the picture height is what the part then
    needs between the title band and the colour-bar band (at least :data:`MIN_PART_HEIGHT`, at
    most ``max_height`` overall, in which case the height governs and the width has room to spare).

    Parameters
    ----------
    points : ndarray, shape (n, 3)
        The part's surface points. [length unit]
    towards_camera : ndarray, shape (3,)
        Direction from the part to the camera.
    width, max_height : int
        Picture width and the largest picture height. [px]

    Returns
    -------
    camera : (position, focal point, view up, parallel scale)
        The parallel scale is half the picture height in model units.
    size : (int, int)
        Picture width and height. [px]
    """
    w, right, up = view_frame(towards_camera)
    lo, hi = points.min(axis=0), points.max(axis=0)
    centre = 0.5 * (lo + hi)
    u, v = (points - centre) @ right, (points - centre) @ up
    du, dv = float(np.ptp(u)), float(np.ptp(v))
    extent = max(du, dv) or 1.0
    pad = MARGIN * extent
    across, tall = (du + 2 * pad) or 1.0, (dv + 2 * pad) or 1.0
    bands = TOP_BAND + BOTTOM_BAND
    per_unit = width / across                                   # pixels per model unit
    if tall * per_unit > max_height - bands:
        per_unit = (max_height - bands) / tall
    height = min(int(np.ceil(max(tall * per_unit, MIN_PART_HEIGHT))) + bands,
                 max(int(max_height), MIN_PART_HEIGHT + bands))
    scale = 0.5 * height / per_unit
    # the part's centre sits in the middle of the space between the bands, not of the picture
    shift = 0.5 * (BOTTOM_BAND - TOP_BAND) / per_unit
    focal = centre + 0.5 * (u.min() + u.max()) * right + (0.5 * (v.min() + v.max()) - shift) * up
    diag = float(np.linalg.norm(hi - lo)) or 1.0
    return (focal + 3 * diag * w, focal, up, scale), (int(width), height)


def set_camera(plotter: Any, position: NDArray, focal: NDArray, up: NDArray, scale: float) -> None:
    cam = plotter.camera
    cam.enable_parallel_projection()   # pyvista's own flag: get_image_depth reads it
    cam.SetPosition(*position)
    cam.SetFocalPoint(*focal)
    cam.SetViewUp(*up)
    cam.SetParallelScale(scale)
    plotter.camera_set = True   # else pyvista's show() replaces the camera with its default
    plotter.renderer.ResetCameraClippingRange()


def project(plotter: Any, points: NDArray) -> NDArray[np.float64]:
    """Display coordinates (x right, y up from the bottom, in pixels) of model points."""
    ren = plotter.renderer
    out = np.empty((len(points), 2))
    for i, p in enumerate(points):
        ren.SetWorldPoint(float(p[0]), float(p[1]), float(p[2]), 1.0)
        ren.WorldToDisplay()
        out[i] = ren.GetDisplayPoint()[:2]
    return out


def visible_gauges(plotter: Any, glyphs: Glyphs, size: tuple[int, int]) -> NDArray[np.bool_]:
    """Depth-buffer test on the bare surface now rendered in ``plotter``."""
    # distance along the view; background (nothing drawn) is infinitely far
    depth = -np.asarray(plotter.get_image_depth(fill_value=-np.inf))
    cam = plotter.camera
    position = np.array(cam.GetPosition())
    view = unit(np.array(cam.GetFocalPoint()) - position)
    W, H = size
    xy = project(plotter, glyphs.base)
    col = np.round(xy[:, 0]).astype(int)
    row = np.round(H - 1 - xy[:, 1]).astype(int)
    dist = (glyphs.base - position) @ view
    tol = DEPTH_TOL * glyphs.size
    facing = glyphs.normal @ (-view) >= FACING_COS
    inside = (col >= 4) & (col < W - 4) & (row >= TOP_BAND // 2) & (row < H - 4)
    out = np.zeros(len(col), dtype=bool)
    for i in np.flatnonzero(facing & inside):
        window = depth[row[i] - 1: row[i] + 2, col[i] - 1: col[i] + 2]
        out[i] = bool(np.any(window >= dist[i] - tol))
    return out


def direction_name(towards_camera: NDArray) -> str:
    k = int(np.argmax(np.abs(towards_camera)))
    if abs(towards_camera[k]) > 0.97:
        return f"looking along {'-' if towards_camera[k] > 0 else '+'}{'xyz'[k]}"
    v = np.round(-towards_camera, 2) + 0.0       # + 0.0 turns -0.0 into 0.0
    return "looking along ({:+.2f}, {:+.2f}, {:+.2f})".format(*v)
