"""Rosette principal strains with their uncertainty, propagated from the grids' budgets.

The 0/45/90 rosette of tests/builders.py (grids without transverse sensitivity here, so that the
reduction is the handbook closed form: Dally & Riley, Experimental Stress Analysis; Window, Strain
Gauge Technology) on the analytic block. References: the GUM's law of propagation (JCGM 100:2008
eq. 13) with the closed form differentiated by hand, independent terms in quadrature and the
gauge-factor lot and the model inputs fully correlated between the grids (JCGM 100:2008 5.2.2),
and a Monte Carlo propagation of the same distributions (JCGM 101:2008). Invented scenario.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from builders import block_readings, default_gauges, write_block_study
from test_uncertainty import principal_jacobian_by_hand, principal_rectangular

from correlate.commands.cli import main

GF, DAQ, LOAD, UE = 0.006, 2.5, 0.004, 0.02
TOML = f"""
[uncertainty]
gauge_factor = {GF}
daq_ue = {DAQ}
load = {LOAD}
[[uncertainty.input]]
name = "E"
relative = {UE}
exponent = -1.0
"""


@pytest.fixture(scope="module")
def rosette_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("rosette")
    gauges = default_gauges().iloc[[0, 10, 11, 12]].reset_index(drop=True)
    gauges.loc[gauges["rosette"] == "R", "kt"] = 0.0
    rows = block_readings(gauges)
    names = list(gauges["gauge"])
    rows[names] = rows[names] * 1.04 + np.array([0.0, 6.0, -4.0, 3.0])  # invented test
    study = write_block_study(folder, readings_rows=rows, gauges=gauges, ctype="hexahedron",
                              extra_toml=TOML)
    assert main(["--quiet", "run", str(study), "--out", str(folder / "out"), "--no-report"]) == 0
    return (pd.read_csv(folder / "out" / "rosettes.csv"),
            pd.read_csv(folder / "out" / "gauges.csv"))


def _grids(gauge_rows: pd.DataFrame, step: int, column: str) -> np.ndarray:
    at = gauge_rows[gauge_rows["step"] == step].set_index("gauge")
    return at.loc[["R-a", "R-b", "R-c"], column].to_numpy(dtype=float)


def test_measured_side_follows_the_gum_with_the_shared_lot(rosette_run):
    ros, rows = rosette_run
    for _, r in ros[ros["source"] == "measured"].iterrows():
        x = _grids(rows, r["step"], "measured_ue")
        u_d = _grids(rows, r["step"], "u_d_ue")
        own = np.sqrt(np.maximum(u_d**2 - (GF * x) ** 2, 0.0))  # the grids' independent part
        J = principal_jacobian_by_hand(*x)
        u = np.sqrt(J**2 @ own**2 + (J @ (GF * x)) ** 2)          # eq. 13, r = 1 for the lot
        # 0.003 ue: the CSVs keep 3 decimals; central differences are exact to 1e-8 here.
        np.testing.assert_allclose([r["u_e1_ue"], r["u_e2_ue"]], u, rtol=0, atol=3e-3)


def test_predicted_side_scales_with_the_shared_inputs(rosette_run):
    ros, _ = rosette_run
    pred = ros[ros["source"] == "predicted"]
    # Load and modulus move every grid by the same relative amount, so the principal strains
    # move with them: u = |e| sqrt(load^2 + u_E^2) (homogeneity of the reduction, degree 1).
    for col in ("e1", "e2"):
        np.testing.assert_allclose(pred[f"u_{col}_ue"], pred[f"{col}_ue"].abs()
                                   * np.hypot(LOAD, UE), rtol=0, atol=3e-3)  # 3 decimals


def test_measured_side_agrees_with_monte_carlo(rosette_run):
    # JCGM 101:2008: draw the lot's error once per trial for all three grids and the
    # acquisition error per grid; M = 200,000, tolerance 4 standard errors of a standard
    # deviation (0.63 %) plus 0.2 % for the linearisation of the square root near these states.
    ros, rows = rosette_run
    r = ros[ros["source"] == "measured"].sort_values("e1_ue").iloc[-1]
    x = _grids(rows, r["step"], "measured_ue")
    rng = np.random.default_rng(13)
    M = 200_000
    samples = x * (1 + rng.normal(0, GF, (M, 1))) + rng.normal(0, DAQ, (M, 3))
    e = principal_rectangular(samples)
    tol = 4.0 / np.sqrt(2.0 * (M - 1)) + 2e-3
    np.testing.assert_allclose(e.std(axis=0, ddof=1), [r["u_e1_ue"], r["u_e2_ue"]], rtol=tol,
                               atol=0)
