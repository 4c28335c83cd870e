"""Load-strain curves for several loads: drawn against what moves, never with a vertical jump.

The study: the analytic two-case block of ``tests/builders.py`` (case 'pull' referenced to
P_kN = 10, case 'side' to S_kN = 2), its readings equal to the analytic model readings. In the
two-actuator test the second load rises while the first is held at 10 kN (steps 3 to 5); in the
proportional test both rise together (S = P / 5 at every step).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from builders import block_readings, default_gauges, write_block_study

# P_kN, S_kN per step: pull to 10, then side to 2 with pull held, then both down
HELD = ((0.0, 0.0), (5.0, 0.0), (10.0, 0.0), (10.0, 1.0), (10.0, 2.0), (5.0, 1.0), (0.0, 0.0))
TOGETHER = ((0.0, 0.0), (2.5, 0.5), (5.0, 1.0), (10.0, 2.0), (5.0, 1.0), (0.0, 0.0))


def _correlate(folder: Path, loads):
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study

    gauges = default_gauges().iloc[[0, 3, 6]].reset_index(drop=True)
    study = write_block_study(folder, readings_rows=block_readings(gauges, loads=loads),
                              gauges=gauges, ctype="hexahedron")
    return correlate_study(read_study(study))


def _drawn_segments(corr, axis):
    """Every straight segment (x0, y0, x1, y1) the report draws in each gauge's panel."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from correlate.measurement.health import load_direction
    from correlate.report.figures import draw_load_panel

    steps = corr.steps
    direction = load_direction(steps.loads, steps.sequence, tol=corr.study.zero_tol)
    healthy = np.isfinite(corr.measured)
    segments = []
    for j in range(len(corr.gauges)):
        fig = Figure()
        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        draw_load_panel(ax, j, axis.values, direction, steps.sequence, corr.measured,
                        corr.predicted, healthy, ~healthy)
        for line in ax.get_lines():
            x, y = (np.asarray(v, dtype=float) for v in line.get_data())
            if line.get_linestyle() in ("None", "none", ""):
                continue
            for k in range(len(x) - 1):
                if np.isfinite([x[k], y[k], x[k + 1], y[k + 1]]).all():
                    segments.append((x[k], y[k], x[k + 1], y[k + 1]))
    return segments


def test_held_first_load_draws_no_vertical_jump(tmp_path: Path) -> None:
    from correlate.report.document import load_axis

    corr = _correlate(tmp_path, HELD)
    axis = load_axis(corr)
    # the loads do not rise together: the curves run through the steps in test order
    assert axis.steps
    np.testing.assert_array_equal(axis.values, np.arange(1.0, len(HELD) + 1.0))
    segments = _drawn_segments(corr, axis)
    assert segments
    # the failure this guards against: against the first load alone, steps 3 to 5 sit at 10 kN
    # while the strain changes (side load rising), i.e. vertical segments
    p = corr.steps.loads[:, corr.steps.load_names.index("P_kN")]
    assert p[2] == p[3] == p[4]
    assert np.ptp(corr.predicted[2:5], axis=0).max() > 1.0
    # now no segment is vertical: x moves on every segment (0.5 step at least)
    assert min(abs(x1 - x0) for x0, _, x1, _ in segments) >= 0.5


def test_loads_rising_together_use_the_first_case_factor(tmp_path: Path) -> None:
    from correlate.report.document import load_axis

    corr = _correlate(tmp_path, TOGETHER)
    axis = load_axis(corr)
    assert not axis.steps
    assert "pull" in axis.label
    # by hand: the factor of case 'pull' is the tared P_kN over its reference of 10 (the first
    # step is the tare, at zero); exact division
    expected = np.array([p for p, _ in TOGETHER]) / 10.0
    np.testing.assert_allclose(axis.values, expected, rtol=1e-12, atol=0)


def test_report_draws_the_load_history_for_a_held_load(tmp_path: Path) -> None:
    from correlate.report import write_report

    corr = _correlate(tmp_path, HELD)
    out = tmp_path / "out"
    out.mkdir()
    with pytest.MonkeyPatch.context() as mp:
        import correlate.report.document as document

        # the 3D views are tested elsewhere; a machine without OpenGL also gets this report
        mp.setattr(document, "_render", lambda corr, folder: (None, "views left out"))
        write_report(corr, out)
    html = (out / "report.html").read_text(encoding="utf-8")
    assert (out / "load_history.png").exists()
    assert "step in test order" in html
    assert "the loads do not rise together" in html
