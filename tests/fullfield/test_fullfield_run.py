"""`correlate run` with a [fullfield] table, on a synthetic DIC export of the analytic block.

The block of tests/builders.write_block_study carries two linear strain cases given in closed
form (builders.block_strain); quadratic hexahedra reproduce a linear field exactly. The DIC
points are a grid on its top face (z = 2 mm) seen by a camera with a known rigid transform; the
exported strains are the analytic small strains converted to Green-Lagrange, E = B + B^2 / 2
(B symmetric: the polar decomposition with no rotation, Holzapfel, Nonlinear Solid Mechanics,
2000, section 2.5), in the camera's x, y axes. So every expected value comes from the closed
form, not from the tool.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from builders import block_readings, block_strain, default_gauges, write_block_study
from scipy.spatial.transform import Rotation

from correlate.commands.cli import main

ANGLE_DEG = 7.0                              # camera turned about the model's z axis
TRANSLATION = np.array([1.3, -0.4, 0.25])    # model = R dic + t  [mm]
ROT = Rotation.from_euler("zx", [ANGLE_DEG, 0.0], degrees=True).as_matrix()
STEPS = (1, 2, 3)                            # readings steps of the three frames


def _grid() -> np.ndarray:
    x, y = np.meshgrid(np.arange(0.3, 3.71, 0.1), np.arange(0.3, 2.71, 0.1))
    return np.c_[x.ravel(), y.ravel(), np.full(x.size, 2.0)]


def _frame(model_pts: np.ndarray, dic: np.ndarray, step: int, rng: np.random.Generator
           ) -> pd.DataFrame:
    """DIC export of one step: camera coordinates and Green-Lagrange strain in camera axes."""
    loads = np.asarray(block_readings(default_gauges().iloc[[0]])[["P_kN", "S_kN"]])[step]
    T = loads[0] / 10.0 * block_strain("pull", model_pts) + loads[1] / 2.0 * block_strain(
        "side", model_pts)
    ex, ey = ROT[:, 0], ROT[:, 1]                # the camera axes in model coordinates
    B = np.empty((len(T), 2, 2))
    B[:, 0, 0] = np.einsum("i,nij,j->n", ex, T, ex)
    B[:, 1, 1] = np.einsum("i,nij,j->n", ey, T, ey)
    B[:, 0, 1] = B[:, 1, 0] = np.einsum("i,nij,j->n", ex, T, ey)
    E = B + 0.5 * B @ B
    df = pd.DataFrame({"Xc": dic[:, 0], "Yc": dic[:, 1], "Zc": dic[:, 2], "E11": E[:, 0, 0],
                       "E22": E[:, 1, 1], "E12": E[:, 0, 1]})
    df.loc[rng.choice(len(df), 20, replace=False), ["E11", "E22", "E12"]] = np.nan  # lost points
    return df


def _study(tmp_path, *, filter_line: str = 'filter = "none"', edge: float = 0.15,
           own: float = 0.0):
    rng = np.random.default_rng(17)
    gauges = default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges), gauges=gauges,
                              extra_toml="")
    dic = tmp_path / "dic"
    dic.mkdir()
    pts = _grid()
    # the points stay fixed across frames (grid-based exports); 2 um position noise, R^T (x - t)
    cam = (pts - TRANSLATION) @ ROT + rng.normal(0.0, 0.002, pts.shape)
    for k, step in enumerate(STEPS):
        df = _frame(pts, cam + rng.normal(0.0, own, cam.shape) if own else cam, step, rng)
        if k == 1:   # a semicolon / decimal-comma export, as spreadsheets in many locales write
            df.to_csv(dic / f"frame_{k + 1}.csv", sep=";", decimal=",", index=False)
        else:
            df.to_csv(dic / f"frame_{k + 1}.csv", index=False)
    pd.DataFrame({"frame": [f"frame_{k + 1}" for k in range(3)],
                  "file": [f"frame_{k + 1}.csv" for k in range(3)], "step": list(STEPS)}
                 ).to_csv(dic / "frames.csv", index=False)
    corners = np.array([[0.0, 0.0, 2.0], [4.0, 0.0, 2.0], [4.0, 3.0, 2.0], [0.0, 3.0, 2.0]])
    lm_dic = (corners - TRANSLATION) @ ROT + rng.normal(0.0, 0.003, corners.shape)
    pd.DataFrame({"landmark": list("ABCD"), "dic_x": lm_dic[:, 0], "dic_y": lm_dic[:, 1],
                  "dic_z": lm_dic[:, 2], "model_x": corners[:, 0], "model_y": corners[:, 1],
                  "model_z": corners[:, 2]}).to_csv(dic / "landmarks.csv", index=False)
    with study.open("a") as f:
        f.write('[fullfield]\nfiles = "dic/frame_*.csv"\nframe_step = "dic/frames.csv"\n'
                'columns = { x = "Xc", y = "Yc", z = "Zc", exx = "E11", eyy = "E22", exy = "E12" }\n'
                'register = { landmarks = "dic/landmarks.csv", refine = "icp" }\n'
                f'{filter_line}\nedge = {edge}\n')
    return study


@pytest.fixture(scope="module")
def unfiltered(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ff")
    study = _study(tmp, edge=0.2)
    assert main(["run", "--quiet", str(study), "--out", str(tmp / "out"), "--no-report"]) == 0
    return tmp / "out"


def test_registration_recovers_the_camera_transform(unfiltered):
    reg = json.loads((unfiltered / "fullfield.json").read_text())["registration"]
    M = np.array(reg["matrix"])
    # issue 17's acceptance, 0.01 mm and 0.01 degree, for what ICP fixes on this flat face: the
    # tilt of the face normal and the offset along it (the face pins them through 875 points)
    tilt = np.degrees(np.arccos(np.clip(M[:3, 2] @ ROT[:, 2], -1, 1)))
    assert tilt < 0.01
    assert abs(M[2, 3] - TRANSLATION[2]) < 0.01
    # in the plane a flat face leaves rotation and shift free (Low 2004: the point-to-plane system
    # is rank deficient there), so the landmarks fix them: 3 um noise on 4 landmarks about 2.5 mm
    # from their centroid gives sigma(angle) = 0.003 / sqrt(4 x 2.5^2) rad = 0.034 deg (Kabsch
    # error propagation, from memory); allow 3 sigma, 0.1 deg, and 0.01 mm in the plane
    angle = np.degrees(np.arccos(np.clip((np.trace(ROT.T @ M[:3, :3]) - 1) / 2, -1, 1)))
    assert angle < 0.1
    assert np.abs(M[:2, 3] - TRANSLATION[:2]).max() < 0.01
    # the noise is 2 um normal to the face: the RMS distance to the surface is about that
    assert reg["rms_distance"] == pytest.approx(0.002, rel=0.3)


def test_unfiltered_comparison_reproduces_the_analytic_field(unfiltered):
    table = pd.read_parquet(unfiltered / "fullfield.parquet")
    assert sorted(table["frame"].unique()) == ["frame_1", "frame_2", "frame_3"]
    # written frame by frame (one row group each, never joined in memory: pyarrow's metadata)
    groups = pq.ParquetFile(unfiltered / "fullfield.parquet")
    assert groups.metadata.num_row_groups == 3
    assert [groups.read_row_group(g)["frame"].unique().to_pylist() for g in range(3)] == [
        [f] for f in table["frame"].unique()]
    M = np.array(json.loads((unfiltered / "fullfield.json").read_text())["registration"]["matrix"])
    x = table[["x", "y", "z"]].to_numpy()
    ex = M[:3, 0] - M[2, 0] * np.array([0.0, 0.0, 1.0])   # the DIC x axis in the top face
    ex /= np.linalg.norm(ex)
    ey = np.cross([0.0, 0.0, 1.0], ex)
    f = {1: (0.25, 0.25), 2: (0.5, 0.5), 3: (1.0, 1.0)}   # case factors of steps 1-3 (builders)
    T = np.stack([f[s][0] * block_strain("pull", x[i:i + 1])[0]
                  + f[s][1] * block_strain("side", x[i:i + 1])[0]
                  for i, s in enumerate(table["step"])])
    # the model side is the closed form at the registered points in the registered axes:
    # quadratic hexahedra carry a linear field exactly; the axes come from fullfield.json's
    # matrix, written to 6 significant digits: axes turned by up to 1e-6 rad, times twice the
    # largest strain (1700 ue) gives the tolerance 4e-3 ue
    for comp, (a, b) in {"exx": (ex, ex), "eyy": (ey, ey), "exy": (ex, ey)}.items():
        expected = np.einsum("ni,nij,nj->n", np.broadcast_to(a, x.shape), T,
                             np.broadcast_to(b, x.shape)) * 1e6
        np.testing.assert_allclose(table[f"{comp}_model_ue"], expected, rtol=0, atol=4e-3)
    # measured - model: the analytic field sampled where the points really are, against the
    # model where registration put them. Bound: gradient (at most 110 ue/mm, builders) times
    # the position error (6 um noise at 3 sigma plus 10 um of in-plane registration) = 1.8 ue,
    # plus the axes turned by the in-plane angle error (<= 0.1 deg = 1.7e-3 rad) times twice the
    # largest in-plane shear (about 650 ue) = 2.3 ue; 4.5 ue in all
    for comp in ("exx", "eyy", "exy", "eeq"):
        assert table[f"{comp}_diff_ue"].abs().max() < 4.5
    # the lost points are NaN on the measured side only (missing in that frame, used in others)
    assert table["exx_measured_ue"].isna().sum() > 0
    assert table["exx_model_ue"].notna().all()


def test_statistics_per_frame_give_a_unit_slope(unfiltered):
    stats = pd.read_csv(unfiltered / "fullfield_stats.csv")
    eeq = stats[stats["component"] == "eeq"]
    assert len(eeq) == 3
    # measured equals model within 4.5 ue of about 1500 ue (see above), and the errors are
    # mostly random: slope 1 within 1e-3, Lin's concordance (Lin 1989) within 1e-4 of 1
    np.testing.assert_allclose(eeq["slope_origin"], 1.0, rtol=1e-3, atol=0)
    np.testing.assert_allclose(eeq["ccc"], 1.0, rtol=1e-4, atol=0)
    # the blocked interval (blocks of 5 spacings) is wider than the naive one
    assert ((eeq["slope_ci_high"] - eeq["slope_ci_low"])
            > (eeq["naive_ci_high"] - eeq["naive_ci_low"])).all()
    assert (eeq["share_within"] == 1.0).all()


def test_edge_mask_drops_the_rim_of_the_grid(unfiltered):
    reg = json.loads((unfiltered / "fullfield.json").read_text())["registration"]
    # a 35 x 25 grid at 0.1 mm with edge = 0.2 mm: the two outer rings lie 0.05 and 0.15 from
    # the region's boundary (half a spacing outside the outer points), the third 0.25
    n = 35 * 25
    assert reg["points_read"] == n
    assert reg["dropped_near_region_boundary"] == n - 31 * 21
    assert reg["dropped_near_part_edges"] == 0   # the grid keeps 0.3 mm from the face's edges


def test_gaussian_levelling_of_a_linear_field_keeps_it_inside(tmp_path):
    study = _study(tmp_path, filter_line='filter = { size = 0.2, kind = "gaussian" }',
                   edge=0.7)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 0
    table = pd.read_parquet(tmp_path / "o" / "fullfield.parquet")
    # edge = 0.7 also drops the points within 0.7 of the face's edges (x < 0.7 and so on), so
    # the 3-sigma kernel (0.6) is whole only 1.3 from them
    whole = table["x"].between(1.3, 2.7) & table["y"].between(1.3, 1.7)
    assert whole.sum() > 100
    table = table[whole]
    # a normalised symmetric kernel keeps a linear field where the kernel is whole (here the
    # points below): the smoothed
    # value of f = a + b.x is f (closed form, the second-moment term vanishes for linear f)
    d = (table["exx_levelled_ue"] - table["exx_model_ue"]).abs()
    # tolerance: 2 um in-plane noise over an effective 4 pi sigma^2 / h^2 = 50 points moves the
    # kernel's centroid by 0.3 um (one sigma) x 110 ue/mm = 0.03 ue; 0.25 ue is 8 sigma
    assert d.max() < 0.25


def test_other_outputs_do_not_depend_on_fullfield(tmp_path, unfiltered):
    """The gauge outputs of the same study without [fullfield] are byte-identical."""
    gauges = default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges), gauges=gauges)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 0
    plain = {p.name for p in (tmp_path / "o").iterdir()}
    assert not any(name.startswith("fullfield") for name in plain)
    for name in ("gauges.csv", "gauge_stats.csv", "rosettes.csv", "flags.csv"):
        assert (tmp_path / "o" / name).read_bytes() == (unfiltered / name).read_bytes(), name


def test_points_off_the_model_exit_2_with_one_line(tmp_path, capsys):
    study = _study(tmp_path)
    text = study.read_text().replace(
        'register = { landmarks = "dic/landmarks.csv", refine = "icp" }',
        'register = { matrix = [[1, 0, 0, 100], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]] }')
    study.write_text(text)   # a transform that puts the points 100 mm beside the block
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "none of the" in err[0] and "snap_tol" in err[0]
    assert not (tmp_path / "o").exists()                       # nothing half-written
    assert before == {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}


def test_a_frame_with_a_column_given_twice_is_refused_in_one_line(tmp_path, capsys):
    # pandas would rename the second 'E11' to 'E11.1' and the first would be compared silently
    study = _study(tmp_path)
    frame = tmp_path / "dic" / "frame_3.csv"
    df = pd.read_csv(frame)
    df.insert(4, "E11", df["E22"], allow_duplicates=True)
    df.to_csv(frame, index=False)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["error: frame_3.csv: column 'E11' appears 2 times in the header (columns 4, "
                   "5); rename or remove the others"]
    assert not (tmp_path / "o").exists()


@pytest.mark.render
def test_report_has_the_fullfield_section(tmp_path):
    from PIL import Image

    study = _study(tmp_path, edge=0.2)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o")]) == 0
    html = (tmp_path / "o" / "report.html").read_text(encoding="utf-8")
    # numbered after the sections before it (no [uncertainty] here, so no section 11 of its
    # own) and listed in the contents
    assert "<h2>11. Full-field (DIC) comparison</h2>" in html
    assert '<a href="#fullfield">Full-field (DIC) comparison</a>' in html
    with Image.open(tmp_path / "o" / "fullfield_maps.png") as img:
        assert img.size == (1800, 620)
        pixels = np.asarray(img.convert("RGB"), dtype=float)
    assert pixels.std() > 5          # not blank
    # the point clouds are coloured: more than a grey model and a white background
    colourful = np.abs(pixels[..., 0] - pixels[..., 2]) > 40
    assert colourful.mean() > 0.01


@pytest.mark.parametrize("suffix", ["parquet", "vtp"])
def test_parquet_and_vtp_frames_give_the_statistics_of_the_csv_frames(unfiltered, suffix):
    # The same three frames written as Parquet tables and as VTK XML point clouds (the points
    # the coordinates, the strains point arrays; VTK's own writer through pyvista): the run
    # must give the CSV run's statistics. rtol 1e-12: float64 throughout (CSV text holds
    # the shortest repr of each double, so reading it back is exact), the rest is round-off.
    import shutil

    import pyvista as pv

    src = unfiltered.parent
    work = src / f"as_{suffix}"
    if work.exists():
        shutil.rmtree(work)
    shutil.copytree(src, work, ignore=shutil.ignore_patterns("out", "as_*"))
    dic = work / "dic"
    for k in range(3):
        path = dic / f"frame_{k + 1}.csv"
        df = (pd.read_csv(path, sep=";", decimal=",") if k == 1 else pd.read_csv(path))
        path.unlink()
        if suffix == "parquet":
            df.to_parquet(dic / f"frame_{k + 1}.parquet", index=False)
        else:
            cloud = pv.PolyData(df[["Xc", "Yc", "Zc"]].to_numpy(dtype=float))
            for c in ("E11", "E22", "E12"):
                cloud.point_data[c] = df[c].to_numpy(dtype=float)
            cloud.save(str(dic / f"frame_{k + 1}.vtp"))
    frames = pd.read_csv(dic / "frames.csv")
    frames["file"] = frames["file"].str.replace(".csv", f".{suffix}")
    frames.to_csv(dic / "frames.csv", index=False)
    study = next(work.glob("*.toml"))
    study.write_text(study.read_text().replace('"dic/frame_*.csv"', f'"dic/frame_*.{suffix}"'))
    assert main(["run", "--quiet", str(study), "--out", str(work / "out"), "--no-report"]) == 0
    ref = pd.read_csv(unfiltered / "fullfield_stats.csv")
    got = pd.read_csv(work / "out" / "fullfield_stats.csv")
    assert list(got.columns) == list(ref.columns) and len(got) == len(ref)
    pd.testing.assert_frame_equal(got, ref, check_exact=False, rtol=1e-12, atol=1e-9)


def test_frames_with_their_own_points_are_levelled_each_over_its_own(tmp_path):
    # Each frame's points jittered by 3 um (their own point sets, as exports that track the
    # points give): each frame is levelled over its own points, and a linear field is kept
    # where the kernel is whole (closed form as above; the jitter adds 3 um / sqrt(50) x
    # 110 ue/mm = 0.05 ue of centroid scatter, so the same 0.25 ue holds)
    study = _study(tmp_path, filter_line='filter = { size = 0.2, kind = "gaussian" }',
                   edge=0.7, own=0.003)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 0
    info = json.loads((tmp_path / "o" / "fullfield.json").read_text())
    assert "each frame over its own points" in info["levelling"]
    table = pd.read_parquet(tmp_path / "o" / "fullfield.parquet")
    assert table.groupby("frame")["point"].min().nunique() == 3   # no point shared
    whole = table["x"].between(1.3, 2.7) & table["y"].between(1.3, 1.7)
    assert whole.sum() > 100
    d = (table.loc[whole, "exx_levelled_ue"] - table.loc[whole, "exx_model_ue"]).abs()
    assert d.max() < 0.25


def test_points_on_an_inverted_element_are_refused_in_one_line(tmp_path, capsys):
    # The hexahedron20 at x 3-4, y 2-3, top layer, carries no gauge but DIC points. Its top and
    # bottom faces are swapped in the connectivity (corners 0-3 <-> 4-7, edge nodes 8-11 <->
    # 12-15): the same cell mirrored, so det J < 0 throughout (an inverted element, as a mesher
    # error leaves it). The gauges would be refused on it; the DIC points now are too.
    import meshio

    study = _study(tmp_path)
    block = meshio.read(tmp_path / "block.vtu")
    conn = block.cells[0].data.copy()
    centres = block.points[conn[:, :8]].mean(axis=1)
    k = int(np.flatnonzero((centres[:, 0] > 3) & (centres[:, 1] > 2) & (centres[:, 2] > 1))[0])
    order = np.r_[4:8, 0:4, 12:16, 8:12, 16:20]
    conn[k] = conn[k][order]
    meshio.write(tmp_path / "block.vtu", meshio.Mesh(block.points, [("hexahedron20", conn)],
                                                      point_data=block.point_data))
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert "[fullfield]" in err[0] and f"element {k} inverted" in err[0]
    assert "fix the mesh" in err[0]
    assert not (tmp_path / "o").exists()                       # nothing half-written
    assert before == {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}


def _scaled_frames(tmp_path, factor: float) -> None:
    """Multiply the exported strains of every frame by ``factor`` (another unit's export)."""
    for frame in sorted((tmp_path / "dic").glob("frame_*.csv")):
        semicolon = ";" in frame.read_text().splitlines()[0]
        df = pd.read_csv(frame, sep=";" if semicolon else ",", decimal="," if semicolon else ".")
        df[["E11", "E22", "E12"]] *= factor
        df.to_csv(frame, sep=";" if semicolon else ",", decimal="," if semicolon else ".",
                  index=False)


def test_frames_in_microstrain_read_as_fractions_are_refused(tmp_path, capsys):
    # 1 m/m is 100 % strain, beyond what a DIC of a structural test measures (common
    # practice); such values are an export in another unit than [fullfield] strain_unit says
    study = _study(tmp_path)
    _scaled_frames(tmp_path, 1e6)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: frame_1.csv: row 2, column 'E11' holds ")
    assert err[0].endswith("set [fullfield] strain_unit to the export's unit (fraction, "
                           "percent, ue)")
    assert not (tmp_path / "o").exists()


@pytest.mark.render
def test_frames_in_percent_read_as_fractions_are_warned_in_the_report(tmp_path, capsys):
    # The block's exact field: the DIC/model slope is 1 (test_statistics_per_frame_give_a_unit_
    # slope); exported in percent and read as fractions it is about 100 (not exactly: the
    # export is Green-Lagrange strain, whose conversion to small strain is not linear), which
    # the run names on stderr, in fullfield.json and in the report's full-field section;
    # declared, it is 1 again.
    study = _study(tmp_path, edge=0.2)
    _scaled_frames(tmp_path, 100.0)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o")]) == 0
    err = capsys.readouterr().err
    factor = float(re.search(r"the DIC strains are ([0-9.]+) x the model's", err).group(1))
    assert 80 < factor < 120
    assert "the DIC export looks like percent" in err
    summary = json.loads((tmp_path / "o" / "fullfield.json").read_text())
    assert len(summary["warnings"]) == 1 and "looks like percent" in summary["warnings"][0]
    html = (tmp_path / "o" / "report.html").read_text(encoding="utf-8")
    assert '<p class="box caution">Warning: [fullfield]: at frame' in html
    study.write_text(study.read_text().replace("[fullfield]\n",
                                               '[fullfield]\nstrain_unit = "percent"\n'))
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "p"), "--no-report"]) == 0
    assert "looks like percent" not in capsys.readouterr().err
    stats = pd.read_csv(tmp_path / "p" / "fullfield_stats.csv")
    # the exact field, unfiltered: slope 1 within 1e-3, as in test_statistics_per_frame_give_a_
    # unit_slope (2 um position noise on the points; the percent round trip adds only round-off)
    np.testing.assert_allclose(stats.loc[stats["component"] == "exx", "slope_origin"], 1.0,
                               rtol=0, atol=1e-3)


