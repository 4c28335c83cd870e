"""The report's full-field (DIC) section: maps on the model, a histogram, statistics per frame.

Stage: report. In: a :class:`~correlate.fullfield.comparison.FullFieldResult`, the run's
:class:`~correlate.comparison.correlation.Correlation` (for the model surface) and the output
folder. Out: the context of the ``fullfield.html`` template block (None without ``[fullfield]``)
and three pictures: ``fullfield_maps.png`` (for the reference frame, the measured and the
levelled model equivalent strain and their difference, side by side on the model surface, one
camera; measured and model share one colour scale, the difference has its own, symmetric about
zero, and each map's title says which: on one scale with the others a difference of a few
percent of the field would show as one flat colour), ``fullfield_histogram.png`` (the differences of every component at the reference frame)
and ``fullfield_frames.png`` (slope with its blocked interval and RMS difference against frame).
It reads results and draws them; it computes no physics.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

import correlate.report.figures as figures
from correlate.comparison.correlation import Correlation
from correlate.fullfield.comparison import COMPONENTS, FullFieldResult
from correlate.report.tables import num

MAP_SIZE = (1800, 620)
QUANTITY = "eeq"   # the maps show the equivalent strain, the DIC's usual summary quantity


def render_maps(corr: Correlation, result: FullFieldResult, path: Path) -> Path:
    """Measured, levelled model and difference of the equivalent strain on the model surface."""
    import pyvista as pv

    from correlate.report.scene import model_surface

    ref = result.frame(result.reference_frame)
    xyz = ref[["x", "y", "z"]].to_numpy(dtype=float)
    values = {"measured": ref[f"{QUANTITY}_measured_ue"].to_numpy(dtype=float),
              "model, levelled": ref[f"{QUANTITY}_levelled_ue"].to_numpy(dtype=float),
              "measured - model": ref[f"{QUANTITY}_diff_ue"].to_numpy(dtype=float)}
    both = np.concatenate([values["measured"], values["model, levelled"]])
    span = (float(np.nanmin(both)), float(np.nanmax(both)))
    d = float(np.nanmax(np.abs(values["measured - model"]))) or 1.0
    surface, _ = model_surface(corr)
    normal = np.asarray(corr.model.locator.project(xyz).normal).mean(axis=0)
    normal /= np.linalg.norm(normal) or 1.0
    centre = xyz.mean(axis=0)
    size = float(np.ptp(xyz, axis=0).max()) or 1.0
    plotter = pv.Plotter(shape=(1, 3), off_screen=True, window_size=MAP_SIZE, border=False)
    for i, (title, v) in enumerate(values.items()):
        plotter.subplot(0, i)
        plotter.add_mesh(surface, color="#d0d0d0", smooth_shading=False)
        cloud = pv.PolyData(xyz + 0.002 * size * normal)
        cloud[title] = v
        clim = span if i < 2 else (-d, d)
        cmap = "viridis" if i < 2 else "coolwarm"
        plotter.add_mesh(cloud, scalars=title, clim=clim, cmap=cmap, point_size=6,
                         render_points_as_spheres=True, nan_opacity=0.0,
                         scalar_bar_args={"title": f"{title} [ue]", "vertical": False,
                                          "position_x": 0.15, "position_y": 0.04, "width": 0.7,
                                          "height": 0.08, "fmt": "%.0f" if i < 2 else "%.3g"})
        scale = ("one colour scale with the model" if i == 0 else
                 "one colour scale with the measured" if i == 1 else
                 "its OWN colour scale, symmetric about 0")
        plotter.add_text(figures.plain(f"{title}, equivalent strain\n({scale})"), font_size=10)
        plotter.camera.focal_point = centre
        plotter.camera.position = centre + 2.2 * size * normal
        plotter.camera.up = _up(normal)
    plotter.screenshot(str(path))
    plotter.close()
    return path


def _up(normal: np.ndarray) -> tuple[float, float, float]:
    """A view-up direction across the normal: the model's z, or y when z is the normal."""
    up = np.array([0.0, 0.0, 1.0]) if abs(normal[2]) < 0.9 else np.array([0.0, 1.0, 0.0])
    return tuple(float(u) for u in up)  # type: ignore[return-value]


@figures._quiet
def plot_histogram(result: FullFieldResult, path: Path) -> Path:
    """Histogram of measured - levelled model per in-plane component at the reference frame."""
    ref = result.frame(result.reference_frame)
    fig = figures._figure(7.5, 4.2)
    ax = fig.add_subplot(1, 1, 1)
    for comp in ("exx", "eyy", "exy", "eeq"):
        d = ref[f"{comp}_diff_ue"].dropna().to_numpy(dtype=float)
        if len(d):
            ax.hist(d, bins=40, histtype="step", lw=1.3, label=comp)
    ax.axvline(0.0, color="#444444", lw=0.8)
    ax.set_xlabel("measured - levelled model [ue]")
    ax.set_ylabel("points")
    ax.set_title(figures.plain(f"Differences at frame {result.reference_frame}"), fontsize=10)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return figures._save(fig, path)


