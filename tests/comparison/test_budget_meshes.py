"""Predictions on coarser meshes and the grid convergence index, wired into `correlate run`.

Three meshes of the block of tests/builders.py (with different element counts, so they share no
nodes) carry the analytic strain field plus a known discretisation error c h^p added to e_xx.
Roache's grid convergence index as ASME V&V 20-2009 section 2 uses it must recover p, the
Richardson-extrapolated reading and GCI = 1.25 |S2 - S1| / (r^p - 1); with two meshes, or an
oscillating error, the formal order and the factor 3 (Roache). u_num = GCI / 1.15 is V&V 20's
conversion of the GCI taken as a 95 % expanded uncertainty (from memory). The readings a gauge
indicates for an offset of e_xx follow from the strain transformation and the transverse
sensitivity relation (Vishay Micro-Measurements Tech Note TN-509). Every scenario is invented.
"""

from __future__ import annotations

import json

import meshio
import numpy as np
import pandas as pd
from builders import block_readings, block_strain, default_gauges, solid_mesh, write_block_study

from correlate.commands.cli import main

NU0 = 0.285
C, P = 40e-6, 1.7          # the invented error term c h^p added to e_xx of case 'pull' [m/m]
CELLS = {1.0: (8, 6, 4), 2.0: (4, 3, 2), 4.0: (2, 2, 1), 1.5: (6, 4, 3), 2.7: (3, 2, 2)}


def _gauges() -> pd.DataFrame:
    return default_gauges().iloc[[0, 3, 6]].reset_index(drop=True)


def _write_mesh(path, h: float, sign: float = 1.0) -> None:
    """The block meshed for element size h, its 'pull' e_xx raised by sign c h^p."""
    mesh = solid_mesh("hexahedron", n=CELLS[h])
    x = mesh.points
    fields = {}
    for case in ("pull", "side"):
        e = block_strain(case, x)
        if case == "pull":
            e[:, 0, 0] += sign * C * h**P
        voigt = np.c_[e[:, 0, 0], e[:, 1, 1], e[:, 2, 2], 2 * e[:, 0, 1], 2 * e[:, 1, 2],
                      2 * e[:, 0, 2]]       # engineering shear, as the study reads it
        fields[f"E_{case}"] = voigt
    meshio.write(path, meshio.Mesh(x, [("hexahedron", mesh.blocks[0][1])], point_data=fields))


def _offset_reading(gauges: pd.DataFrame) -> np.ndarray:
    """What each gauge indicates for e_xx = 1 alone [per unit e_xx] (TN-509, top face)."""
    d = gauges[["dir_x", "dir_y"]].to_numpy(dtype=float, copy=True)
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    kt = gauges["kt"].to_numpy(dtype=float)
    e_a, e_t = d[:, 0] ** 2, d[:, 1] ** 2   # transverse direction (-d_y, d_x)
    return (e_a + kt * e_t) / (1 - NU0 * kt)


def _run(tmp_path, sizes, signs=None, formal: float = 2.0):
    gauges = _gauges()
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges), gauges=gauges,
                              ctype="hexahedron", extra_toml="")
    signs = signs or [1.0] * len(sizes)
    _write_mesh(tmp_path / "block.vtu", sizes[0], signs[0])
    meshes = []
    for k, (h, sign) in enumerate(zip(sizes[1:], signs[1:], strict=True)):
        _write_mesh(tmp_path / f"mesh{k}.vtu", h, sign)
        meshes.append(f'{{ file = "mesh{k}.vtu", h = {h} }}')
    study.write_text(study.read_text() + "[uncertainty]\n[numerical]\n"
                     f"h = {sizes[0]}\nformal_order = {formal}\nmeshes = [ {', '.join(meshes)} ]\n")
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 0
    table = pd.read_csv(tmp_path / "out" / "uncertainty.csv", dtype={"convergence": str})
    table["convergence"] = table["convergence"].fillna("")
    rows = pd.read_csv(tmp_path / "out" / "gauges.csv")
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    factor = 10.0 / 10.0  # the reference step is the full pull load (P = 10 kN, reference 10)
    return table, rows, summary, _offset_reading(gauges) * factor * 1e6


