"""Report 3D views and VTK files: the model surface, the gauges and their discrepancies.

Stage: report. In: a :class:`~correlate.comparison.correlation.Correlation`. Out: PNG views rendered off-screen with
PyVista (an isometric view plus views against the clustered gauge normals), the list of gauges that
no view shows, and ``gauges.vtp`` / ``surface.vtp`` for any VTK viewer.

The surface is coloured by the predicted maximum principal strain at the reference step: each case's
field times the reference step's factor, summed (readings and fields are linear in the loads). Each
gauge is a short bar along its grid, lifted off the surface along the normal, coloured by
measured - predicted at the reference step on a diverging map with symmetric limits; gauges that were
not evaluated there are grey. Grids that share a centre (rosettes) are drawn as a fan from the centre
so that each grid keeps a spot of its own colour. Each view draws and labels only the gauges it shows;
labels are moved clear of each other and of the bars, with a leader line when moved far.

A gauge counts as visible in a view when its marker point faces the camera (normal within 75 degrees
of the view direction), projects inside the picture, and the depth buffer of the bare surface holds
nothing nearer to the camera than the point (tolerance 1 % of the model size).

pyvista is imported inside the functions so that ``import correlate`` stays light.
"""

from __future__ import annotations

import inspect
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.core.units import MICROSTRAIN
from correlate.mechanics import elements

SIZE = (1200, 900)                  # picture size [px]
DIVERGING = "RdBu_r"                # gauge discrepancy: blue below zero, red above
SEQUENTIAL = "viridis"              # surface strain
GREY = (0.55, 0.55, 0.55)           # gauges not evaluated at the reference step
BAR_FRACTION = 0.02                 # shortest bar: 2 % of the model size
FAN_FRACTION = 0.03                 # shortest grid of a rosette fan: 3 % of the model size
RADIUS_FRACTION = 0.0035            # bar radius: 0.35 % of the model size
FAN_ANCHOR = 0.65                   # marker point of a fanned grid, as a share of its bar length
FACING_COS = np.cos(np.radians(75.0))
DEPTH_TOL = 0.01                    # occlusion tolerance, share of the model size
CLUSTER_COS = np.cos(np.radians(30.0))
MAX_VIEWS = 6
MAX_ZOOM = 2.0                      # detail views: at most twice as close as the whole part
TOP_BAND, BOTTOM_BAND = 50, 150     # pixels kept free for the title and the colour bars
LABEL_CHARS = 24
FONT = 13

# meshio cell type -> VTK cell type id (VTK node order is meshio's; see the library notes)
VTK_TYPES = {"triangle": 5, "triangle6": 22, "quad": 9, "quad8": 23, "quad9": 28, "tetra": 10,
             "tetra10": 24, "hexahedron": 12, "hexahedron20": 25, "hexahedron27": 29, "wedge": 13}
STATUS_CODES = {"pass": 0, "fail": 1}
STATUS_LEGEND = ("0 pass", "1 fail", "2 not evaluated (tare, zero-load, missing, flagged or excluded)")


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


@dataclass(frozen=True)
class View:
    """One rendered picture and the parallel-projection camera that made it."""

    name: str
    file: str
    title: str
    position: tuple[float, float, float]
    focal_point: tuple[float, float, float]
    view_up: tuple[float, float, float]
    parallel_scale: float
    size: tuple[int, int]
    visible: tuple[str, ...]


@dataclass(frozen=True)
class Rendering:
    """The views, the gauges no view shows, the glyphs and the coloured surface with its note."""

    views: tuple[View, ...]
    not_visible: tuple[str, ...]
    glyphs: Glyphs
    surface: Any        # pyvista.PolyData with the reference-step strain arrays
    note: str


# ----------------------------------------------------------------------------- reference field

def reference_index(corr: Any) -> int:
    """Index in ``corr.steps`` of the reference step named in the summary."""
    ref = corr.summary["reference_step"]
    hit = np.flatnonzero((corr.steps.step == ref["step"]) & (corr.steps.sequence == ref["sequence"]))
    return int(hit[0]) if len(hit) else 0


def _cell_mean(mesh: Any, values: NDArray) -> NDArray:
    """Mean of nodal values over each cell's nodes (global cell order)."""
    return np.concatenate([values[conn].mean(axis=1) for _, conn in mesh.blocks])


