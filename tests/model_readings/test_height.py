"""Grid height: the model reading at a grid raised above the surface by its backing and adhesive.

Reference: in a beam in bending the strain is linear through the depth, e(y) = kappa y, so a grid
at height h above a face at distance c from the neutral axis reads (c + h)/c times the surface
strain (Euler-Bernoulli beam theory; the 5 % on 2 mm sheet of the issue is this ratio with
c = 1 mm and h = 0.05 mm). The fields below are analytic and linear through the depth: quadratic
solids reproduce them exactly, and a shell's two faces bound the same line.
"""

from __future__ import annotations

import json

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import flat_panel, solid_mesh

from correlate.core.errors import CorrelateWarning, GaugeError
from correlate.model_readings.model import prepare
from correlate.model_readings.table import predict_table
from correlate.readers.study import read_study

KAPPA = 1e-3      # curvature x distance: surface strain 1000 ue at c = 1 mm
H = 0.05          # mm: backing plus adhesive
C = 1.0           # mm: half depth of the 2 mm block (z 0..2)


def bending_block(folder, *, ctype="hexahedron20", cell=False, heights=(H, H, 0.0)):
    mesh = solid_mesh(ctype, n=(4, 3, 2), size=(4.0, 3.0, 2.0))
    x = mesh.points
    conn = mesh.blocks[0][1]

    def strain(points):
        exx = KAPPA * (points[:, 2] - C)          # neutral axis at z = 1
        e = np.zeros((len(points), 6))
        e[:, 0], e[:, 1], e[:, 2] = exx, -0.3 * exx, -0.3 * exx
        return e

    if cell:
        data = {"cell_data": {"E": [strain(x[conn].mean(axis=1))]}}
    else:
        data = {"point_data": {"E": strain(x)}}
    meshio.write(folder / "beam.vtu", meshio.Mesh(x, [(ctype, conn)], **data))
    gauges = pd.DataFrame([
        {"gauge": "TOP", "x": 1.9, "y": 1.4, "z": 2.0, "dir_x": 1, "dir_y": 0, "dir_z": 0,
         "length": 0.6, "kt": 0.0, "height": heights[0]},
        {"gauge": "BOTTOM", "x": 2.1, "y": 1.6, "z": 0.0, "dir_x": 1, "dir_y": 0, "dir_z": 0,
         "length": 0.6, "kt": 0.0, "height": heights[1]},
        {"gauge": "FLAT", "x": 2.1, "y": 1.6, "z": 2.0, "dir_x": 1, "dir_y": 0, "dir_z": 0,
         "length": 0.6, "kt": 0.0, "height": heights[2]}])
    gauges.to_csv(folder / "gauges.csv", index=False)
    study = folder / "study.toml"
    study.write_text('[model]\nfile = "beam.vtu"\nlength_unit = "mm"\n'
                     '[[case]]\nname = "bend"\nstrain = "E"\n'
                     + ('average = "cell"\n' if cell else "")
                     + '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.1\nangle_tol = 1.0\n',
                     encoding="utf-8")
    return study


def test_raised_grid_on_a_beam_in_bending_reads_c_plus_h_over_c(tmp_path):
    table = predict_table(prepare(read_study(bending_block(tmp_path)))).set_index("gauge")
    p = table["predicted_ue"]
    # atol 1e-6 ue: the linear field is exact on hex20 (rounding ~1e-9 ue)
    assert p["TOP"] == pytest.approx(KAPPA * 1e6 * (C + H) / C, rel=0, abs=1e-6)
    assert p["BOTTOM"] == pytest.approx(-KAPPA * 1e6 * (C + H) / C, rel=0, abs=1e-6)
    assert p["FLAT"] == pytest.approx(KAPPA * 1e6, rel=0, abs=1e-6)   # height 0: the surface


def test_cell_data_takes_the_nodal_averaged_gradient_and_says_so(tmp_path):
    study = bending_block(tmp_path, ctype="hexahedron", cell=True)
    with pytest.warns(CorrelateWarning, match="needs a nodal strain field of quadratic elements"):
        table = predict_table(prepare(read_study(study))).set_index("gauge")
    p = table["predicted_ue"]
    # cell values are the layer means (+-500 ue on two layers); the nodal average of the two
    # layers has slope 500 ue/mm in the block, so TOP gains h x 500 ue/mm = 25 ue exactly
    assert p["TOP"] - p["FLAT"] == pytest.approx(H * 500.0, rel=0, abs=1e-6)