@figures._quiet
def plot_frames(stats: pd.DataFrame, path: Path) -> Path:
    """Slope (with its blocked interval) and RMS difference of the equivalent strain per frame."""
    s = stats[stats["component"] == QUANTITY].reset_index(drop=True)
    fig = figures._figure(7.5, 4.6)
    ax = fig.add_subplot(2, 1, 1)
    x = np.arange(len(s))
    if "slope_origin" in s:
        slope = s["slope_origin"].to_numpy(dtype=float)
        err = np.vstack([slope - s["slope_ci_low"].to_numpy(dtype=float),
                         s["slope_ci_high"].to_numpy(dtype=float) - slope])
        ax.errorbar(x, slope, yerr=err, fmt="o", ms=4, capsize=3, color=figures.PREDICTED)
    ax.axhline(1.0, color="#888888", lw=0.8)
    ax.ticklabel_format(axis="y", useOffset=False)
    ax.set_ylabel("measured / model")
    ax.set_xticks(x, [])
    ax2 = fig.add_subplot(2, 1, 2)
    if "rms_diff_ue" in s:
        ax2.plot(x, s["rms_diff_ue"].to_numpy(dtype=float), "o-", ms=4, color="#c25a00")
    ax2.set_ylabel("RMS difference [ue]")
    ax2.set_xticks(x, [figures.plain(figures.short(str(f), 10)) for f in s["frame"]],
                   rotation=60 if len(s) > 8 else 0, fontsize=8)
    ax2.set_xlabel("frame")
    fig.tight_layout()
    return figures._save(fig, path)


def _rows(stats: pd.DataFrame, frame: str) -> list[dict[str, str]]:
    rows = []
    for _, r in stats[stats["frame"] == frame].iterrows():
        rows.append({"component": str(r["component"]), "points": str(int(r["points"])),
                     "slope": num(r.get("slope_origin"), ".3f"),
                     "ci": f"{num(r.get('slope_ci_low'), '.3f')} to "
                           f"{num(r.get('slope_ci_high'), '.3f')}",
                     "ccc": num(r.get("ccc"), ".3f"), "rms": num(r.get("rms_diff_ue"), ".1f"),
                     "p05": num(r.get("p05_diff_ue"), ".1f"),
                     "p95": num(r.get("p95_diff_ue"), ".1f"),
                     "within": num(r.get("share_within"), ".0%")})
    return rows


def fullfield_context(corr: Correlation, result: FullFieldResult | None, folder: Path,
                      as_uri: Callable[[Path], dict[str, Any]]) -> dict[str, Any] | None:
    """The template's ``fullfield`` block, or None when the run has no full-field comparison."""
    if result is None:
        return None
    s = result.summary
    reg = s["registration"]
    hot = next((h for h in s["hot_spots"] if h.get("frame") == result.reference_frame), {})
    pictures = {"histogram": as_uri(plot_histogram(result, folder / "fullfield_histogram.png")),
                "frames": as_uri(plot_frames(result.stats, folder / "fullfield_frames.png"))}
    try:
        pictures["maps"] = as_uri(render_maps(corr, result, folder / "fullfield_maps.png"))
        note = ""
    except (RuntimeError, ValueError, OSError) as exc:   # no render window: say so, keep the rest
        note = f"The maps could not be drawn here ({str(exc).splitlines()[0]})."
    return {
        "pictures": pictures, "note": note, "frame": result.reference_frame,
        "warnings": s.get("warnings", []),
        "frames": len(result.frames), "method": reg["method"],
        "rotation": num(reg["rotation_deg"], ".3f"),
        "translation": ", ".join(num(v, ".3f") for v in np.asarray(reg["matrix"])[:3, 3]),
        "landmark_rms": num(reg["landmark_rms"], ".3g"), "rms": num(reg["rms_distance"], ".3g"),
        "p95": num(reg["p95_distance"], ".3g"), "read": reg["points_read"],
        "kept": reg["points_kept"], "snap": reg["dropped_beyond_snap_tol"],
        "part_edges": reg["dropped_near_part_edges"],
        "boundary": reg["dropped_near_region_boundary"], "levelling": s["levelling"],
        "levelling_rms": num(s["levelling_effect_ue"]["rms"], ".1f"),
        "levelling_max": num(s["levelling_effect_ue"]["max"], ".1f"),
        "block": num(s["block_size"], ".3g"), "measure": s["measure"],
        "hot": {"measured": num(hot.get("measured_ue"), ".0f"),
                "model": num(hot.get("model_ue"), ".0f"),
                "distance": num(hot.get("distance"), ".3g")},
        "rows": _rows(result.stats, result.reference_frame), "components": list(COMPONENTS),
    }


__all__ = ["fullfield_context", "plot_frames", "plot_histogram", "render_maps"]
