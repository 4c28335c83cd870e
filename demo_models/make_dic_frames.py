"""Generate the invented DIC frame set of the demo campaign: the bracket arm's top face, seeded.

Everything is invented. The "truth" is the shipped FE model as for the gauges (modulus 0.95 times
the analysis value: true strain = model / 0.95, see make_test_log.py) plus a local stiffness
error the gauges miss: a soft patch (invented) on the arm's top face at (112, -9) mm, where the
true strain is up to 12 % higher, falling off as a Gaussian of 5 mm. The camera pair sees the top
face of the arm (x 40..130 mm) in its own axes, turned 1.5 degrees about the part's z axis and
0.4 degrees about its x axis from the model axes and shifted, so the study registers it with four
landmarks and ICP. The export has the usual faults: 40 microstrain of strain noise (after its own
filtering), 5 um of position noise, a few lost points (glare), and points up to the arm's edges
(the study's `edge` drops them). Strains are Green-Lagrange in the camera's x, y axes, tensor
shear, as fractions; one Parquet file with `frame` and `step` columns. The model strains are
probed with PyVista's `sample` (inside the solid, 1 um below the top face).

Run:  python demo_models/make_dic_frames.py   (writes correlate/data/demo/dic_frames.parquet and
      dic_landmarks.csv)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial.transform import Rotation

DEMO = Path(__file__).resolve().parent.parent / "correlate" / "data" / "demo"
SEED = 1717
TOP = 12.0
MODULUS_RATIO = 0.95                     # as make_test_log.py: true strain = model / 0.95
PATCH = (112.0, -9.0, 5.0, 0.12)         # soft patch: centre x, y, Gaussian width, peak excess
STEPS = {3: (5.0, 0.0), 5: (10.0, 0.0), 6: (10.0, 1.0), 7: (10.0, 2.0), 9: (5.0, 1.0)}  # kN
TARE = (0.4, 0.05)   # kN at step 1 (readings.csv), where the DIC took its reference images
REFERENCE = {"pull": 10.0, "side": 2.0}  # kN, the study's [[load]] references
SPACING = 1.5                            # mm between DIC points (the export's step)
STRAIN_NOISE = 40e-6
POSITION_NOISE = 0.005
ROTATION = Rotation.from_euler("zx", [1.5, 0.4], degrees=True).as_matrix()  # camera -> model
TRANSLATION = np.array([85.0, 0.0, TOP])                                     # camera origin


def _tensor(voigt: np.ndarray) -> np.ndarray:
    """Engineering-shear Voigt (xx, yy, zz, xy, yz, xz) to tensors (n, 3, 3)."""
    t = np.zeros((len(voigt), 3, 3))
    t[:, 0, 0], t[:, 1, 1], t[:, 2, 2] = voigt[:, 0], voigt[:, 1], voigt[:, 2]
    t[:, 0, 1] = t[:, 1, 0] = voigt[:, 3] / 2
    t[:, 1, 2] = t[:, 2, 1] = voigt[:, 4] / 2
    t[:, 0, 2] = t[:, 2, 0] = voigt[:, 5] / 2
    return t


def model_strain(points: np.ndarray) -> dict[str, np.ndarray]:
    """The two unit cases' strain tensors at points inside the bracket (PyVista probe)."""
    import pyvista as pv

    mesh = pv.read(str(DEMO / "bracket.vtu"))
    probe = pv.PolyData(points).sample(mesh)
    if not np.asarray(probe["vtkValidPointMask"]).all():
        raise SystemExit("a DIC point fell outside the bracket; check the grid")
    return {"pull": _tensor(np.asarray(probe["E_pull"])),
            "side": _tensor(np.asarray(probe["E_side"]))}


def build() -> tuple[pd.DataFrame, pd.DataFrame]:
    """The frames table and the landmarks table, as written (seeded: the same every run)."""
    rng = np.random.default_rng(SEED)
    x, y = np.meshgrid(np.arange(40.0, 130.01, SPACING), np.arange(-19.5, 19.51, SPACING))
    true_pts = np.c_[x.ravel(), y.ravel(), np.full(x.size, TOP)]
    cases = model_strain(true_pts - [0.0, 0.0, 1e-3])
    cx, cy, width, peak = PATCH
    soft = 1.0 + peak * np.exp(-((true_pts[:, 0] - cx) ** 2 + (true_pts[:, 1] - cy) ** 2)
                               / (2 * width**2))
    cam = (true_pts - TRANSLATION) @ ROTATION      # R^T (x - t): camera coordinates
    cam = cam + rng.normal(0.0, POSITION_NOISE, cam.shape)
    ex, ey = ROTATION[:, 0], ROTATION[:, 1]
    parts = []
    for step, (pull, side) in STEPS.items():
        # DIC strain is relative to the reference images, so it follows the load above the tare
        T = ((pull - TARE[0]) / REFERENCE["pull"] * cases["pull"]
             + (side - TARE[1]) / REFERENCE["side"] * cases["side"])
        T = T * (soft / MODULUS_RATIO)[:, None, None]
        B = np.empty((len(T), 2, 2))
        B[:, 0, 0] = np.einsum("i,nij,j->n", ex, T, ex)
        B[:, 1, 1] = np.einsum("i,nij,j->n", ey, T, ey)
        B[:, 0, 1] = B[:, 1, 0] = np.einsum("i,nij,j->n", ex, T, ey)
        E = B + 0.5 * B @ B                          # Green-Lagrange of a stretch without rotation
        E = E + rng.normal(0.0, STRAIN_NOISE, E.shape) * [[1, 1], [1, 1]]
        frame = pd.DataFrame({"frame": f"F{step:02d}", "step": step, "X": cam[:, 0],
                              "Y": cam[:, 1], "Z": cam[:, 2], "exx": E[:, 0, 0],
                              "eyy": E[:, 1, 1], "exy": 0.5 * (E[:, 0, 1] + E[:, 1, 0])})
        lost = rng.choice(len(frame), len(frame) // 100, replace=False)   # glare
        frame.loc[lost, ["exx", "eyy", "exy"]] = np.nan
        parts.append(frame)
    table = pd.concat(parts, ignore_index=True)
    for col in ("X", "Y", "Z"):
        table[col] = table[col].round(4)
    for col in ("exx", "eyy", "exy"):
        table[col] = table[col].round(7)
    marks = np.array([[40.0, -20.0, TOP], [130.0, -20.0, TOP], [130.0, 20.0, TOP],
                      [40.0, 20.0, TOP]])   # the arm's top corners, picked in both
    dic = (marks - TRANSLATION) @ ROTATION + rng.normal(0.0, 0.02, marks.shape)
    landmarks = pd.DataFrame({"landmark": ["L1", "L2", "L3", "L4"], "dic_x": dic[:, 0].round(3),
                              "dic_y": dic[:, 1].round(3), "dic_z": dic[:, 2].round(3),
                              "model_x": marks[:, 0], "model_y": marks[:, 1],
                              "model_z": marks[:, 2]})
    return table, landmarks


def main() -> int:
    table, landmarks = build()
    table.to_parquet(DEMO / "dic_frames.parquet", index=False, compression="zstd")
    landmarks.to_csv(DEMO / "dic_landmarks.csv", index=False)
    print(f"wrote {len(table)} rows in {len(STEPS)} frames to {DEMO / 'dic_frames.parquet'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