def test_three_meshes_recover_the_order_and_the_richardson_value(tmp_path):
    table, rows, summary, a = _run(tmp_path, [1.0, 2.0, 4.0])
    # Observed order ln(|S3 - S2| / |S2 - S1|) / ln r is p exactly for S = S_exact + c h^p.
    # rtol 1e-4: readings are written with 3 decimals of microstrain (differences of ~100 ue).
    np.testing.assert_allclose(table["order"], P, rtol=1e-4, atol=0)
    assert (table["factor"] == 1.25).all()
    # (S2 - S1) / (r^p - 1) = c h1^p a: GCI = 1.25 |c| a, and S1 minus it is the exact reading.
    np.testing.assert_allclose(table["gci_ue"], 1.25 * C * a, rtol=1e-4, atol=0)
    np.testing.assert_allclose(table["u_numerical_ue"], 1.25 * C * a / 1.15, rtol=1e-4, atol=0)
    assert (table["convergence"] == "").all()
    ref = rows[rows["step"] == table["step"].iloc[0]]
    np.testing.assert_allclose(ref["u_num_ue"], table["u_numerical_ue"], rtol=0, atol=1e-3)
    assert summary["validation"]["convergence"] == {"oscillatory": [], "order_fell_back": [],
                                                    "nonconstant_r": False}


def test_two_meshes_take_the_formal_order_and_factor_three(tmp_path):
    table, _, summary, a = _run(tmp_path, [1.0, 2.0], formal=2.0)
    # Roache: with two grids, p = formal order and Fs = 3: GCI = 3 |S2 - S1| / (r^2 - 1).
    expect = 3.0 * C * (2.0**P - 1.0) * a / (2.0**2 - 1.0)
    np.testing.assert_allclose(table["gci_ue"], expect, rtol=1e-4, atol=0)  # 3 decimals
    assert (table["order"] == 2.0).all() and (table["factor"] == 3.0).all()
    assert table["convergence"].str.contains("order fell back").all()
    assert summary["validation"]["convergence"]["order_fell_back"] == ["S00", "S03", "S06"]


def test_an_oscillating_error_is_marked_and_falls_back(tmp_path):
    table, _, summary, a = _run(tmp_path, [1.0, 2.0, 4.0], signs=[1.0, -1.0, 1.0])
    # S3 - S2 and S2 - S1 of opposite sign: oscillatory, p = formal order, Fs = 3 (Roache).
    expect = 3.0 * C * (2.0**P + 1.0) * a / (2.0**2 - 1.0)
    np.testing.assert_allclose(table["gci_ue"], expect, rtol=1e-4, atol=0)  # 3 decimals
    assert table["convergence"].str.contains("oscillatory").all()
    assert summary["validation"]["convergence"]["oscillatory"] == ["S00", "S03", "S06"]


def test_non_constant_refinement_ratio_is_solved_by_iteration(tmp_path):
    table, _, summary, a = _run(tmp_path, [1.0, 1.5, 2.7])
    # Celik et al., J. Fluids Eng. 130 (2008) 078001, eqs. 5a-c: the fixed point is p itself.
    np.testing.assert_allclose(table["order"], P, rtol=1e-4, atol=0)  # 3 decimals
    np.testing.assert_allclose(table["gci_ue"], 1.25 * C * a, rtol=1e-4, atol=0)
    assert table["convergence"].str.contains("non-constant r").all()
    assert summary["validation"]["convergence"]["nonconstant_r"] is True


def test_a_mesh_that_does_not_hold_a_case_is_refused_in_one_line(tmp_path, capsys):
    gauges = _gauges()
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges), gauges=gauges,
                              ctype="hexahedron")
    mesh = solid_mesh("hexahedron", n=CELLS[2.0])
    meshio.write(tmp_path / "bare.vtu", meshio.Mesh(mesh.points, [("hexahedron",
                                                                   mesh.blocks[0][1])]))
    study.write_text(study.read_text() + "[uncertainty]\n[numerical]\nh = 1.0\n"
                     'meshes = [ { file = "bare.vtu", h = 2.0 } ]\n')
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bare.vtu" in err[0] and "E_pull" in err[0], err
    assert not (tmp_path / "out").exists()


def test_a_mesh_that_reads_as_the_model_itself_is_refused(tmp_path, capsys):
    # A copy of the model file given as the coarser mesh: S2 = S1 at every gauge and step, so
    # GCI = Fs |S2 - S1| / (r^p - 1) = 0 (Roache) and the budget would claim no numerical
    # uncertainty at all; no other mesh reads the same to the last digit
    import shutil

    gauges = _gauges()
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges), gauges=gauges,
                              ctype="hexahedron")
    _write_mesh(tmp_path / "block.vtu", 1.0)
    shutil.copyfile(tmp_path / "block.vtu", tmp_path / "coarse.vtu")
    study.write_text(study.read_text() + "[uncertainty]\n[numerical]\nh = 1.0\n"
                     'meshes = [ { file = "coarse.vtu", h = 2.0 } ]\n')
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["error: study.toml: [numerical] meshes: 'coarse.vtu' gives the model's own "
                   "readings at every gauge and step, so its grid convergence index would be 0: "
                   "the model file or a copy of it? give the results on a mesh of other element "
                   "sizes"]
    assert not (tmp_path / "out").exists()
