"""The 3D views of the report: the model surface and the gauges, rendered off-screen.

Stage: report. In: a :class:`~correlate.comparison.correlation.Correlation`. Out: PNG views
rendered off-screen with PyVista (an isometric view plus views against the clustered gauge
normals) and the list of gauges that no view shows. The surface is coloured by the predicted
maximum principal strain at the reference step (:mod:`correlate.comparison.reference_field`); the
gauges are drawn by :mod:`correlate.report.glyphs`, framed by :mod:`correlate.report.camera` and
labelled by :mod:`correlate.report.annotations`. Each view draws and labels only the gauges it
shows; gauges not evaluated at the reference step are magenta, and they and the failing ones are
ringed and labelled with their state. Every view fits the whole part, carries an axis triad and a
scale bar in the model's length unit.

pyvista is imported inside the functions so that ``import correlate`` stays light.
"""

from __future__ import annotations

import inspect
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.comparison.reference_field import reference_strain, strain_arrays
from correlate.core.errors import CorrelateWarning
from correlate.mechanics import elements
from correlate.report.annotations import (
    add_labels,
    add_text,
    bands,
    nice_range,
    place_scalar_bar,
    resize_bands,
    scalar_bar,
    scale_bar,
)
from correlate.report.camera import (
    cluster_normals,
    direction_name,
    fit_camera,
    iso_direction,
    set_camera,
    unit,
    visible_gauges,
)
from correlate.report.glyphs import Glyphs, bars, gauge_glyphs

SIZE = (1200, 1100)                 # picture width and largest height [px]
DIVERGING = "RdBu_r"                # gauge discrepancy: blue below zero, red above
SEQUENTIAL = "viridis"              # surface strain
# gauges not evaluated at the reference step (flagged, excluded, missing): a colour on neither
# colour map, so that they stand out instead of fading
FLAGGED = (0.85, 0.0, 0.75)
MAX_VIEWS = 6
BAR_X = (0.03, 0.39)                # left edges of the two colour bars, share of the width
TRIAD = 130                         # axis triad: a square of this many pixels, bottom right


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


def model_grid(mesh: Any) -> Any:
    """The model as a ``pyvista.UnstructuredGrid`` (cells in global order)."""
    import pyvista as pv

    cells, types = [], []
    for ctype, conn in mesh.blocks:
        cells.append(np.c_[np.full(len(conn), conn.shape[1]), conn].ravel())
        types.append(np.full(len(conn), elements.ELEMENTS[ctype].vtk_id, dtype=np.uint8))
    return pv.UnstructuredGrid(np.concatenate(cells), np.concatenate(types),
                               np.asarray(mesh.points, dtype=float))


def model_surface(corr: Any) -> tuple[Any, str]:
    """Outer surface with the reference-step strain arrays, and a note on the colouring."""
    mesh = corr.model.operator.mesh
    grid = model_grid(mesh)
    field = reference_strain(corr)
    location, tensors, note = field.location, field.tensors, field.note
    if tensors is not None:
        data = grid.point_data if location == "point" else grid.cell_data
        bad = ~np.isfinite(tensors).all(axis=(1, 2))
        if bad.any():
            _warn_non_finite(corr, location, int(bad.sum()))
            tensors = np.where(bad[:, None, None], 0.0, tensors)
        for name, arr in strain_arrays(tensors).items():
            # non-finite values far from the gauges: left uncoloured (NaN colour), never drawn
            data[name] = np.where(bad.reshape((-1,) + (1,) * (arr.ndim - 1)), np.nan, arr)
    options: dict[str, Any] = {"pass_pointid": False, "pass_cellid": False}
    if "algorithm" in inspect.signature(grid.extract_surface).parameters:
        options["algorithm"] = "dataset_surface"   # handles quadratic faces; pyvista >= 0.47
    surface = grid.extract_surface(**options)
    return surface, note


def _warn_non_finite(corr: Any, location: str, entities: int) -> None:
    """One warning naming the arrays with non-finite values and how many there are."""
    counts = []
    for fld in corr.model.fields.values():
        arrays = fld.data if isinstance(fld.data, dict) else {"": fld.data}
        count = sum(int(np.size(raw) - np.isfinite(raw).sum()) for raw in arrays.values())
        if count:
            counts.append(f"'{fld.array}' of case '{fld.case}' ({count} value(s))")
    what = ", ".join(dict.fromkeys(counts)) or "the reference-step field"
    where = "nodes" if location == "point" else "cells"
    warnings.warn(f"non-finite (NaN or infinite) values in {what}: {entities} {where} of the "
                  "reference-step surface are left uncoloured in the report views",
                  CorrelateWarning, stacklevel=3)


