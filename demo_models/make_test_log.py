"""Generate the invented test log of the demo campaign: seeded, so the log is reproducible.

The "truth" is the shipped FE model with a modulus 0.95 times the analysis value, so every true strain
is the model's divided by 0.95 and the expected measured/predicted ratio is 1/0.95 = 1.053. On top of
the truth come the faults real tests have: noise, zero offsets, a seating preload in the tare row,
slight hysteresis on unloading, and five invented channel faults (see FAULTS). The channels are
3-wire quarter bridges with invented lead resistances, read at an instrument gauge factor of 2.00
from gauges of an invented lot (gauge factor 2.05, thermal-output polynomial LOT) while the bracket
warms by 6 degC in each run (TEMPERATURE_C): the raw readings are made from the true strains by the
measurement chain run forward (correlate.measurement.chain.raw_from_true), so the study's
[[gauge_lot]], [thermal] and gauge-map wiring columns recover them. Nothing here describes a real
test.

Run:  python demo_models/make_test_log.py      (writes correlate/data/demo/readings.csv)
"""

from __future__ import annotations

import warnings
from pathlib import Path

import meshio
import numpy as np
import pandas as pd

from correlate.api import predict_readings
from correlate.core.errors import CorrelateWarning
from correlate.measurement.bridge import bridge_output
from correlate.measurement.chain import lead_wire_factor, raw_from_true

DEMO = Path(__file__).resolve().parent.parent / "correlate" / "data" / "demo"
SEED = 20261201
STIFFNESS = 0.95               # truth modulus / analysis modulus
NOISE_UE = 2.0                 # channel noise, standard deviation
OFFSET_UE = 300.0              # zero offsets, uniform +/- this
HYSTERESIS = 0.006             # unloading reads this share of the gauge's peak higher
PRELOAD = (0.4, 0.05)          # seating preload in the tare row: F_pull_kN, F_side_kN
# (F_pull_kN, F_side_kN) per step: load the pull, add the side load, unload in a different order
PROFILE = [PRELOAD, (2.5, 0.0), (5.0, 0.0), (7.5, 0.0), (10.0, 0.0), (10.0, 1.0), (10.0, 2.0),
           (7.5, 2.0), (5.0, 1.0), (2.5, 0.0), PRELOAD]
SEQUENCES = 2
REFERENCE = {"pull": 10.0, "side": 2.0}
# The invented faults: gauge id -> what happened on the rig.
FAULTS = {
    "reversed": "G07",          # bridge wired with reversed sign
    "offset": "G09",            # bonded 3 mm off its position, in the lightening hole's gradient
    "rotated": "G15",           # grid turned 90 degrees where |e1| >= 2 |e2|
    "dead": "G01",              # open channel reading a constant
    "drift": "G13",             # zero drifts through the test
}
OFFSET_MM = (3.0, 0.0)         # (along grid, across grid) of the offset gauge
DRIFT_UE_PER_STEP = 9.0
# The invented gauge lot (study.toml's [[gauge_lot]] says the same; the leads, wiring and the
# instrument's gauge factor are read from gauges.csv, written by build_model.py):
LOT = {"gauge_factor": 2.05, "gauge_factor_tc": 1.0, "reference_C": 24.0, "range_C": (-30.0, 120.0),
       "thermal_output": (40.0, -1.0, -0.02, 4.0e-5)}  # ue against degC, at GF 2.00
TEMPERATURE_C = ((21.0, 27.0), (30.0, 36.0))  # per run: the bracket warms in the hall (invented)
# The invented bending half bridge on the arm (gauges.csv HB1, HB2; study.toml's [[bridge]] says
# the same): read at factor 2 as the surface bending strain; its shunt calibration read 0.4 % low.
BRIDGE = {"name": "HB", "factor": 2.0, "shunt_gain": 0.996}


def model_readings(gauges: pd.DataFrame) -> pd.DataFrame:
    mesh = meshio.read(DEMO / "bracket.vtu")
    with warnings.catch_warnings():
        # the moved gauge sits on the bore, where its old direction leaves the surface plane
        warnings.simplefilter("ignore", CorrelateWarning)
        return _readings(mesh, gauges)


def _readings(mesh: meshio.Mesh, gauges: pd.DataFrame) -> pd.DataFrame:
    return predict_readings(mesh, gauges, {"pull": "E_pull", "side": "E_side"},
                            snap_tol=2.0, calibration_poisson=0.285).pivot(index="gauge", columns="case",
                                                values="predicted_ue")


def faulted_gauge_map(gauges: pd.DataFrame) -> pd.DataFrame:
    """The gauges as actually bonded: one moved, one turned 90 degrees in its surface."""
    real = gauges.copy()
    i = real.index[real["gauge"] == FAULTS["offset"]][0]
    d = real.loc[i, ["dir_x", "dir_y", "dir_z"]].to_numpy(float)
    d = d / np.linalg.norm(d)
    # moved along the grid; on a curved face the point is snapped back onto the surface
    real.loc[i, ["x", "y", "z"]] = real.loc[i, ["x", "y", "z"]].to_numpy(float) + OFFSET_MM[0] * d
    j = real.index[real["gauge"] == FAULTS["rotated"]][0]
    real.loc[j, ["dir_x", "dir_y", "dir_z"]] = _turned_90(real.loc[j])
    return real


def _turned_90(row: pd.Series) -> np.ndarray:
    """Grid direction turned 90 degrees about the surface normal at the gauge (from the mesh)."""
    from correlate.model_readings.locator import Locator, build_surface
    from correlate.readers.model import open_model

    src = open_model(DEMO / "bracket.vtu")
    loc = Locator(src.mesh, build_surface(src.mesh))
    sp = loc.project(np.array([row[["x", "y", "z"]].to_numpy(float)]))
    d = row[["dir_x", "dir_y", "dir_z"]].to_numpy(float)
    return np.cross(sp.normal[0], d / np.linalg.norm(d))