def test_unit_warnings_read_the_strain_components_of_the_frame():
    from correlate.fullfield.comparison import unit_warnings

    stats = pd.DataFrame({"frame": ["F"] * 4 + ["G"] * 3,
                          "component": ["exx", "eyy", "exy", "eeq", "exx", "eyy", "exy"],
                          "slope_origin": [0.0102, 0.0098, 0.011, 1.0, 1.0, 1.0, 1.0]})
    lines = unit_warnings(stats, "F", "fraction")
    assert len(lines) == 1 and "one of them looks like percent" in lines[0]
    assert unit_warnings(stats, "G", "fraction") == []
    # the median of the components: one component's stray slope does not decide
    stats.loc[4, "slope_origin"] = 100.0
    assert unit_warnings(stats, "G", "fraction") == []


def test_landmarks_whose_distances_disagree_name_the_unit(tmp_path, capsys):
    # a rigid transform keeps distances (Kabsch / Horn fit rotation and shift only): DIC
    # landmarks written in metres while [fullfield] says mm are 1000 times too close together
    study = _study(tmp_path)
    lm = pd.read_csv(tmp_path / "dic" / "landmarks.csv")
    lm[["dic_x", "dic_y", "dic_z"]] /= 1000.0
    lm.to_csv(tmp_path / "dic" / "landmarks.csv", index=False)
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(
        "error: landmarks.csv: the distances between the DIC landmarks are 0.001 x those between "
        "their model points")
    assert not (tmp_path / "o").exists()