def test_shell_reads_linearly_through_the_thickness_beyond_the_face(tmp_path):
    pts, quads = flat_panel(5.0)
    n = len(pts)
    top = np.tile([KAPPA, -0.3 * KAPPA, 0, 0, 0, 0], (n, 1))
    meshio.write(tmp_path / "panel.vtu", meshio.Mesh(pts, [("quad", quads)],
                                                     point_data={"E_top": top, "E_bot": -top}))
    pd.DataFrame([{"gauge": "P1", "x": 2.0, "y": 1.5, "z": 5.0, "dir_x": 1, "dir_y": 0,
                   "dir_z": 0, "length": 0.8, "face": "top", "height": H},
                  {"gauge": "P2", "x": 3.0, "y": 2.5, "z": 5.0, "dir_x": 1, "dir_y": 0,
                   "dir_z": 0, "length": 0.8, "face": "bottom", "height": H}]).to_csv(
        tmp_path / "gauges.csv", index=False)
    study = tmp_path / "study.toml"
    study.write_text('[model]\nfile = "panel.vtu"\nlength_unit = "mm"\nthickness = 2.0\n'
                     '[[case]]\nname = "bend"\nstrain = { top = "E_top", bottom = "E_bot" }\n'
                     '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.1\n', encoding="utf-8")
    p = predict_table(prepare(read_study(study))).set_index("gauge")["predicted_ue"]
    # faces at +-t/2 = +-1 mm: the grid at t/2 + h reads (c + h)/c of its face, c = t/2
    assert p["P1"] == pytest.approx(KAPPA * 1e6 * (C + H) / C, rel=0, abs=1e-6)
    assert p["P2"] == pytest.approx(-KAPPA * 1e6 * (C + H) / C, rel=0, abs=1e-6)
    study.write_text(study.read_text().replace("thickness = 2.0\n", ""), encoding="utf-8")
    with pytest.raises(GaugeError, match=r"needs \[model\] thickness"):
        predict_table(prepare(read_study(study)))


def test_negative_height_is_refused_naming_the_gauge(tmp_path):
    study = bending_block(tmp_path, heights=(-0.05, 0.0, 0.0))
    with pytest.raises(GaugeError, match=r"gauge 'TOP'\): height = -0.05 is negative"):
        prepare(read_study(study))


def test_run_reports_the_height_correction_per_gauge(tmp_path):
    # readings from beam theory at the grid, (c + h)/c of the surface strain; corrections.csv
    # names the height correction of each model reading at the reference step
    from correlate.commands.cli import main

    study = bending_block(tmp_path)
    loads = np.array([0.0, 0.5, 1.0, 0.0])
    surface = {"TOP": KAPPA * 1e6, "BOTTOM": -KAPPA * 1e6, "FLAT": KAPPA * 1e6}
    rise = {"TOP": (C + H) / C, "BOTTOM": (C + H) / C, "FLAT": 1.0}
    rows = pd.DataFrame({"step": np.arange(4), "P": loads,
                         **{g: loads * surface[g] * rise[g] for g in surface}})
    rows.to_csv(tmp_path / "readings.csv", index=False)
    with open(study, "a", encoding="utf-8") as fh:
        fh.write('[readings]\nfile = "readings.csv"\n[[load]]\ncolumn = "P"\ncase = "bend"\n'
                 "reference = 1.0\n")
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 0
    c = pd.read_csv(tmp_path / "run" / "corrections.csv").set_index("gauge")
    # h/c x 1000 ue = 50 ue at P = 1; written to 0.001 ue
    assert c.loc["TOP", "height_ue"] == pytest.approx(50.0, rel=0, abs=1e-3)
    assert c.loc["BOTTOM", "height_ue"] == pytest.approx(-50.0, rel=0, abs=1e-3)
    assert c.loc["FLAT", "height_ue"] == 0.0
    g = pd.read_csv(tmp_path / "run" / "gauges.csv")
    assert g["difference_ue"].abs().max() < 1e-3


def test_a_failure_diagnosis_moves_a_raised_grid_at_its_height(tmp_path):
    # The grid TOP stands 0.3 mm high on a 2 mm beam in bending, so the model reads
    # (c + h)/c = 1.3 x the surface strain; the readings are the surface strain (as if the grid
    # were flat), so TOP fails by 30 %. The strain does not vary along the beam (uniform
    # curvature, Euler-Bernoulli): no move of the grid explains it; a grid turned by theta in
    # the uniaxial field reads e (cos^2 - 0.3 sin^2), which gives 1/1.3 of it at
    # cos^2 theta = (1/1.3 + 0.3)/1.3 (strain transformation, a closed form). The diagnosis's
    # moved grids must stand as high as the gauge: before, they were read on the surface, so
    # every move "explained" the failure (position offset 1.63 mm, grid turned -0.00 deg).
    from correlate.commands.cli import main

    study = bending_block(tmp_path, heights=(0.3, 0.3, 0.0))
    loads = np.array([0.0, 0.25, 0.5, 0.75, 1.0, 0.0])
    surface = {"TOP": KAPPA * 1e6, "BOTTOM": -KAPPA * 1e6 * 1.3, "FLAT": KAPPA * 1e6}
    pd.DataFrame({"step": np.arange(6), "P": loads, **{g: loads * v for g, v in surface.items()}}
                 ).to_csv(tmp_path / "readings.csv", index=False)
    with open(study, "a", encoding="utf-8") as fh:
        fh.write('[readings]\nfile = "readings.csv"\n[[load]]\ncolumn = "P"\ncase = "bend"\n'
                 "reference = 1.0\n")
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 0
    found = json.loads((tmp_path / "run" / "summary.json").read_text())["diagnoses"]
    assert [d["gauge"] for d in found] == ["TOP"]
    assert found[0]["explanation"] == "grid angle"
    theta = np.degrees(np.arccos(np.sqrt((1 / 1.3 + 0.3) / 1.3)))
    # tolerance 0.05 deg: the search's resolution on the angle, the field being exact on hex20
    assert abs(found[0]["parameter"]) == pytest.approx(theta, abs=0.05)