def _cell_strain_from_displacement(mesh: Any, u: NDArray) -> NDArray:
    """Small-strain tensor at each cell's centre from nodal displacements (m/m)."""
    parts = []
    for ctype, conn in mesh.blocks:
        ref = elements.ELEMENTS[ctype].reference_nodes
        xi = np.tile(ref[: elements.ELEMENTS[ctype].n_corners].mean(axis=0), (len(conn), 1))
        dN, _ = elements.physical_gradients(ctype, mesh.points[conn], xi)
        H = np.einsum("cni,cnj->cij", u[conn], dN)
        parts.append(0.5 * (H + np.swapaxes(H, 1, 2)))
    return np.concatenate(parts)


def _series_weights(corr: Any, case: Any, ref: int) -> dict[int, float] | None:
    """Weights of a series case's FE steps at the reference step (None: not modelled there).

    The run pairs each readings row with the FE state at its load by linear interpolation
    (:func:`correlate.comparison.pairing.interpolate_series`); that rule is linear in the rows, so applied to
    the identity it gives the weight of each FE step.
    """
    from correlate.comparison.pairing import interpolate_series
    from correlate.measurement.health import load_direction
    from correlate.model_readings.model import case_steps

    match = case.match or {}
    column, scale = match.get("column"), match.get("value_at_time_1")
    steps = corr.steps
    if column not in steps.load_names or not isinstance(scale, int | float):
        return None
    states = case_steps(corr.model, case)
    fe_load = np.array([t * scale for _, t in states], dtype=float)
    load = steps.loads[:, steps.load_names.index(column)]
    direction = load_direction(load[:, None], steps.sequence, tol=corr.study.zero_tol)
    weights, modelled = interpolate_series(fe_load, np.eye(len(states)), load, direction)
    if not modelled[ref]:
        return None
    return {int(states[k][0]): float(weights[k, ref]) for k in range(len(states))
            if weights[k, ref] != 0}


def _case_strain(model: Any, case: Any, fe_index: int | None, notes: list[str]
                 ) -> tuple[str, NDArray] | None:
    """One FE state of a case as ("point" | "cell", strain tensors in m/m); None if impossible."""
    fld = model.case_field(case, fe_index)
    values = fld.values
    if isinstance(values, dict):
        face = "top" if "top" in values else next(iter(values))
        values = values[face]
        notes.append(f"shell surface shows the {face} face")
    if fld.kind != "displacement":
        return fld.location, np.asarray(values)
    try:
        strain = _cell_strain_from_displacement(model.operator.mesh, np.asarray(values))
    except (ValueError, KeyError, np.linalg.LinAlgError):
        notes.append(f"case '{case.name}' gives displacement and its strain could not be "
                     "derived on these cells: the surface is not coloured")
        return None
    notes.append("strain from displacement, constant per element")
    return "cell", strain


def reference_strain(corr: Any) -> tuple[str, NDArray[np.float64] | None, str]:
    """Predicted strain tensors at the reference step: ("point" | "cell", (n, 3, 3) m/m, note).

    Each case's field times the reference step's factor, summed; a series case (one FE state per
    load) contributes the states the run interpolates between at the reference load. Returns
    ``(location, None, note)`` when a field cannot be had.
    """
    model, study = corr.model, corr.study
    mesh = model.operator.mesh
    ref = reference_index(corr)
    factors = corr.steps.factors[ref]
    parts: list[tuple[str, NDArray]] = []
    notes: list[str] = []
    for case, f in zip(study.cases, factors, strict=True):
        if case.time_index == "all" or isinstance(case.time_index, tuple):
            weights = _series_weights(corr, case, ref)
            if weights is None:
                notes.append(f"series case '{case.name}' is not modelled at the reference load: "
                             "the surface is not coloured")
                return "point", None, "; ".join(notes)
        else:
            weights = {case.time_index if isinstance(case.time_index, int) else None: float(f)}
        for fe_index, w in weights.items():
            if w == 0:
                continue
            got = _case_strain(model, case, fe_index, notes)
            if got is None:
                return "cell", None, "; ".join(dict.fromkeys(notes))
            parts.append((got[0], w * got[1]))
    if not parts:
        return "point", np.zeros((len(mesh.points), 3, 3)), "; ".join(dict.fromkeys(notes))
    if all(loc == "point" for loc, _ in parts):
        return "point", sum(v for _, v in parts), "; ".join(dict.fromkeys(notes))
    total = sum(v if loc == "cell" else _cell_mean(mesh, v) for loc, v in parts)
    return "cell", total, "; ".join(dict.fromkeys(notes))


