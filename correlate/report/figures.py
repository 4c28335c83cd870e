"""Report figures (matplotlib, Agg canvas): scatter, load-strain curves and rosette directions.

Stage: report. In: numpy arrays taken from a :class:`~correlate.comparison.correlation.Correlation` by
:mod:`correlate.report.document`. Out: PNG files. Figures are drawn on their own ``Figure`` with an
Agg canvas, so no global pyplot state or display is touched.

Strain is in microstrain, tension positive; the difference is measured - predicted.
"""

from __future__ import annotations

import functools
import itertools
import math
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

import numpy as np
from numpy.typing import NDArray

from correlate.comparison.criteria import allowed_difference

DPI = 110
MEASURED = "#1f4e99"        # measured readings
UNLOADING = "#c25a00"       # measured readings while the load falls
PREDICTED = "#4d4d4d"       # model readings
REFERENCE = "#e08a00"       # the reference step in the scatter
FLAGGED = "#9a9a9a"
FIT = "#b2182b"
PER_FIGURE = 8              # load-strain panels per figure (4 x 2: under half a printed page)
TITLE_CHARS = 28


F = TypeVar("F", bound=Callable[..., Any])


def _quiet(func: F) -> F:
    """Drop matplotlib's warning for a character its font lacks (ids in any script): the
    character shows as a box, which is all that can be done without shipping fonts."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="Glyph .* missing from font",
                                    category=UserWarning)
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def plain(text: str) -> str:
    """Text for matplotlib: a literal '$' would start math mode."""
    return str(text).replace("$", r"\$")


def short(text: str, chars: int = TITLE_CHARS) -> str:
    """Shorten a long id for a figure label."""
    text = str(text)
    return text if len(text) <= chars else text[: chars - 3] + "..."


def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path: Path) -> Path:
    fig.savefig(path, dpi=DPI, facecolor="white")
    return path


def band_lines(x: NDArray[np.float64], relative: float, absolute_ue: float) -> tuple[NDArray, NDArray]:
    """Lower and upper tolerance lines around measured = predicted.

    The allowed difference is the study's pass rule (:func:`allowed_difference`).
    """
    allowed = allowed_difference(x, relative, absolute_ue)
    return x - allowed, x + allowed


@_quiet
def plot_scatter(measured: NDArray, predicted: NDArray, evaluated: NDArray[np.bool_],
                 flagged: NDArray[np.bool_], ref: int, *, fit: dict, relative: float,
                 absolute_ue: float, path: Path, ref_label: str = "reference step",
                 names: list[str] | None = None, annotate: int = 5) -> Path:
    """Measured against predicted with the 1:1 line, the fit and the tolerance band.

    Parameters
    ----------
    measured, predicted : ndarray, shape (s, g)
        Readings per step and gauge. [ue]
    evaluated : ndarray of bool, shape (s, g)
        Healthy pairs that count for the criteria and the fit.
    flagged : ndarray of bool, shape (s, g)
        Pairs removed by a flag or an exclusion (drawn grey, not in the fit).
    ref : int
        Row of the reference step (highlighted).
    fit : dict
        ``slope``, ``intercept`` and ``slope_origin`` of the fit over the evaluated pairs.
    relative, absolute_ue : float
        The criteria: allowed |difference| = max(relative * |predicted|, absolute_ue).
    path : Path
        PNG file to write.
    names : list of str, optional
        Gauge ids; the ``annotate`` largest differences at the reference step are labelled.
    """
    fig = _figure(8.0, 8.6)
    ax = fig.add_subplot(1, 1, 1)
    other = evaluated.copy()
    other[ref] = False
    pts = [predicted[evaluated | flagged], measured[evaluated | flagged]]
    values = np.concatenate([np.ravel(p) for p in pts] + [[0.0]])
    values = values[np.isfinite(values)]
    hi = float(np.max(np.abs(values))) if len(values) else 1.0
    hi = hi * 1.08 if hi > 0 else 1.0
    x = np.linspace(-hi, hi, 401)
    x = np.sort(np.r_[x, [-absolute_ue / relative, absolute_ue / relative] if relative > 0 else []])
    low, high = band_lines(x, relative, absolute_ue)
    ax.fill_between(x, low, high, color="#d9d9d9", alpha=0.45, lw=0, zorder=0)
    ax.plot(x, high, color="#7f7f7f", lw=1.0, ls="--", zorder=1,
            label=f"tolerance: max({relative:.0%} of |predicted|, {absolute_ue:g} ue)")
    ax.plot(x, low, color="#7f7f7f", lw=1.0, ls="--", zorder=1)
    ax.plot([-hi, hi], [-hi, hi], color="black", lw=1.1, zorder=2, label="measured = predicted")
    slope, intercept = fit.get("slope"), fit.get("intercept")
    if slope is not None and intercept is not None and np.isfinite([slope, intercept]).all():
        ax.plot(x, intercept + slope * x, color=FIT, lw=1.5, zorder=3,
                label=f"fit: {slope:.3f} x predicted {intercept:+.1f} ue")
    k = fit.get("slope_origin")
    if k is not None and np.isfinite(k):
        ax.plot(x, k * x, color=FIT, lw=1.2, ls=":", zorder=3,
                label=f"ratio through the origin: {k:.3f}")
    if other.any():
        ax.scatter(predicted[other], measured[other], s=22, color=MEASURED, alpha=0.65, lw=0,
                   zorder=4, label="healthy pairs, all steps")
    if evaluated[ref].any():
        ax.scatter(predicted[ref][evaluated[ref]], measured[ref][evaluated[ref]], s=70,
                   marker="D", color=REFERENCE, edgecolor="black", lw=0.7, zorder=5,
                   label=ref_label)
    if flagged.any():
        ax.scatter(predicted[flagged], measured[flagged], s=40, marker="x", color=FLAGGED,
                   lw=1.4, zorder=4, label="flagged or excluded (not in the fit)")
    if names is not None and evaluated[ref].any():
        diff = np.where(evaluated[ref], np.abs(measured[ref] - predicted[ref]), -1.0)
        worst = [j for j in np.argsort(-diff)[:annotate] if diff[j] > absolute_ue]
        placed: list[tuple[float, float]] = []
        step = 2 * hi / 60          # about one line of text in data units
        for j in sorted(worst, key=lambda j: (predicted[ref, j], measured[ref, j])):
            x0, y0 = predicted[ref, j], measured[ref, j] - 1.6 * step
            while any(abs(x0 - a) < 6 * step and abs(y0 - b) < step for a, b in placed):
                y0 -= step
            placed.append((x0, y0))
            ax.annotate(plain(short(names[j], 18)), (predicted[ref, j], measured[ref, j]),
                        xytext=(x0 + 0.5 * step, y0), textcoords="data", fontsize=8.5,
                        color="#333333", zorder=6,
                        arrowprops={"arrowstyle": "-", "color": "#999999", "lw": 0.6})
    ax.set_xlim(-hi, hi)
    ax.set_ylim(-hi, hi)
    ax.set_aspect("equal")
    ax.axhline(0, color="#bbbbbb", lw=0.6, zorder=0)
    ax.axvline(0, color="#bbbbbb", lw=0.6, zorder=0)
    ax.grid(True, color="#eeeeee", lw=0.6)
    ax.set_xlabel("predicted strain [ue]")
    ax.set_ylabel("measured strain [ue]")
    ax.set_title("Measured against predicted strain", fontsize=12)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.09), ncol=2, fontsize=8.5,
              frameon=False)
    fig.tight_layout()
    return _save(fig, path)


@_quiet
def plot_load_strain(load: NDArray, load_label: str, direction: NDArray, sequence: NDArray,
                     measured: NDArray, predicted: NDArray, healthy: NDArray[np.bool_],
                     flagged: NDArray[np.bool_], gauges: list[str], titles: list[str],
                     folder: Path, *, per_figure: int = PER_FIGURE,
                     stem: str = "load_strain", steps_axis: bool = False) -> list[Path]:
    """Small multiples of strain against load, measured and predicted, one panel per gauge.

    Parameters
    ----------
    load : ndarray, shape (s,)
        The horizontal coordinate of each step: a tared load, a combined load parameter, or the
        position of the step in the test (``steps_axis``).
    direction : ndarray of int, shape (s,)
        +1 loading, -1 unloading, 0 neither (see :func:`correlate.measurement.health.load_direction`).
    sequence : ndarray, shape (s,)
        Load sequence of each step; each sequence is drawn as its own path in step order.
    measured, predicted : ndarray, shape (s, g)
        Readings [ue]; a NaN predicted value (no model reading) leaves a gap in its line.
    healthy : ndarray of bool, shape (s, g)
        Measured points drawn on the path (evaluated, tare and zero-load rows).
    flagged : ndarray of bool, shape (s, g)
        Measured points removed by a flag (grey crosses).
    gauges, titles : list of str
        Gauge ids and the panel titles.
    folder : Path
        Where ``load_strain_1.png``, ``load_strain_2.png``, ... are written.
    steps_axis : bool
        The horizontal axis counts steps: whole-number ticks and a dotted line where a new load
        sequence starts.

    Returns
    -------
    list of Path
        The files written, in gauge order.
    """
    from matplotlib.lines import Line2D

    files = []
    n = len(gauges)
    starts = [float(load[i]) for i in range(1, len(sequence)) if sequence[i] != sequence[i - 1]]
    for f, first in enumerate(range(0, n, per_figure), start=1):
        idx = list(range(first, min(first + per_figure, n)))
        cols = min(4, len(idx))
        rows = math.ceil(len(idx) / cols)
        width, height = 3.2 * cols + 0.7, 2.45 * rows + 1.0
        fig = _figure(width, height)
        # fixed margins in inches: tight_layout costs seconds on a 4 x 4 grid
        fig.subplots_adjust(left=0.75 / width, right=1 - 0.15 / width, bottom=0.55 / height,
                            top=1 - 0.65 / height, wspace=0.32, hspace=0.5)
        axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
        for k, ax in enumerate(axes.ravel()):
            if k >= len(idx):
                ax.set_visible(False)
                continue
            draw_load_panel(ax, idx[k], load, direction, sequence, measured, predicted, healthy,
                            flagged)
            if steps_axis:
                for x0 in starts:
                    ax.axvline(x0 - 0.5, color="#999999", lw=0.8, ls=":", zorder=1)
                ax.xaxis.get_major_locator().set_params(integer=True)
            ax.set_title(plain(titles[idx[k]]), fontsize=9.5, loc="left")
            if k % cols == 0:
                ax.set_ylabel("strain [ue]", fontsize=8.5)
            if k >= len(idx) - cols:
                ax.set_xlabel(plain(load_label), fontsize=8.5)
                ax.xaxis.set_tick_params(labelbottom=True)
        handles = [
            Line2D([], [], color=MEASURED, marker="o", lw=1.3, ms=4.5, label="measured, loading"),
            Line2D([], [], color=UNLOADING, marker="s", mfc="white", lw=1.3, ls="--", ms=6.5,
                   label="measured, unloading"),
            Line2D([], [], color=PREDICTED, marker=".", lw=1.2, label="predicted"),
            Line2D([], [], color=FLAGGED, marker="x", ls="none", mew=1.4,
                   label="flagged or excluded reading")]
        fig.legend(handles=handles, loc="upper center", ncol=4, fontsize=9, frameon=False)
        files.append(_save(fig, folder / f"{stem}_{f}.png"))
    return files


@_quiet
def plot_load_history(steps: NDArray, loads: NDArray, names: list[str], sequence: NDArray,
                      path: Path, *, ylabel: str) -> Path:
    """Each load against the step position: which load moves in which part of the test.

    Parameters
    ----------
    steps : ndarray, shape (s,)
        Position of each step in the test (the horizontal axis of the load-strain curves).
    loads : ndarray, shape (s, L)
        Each load as plotted (e.g. tared load / reference: the factor of its FE case).
    names : list of str
        Legend entry of each load.
    sequence : ndarray, shape (s,)
        Load sequence of each step; a dotted line marks where a new one starts.
    path : Path
        PNG file to write.
    """
    fig = _figure(13.5, 2.6)
    ax = fig.add_subplot(1, 1, 1)
    colours = ["#1f4e99", "#c25a00", "#2e7d32", "#7b1fa2", "#5d4037", "#00838f"]
    for j, name in enumerate(names):
        for seq in np.unique(sequence):
            rows = np.flatnonzero(sequence == seq)
            ax.plot(steps[rows], loads[rows, j], color=colours[j % len(colours)], lw=1.6,
                    marker="o", ms=3.5, label=plain(name) if seq == sequence[0] else None)
    for i in range(1, len(sequence)):
        if sequence[i] != sequence[i - 1]:
            ax.axvline(steps[i] - 0.5, color="#999999", lw=0.8, ls=":")
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.grid(True, color="#eeeeee", lw=0.6)
    ax.tick_params(labelsize=8)
    ax.set_xlabel("step in test order (1 = first row of the readings)", fontsize=8.5)
    ax.set_ylabel(plain(ylabel), fontsize=8.5)
    ax.set_title("Load history", fontsize=10, loc="left", pad=4)
    ax.legend(loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=min(len(names), 6),
              fontsize=8.5, frameon=False)
    fig.subplots_adjust(left=0.06, right=0.98, bottom=0.2, top=0.84)
    return _save(fig, path)


def _paths(x: NDArray, y: NDArray, pairs: list[tuple[int, int]]) -> tuple[NDArray, NDArray]:
    """Separate two-point segments as one polyline broken by NaN (one artist, fast to draw)."""
    if not pairs:
        return np.array([]), np.array([])
    a, b = np.array(pairs).T
    nan = np.full(len(a), np.nan)
    return np.c_[x[a], x[b], nan].ravel(), np.c_[y[a], y[b], nan].ravel()


def draw_load_panel(ax, j: int, load: NDArray, direction: NDArray, sequence: NDArray,
                    measured: NDArray, predicted: NDArray, healthy: NDArray,
                    flagged: NDArray) -> None:
    """One gauge on ``ax``: predicted path, measured loading and unloading paths, flagged points
    (the arguments of :func:`plot_load_strain`, ``j`` the gauge's column)."""
    m = measured[:, j]
    up_pairs, down_pairs = [], []
    for seq in np.unique(sequence):
        rows_s = np.flatnonzero(sequence == seq)
        ax.plot(load[rows_s], predicted[rows_s, j], color=PREDICTED, lw=1.2, marker=".", ms=4,
                zorder=2)
        ok = rows_s[healthy[rows_s, j]]
        for a, b in itertools.pairwise(ok):
            (down_pairs if direction[b] < 0 else up_pairs).append((a, b))
    ax.plot(*_paths(load, m, down_pairs), color=UNLOADING, lw=1.3, ls="--", zorder=3)
    ax.plot(*_paths(load, m, up_pairs), color=MEASURED, lw=1.3, zorder=4)
    ok = healthy[:, j]
    down = ok & (direction < 0)
    # unloading: larger open squares under the loading dots, so both show where they coincide
    ax.plot(load[down], m[down], ls="none", marker="s", ms=6.5, color=UNLOADING, mfc="white",
            mew=1.2, zorder=3)
    ax.plot(load[ok & ~down], m[ok & ~down], ls="none", marker="o", ms=4.5, color=MEASURED,
            zorder=5)
    bad = flagged[:, j]
    if bad.any():
        ax.plot(load[bad], m[bad], ls="none", marker="x", ms=6, color=FLAGGED, mew=1.4, zorder=4)
    ax.grid(True, color="#eeeeee", lw=0.6)
    ax.tick_params(labelsize=8)
    ax.locator_params(nbins=5)
    ax.axhline(0, color="#cccccc", lw=0.6, zorder=1)


def _cross(ax, angle_deg: float, e1: float, e2: float, scale: float, color: str,
           width: float) -> None:
    """Principal axes as a cross: arms along e1 and e2, length |e| / scale; dashed if negative."""
    if not np.isfinite(angle_deg):
        r = max(abs(e1), abs(e2)) / scale
        t = np.linspace(0, 2 * np.pi, 90)
        ax.plot(r * np.cos(t), r * np.sin(t), color=color, lw=width, ls=":" if e1 < 0 else "-")
        return
    a = np.radians(angle_deg)
    for value, phi in ((e1, a), (e2, a + np.pi / 2)):
        r = abs(value) / scale
        dx, dy = r * np.cos(phi), r * np.sin(phi)
        ax.plot([-dx, dx], [-dy, dy], color=color, lw=width, ls="-" if value >= 0 else "--",
                solid_capstyle="butt")


@_quiet
def plot_rosettes(rosettes: list[dict], path: Path) -> Path:
    """Principal directions of each rosette at the reference step, measured against predicted.

    Parameters
    ----------
    rosettes : list of dict
        One per rosette: ``name``, ``grid_angles`` (deg from grid A, counterclockwise about the
        outward normal), and ``measured`` / ``predicted`` each None or a dict with ``e1``, ``e2``
        [ue] and ``angle`` [deg from grid A to e1; NaN when e1 - e2 is too small].
    path : Path
        PNG file to write.
    """
    from matplotlib.lines import Line2D

    n = max(len(rosettes), 1)
    cols = min(4, n)
    rows = math.ceil(n / cols)
    legend_rows = 1 if cols >= 3 else 2
    fig = _figure(max(3.1 * cols + 0.4, 5.2), 3.45 * rows + 0.5 + 0.3 * legend_rows)
    axes = fig.subplots(rows, cols, squeeze=False)
    for k, ax in enumerate(axes.ravel()):
        ax.set_aspect("equal")
        ax.set_xlim(-1.25, 1.25)
        ax.set_ylim(-1.25, 1.25)
        ax.set_xticks([])
        ax.set_yticks([])
        if k >= len(rosettes):
            ax.set_visible(False)
            continue
        r = rosettes[k]
        for letter, ang in zip("ABCDEFGH", r["grid_angles"], strict=False):
            a = np.radians(ang)
            ax.plot([0, 1.1 * np.cos(a)], [0, 1.1 * np.sin(a)], color="#c8c8c8", lw=3, zorder=0)
            ax.text(1.18 * np.cos(a), 1.18 * np.sin(a), letter, ha="center", va="center",
                    fontsize=8, color="#888888")
        found = [abs(r[s][e]) for s in ("measured", "predicted") if r[s] for e in ("e1", "e2")
                 if np.isfinite(r[s][e])]
        scale = max(found) if found and max(found) > 0 else 1.0
        lines = []
        for source, color, width in (("predicted", REFERENCE, 4.0), ("measured", MEASURED, 1.8)):
            v = r[source]
            if v is None:
                lines.append(f"{source}: not evaluated")
                continue
            _cross(ax, v["angle"], v["e1"], v["e2"], scale, color, width)
            ang = "undefined" if not np.isfinite(v["angle"]) else f"{v['angle']:.1f} deg"
            lines.append(f"{source}: e1 {v['e1']:.0f}, e2 {v['e2']:.0f} ue, {ang}")
        ax.set_title(plain(short(r["name"])), fontsize=10, loc="left")
        ax.set_xlabel("\n".join(lines), fontsize=7.8)
    handles = [Line2D([], [], color=MEASURED, lw=1.8, label="measured"),
               Line2D([], [], color=REFERENCE, lw=4.0, label="predicted"),
               Line2D([], [], color="black", lw=1.2, ls="--", label="compressive arm"),
               Line2D([], [], color="#c8c8c8", lw=3, label="grids A, B, C")]
    fig.legend(handles=handles, loc="upper center", ncol=4 // legend_rows, fontsize=9,
               frameon=False)
    fig.tight_layout(rect=(0, 0, 1, 1 - (0.2 + 0.25 * legend_rows) / fig.get_figheight()))
    return _save(fig, path)
