"""DIC frames and the [fullfield] table: formats, column mapping, units, and one-line errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.readers.dic_frames import read_frames, read_landmarks
from correlate.readers.fullfield_study import fullfield_table

COLUMNS = {"x": "X [mm]", "y": "Y [mm]", "exx": "eps_xx", "eyy": "eps_yy", "exy": "gamma_xy"}


def _export(n: int = 6) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    return pd.DataFrame({"X [mm]": rng.uniform(0, 10, n), "Y [mm]": rng.uniform(0, 5, n),
                         "eps_xx": rng.uniform(-0.1, 0.1, n), "eps_yy": rng.uniform(-0.1, 0.1, n),
                         "gamma_xy": rng.uniform(-0.1, 0.1, n)})


def _settings(tmp_path: Path, table: str, problems: list[str] | None = None):
    import tomllib

    raw = tomllib.loads(table)
    found: list[str] = [] if problems is None else problems
    ff = fullfield_table(raw, tmp_path, "study.toml", found)
    if problems is None:
        assert found == []
    return ff


def _toml(files: str, extra: str = "") -> str:
    cols = ", ".join(f'{k} = "{v}"' for k, v in COLUMNS.items())
    return (f'[fullfield]\nfiles = "{files}"\ncolumns = {{ {cols} }}\nshear = "engineering"\n'
            f'strain_unit = "percent"\nmeasure = "small"\n{extra}')


@pytest.mark.parametrize("fmt", ["comma", "semicolon", "parquet"], ids=["csv", "csv-de", "parquet"])
def test_export_names_units_and_shear_are_mapped(tmp_path, fmt):
    df = _export().assign(step=4)
    if fmt == "comma":
        df.to_csv(tmp_path / "f_1.csv", index=False)
    elif fmt == "semicolon":
        df.to_csv(tmp_path / "f_1.csv", sep=";", decimal=",", index=False)
    else:
        df.to_parquet(tmp_path / "f_1.parquet")
    name = "f_1.parquet" if fmt == "parquet" else "f_1.csv"
    frames = read_frames(_settings(tmp_path, _toml(name)))
    t = frames.table
    # percent to m/m (1 % = 0.01) and engineering to tensor shear (exy = gamma / 2): exact up to
    # the CSV's 15-17 significant digits (rtol 1e-12)
    np.testing.assert_allclose(t["exx"], df["eps_xx"] * 0.01, rtol=1e-12, atol=0)
    np.testing.assert_allclose(t["exy"], df["gamma_xy"] * 0.01 / 2, rtol=1e-12, atol=0)
    np.testing.assert_allclose(t["x"], df["X [mm]"], rtol=1e-12, atol=0)
    assert (t["z"] == 0).all() and frames.planar
    assert frames.steps == (4.0,)


def test_vtp_point_cloud_strains_are_point_arrays(tmp_path):
    import pyvista as pv

    df = _export()
    cloud = pv.PolyData(np.c_[df["X [mm]"], df["Y [mm]"], np.ones(len(df))])
    for col in ("eps_xx", "eps_yy", "gamma_xy"):
        cloud.point_data[col] = df[col].to_numpy()
    cloud.point_data["step"] = np.full(len(df), 2.0)
    cloud.save(str(tmp_path / "f_1.vtp"))
    t = read_frames(_settings(tmp_path, _toml("f_1.vtp"))).table
    # coordinates from the points (VTK writes float32 points by default: rtol 1e-6)
    np.testing.assert_allclose(t["z"], 1.0, rtol=1e-6, atol=0)
    np.testing.assert_allclose(t["eyy"], df["eps_yy"] * 0.01, rtol=1e-12, atol=0)


def test_frames_sort_naturally_and_blank_strain_stays_nan(tmp_path):
    for k in (10, 2, 1):
        df = _export().assign(step=k)
        if k == 2:
            df.loc[3, "eps_xx"] = np.nan
        df.to_csv(tmp_path / f"f_{k}.csv", index=False)
    frames = read_frames(_settings(tmp_path, _toml("f_*.csv")))
    assert frames.frames == ("f_1", "f_2", "f_10")   # natural order, not f_1, f_10, f_2
    t = frames.table
    assert t["exx"].isna().sum() == 1 and len(t) == 18


def test_missing_column_names_file_and_study_key(tmp_path):
    _export().drop(columns="eps_yy").assign(step=1).to_csv(tmp_path / "f_1.csv", index=False)
    with pytest.raises(ReadingsFormatError, match=r"f_1.csv: column\(s\) eyy = 'eps_yy'") as e:
        read_frames(_settings(tmp_path, _toml("f_1.csv")))
    assert "\n" not in str(e.value)


def test_frame_without_step_is_refused(tmp_path):
    _export().to_csv(tmp_path / "f_1.csv", index=False)
    _export().to_csv(tmp_path / "f_2.csv", index=False)
    pd.DataFrame({"frame": ["f_1"], "file": ["f_1.csv"], "step": [1]}).to_csv(
        tmp_path / "frames.csv", index=False)
    with pytest.raises(ReadingsFormatError, match=r"frame 'f_2' .* has no row"):
        read_frames(_settings(tmp_path, _toml("f_*.csv", 'frame_step = "frames.csv"\n')))
    with pytest.raises(ReadingsFormatError, match="frame 'f_1' has no step"):
        read_frames(_settings(tmp_path, _toml("f_1.csv")))


def test_non_numeric_value_names_row_and_column(tmp_path):
    df = _export().assign(step=1).astype(object)
    df.loc[2, "eps_xx"] = "n/a?"
    df.to_csv(tmp_path / "f_1.csv", index=False)
    with pytest.raises(ReadingsFormatError, match="row 4, column 'eps_xx'"):
        read_frames(_settings(tmp_path, _toml("f_1.csv")))


def test_a_bad_value_of_a_parquet_table_or_vtk_cloud_is_named_as_its_viewers_count(tmp_path):
    # a CSV's rows are counted as a spreadsheet shows them (header = 1); a Parquet table has no
    # header row, so its rows count from 1 as the readings' Parquet messages count them, and a
    # VTK cloud's points from 0 (VTK's own point ids): "row 4" there pointed one or two off
    import pyvista as pv

    df = _export().assign(step=1)
    df["eps_xx"] = df["eps_xx"].astype(str)     # a text column, as some exports write
    df.loc[2, "eps_xx"] = "n/a?"
    df.to_parquet(tmp_path / "f_1.parquet")
    with pytest.raises(ReadingsFormatError,
                       match=r"f_1.parquet: row 3 \(from 1, no header row\), column 'eps_xx' "
                             r"holds 'n/a\?'"):
        read_frames(_settings(tmp_path, _toml("f_1.parquet")))
    df = _export()
    cloud = pv.PolyData(np.c_[df["X [mm]"], df["Y [mm]"], np.zeros(len(df))])
    for col in ("eps_xx", "eps_yy", "gamma_xy"):
        cloud.point_data[col] = df[col].to_numpy()
    cloud.point_data["eps_yy"][3] = 250.0      # 250 % in percent: past 100 % strain
    cloud.point_data["step"] = np.full(len(df), 2.0)
    cloud.save(str(tmp_path / "f_1.vtp"))
    with pytest.raises(ReadingsFormatError,
                       match=r"f_1.vtp: point 3 \(from 0\), array 'eps_yy' holds 250, "):
        read_frames(_settings(tmp_path, _toml("f_1.vtp")))


def test_bad_table_entries_each_get_a_line(tmp_path):
    problems: list[str] = []
    _settings(tmp_path, '[fullfield]\nfiles = "none_*.csv"\nmeasure = "log"\n'
                        'filter = { size = -1 }\nregister = "camera"\ncolumns = { exz = "a" }\n',
              problems)
    text = "\n".join(problems)
    for piece in ("matches no file", "measure = 'log'", "size = -1", "register = 'camera'",
                  "unknown key 'exz'"):
        assert piece in text
    assert len(problems) == 5


def test_landmarks_too_few_or_collinear_are_refused(tmp_path):
    from correlate.fullfield.registration import rigid_from_landmarks

    lm = pd.DataFrame({"landmark": list("ABC"), "dic_x": [0.0, 1.0, 2.0], "dic_y": 0.0,
                       "dic_z": 0.0, "model_x": [0.0, 1.0, 2.0], "model_y": 0.0, "model_z": 0.0})
    lm.to_csv(tmp_path / "lm.csv", index=False)
    got = read_landmarks(tmp_path / "lm.csv")
    with pytest.raises(StudyError, match="collinear"):
        rigid_from_landmarks(got.dic, got.model)
    lm.iloc[:2].to_csv(tmp_path / "lm2.csv", index=False)
    got = read_landmarks(tmp_path / "lm2.csv")
    with pytest.raises(StudyError, match="at least 3 non-collinear"):
        rigid_from_landmarks(got.dic, got.model)