def _strain_arrays(tensors: NDArray) -> dict[str, NDArray]:
    """Principal and component arrays in microstrain (engineering shear for gxy, gyz, gxz)."""
    t = np.nan_to_num(tensors) * MICROSTRAIN
    eig = np.linalg.eigvalsh(t)
    return {
        "max_principal_ue": eig[:, -1], "min_principal_ue": eig[:, 0],
        "exx_ue": t[:, 0, 0], "eyy_ue": t[:, 1, 1], "ezz_ue": t[:, 2, 2],
        "gxy_ue": 2 * t[:, 0, 1], "gyz_ue": 2 * t[:, 1, 2], "gxz_ue": 2 * t[:, 0, 2],
        "strain_tensor_ue": t.reshape(len(t), 9),
    }


def model_grid(mesh: Any) -> Any:
    """The model as a ``pyvista.UnstructuredGrid`` (cells in global order)."""
    import pyvista as pv

    cells, types = [], []
    for ctype, conn in mesh.blocks:
        cells.append(np.c_[np.full(len(conn), conn.shape[1]), conn].ravel())
        types.append(np.full(len(conn), VTK_TYPES[ctype], dtype=np.uint8))
    return pv.UnstructuredGrid(np.concatenate(cells), np.concatenate(types),
                               np.asarray(mesh.points, dtype=float))


def model_surface(corr: Any) -> tuple[Any, str]:
    """Outer surface with the reference-step strain arrays, and a note on the colouring."""
    mesh = corr.model.operator.mesh
    grid = model_grid(mesh)
    location, tensors, note = reference_strain(corr)
    if tensors is not None:
        data = grid.point_data if location == "point" else grid.cell_data
        for name, arr in _strain_arrays(tensors).items():
            data[name] = arr
    options: dict[str, Any] = {"pass_pointid": False, "pass_cellid": False}
    if "algorithm" in inspect.signature(grid.extract_surface).parameters:
        options["algorithm"] = "dataset_surface"   # handles quadratic faces; pyvista >= 0.47
    surface = grid.extract_surface(**options)
    return surface, note


# ----------------------------------------------------------------------------- gauge glyphs

def gauge_glyphs(corr: Any) -> Glyphs:
    """Bars, marker points and discrepancy colours of every gauge at the reference step."""
    place = corr.model.operator.placement
    pts = corr.model.operator.mesh.points
    size = float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0))) or 1.0
    ref = reference_index(corr)
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
    evaluated = corr.status["evaluated"][ref]
    disc = np.where(evaluated, corr.measured[ref] - corr.predicted[ref], np.nan)
    finite = np.isfinite(disc)
    limit = float(np.max(np.abs(disc[finite]))) if finite.any() else 0.0
    return Glyphs(gauges=tuple(corr.gauges), start=start, end=end, anchor=base + lift, base=base,
                  normal=n, discrepancy=disc, limit=limit if limit > 0 else 1.0, radius=radius,
                  size=size)


def _bars(glyphs: Glyphs, select: NDArray[np.bool_], thickness: float = 1.0) -> Any:
    """Tubes along the selected gauges' grids, radius times ``thickness``."""
    import pyvista as pv

    idx = np.flatnonzero(select)
    pts = np.empty((2 * len(idx), 3))
    pts[0::2], pts[1::2] = glyphs.start[idx], glyphs.end[idx]
    lines = np.c_[np.full(len(idx), 2), 2 * np.arange(len(idx)), 2 * np.arange(len(idx)) + 1]
    poly = pv.PolyData(pts, lines=lines.ravel())
    poly.point_data["discrepancy_ue"] = np.repeat(glyphs.discrepancy[idx], 2)
    return poly.tube(radius=thickness * glyphs.radius, n_sides=16, capping=True)


# ----------------------------------------------------------------------------- cameras

def _unit(v: NDArray) -> NDArray:
    return v / np.linalg.norm(v)


def cluster_normals(normals: NDArray[np.float64]) -> list[NDArray[np.int64]]:
    """Group unit normals within 30 degrees of a group's mean; largest group first."""
    sums: list[NDArray] = []
    members: list[list[int]] = []
    for i, v in enumerate(normals):
        cos = [float(np.dot(_unit(s), v)) for s in sums]
        k = int(np.argmax(cos)) if cos else -1
        if k >= 0 and cos[k] >= CLUSTER_COS:
            sums[k] = sums[k] + v
            members[k].append(i)
        else:
            sums.append(v.copy())
            members.append([i])
    order = sorted(range(len(members)), key=lambda k: -len(members[k]))
    return [np.array(members[k]) for k in order]