def make_log() -> pd.DataFrame:
    rng = np.random.default_rng(SEED)
    every = pd.read_csv(DEMO / "gauges.csv", dtype={"gauge": str, "rosette": str, "face": str,
                                                    "bridge": str, "lot": str, "wiring": str})
    arm = every["bridge"].fillna("") != ""
    gauges = every[~arm].reset_index(drop=True)   # the quarter-bridge channels
    names = list(gauges["gauge"])
    all_cases = model_readings(faulted_gauge_map(every)) / STIFFNESS
    truth_cases = all_cases.loc[names]
    profile = np.array(PROFILE * SEQUENCES)
    seq = np.repeat(np.arange(1, SEQUENCES + 1), len(PROFILE))
    f = np.c_[profile[:, 0] / REFERENCE["pull"], profile[:, 1] / REFERENCE["side"]]
    truth = f @ truth_cases[["pull", "side"]].to_numpy().T                     # (steps, gauges)
    peak = np.max(np.abs(truth), axis=0)
    size = np.hypot(f[:, 0], f[:, 1])
    unloading = np.r_[False, np.diff(size) < 0] & (np.r_[1, np.diff(seq)] == 0)
    data = truth + HYSTERESIS * peak * np.sign(truth) * unloading[:, None]
    data += rng.uniform(-OFFSET_UE, OFFSET_UE, len(names))                     # zero offsets
    data += rng.normal(0.0, NOISE_UE, data.shape)
    col = {g: k for k, g in enumerate(names)}
    data[:, col[FAULTS["drift"]]] += DRIFT_UE_PER_STEP * np.arange(len(profile))
    temperature = np.round(np.concatenate([np.linspace(*span, len(PROFILE))
                                           for span in TEMPERATURE_C]), 2)
    data = as_read(data, temperature, seq, gauges)
    data[:, col[FAULTS["reversed"]]] *= -1.0
    data[:, col[FAULTS["dead"]]] = -12.0 + rng.normal(0.0, 0.3, len(profile))
    log = pd.DataFrame(np.round(data, 1), columns=names)
    log[BRIDGE["name"]] = np.round(bridge_channel(f, all_cases, every[arm]), 1)
    log.insert(0, "temp_C", temperature)
    log.insert(0, "F_side_kN", profile[:, 1])
    log.insert(0, "F_pull_kN", profile[:, 0])
    log.insert(0, "time_s", 30 * np.arange(len(profile)))
    log.insert(0, "sequence", seq)
    log.insert(0, "step", np.arange(1, len(profile) + 1))
    return log


def bridge_channel(f: np.ndarray, cases: pd.DataFrame, arms: pd.DataFrame) -> np.ndarray:
    """What the invented bending half bridge's channel shows: (e1 - e2) / factor of its arms'
    true strains (the Wheatstone bridge relation, correlate.measurement.bridge.bridge_output;
    the preload of the tare row included), times the channel's shunt gain (the channel was set
    to the grids' gauge factor, so no gauge-factor ratio), plus a zero offset and noise; a
    random stream of its own (seed + 1), so the quarter-bridge channels are as before."""
    rng = np.random.default_rng(SEED + 1)
    arm_of = dict(zip(arms["arm"].astype(int), arms["gauge"], strict=True))
    e = np.stack([f @ cases.loc[arm_of[k], ["pull", "side"]].to_numpy(dtype=float)
                  if k in arm_of else np.full(len(f), np.nan) for k in (1, 2, 3, 4)], axis=1)
    channel = bridge_output(e, factor=BRIDGE["factor"])
    offset = rng.uniform(-OFFSET_UE, OFFSET_UE)
    return channel * BRIDGE["shunt_gain"] + offset + rng.normal(0.0, NOISE_UE, len(f))


def as_read(strain: np.ndarray, temperature: np.ndarray, seq: np.ndarray,
            gauges: pd.DataFrame) -> np.ndarray:
    """What the invented 3-wire quarter bridges show for grid strains, per run (tared on its first
    row, at that row's temperature)."""
    out = np.empty_like(strain)
    names = list(gauges["gauge"])
    daq = gauges["daq_gauge_factor"].to_numpy(dtype=float)
    leads = lead_wire_factor(gauges["gauge_ohm"].to_numpy(dtype=float),
                             gauges["lead_ohm"].to_numpy(dtype=float), list(gauges["wiring"]))
    for s in np.unique(seq):
        rows = seq == s
        t0 = temperature[rows][0]
        out[rows] = raw_from_true(
            strain[rows], gauges=names, gf_ratio=daq / LOT["gauge_factor"],
            lead_factor=leads, nonlinear=True, gauge_factor=LOT["gauge_factor"],
            daq_gauge_factor=daq,
            temperature=temperature[rows], temperature_tare=t0,
            thermal_coefficients=LOT["thermal_output"], thermal_range_C=LOT["range_C"],
            gf_tc=LOT["gauge_factor_tc"], reference_C=LOT["reference_C"])
    return out


def write_log(log: pd.DataFrame, path: Path) -> None:
    units = ["", "", "s", "kN", "kN", "degC"] + ["µε"] * (log.shape[1] - 6)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(log.columns) + "\n")
        fh.write(",".join(units) + "\n")
        log.to_csv(fh, index=False, header=False, lineterminator="\n")


if __name__ == "__main__":
    write_log(make_log(), DEMO / "readings.csv")
    print(f"wrote {DEMO / 'readings.csv'}")