def test_frames_with_no_point_left_are_said_so(tmp_path, capsys):
    # one frame exported with its points 100 mm beside the part (an export of another region):
    # every point is beyond snap_tol, so it has nothing to compare; the run goes on with the
    # others and says which. With every point of every frame dropped, the run stops in one
    # line (before: an IndexError, an internal error).
    study = _study(tmp_path)
    frame = tmp_path / "dic" / "frame_3.csv"
    df = pd.read_csv(frame)
    df["Xc"] += 100.0
    df.to_csv(frame, index=False)
    study.write_text(study.read_text().replace("[fullfield]\n",
                                               '[fullfield]\nreference_frame = "frame_3"\n'))
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 0
    assert "frame(s) frame_3 have no point left to compare" in capsys.readouterr().err
    # the frame the study asked the report to show has nothing: the largest other one is shown
    assert json.loads((tmp_path / "o" / "fullfield.json").read_text())["reference_frame"] != \
        "frame_3"
    stats = pd.read_csv(tmp_path / "o" / "fullfield_stats.csv")
    assert (stats.loc[stats["frame"] == "frame_3", "points"] == 0).all()
    assert (stats.loc[stats["frame"] != "frame_3", "points"] > 0).all()
    # every frame in metres read as mm, placed by a given matrix (no landmarks to check the
    # scale): the points cover a region 0.004 mm wide, all within edge of its boundary
    for path in (tmp_path / "dic").glob("frame_*.csv"):
        semicolon = ";" in path.read_text().splitlines()[0]
        sep, dec = (";", ",") if semicolon else (",", ".")
        df = pd.read_csv(path, sep=sep, decimal=dec)
        df[["Xc", "Yc", "Zc"]] /= 1000.0
        df.to_csv(path, sep=sep, decimal=dec, index=False)
    M = np.eye(4)
    M[:3, :3], M[:3, 3] = ROT, TRANSLATION
    study.write_text(study.read_text().replace(
        'register = { landmarks = "dic/landmarks.csv", refine = "icp" }',
        f"register = {{ matrix = {M.tolist()} }}"))
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "p"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "no DIC point is left to compare in any frame" in err[0], err
    assert not (tmp_path / "p").exists()