def _iso_direction(normals: NDArray) -> NDArray:
    """Octant diagonal (camera side) that faces the most gauges; ties prefer +z, then -y, +x."""
    best, score = None, -1.0
    for sz in (1, -1):
        for sy in (-1, 1):
            for sx in (1, -1):
                v = _unit(np.array([sx, sy, sz], dtype=float))
                s = float(np.clip(normals @ v, 0, None).sum()) if len(normals) else 0.0
                if s > score + 1e-9:
                    best, score = v, s
    return best  # type: ignore[return-value]


def _camera(points: NDArray, towards_camera: NDArray, size: tuple[int, int],
            frame: NDArray | None = None, pad: float = 0.0,
            ) -> tuple[NDArray, NDArray, NDArray, float]:
    """Parallel camera seeing ``points`` from the side ``towards_camera``, leaving text bands free.

    ``frame`` (points) and ``pad`` (model units) narrow the picture to a detail; the camera stays
    outside the whole model. Returns position, focal point, view up and parallel scale (half the
    picture height in model units).
    """
    w = _unit(np.asarray(towards_camera, dtype=float))
    up = np.array([0.0, 0.0, 1.0]) if abs(w[2]) < 0.95 else np.array([0.0, 1.0, 0.0])
    right = _unit(np.cross(up, w))
    up = np.cross(w, right)
    lo, hi = points.min(axis=0), points.max(axis=0)
    centre = 0.5 * (lo + hi)
    if frame is None:
        frame = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1])
                          for z in (lo[2], hi[2])])
    u, v = (frame - centre) @ right, (frame - centre) @ up
    cx, cy = 0.5 * (u.min() + u.max()), 0.5 * (v.min() + v.max())
    hx = 0.5 * (u.max() - u.min()) + pad or 1.0
    hy = 0.5 * (v.max() - v.min()) + pad or 1.0
    W, H = size
    usable = H - TOP_BAND - BOTTOM_BAND
    scale = max(hy * H / (0.92 * usable), hx * H / (0.92 * W))
    shift = 0.5 * (BOTTOM_BAND - TOP_BAND) * 2 * scale / H      # model units
    focal = centre + cx * right + (cy - shift) * up
    diag = float(np.linalg.norm(hi - lo)) or 1.0
    return focal + 3 * diag * w, focal, up, scale


def _set_camera(plotter: Any, position: NDArray, focal: NDArray, up: NDArray, scale: float) -> None:
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
    view = _unit(np.array(cam.GetFocalPoint()) - position)
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


# ----------------------------------------------------------------------------- drawing