@contextmanager
def vtk_errors_only() -> Iterator[None]:
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
    """One off-screen plotter holding the surface and the gauge bars; one camera and picture size
    per view (the bands, the title, the legend and the scale bar are laid out again for each)."""

    def __init__(self, surface: Any, glyphs: Glyphs, width: int, unit: str) -> None:
        import pyvista as pv

        theme = pv.themes.DocumentTheme()
        theme.multi_samples = 1          # multisampling costs 4x per frame in software OpenGL
        self.size = (int(width), int(0.75 * width))
        self.plotter = pv.Plotter(off_screen=True, window_size=list(self.size), theme=theme)
        self.plotter.set_background("white")
        # no anti-aliasing: SSAA, the only kind software OpenGL offers, costs 10x per frame
        self.glyphs = glyphs
        self.unit = unit
        # 2D props that keep their pixels (colour-bar titles) or are refitted (the bands); the
        # bands first, so that they lie under the colour bars and the text
        self.bands = bands(self.plotter, self.size)
        self.static: list[Any] = [self.bands]
        self.bars_2d: list[tuple[Any, float]] = []
        self.per_view: list[Any] = []    # 2D props laid out for each picture size
        self.clim: tuple[float, float] | None = None
        ticks = 5
        if "max_principal_ue" in surface.array_names:
            v = np.asarray(surface["max_principal_ue"])
            v = v[np.isfinite(v)]
            if len(v):
                low, high, ticks = nice_range(float(np.min(v)), float(np.max(v)))
                self.clim = (low, high)
        pl = self.plotter
        if self.clim is not None:
            actor = pl.add_mesh(surface, scalars="max_principal_ue", cmap=SEQUENTIAL, clim=self.clim,
                                show_scalar_bar=False, ambient=0.3, diffuse=0.75, specular=0.0,
                                render=False)
            self._colour_bar(actor.mapper, "max principal strain [ue]", BAR_X[0], ticks)
        else:
            pl.add_mesh(surface, color=(0.85, 0.85, 0.82), ambient=0.3, diffuse=0.75, render=False)
        edges = surface.extract_feature_edges(feature_angle=30.0, boundary_edges=True,
                                              non_manifold_edges=False, manifold_edges=False)
        if edges.n_points:
            pl.add_mesh(edges, color=(0.15, 0.15, 0.15), line_width=1.0, lighting=False,
                        render=False)
        # bars: one coloured and one flagged actor whose input is set per view (its visible gauges)
        self.finite = np.isfinite(glyphs.discrepancy)
        self.bars = self.flagged = None
        if self.finite.any():
            self.bars = pl.add_mesh(bars(glyphs, self.finite), scalars="discrepancy_ue",
                                    cmap=DIVERGING, clim=(-glyphs.limit, glyphs.limit),
                                    lighting=False, n_colors=256, show_scalar_bar=False,
                                    render=False)
            self._colour_bar(self.bars.mapper, "measured - predicted [ue]", BAR_X[1])
        if (~self.finite).any():
            self.flagged = pl.add_mesh(bars(glyphs, ~self.finite), color=FLAGGED, lighting=False,
                                       render=False)
        self.triad = pl.add_axes(interactive=False, line_width=3, labels_off=False)
        pl.renderer.axes_widget.SetZoom(1.6)   # the marker fills its square, labels inside
        self.title: Any = None
        self.labels: list[Any] = []
        self.first = True

    def _colour_bar(self, mapper: Any, title: str, x: float, ticks: int = 5) -> None:
        bar, label = scalar_bar(self.plotter, mapper, title, x, ticks)
        self.bars_2d.append((bar, x))
        self.static.append(label)

    def look(self, camera: tuple[NDArray, NDArray, NDArray, float], size: tuple[int, int]
             ) -> None:
        """Resize the picture, lay out its bands and legend, and set the camera."""
        pl = self.plotter
        for actor in self.per_view:
            pl.renderer.RemoveViewProp(actor)
        if tuple(pl.window_size) != tuple(size):
            pl.window_size = list(size)
        self.size = (int(size[0]), int(size[1]))
        W, H = self.size
        resize_bands(self.bands, self.size)
        self.per_view = []
        for bar, x in self.bars_2d:
            place_scalar_bar(bar, x, self.size)
        self.title = add_text(pl, "", 14, H - 34, 17)
        self.per_view.append(self.title)
        self.per_view.append(add_text(
            pl, "magenta bars: flagged or not evaluated at the reference step; ringed and "
            "labelled with their state: failing or flagged gauges", 12, 5, 12, (0.25, 0.25, 0.25)))
        per_unit = 0.5 * H / camera[3]
        self.per_view += scale_bar(pl, per_unit, self.unit, self.size)
        # the axis triad in the bottom band, right: a square of TRIAD pixels
        pl.renderer.axes_widget.SetViewport(1 - (TRIAD + 8) / W, 4 / H, 1 - 8 / W, (TRIAD + 4) / H)
        set_camera(pl, *camera)

    def overlays(self) -> list[Any]:
        return [*self.per_view, *self.static, *(b for b, _ in self.bars_2d), self.triad]

    def visible(self) -> NDArray[np.bool_]:
        """Render the bare surface and run the depth test."""
        for actor in self.overlays() + self.labels + [self.bars, self.flagged]:
            if actor is not None:
                actor.SetVisibility(False)
        if self.first:
            self.plotter.show(auto_close=False)   # pyvista reads depth only after a show()
            self.first = False
        else:
            self.plotter.render()
        shown = visible_gauges(self.plotter, self.glyphs, self.size)
        for actor in self.overlays():
            actor.SetVisibility(True)
        return shown

    def save(self, path: Path, title: str, shown: NDArray[np.bool_]) -> None:
        renderer = self.plotter.renderer
        for actor in self.labels:
            renderer.RemoveViewProp(actor)
        self.title.SetInput(title)
        # only the gauges this view shows: others would be edge-on sticks or hidden anyway
        for actor, select in ((self.bars, self.finite & shown),
                              (self.flagged, ~self.finite & shown)):
            if actor is not None:
                if select.any():
                    actor.mapper.SetInputData(bars(self.glyphs, select))
                actor.SetVisibility(bool(select.any()))
        self.labels = add_labels(self.plotter, self.glyphs, shown, self.size)
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
        Picture width and largest height; each picture's height follows the part's projected
        shape (:func:`correlate.report.camera.fit_camera`). [px]
    max_views : int
        Views besides the isometric one (at most).

    Returns
    -------
    Rendering
        Views with their cameras and visible gauges, and the gauges no view shows.
    """
    surface, note = model_surface(corr)
    glyphs = gauge_glyphs(corr, surface)
    pts = np.asarray(surface.points)
    normals = glyphs.normal
    queue: list[tuple[str, NDArray, NDArray]] = [("iso", iso_direction(normals),
                                                  np.arange(len(normals)))]
    for members in cluster_normals(normals)[:max_views]:
        queue.append(("group", unit(normals[members].sum(axis=0)), members))
    with vtk_errors_only():
        scene = _Scene(surface, glyphs, size[0], str(corr.study.length_unit))
        try:
            return _render_all(queue, scene, pts, normals, folder, size, max_views, note, surface)
        finally:
            scene.close()


def _render_all(queue: list[tuple[str, NDArray, NDArray]], scene: _Scene, pts: NDArray,
                normals: NDArray, folder: Path, size: tuple[int, int], max_views: int, note: str,
                surface: Any) -> Rendering:
    """Work through the queue of view directions (see :func:`render_views`)."""
    glyphs = scene.glyphs
    seen = np.zeros(len(glyphs.gauges), dtype=bool)
    seen_faces = np.zeros(len(glyphs.gauges), dtype=bool)
    views: list[View] = []
    retried = False
    while queue:
        kind, w, members = queue.pop(0)
        if kind != "iso" and len(views) > max_views:
            break
        camera, picture = fit_camera(pts, w, size[0], size[1])
        scene.look(camera, picture)
        shown = scene.visible()
        # a view is kept for a gauge of its own group no earlier face view showed
        wanted = shown[members] & ~seen_faces[members] if kind == "group" else shown & ~seen
        if kind != "iso" and not wanted.any():
            continue
        if kind != "iso":
            seen_faces |= shown
        position, focal, up, scale = camera
        name = "iso" if kind == "iso" else str(len(views))
        title = "isometric view" if kind == "iso" else f"view {name}: {direction_name(w)}"
        title += f" - {int(shown.sum())} of {len(shown)} gauge grids visible"  # a bridge: its arms
        file = f"view_{name}.png"
        scene.save(folder / file, title, shown)
        seen |= shown
        views.append(View(
            name=name, file=file, title=title, position=tuple(map(float, position)),
            focal_point=tuple(map(float, focal)), view_up=tuple(map(float, up)),
            parallel_scale=float(scale), size=picture,
            visible=tuple(g for g, s in zip(glyphs.gauges, shown, strict=True) if s)))
        if not queue and not retried:
            retried = True
            queue = [("single", normals[i], np.array([i])) for i in np.flatnonzero(~seen)]
    not_visible = tuple(g for g, s in zip(glyphs.gauges, seen, strict=True) if not s)
    return Rendering(views=tuple(views), not_visible=not_visible, glyphs=glyphs, surface=surface,
                     note=note)