def _font(prop: Any, size: int, color: tuple[float, float, float] = (0.05, 0.05, 0.05)) -> None:
    """Use matplotlib's DejaVu Sans: VTK's built-in sans font draws '[' and ']' as parentheses."""
    from matplotlib import get_data_path

    prop.SetFontFamily(4)   # VTK_FONT_FILE
    prop.SetFontFile(str(Path(get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf"))
    prop.SetFontSize(size)
    prop.SetColor(*color)


def _text(plotter: Any, text: str, x: int, y: int, size: int,
          color: tuple[float, float, float] = (0.05, 0.05, 0.05)) -> Any:
    """A 2D text actor at pixel (x, y) from the lower left corner."""
    from vtkmodules.vtkRenderingCore import vtkTextActor

    actor = vtkTextActor()
    actor.SetInput(text)
    _font(actor.GetTextProperty(), size, color)
    actor.SetDisplayPosition(int(x), int(y))
    plotter.renderer.AddViewProp(actor)
    return actor


MAX_LABELS = 60  # gauge ids per view; more would cover the part


def _label_text(gauge: str) -> str:
    text = gauge if len(gauge) <= LABEL_CHARS else gauge[: LABEL_CHARS - 3] + "..."
    return text.replace("$", "\\$")   # VTK renders $...$ as math text otherwise


def _free(box: tuple[float, float, float, float], taken: list[tuple[float, float, float, float]],
          size: tuple[int, int]) -> bool:
    x0, y0, x1, y1 = box
    if x0 < 2 or y0 < BOTTOM_BAND or x1 > size[0] - 2 or y1 > size[1] - TOP_BAND:
        return False
    return all(x1 < a0 or x0 > a1 or y1 < b0 or y0 > b1 for a0, b0, a1, b1 in taken)


def _add_labels(plotter: Any, glyphs: Glyphs, shown: NDArray[np.bool_],
                size: tuple[int, int]) -> list[Any]:
    """Gauge ids beside the bar ends, moved around to avoid each other and the marker points.

    At most MAX_LABELS per view: the flagged (grey) gauges and the largest discrepancies; the
    others keep their coloured bar without an id (every gauge is in the report's tables).
    """
    idx = np.flatnonzero(shown)
    if len(idx) > MAX_LABELS:
        d = np.abs(glyphs.discrepancy[idx])
        keep = np.argsort(-np.nan_to_num(d, nan=np.inf), kind="stable")[:MAX_LABELS]
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
    for k, i in enumerate(idx):
        actor = _text(plotter, _label_text(glyphs.gauges[i]), 0, 0, FONT)
        prop = actor.GetTextProperty()
        prop.SetBackgroundColor(1.0, 1.0, 1.0)
        prop.SetBackgroundOpacity(0.85)
        prop.SetFrame(True)
        prop.SetFrameColor(0.4, 0.4, 0.4)
        prop.SetFrameWidth(1)
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
                if _free(box, taken, size):
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
        actors.append(_leader_lines(plotter, leaders))
    return actors


def _bands(plotter: Any, size: tuple[int, int]) -> Any:
    """White rectangles over the top and bottom text bands, with a thin rule at their edges."""
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
    actor = _overlay(plotter, poly, (1.0, 1.0, 1.0))
    actor.GetProperty().SetOpacity(0.92)
    return actor


def _overlay(plotter: Any, poly: Any, color: tuple[float, float, float]) -> Any:
    """A 2D actor in display coordinates drawing ``poly`` in one colour, added to the plotter."""
    from vtkmodules.vtkRenderingCore import vtkActor2D, vtkPolyDataMapper2D

    mapper = vtkPolyDataMapper2D()
    mapper.SetInputData(poly)
    actor = vtkActor2D()
    actor.SetMapper(mapper)
    actor.GetProperty().SetColor(*color)
    plotter.renderer.AddViewProp(actor)
    return actor


def _leader_lines(plotter: Any, segments: list[tuple[tuple[float, float], tuple[float, float]]]
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
    actor = _overlay(plotter, poly, (0.25, 0.25, 0.25))
    actor.GetProperty().SetLineWidth(1.0)
    return actor


def _nice_range(low: float, high: float) -> tuple[float, float, int]:
    """Limits widened to round tick values, and the number of ticks (for the colour bar)."""
    from matplotlib.ticker import MaxNLocator

    if not high - low > 1e-9 * max(1.0, abs(high)):
        return low - 1.0, high + 1.0, 5
    ticks = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]).tick_values(low, high)
    ticks = ticks[(ticks >= ticks[ticks <= low].max()) & (ticks <= ticks[ticks >= high].min())]
    return float(ticks[0]), float(ticks[-1]), len(ticks)


def _tick_format(low: float, high: float, ticks: int = 5) -> str:
    """Enough decimals to tell the tick labels apart (at most three)."""
    step = (high - low) / max(ticks - 1, 1)
    digits = 0 if step <= 0 else int(np.clip(np.ceil(-np.log10(step)), 0, 3))
    return f"%.{digits}f"


def _scalar_bar(plotter: Any, mapper: Any, title: str, x: float, ticks: int = 5) -> list[Any]:
    """A horizontal colour bar in the bottom band, tick labels under it, its title above it.

    The title is a separate text actor: VTK's own scalar-bar title overlaps the tick labels of a
    horizontal bar.
    """
    width, height = plotter.window_size
    low, high = mapper.GetScalarRange()
    bar = plotter.add_scalar_bar(
        title=" " * (1 + len(plotter.scalar_bars)), mapper=mapper, vertical=False,
        position_x=x, position_y=0.025, width=0.38, height=0.09, n_labels=ticks,
        fmt=_tick_format(low, high, ticks),
        color="black", label_font_size=14, font_family="arial", render=False)
    bar.SetTextPositionToPrecedeScalarBar()
    bar.SetBarRatio(0.45)
    _font(bar.GetLabelTextProperty(), 14)
    bar.GetLabelTextProperty().SetBold(False)
    bar.GetLabelTextProperty().SetShadow(False)
    text = _text(plotter, title, int(x * width) + 2, int(0.115 * height) + 4, 15)
    return [bar, text]


def _direction_name(towards_camera: NDArray) -> str:
    k = int(np.argmax(np.abs(towards_camera)))
    if abs(towards_camera[k]) > 0.97:
        return f"looking along {'-' if towards_camera[k] > 0 else '+'}{'xyz'[k]}"
    v = np.round(-towards_camera, 2) + 0.0       # + 0.0 turns -0.0 into 0.0
    return "looking along ({:+.2f}, {:+.2f}, {:+.2f})".format(*v)


@contextmanager
def _vtk_errors_only() -> Iterator[None]:
    """Silence VTK's stderr warnings while rendering: off-screen, VTK first tries an X display
    and logs "bad X server connection" before it falls back to EGL or OSMesa."""
    from vtkmodules.vtkCommonCore import vtkLogger

    before = vtkLogger.GetCurrentVerbosityCutoff()
    vtkLogger.SetStderrVerbosity(vtkLogger.VERBOSITY_ERROR)
    try:
        yield
    finally:
        vtkLogger.SetStderrVerbosity(before)


class _Scene:
    """One off-screen plotter holding the surface and the gauge bars; one camera per view."""

    def __init__(self, surface: Any, glyphs: Glyphs, size: tuple[int, int]) -> None:
        import pyvista as pv

        theme = pv.themes.DocumentTheme()
        theme.multi_samples = 1          # multisampling costs 4x per frame in software OpenGL
        self.plotter = pv.Plotter(off_screen=True, window_size=list(size), theme=theme)
        self.plotter.set_background("white")
        # no anti-aliasing: SSAA, the only kind software OpenGL offers, costs 10x per frame
        self.size = size
        self.glyphs = glyphs
        # hidden during the depth test; first, drawn first: opaque bands under the title and the
        # colour bars, since a detail view fills the picture
        self.overlay: list[Any] = [_bands(self.plotter, size)]
        self.clim: tuple[float, float] | None = None
        ticks = 5
        if "max_principal_ue" in surface.array_names:
            v = np.asarray(surface["max_principal_ue"])
            low, high, ticks = _nice_range(float(np.min(v)), float(np.max(v)))
            self.clim = (low, high)
        pl = self.plotter
        if self.clim is not None:
            actor = pl.add_mesh(surface, scalars="max_principal_ue", cmap=SEQUENTIAL, clim=self.clim,
                                show_scalar_bar=False, ambient=0.3, diffuse=0.75, specular=0.0,
                                render=False)
            self.overlay += _scalar_bar(pl, actor.mapper, "max principal strain [ue]", 0.05,
                                        ticks)
        else:
            pl.add_mesh(surface, color=(0.85, 0.85, 0.82), ambient=0.3, diffuse=0.75, render=False)
        edges = surface.extract_feature_edges(feature_angle=30.0, boundary_edges=True,
                                              non_manifold_edges=False, manifold_edges=False)
        if edges.n_points:
            pl.add_mesh(edges, color=(0.15, 0.15, 0.15), line_width=1.0, lighting=False,
                        render=False)
        # bars: one coloured and one grey actor whose input is set per view (its visible gauges)
        self.finite = np.isfinite(glyphs.discrepancy)
        self.bars = self.grey = None
        if self.finite.any():
            self.bars = pl.add_mesh(_bars(glyphs, self.finite), scalars="discrepancy_ue",
                                    cmap=DIVERGING, clim=(-glyphs.limit, glyphs.limit),
                                    lighting=False, n_colors=256, show_scalar_bar=False,
                                    render=False)
            self.overlay += _scalar_bar(pl, self.bars.mapper, "measured - predicted [ue]", 0.57)
        if (~self.finite).any():
            self.grey = pl.add_mesh(_bars(glyphs, ~self.finite), color=GREY, lighting=False,
                                    render=False)
            self.overlay.append(_text(pl, "grey bars: not evaluated at the reference step",
                                      12, 8, 13, (0.3, 0.3, 0.3)))
        self.title = _text(pl, "", 14, size[1] - 34, 17)
        self.overlay.append(self.title)
        self.labels: list[Any] = []
        self.first = True

    def look(self, camera: tuple[NDArray, NDArray, NDArray, float]) -> None:
        _set_camera(self.plotter, *camera)

    def visible(self) -> NDArray[np.bool_]:
        """Render the bare surface and run the depth test."""
        for actor in self.overlay + self.labels + [self.bars, self.grey]:
            if actor is not None:
                actor.SetVisibility(False)
        if self.first:
            self.plotter.show(auto_close=False)   # pyvista reads depth only after a show()
            self.first = False
        else:
            self.plotter.render()
        shown = visible_gauges(self.plotter, self.glyphs, self.size)
        for actor in self.overlay:
            actor.SetVisibility(True)
        return shown

    def save(self, path: Path, title: str, shown: NDArray[np.bool_], thickness: float = 1.0
             ) -> None:
        renderer = self.plotter.renderer
        for actor in self.labels:
            renderer.RemoveViewProp(actor)
        self.title.SetInput(title)
        # only the gauges this view shows: others would be edge-on sticks or hidden anyway
        for actor, select in ((self.bars, self.finite & shown), (self.grey, ~self.finite & shown)):
            if actor is not None:
                if select.any():
                    actor.mapper.SetInputData(_bars(self.glyphs, select, thickness))
                actor.SetVisibility(bool(select.any()))
        self.labels = _add_labels(self.plotter, self.glyphs, shown, self.size)
        self.plotter.render()
        self.plotter.screenshot(str(path))

    def close(self) -> None:
        self.plotter.close()


def render_views(corr: Any, folder: Path, *, size: tuple[int, int] = SIZE,
                 max_views: int = MAX_VIEWS) -> Rendering:
    """Render the isometric view and the normal-cluster views into ``folder`` as PNG.

    Views: the octant diagonal facing the most gauges; then one view against the mean normal of each
    group of gauge normals (30 degrees), largest group first, kept when it shows one of its group;
    then, for gauges still hidden, a view against each one's own normal, kept when it shows one.

    Parameters
    ----------
    corr : Correlation
        The run's results.
    folder : Path
        Where ``view_iso.png``, ``view_1.png``, ... are written.
    size : (int, int)
        Picture width and height. [px]
    max_views : int
        Views besides the isometric one (at most).

    Returns
    -------
    Rendering
        Views with their cameras and visible gauges, and the gauges no view shows.
    """
    surface, note = model_surface(corr)
    glyphs = gauge_glyphs(corr)
    pts = np.asarray(surface.points)
    normals = glyphs.normal
    queue: list[tuple[str, NDArray, NDArray]] = [("iso", _iso_direction(normals),
                                                  np.arange(len(normals)))]
    for members in cluster_normals(normals)[:max_views]:
        queue.append(("group", _unit(normals[members].sum(axis=0)), members))
    with _vtk_errors_only():
        return _render_all(queue, surface, glyphs, pts, normals, folder, size, max_views, note)


def _render_all(queue: list[tuple[str, NDArray, NDArray]], surface: Any, glyphs: Glyphs,
                pts: NDArray, normals: NDArray, folder: Path, size: tuple[int, int],
                max_views: int, note: str) -> Rendering:
    """Work through the queue of view directions (see :func:`render_views`)."""
    seen = np.zeros(len(glyphs.gauges), dtype=bool)
    seen_faces = np.zeros(len(glyphs.gauges), dtype=bool)
    views: list[View] = []
    retried = False
    scene = _Scene(surface, glyphs, size)
    try:
        while queue:
            kind, w, members = queue.pop(0)
            if kind != "iso" and len(views) > max_views:
                break
            camera = _camera(pts, w, size)
            scene.look(camera)
            shown = scene.visible()
            # a view is kept for a gauge of its own group no earlier face view showed
            wanted = shown[members] & ~seen_faces[members] if kind == "group" else shown & ~seen
            if kind != "iso" and not wanted.any():
                continue
            thickness = 1.0
            if kind != "iso":
                # frame the gauges it shows (occlusion along a direction does not depend on zoom)
                pad = max(0.12 * glyphs.size, 2.0 * float(np.max(np.linalg.norm(
                    glyphs.end[shown] - glyphs.start[shown], axis=1))))
                detail = _camera(pts, w, size, frame=glyphs.anchor[shown], pad=pad)
                if detail[3] < 0.85 * camera[3]:
                    # at most MAX_ZOOM times closer, so that the part stays recognisable
                    ratio = max(detail[3] / camera[3], 1.0 / MAX_ZOOM)
                    camera = (*detail[:3], ratio * camera[3])
                    thickness = ratio           # bars keep their thickness on the picture
                    scene.look(camera)
                seen_faces |= shown
            position, focal, up, scale = camera
            name = "iso" if kind == "iso" else str(len(views))
            title = ("isometric view" if kind == "iso"
                     else f"view {name}: {_direction_name(w)}")
            title += f" - {int(shown.sum())} of {len(shown)} gauges visible"
            file = f"view_{name}.png"
            scene.save(folder / file, title, shown, thickness)
            seen |= shown
            views.append(View(
                name=name, file=file, title=title, position=tuple(map(float, position)),
                focal_point=tuple(map(float, focal)), view_up=tuple(map(float, up)),
                parallel_scale=float(scale), size=(int(size[0]), int(size[1])),
                visible=tuple(g for g, s in zip(glyphs.gauges, shown, strict=True) if s)))
            if not queue and not retried:
                retried = True
                queue = [("single", normals[i], np.array([i])) for i in np.flatnonzero(~seen)]
    finally:
        scene.close()
    not_visible = tuple(g for g, s in zip(glyphs.gauges, seen, strict=True) if not s)
    return Rendering(views=tuple(views), not_visible=not_visible, glyphs=glyphs, surface=surface,
                     note=note)


# ----------------------------------------------------------------------------- VTK files

def _strings(name: str, values: Any) -> Any:
    """A ``vtkStringArray`` filled one value at a time (UTF-8; pyvista refuses non-ASCII text)."""
    from vtkmodules.vtkCommonCore import vtkStringArray

    array = vtkStringArray()
    array.SetName(name)
    for v in values:
        array.InsertNextValue(str(v))
    return array


def gauge_points(corr: Any) -> Any:
    """One point per gauge centre with its reference-step readings, status and statistics.

    Point data: ``gauge`` (string), ``predicted_ue``, ``measured_ue``, ``difference_ue``,
    ``ratio``, ``band_low_ue``, ``band_high_ue``, ``status`` (string) and ``status_code`` (int,
    legend in the field data ``status_legend``), ``unconservative``, ``grid_length``, the
    all-step fit of each gauge as ``stats_<column of gauge_stats.csv>``, and the vectors
    ``grid_direction`` and ``normal``.
    """
    import pyvista as pv

    place = corr.model.operator.placement
    ref = reference_index(corr)
    st = corr.status
    poly = pv.PolyData(np.asarray(place.centre, dtype=float))
    status = np.asarray(st["status"][ref]).astype(str)
    data = {
        "predicted_ue": corr.predicted[ref], "measured_ue": corr.measured[ref],
        "difference_ue": st["difference"][ref], "ratio": st["ratio"][ref],
        "band_low_ue": corr.band_low[ref], "band_high_ue": corr.band_high[ref],
        "grid_length": corr.model.gauges["length"].to_numpy(dtype=float),
    }
    for name, values in data.items():
        poly.point_data[name] = np.asarray(values, dtype=float)
    poly.point_data["status_code"] = np.array([STATUS_CODES.get(s, 2) for s in status],
                                              dtype=np.int32)
    poly.point_data["unconservative"] = np.asarray(st["unconservative"][ref], dtype=np.int32)
    per = corr.per_gauge.set_index("gauge") if len(corr.per_gauge) else None
    if per is not None:
        for col in per.columns:
            values = per[col].reindex(corr.gauges)
            if np.issubdtype(values.dtype, np.number):
                poly.point_data[f"stats_{col}"] = values.to_numpy(dtype=float)
    poly.point_data["grid_direction"] = np.asarray(place.direction, dtype=float)
    poly.point_data["normal"] = np.asarray(place.normal, dtype=float)
    poly.GetPointData().AddArray(_strings("gauge", corr.gauges))
    poly.GetPointData().AddArray(_strings("status", status))
    poly.GetFieldData().AddArray(_strings("status_legend", STATUS_LEGEND))
    step = corr.steps
    poly.field_data["reference_step"] = np.array([step.step[ref], step.sequence[ref]], dtype=np.int64)
    poly.GetFieldData().AddArray(_strings("units", [
        "strain in microstrain (ue), tension positive", f"lengths in {corr.study.length_unit}"]))
    return poly


def write_vtk(corr: Any, folder: Path, surface: Any | None = None) -> None:
    """Write ``gauges.vtp`` (gauge centres) and ``surface.vtp`` (reference-step strain field)."""
    gauge_points(corr).save(str(folder / "gauges.vtp"))
    if surface is None:
        surface, _ = model_surface(corr)
    out = surface.copy()
    ref = reference_index(corr)
    out.field_data["reference_step"] = np.array([corr.steps.step[ref], corr.steps.sequence[ref]],
                                                dtype=np.int64)
    out.GetFieldData().AddArray(_strings("units", [
        "strain in microstrain (ue), tension positive",
        "gxy_ue, gyz_ue, gxz_ue: engineering shear; strain_tensor_ue: full tensor, tensor shear",
        f"coordinates in {corr.study.length_unit}"]))
    out.save(str(folder / "surface.vtp"))
