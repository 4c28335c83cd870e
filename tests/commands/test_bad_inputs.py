"""A catalogue of bad inputs, driven through the command line in-process.

Each case builds a small study in tmp_path (linear hexahedra, three gauges, readings that agree with
the analytic fields of builders.write_block_study), breaks one thing, runs ``correlate check`` or
``correlate run`` and asserts the exit code (2 for a problem with the input), that every line on
stderr is one problem (``error: ...``) or one warning, that no traceback leaks without ``--debug``,
and that one error line names the culprit (file, row, gauge, array) and what was expected versus
found. The wording is not pinned, only those parts.

The rules asserted are the tool's documented interface (README.md "Exit codes", the style guide's
section on errors); the expected-versus-found facts come from the input each case builds.
Inputs the tool must accept (a semicolon file with decimal commas, a dead channel, sentinels, ...)
are checked at the end: they are not errors.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import block_indicated, block_readings, default_gauges, flat_panel, write_small_study

from correlate.commands.cli import main

# --------------------------------------------------------------------------------------------
# builders


def small(folder: Path, **kw) -> Path:
    return write_small_study(folder, **kw)


def gauges3() -> pd.DataFrame:
    return default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)


def rosette_gauges(angles=(0.0, 45.0, 90.0)) -> pd.DataFrame:
    rows = []
    for k, a in enumerate(angles):
        t = np.radians(a)
        rows.append({"gauge": f"R-{'abcd'[k]}", "x": 2.0, "y": 2.2, "z": 2.0,
                     "dir_x": round(np.cos(t), 9), "dir_y": round(np.sin(t), 9), "dir_z": 0,
                     "length": 0.3, "kt": 0.005, "rosette": "R"})
    return pd.concat([gauges3(), pd.DataFrame(rows)], ignore_index=True)


def edit(path: Path, old: str, new: str) -> None:
    """Replace text the fixture is known to write (fails loudly if the fixture changes)."""
    text = path.read_text(encoding="utf-8")
    assert old in text, f"{old!r} not in {path.name}"
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def with_gauges(folder: Path, change: Callable[[pd.DataFrame], pd.DataFrame], **kw) -> Path:
    """A small study whose gauge map is changed after the readings were made from it."""
    g = kw.pop("gauges", None)
    g = gauges3() if g is None else g
    study = small(folder, gauges=g, **kw)
    raw = pd.read_csv(folder / "gauges.csv", dtype=str, keep_default_na=False)
    change(raw).to_csv(folder / "gauges.csv", index=False)
    return study


def _gauge_lines(suffix: str):
    """A small study whose gauge map's data lines each end in ``suffix`` (text, as written)."""
    def build(folder: Path) -> Path:
        study = with_gauges(folder, lambda g: g)
        path = folder / "gauges.csv"
        head, *rows = path.read_text(encoding="utf-8").splitlines()
        path.write_text("\n".join([head] + [r + suffix for r in rows]) + "\n", encoding="utf-8")
        return study
    return build


def set_cell(df: pd.DataFrame, row: int, **values) -> pd.DataFrame:
    df = df.copy()
    for k, v in values.items():
        if k not in df.columns:
            df[k] = ""
        df[k] = df[k].astype(object)
        df.loc[row, k] = str(v)
    return df


def with_readings(folder: Path, change: Callable[[list[str]], list[str]], **kw) -> Path:
    """A small study whose readings.csv lines are rewritten by ``change``."""
    study = small(folder, **kw)
    path = folder / "readings.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    path.write_text("\n".join(change(lines)) + "\n", encoding="utf-8")
    return study


def with_model(folder: Path, change: Callable[[meshio.Mesh], meshio.Mesh | None], **kw) -> Path:
    """A small study whose block.vtu is rewritten after ``change`` edits the meshio mesh."""
    study = small(folder, **kw)
    mesh = meshio.read(folder / "block.vtu")
    mesh = change(mesh) or mesh
    meshio.write(folder / "block.vtu", mesh)
    return study


def cell_at(mesh: meshio.Mesh, point) -> int:
    conn = mesh.cells[0].data
    return int(np.argmin(np.linalg.norm(mesh.points[conn].mean(axis=1) - point, axis=1)))


def replace_cell(df_lines: list[str], line: int, column: str, value: str) -> list[str]:
    """Set the cell of ``column`` on 1-based ``line`` of a comma-separated file."""
    header = df_lines[0].split(",")
    cells = df_lines[line - 1].split(",")
    cells[header.index(column)] = value
    out = list(df_lines)
    out[line - 1] = ",".join(cells)
    return out


# shells: a flat panel of 6 x 4 quads at z = 5 (normal +z), or the same panel turned about x


def panel(flip: int | None = None, tilt_deg: float = 0.0, z0: float = 5.0):
    pts, quads = flat_panel(z0)
    if flip is not None:
        quads[flip] = quads[flip][[0, 3, 2, 1]]
    t = np.radians(tilt_deg)
    rot = np.array([[1, 0, 0], [0, np.cos(t), -np.sin(t)], [0, np.sin(t), np.cos(t)]])
    return pts @ rot.T, quads, rot


def write_shell_study(folder: Path, *, flip=None, tilt_deg=0.0, case_toml: str,
                      point_data=None, cell_data=None) -> Path:
    """A panel model with arrays E_top, E_bot (and any given), one gauge 'P1' whose grid crosses
    x = 2 at y = 1.5 on the top face, and a study with ``case_toml`` as its cases."""
    pts, quads, rot = panel(flip, tilt_deg)
    n, c = len(pts), len(quads)
    top = np.tile([800e-6, -240e-6, 0, 0, 0, 0], (n, 1))
    pdata = {"E_top": top, "E_bot": -top}
    pdata.update(point_data(n) if point_data else {})
    cdata = {k: [v] for k, v in (cell_data(c, rot) if cell_data else {}).items()}
    meshio.write(folder / "panel.vtu", meshio.Mesh(pts, [("quad", quads)], point_data=pdata,
                                                   cell_data=cdata))
    centre = rot @ np.array([2.0, 1.5, 5.0])
    row = {"gauge": "P1", "x": centre[0], "y": centre[1], "z": centre[2], "dir_x": 1, "dir_y": 0,
           "dir_z": 0, "length": 0.8, "face": "top"}
    pd.DataFrame([row]).to_csv(folder / "gauges.csv", index=False)
    study = folder / "study.toml"
    study.write_text('title = "Panel"\n[model]\nfile = "panel.vtu"\nlength_unit = "mm"\n'
                     + case_toml + '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.1\n',
                     encoding="utf-8")
    return study


# --------------------------------------------------------------------------------------------
# the catalogue


@dataclass(frozen=True)
class Bad:
    """One bad input: how to build it, the command, and the parts one error line must hold."""

    build: Callable[[Path], Path]
    expect: tuple[str, ...]
    command: str = "check"
    lines: int | None = None          # exact number of error lines, when it is known


def _toml_syntax(f):
    s = small(f)
    edit(s, 'length_unit = "mm"', 'length_unit = "mm')
    return s


def _unknown_top(f):
    s = small(f)
    edit(s, "title =", "titel =")
    return s


def _unknown_in_table(f):
    s = small(f)
    edit(s, "position_tol = 0.2", "position_tolerance = 0.2")
    return s


def _unknown_in_case(f):
    s = small(f)
    edit(s, 'name = "side"', 'name = "side"\ncompnents = ["xx", "yy", "zz", "xy", "yz", "xz"]')
    return s


def _missing_gauges_table(f):
    s = small(f)
    edit(s, '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.2\nangle_tol = 2.0\n', "")
    return s


def _missing_length_unit(f):
    s = small(f)
    edit(s, 'length_unit = "mm"\n', "")
    return s


def _case_without_array(f):
    s = small(f)
    edit(s, 'strain = "E_side"\n', "")
    return s


def _case_two_arrays(f):
    s = small(f)
    edit(s, 'strain = "E_pull"\n', 'strain = "E_pull"\ndisplacement = "U"\n')
    return s


def _model_file_missing(f):
    s = small(f)
    edit(s, 'file = "block.vtu"', 'file = "blok.vtu"')
    return s


def _not_utf8(f):
    s = small(f)
    latin1 = "Pr\u00fcfk\u00f6rper".encode("latin-1")
    s.write_bytes(s.read_bytes().replace(b"Synthetic block", latin1))
    return s


def _not_a_number(f):
    s = small(f)
    edit(s, "position_tol = 0.2", 'position_tol = "0.2"')
    return s


def _bad_zero_rule(f):
    s = small(f)
    edit(s, 'zero = "first"', 'zero = "start"')
    return s


def _three_problems(f):
    s = small(f)
    edit(s, "title =", "titel =")
    edit(s, 'length_unit = "mm"\n', "")
    edit(s, 'zero = "first"', 'zero = "start"')
    return s


def _truncated(f):
    s = small(f)
    data = (f / "block.vtu").read_bytes()
    (f / "block.vtu").write_bytes(data[: len(data) // 2])
    return s


def _voxels(f):
    # the block's hexahedra written as VTK voxels (type 11: the same cell, nodes 3-4 and 7-8
    # swapped, VTK's vtkCellType.h), which meshio's VTU reader skips with only a warning
    import pyvista as pv

    s = small(f)
    grid = pv.read(f / "block.vtu")
    voxels = grid.cells_dict[pv.CellType.HEXAHEDRON][:, [0, 1, 3, 2, 4, 5, 7, 6]]
    out = pv.UnstructuredGrid(np.c_[np.full(len(voxels), 8), voxels].ravel(),
                              np.full(len(voxels), pv.CellType.VOXEL, np.uint8), grid.points)
    for name in grid.point_data:
        out.point_data[name] = grid.point_data[name]
    out.save(f / "block.vtu")
    return s


def _empty_model(f):
    s = small(f)
    (f / "block.vtu").write_bytes(b"")
    return s


def _unknown_format(f):
    s = small(f)
    (f / "block.res").write_text("RESULTS 1\n1 2 3\n", encoding="utf-8")
    edit(s, 'file = "block.vtu"', 'file = "block.res"')
    return s


def _pyramid(mesh):
    # one pyramid beside the hexahedra (a cell type the element library does not have)
    n = len(mesh.points)
    apex = np.array([[0.5, 0.5, -1.0]])
    base = [0, 1, 2, 3]  # any four existing points; the type alone is refused
    mesh.points = np.vstack([mesh.points, apex])
    mesh.point_data = {k: np.vstack([v, v[:1]]) for k, v in mesh.point_data.items()}
    cells = [(mesh.cells[0].type, mesh.cells[0].data), ("pyramid", np.array([base + [n]]))]
    return meshio.Mesh(mesh.points, cells, point_data=mesh.point_data)


def _lines_only(mesh):
    return meshio.Mesh(mesh.points, [("line", np.array([[0, 1], [1, 2]]))],
                       point_data=mesh.point_data)


def _cell_under_s00(mesh):
    conn = mesh.cells[0].data
    return conn[cell_at(mesh, [0.5, 0.5, 1.5])]


def _tangled(mesh):
    # an inner node of the cell under S00 pulled up through the top face: the Jacobian changes
    # sign inside the cell and is negative under the gauge (an inverted element); the surface
    # itself does not move, so the gauge lands where it should
    mesh.points[_cell_under_s00(mesh)[2]] = [1.0, 1.0, 3.5]


def _flattened(mesh):
    # the cell under S00 squashed to a sliver: its inner nodes moved up to 1e-9 below its top face
    nodes = _cell_under_s00(mesh)
    for lo, hi in zip(nodes[:4], nodes[4:], strict=True):
        mesh.points[lo] = mesh.points[hi] - [0, 0, 1e-9]


def _collapsed(mesh):
    # the cell under S00 squashed flat exactly: its inner nodes moved onto its top face nodes
    nodes = _cell_under_s00(mesh)
    for lo, hi in zip(nodes[:4], nodes[4:], strict=True):
        mesh.points[lo] = mesh.points[hi]


def _displacement_case(change):
    # a displacement case, so the reading needs the element's gradient (its Jacobian)
    def build(f):
        s = small(f)
        m = meshio.read(f / "block.vtu")
        x = m.points
        m.point_data["U"] = np.c_[1e-3 * x[:, 0], -3e-4 * x[:, 1], -3e-4 * x[:, 2]]
        change(m)
        meshio.write(f / "block.vtu", m)
        edit(s, 'strain = "E_pull"', 'displacement = "U"')
        return s
    return build


def _missing_array(f):
    s = small(f)
    edit(s, 'strain = "E_pull"', 'strain = "E_pul"')
    return s


def _four_components(mesh):
    mesh.point_data["E_pull"] = mesh.point_data["E_pull"][:, :4]


def _components_mismatch(f):
    s = small(f)
    edit(s, 'strain = "E_pull"', 'strain = "E_pull"\ncomponents = ["xx", "yy", "xy"]')
    return s


def _nan_at_gauge(mesh):
    top = mesh.points[:, 2] == 2.0
    mesh.point_data["E_pull"][top & (mesh.points[:, 0] <= 1.0)] = np.nan


def _nan_everywhere(mesh):
    mesh.point_data["E_pull"][:] = np.nan


def _inf_at_gauge(mesh):
    top = mesh.points[:, 2] == 2.0
    mesh.point_data["E_side"][top & (mesh.points[:, 0] <= 1.0), 3] = np.inf


SHELL_FACES = '[[case]]\nname = "bend"\nstrain = { top = "E_top", bottom = "E_bot" }\n'


def _opposed_normals(f):
    # cell 9 spans x in [2, 3], y in [1, 2]: a grid from x = 1.6 to 2.4 at y = 1.5 crosses into it
    return write_shell_study(f, flip=9, case_toml=SHELL_FACES)


def _local_axes_missing(f):
    # a panel turned 30 degrees about x: in-plane (xx, yy, xy) cell data are element axes there
    return write_shell_study(
        f, tilt_deg=30.0, case_toml='[[case]]\nname = "bend"\nstrain = "E_loc"\n',
        cell_data=lambda c, rot: {"E_loc": np.tile([500e-6, -100e-6, 80e-6], (c, 1))})


def _axes_on_point_data(f):
    return write_shell_study(
        f, tilt_deg=30.0,
        case_toml='[[case]]\nname = "bend"\nstrain = "E_loc"\naxes = "frame"\n',
        point_data=lambda n: {"E_loc": np.tile([500e-6, -100e-6, 80e-6], (n, 1))},
        cell_data=lambda c, rot: {"frame": np.tile(np.r_[rot[:, 0], rot[:, 1]], (c, 1))})


def _displacement_cell_data(f):
    s = small(f)
    m = meshio.read(f / "block.vtu")
    m.cell_data["U"] = [np.zeros((len(m.cells[0].data), 3))]
    meshio.write(f / "block.vtu", m)
    edit(s, 'strain = "E_pull"', 'displacement = "U"')
    return s


def _time_index_single(f):
    s = small(f)
    edit(s, 'strain = "E_pull"', 'strain = "E_pull"\ntime_index = 2')
    return s


def _plane_without_key(f):
    pts, quads, _ = panel(z0=0.0)
    top = np.tile([800e-6, -240e-6, 50e-6], (len(pts), 1))
    meshio.write(f / "panel.vtu", meshio.Mesh(pts, [("quad", quads)], point_data={"E": top}))
    gauge = {"gauge": "P1", "x": 2.0, "y": 1.5, "z": 0.0, "dir_x": 1, "dir_y": 0, "dir_z": 0}
    pd.DataFrame([gauge]).to_csv(f / "gauges.csv", index=False)
    s = f / "study.toml"
    s.write_text('[model]\nfile = "panel.vtu"\nlength_unit = "mm"\n[[case]]\nname = "c"\n'
                 'strain = "E"\n[gauges]\nfile = "gauges.csv"\n', encoding="utf-8")
    return s


def _out_exists(f):
    s = small(f)
    (f / "out").mkdir()
    return s


def _gauge_edit(change, **kw):
    return lambda f: with_gauges(f, change, **kw)


def _readings_edit(change, **kw):
    return lambda f: with_readings(f, change, **kw)


def _model_edit(change):
    return lambda f: with_model(f, change)


def _study_edit(old, new, **kw):
    def build(f):
        s = small(f, **kw)
        edit(s, old, new)
        return s
    return build


def _zero_load_rule(change):
    def build(f):
        s = with_readings(f, change)
        edit(s, 'zero = "first"', 'zero = "zero-load"')
        return s
    return build


def _swap_header(old, new):
    return lambda lines: [lines[0].replace(old, new, 1)] + lines[1:]


def _drop_column(name):
    def change(lines):
        k = lines[0].split(",").index(name)
        return [",".join(c for j, c in enumerate(line.split(",")) if j != k) for line in lines]
    return change


def _decimal_commas(lines):
    # a comma-separated export whose numbers carry decimal commas: the split is ambiguous
    return [lines[0]] + [line.replace(".", ",") for line in lines[1:]]


def _units_row(lines):
    units = ["", "kN", "kN", "µε", "mV/V", "µε"]
    return [lines[0], ",".join(units)] + lines[1:]


def _no_zero_row(lines):
    # every row loaded: the first row has P = 2.5 kN (the peak is 10 kN)
    return [lines[0]] + [line for line in lines[1:] if not line.startswith(("0,", "4,"))]


RUN = "run"
MISSING_S01 = "the file has columns: step, P_kN, S_kN, S00, S02"
EXCLUDE_S99 = '[[override]]\ngauge = "S99"\naction = "exclude"\nreason = "debonded"\n[criteria]'
EXCLUDE_S01 = '[[override]]\ngauge = "S01"\naction = "exclude"\n[criteria]'

CATALOGUE: dict[str, Bad] = {
    # study file
    "study-toml-syntax": Bad(
        _toml_syntax, ("study.toml", "not valid TOML", "line 4")),
    "study-unknown-top-key": Bad(
        _unknown_top, ("study.toml", "unknown key 'titel'", "did you mean 'title'")),
    "study-unknown-key-in-table": Bad(
        _unknown_in_table,
        ("unknown key 'position_tolerance'", "[gauges]", "did you mean 'position_tol'")),
    "study-unknown-key-in-case": Bad(
        _unknown_in_case, ("[[case]] #2", "unknown key 'compnents'", "did you mean 'components'")),
    "study-missing-file": Bad(
        lambda f: f / "nothere.toml", ("nothere.toml", "does not exist")),
    "study-missing-gauges-table": Bad(
        _missing_gauges_table, ("study.toml", "[gauges] table is missing", "file = ")),
    "study-missing-length-unit": Bad(
        _missing_length_unit, ("length_unit is missing", "mm, m, in")),
    "study-case-without-array": Bad(
        _case_without_array, ("[[case]] 'side'", "exactly one of", "found none"), lines=1),
    "study-case-two-arrays": Bad(
        _case_two_arrays, ("[[case]] 'pull'", "exactly one of", "found strain, displacement"),
        lines=1),
    "study-model-file-missing": Bad(
        _model_file_missing, ("[model] file 'blok.vtu'", "does not exist")),
    "study-not-utf8": Bad(
        _not_utf8, ("study.toml", "not UTF-8")),
    "study-number-as-text": Bad(
        _not_a_number, ("[gauges] position_tol", "'0.2'", "not a number", "without quotes")),
    "study-unknown-zero-rule": Bad(
        _bad_zero_rule, ("[readings] zero = 'start'", '"first"', '"zero-load"')),
    "study-every-problem-at-once": Bad(
        _three_problems, ("unknown key 'titel'",), lines=3),
    # model result
    "model-truncated": Bad(
        _truncated, ("block.vtu", "cannot be read", "truncated")),
    "model-empty": Bad(
        _empty_model, ("block.vtu", "empty")),
    "model-unknown-format": Bad(
        _unknown_format, ("block.res", "no reader recognises")),
    "model-pyramid": Bad(
        _model_edit(_pyramid), ("block.vtu", "pyramid", "not supported", "supported: triangle")),
    "model-voxels": Bad(
        _voxels, ("block.vtu", "VTK type 11 (voxel)", "skips", "supported: triangle")),
    "model-lines-only": Bad(
        _model_edit(_lines_only), ("block.vtu", "line cells", "shell or solid")),
    "model-missing-array": Bad(
        _missing_array, ("block.vtu", "case 'pull'", "array 'E_pul'",
                         "E_pull (point, 6), E_side (point, 6)", "did you mean 'E_pull'")),
    "model-wrong-component-count": Bad(
        _model_edit(_four_components), ("block.vtu", "array 'E_pull'", "4 component(s)",
                                        "needs 6")),
    "model-components-mismatch": Bad(
        _components_mismatch, ("array 'E_pull'", "has 6 components", "lists 3")),
    "model-nan-at-gauge": Bad(
        _model_edit(_nan_at_gauge), ("case 'pull'", "array 'E_pull'", "NaN or infinite", "S00")),
    "model-nan-everywhere": Bad(   # every gauge: counted, the first ones named in map order
        _model_edit(_nan_everywhere), ("case 'pull'", "NaN or infinite", "gauge(s): S00, S01, ")),
    "model-inf-at-gauge": Bad(
        _model_edit(_inf_at_gauge), ("case 'side'", "array 'E_side'", "NaN or infinite", "S00")),
    "model-shell-opposed-normals": Bad(
        _opposed_normals, ("gauge 'P1'", "opposed normals")),
    "model-local-axes-missing": Bad(
        _local_axes_missing, ("case 'bend'", "(xx, yy, xy)", "axes = ")),
    "model-axes-on-point-data": Bad(
        _axes_on_point_data, ("case 'bend'", "point data", "local axes", "cell data")),
    "model-displacement-cell-data": Bad(
        _displacement_cell_data, ("displacement 'U'", "cell data", "at the nodes")),
    "model-time-index-single-state": Bad(
        _time_index_single, ("block.vtu", "time_index = 2", "single state")),
    "model-plane-without-plane-key": Bad(
        _plane_without_key, ("panel.vtu", "2D plane model", "plane = ")),
    # gauge map
    "gauges-duplicate-id": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, gauge="S00")),
        ("gauges.csv", "gauge id 'S00'", "rows [2, 3]", "unique")),
    "gauges-repeated-column": Bad(   # pandas would read the second 'x' as 'x.1', unused
        _gauge_edit(lambda g: g.insert(2, "x", "9", allow_duplicates=True) or g),
        ("gauges.csv", "column 'x' appears 2 times in the header (columns 2, 3)", "rename")),
    "gauges-rows-longer-than-header": Bad(   # pandas made the ids its index: all one column off
        _gauge_lines(",extra"),
        ("gauges.csv", "3 row(s) have more fields than the header's", "line 2 has", "extra"),
        lines=1),
    "gauges-zero-direction": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, dir_x=0, dir_y=0, dir_z=0)),
        ("gauges.csv row 3", "gauge 'S01'", "zero length")),
    "gauges-direction-along-normal": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, dir_x=0, dir_y=0, dir_z=1)),
        ("gauge 'S01'", "90 degrees out of the surface plane", "limit 45")),
    "gauges-off-model": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, z=3.0)),
        ("gauge 'S01'", "is 1 mm from the model surface", "snap_tol 0.2 mm")),
    "gauges-rosette-two-grids": Bad(
        _gauge_edit(lambda g: g.iloc[:-1], gauges=rosette_gauges()),
        ("gauges.csv", "rosette 'R'", "2 grid(s)", "at least three")),
    "gauges-rosette-same-angle": Bad(
        _gauge_edit(lambda g: g, gauges=rosette_gauges((0, 1, 90))),
        ("gauges.csv", "rosette 'R'", "[0.0, 1.0, 90.0]", "degenerate")),
    "gauges-rosette-one-direction": Bad(
        _gauge_edit(lambda g: g, gauges=rosette_gauges((0, 0, 180))),
        ("gauges.csv", "rosette 'R'", "one direction")),
    "gauges-unknown-face": Bad(
        _gauge_edit(lambda g: set_cell(g, 0, face="upper")),
        ("gauges.csv row 2", "gauge 'S00'", "face 'upper'", "top or bottom")),
    "gauges-face-on-solid": Bad(
        _gauge_edit(lambda g: set_cell(g, 0, face="top")), ("gauge 'S00'", "face 'top'", "solid")),
    "gauges-kt-in-percent": Bad(
        _gauge_edit(lambda g: set_cell(g, 0, kt=0.9)),
        ("gauges.csv row 2", "gauge 'S00'", "kt = 0.9", "write 0.009")),
    "gauges-missing-column": Bad(
        _gauge_edit(lambda g: g.drop(columns="dir_z")),
        ("gauges.csv", "dir_z", "missing", "found gauge, x, y, z")),
    "gauges-not-a-number": Bad(
        _gauge_edit(lambda g: set_cell(g, 0, x="0,6")),
        ("gauges.csv row 2", "gauge 'S00'", "column x", "'0,6'", "not a number", "decimal point")),
    "gauges-infinite-coordinate": Bad(
        _gauge_edit(lambda g: set_cell(g, 0, y="inf")),
        ("gauges.csv row 2", "gauge 'S00'", "column y", "'inf'", "not a finite number")),
    "gauges-blank-id": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, gauge="")), ("gauges.csv row 3", "gauge id is blank")),
    "gauges-unknown-column": Bad(
        _gauge_edit(lambda g: g.rename(columns={"length": "lenght"})),
        ("gauges.csv", "unknown column 'lenght'", "did you mean 'length'")),
    "gauges-bad-polarity": Bad(
        _gauge_edit(lambda g: set_cell(g, 2, polarity=2)),
        ("gauges.csv row 4", "gauge 'S02'", "polarity 2", "+1 or -1")),
    "gauges-file-missing": Bad(
        _study_edit('file = "gauges.csv"', 'file = "gauge.csv"'),
        ("[gauges] file 'gauge.csv'", "does not exist")),
    # readings
    "readings-gauge-column-missing": Bad(
        _readings_edit(_drop_column("S01")),
        ("readings.csv", "no column 'S01' for gauge 'S01'", MISSING_S01), RUN),
    "readings-not-a-number": Bad(
        _readings_edit(lambda ls: replace_cell(ls, 4, "S01", "12.5x")),
        ("readings.csv line 4", "column S01", "'12.5x'", "not a number"), RUN),
    "readings-decimal-commas-in-comma-file": Bad(
        _readings_edit(_decimal_commas),
        ("readings.csv line 3", "fields but the header has 6", "decimal commas"), RUN),
    "readings-quoted-decimal-comma": Bad(
        _readings_edit(lambda ls: replace_cell(ls, 3, "S00", '"324,129"')),
        ("readings.csv line 3", "column S00", "'324,129'", "decimal comma"), RUN),
    "readings-duplicate-step": Bad(
        _readings_edit(lambda ls: replace_cell(ls, 5, "step", "2")),
        ("readings.csv", "step 2 appears 2 times", "lines 4, 5"), RUN),
    "readings-no-zero-load-row": Bad(
        _zero_load_rule(_no_zero_row),
        ("readings.csv", "sequence 0", "no zero-load row", 'zero = "first"'), RUN),
    "readings-units-not-microstrain": Bad(
        _readings_edit(_units_row),
        ("readings.csv line 2", "column S01", "'mV/V'", "not microstrain"), RUN),
    "readings-load-column-missing": Bad(
        _readings_edit(_swap_header("P_kN", "P kN")),
        ("readings.csv", "no column 'P_kN' for load", "closest name: 'P kN'"), RUN),
    "readings-step-not-integer": Bad(
        _readings_edit(lambda ls: replace_cell(ls, 3, "step", "1.5")),
        ("readings.csv line 3", "column step", "'1.5'", "not an integer"), RUN),
    "readings-empty-file": Bad(
        _readings_edit(lambda ls: []), ("readings.csv", "empty"), RUN),
    "readings-load-value-missing": Bad(
        _readings_edit(lambda ls: replace_cell(ls, 4, "P_kN", "")),
        ("readings.csv", "load value missing", "step(s) 2"), RUN),
    "readings-file-missing": Bad(
        _study_edit('file = "readings.csv"', 'file = "reading.csv"'),
        ("[readings] file 'reading.csv'", "does not exist"), RUN),
    "readings-channel-is-a-load-column": Bad(
        _gauge_edit(lambda g: set_cell(g, 1, channel="P_kN")),
        ("gauge 'S01'", "column 'P_kN'", "load column"), RUN),
    # loads
    "loads-unknown-case": Bad(
        _study_edit('case = "pull"', 'case = "pul"'),
        ("[[load]] 'P_kN'", "case 'pul'", "cases: pull, side", "did you mean 'pull'"), RUN),
    "loads-zero-reference": Bad(
        _study_edit("reference = 10.0", "reference = 0.0"),
        ("[[load]] 'P_kN'", "reference = 0", "case 'pull'"), RUN),
    "loads-missing-reference": Bad(
        _study_edit("reference = 10.0\n", ""),
        ("[[load]] #1 ('P_kN')", "has no reference", "needs column, case and reference"), RUN),
    "loads-none-for-run": Bad(
        lambda f: small(f, readings=False), ("study.toml", "[readings]", "[[load]]"), RUN),
    # units
    "units-unknown-length-unit": Bad(
        _study_edit('length_unit = "mm"', 'length_unit = "cm"'),
        ("length_unit = 'cm'", "not known", "mm, m, in")),
    # criteria, overrides and outputs
    "criteria-no-tolerance-at-all": Bad(
        _study_edit("relative = 0.10\nabsolute_ue = 20.0", "relative = 0\nabsolute_ue = 0"),
        ("[criteria]", "both 0", "no gauge could pass")),
    "override-unknown-gauge": Bad(
        _study_edit("[criteria]", EXCLUDE_S99),
        ("[[override]]", "gauge 'S99'", "not in the gauge map"), RUN),
    "override-without-reason": Bad(
        _study_edit("[criteria]", EXCLUDE_S01), ("[[override]]", "gauge 'S01'", "needs a reason")),
    "output-folder-exists": Bad(
        _out_exists, ("output folder", "exists", "--force"), RUN),
}

# Bad elements under a gauge: inverted or collapsed cells are named with the gauge.
NEEDS_FIX = {
    # today: exit 0, the readings of a linear field stay right, nothing says the element is bad
    "model-inverted-element": Bad(
        _displacement_case(_tangled), ("gauge 'S00'", "element", "inverted")),
    "model-degenerate-element": Bad(
        _displacement_case(_flattened), ("gauge 'S00'", "element", "degenerate")),
    # today: exit 2, but "116 'hexahedron' cell(s) have a singular Jacobian (first: row 0 of
    # 'nodes')" - sample points counted as cells, an internal array named, no gauge, no element
    "model-collapsed-element-displacement": Bad(
        _displacement_case(_collapsed), ("element", "degenerate")),
    # today: exit 0 with "warning: invalid value encountered in divide" (zero-area boundary faces
    # give NaN normals in locate.build_surface)
    "model-collapsed-element-strain": Bad(
        _model_edit(_collapsed), ("element", "degenerate")),
}


def _run(case: Bad, folder: Path, capsys) -> tuple[int, list[str]]:
    study = case.build(folder)
    argv = ["--quiet", case.command, str(study)]
    if case.command == "run":
        argv += ["--out", str(folder / "out"), "--no-report"]
    capsys.readouterr()
    code = main(argv)
    err = capsys.readouterr().err
    return code, err.splitlines()


def _assert_refused(case: Bad, code: int, lines: list[str]) -> None:
    text = "\n".join(lines)
    assert code == 2, text
    assert "Traceback" not in text and "internal error" not in text, text
    # one line per problem: every stderr line is a whole error or warning, nothing wraps
    assert lines and all(ln.startswith(("error: ", "warning: ")) for ln in lines), text
    errors = [ln for ln in lines if ln.startswith("error: ")]
    assert any(all(part in ln for part in case.expect) for ln in errors), text
    if case.lines is not None:
        assert len(errors) == case.lines, text


@pytest.mark.parametrize("name", list(CATALOGUE), ids=list(CATALOGUE))
def test_bad_input_is_refused_with_culprit_and_expectation(name, tmp_path, capsys):
    case = CATALOGUE[name]
    code, lines = _run(case, tmp_path, capsys)
    _assert_refused(case, code, lines)


@pytest.mark.parametrize("name", list(NEEDS_FIX), ids=list(NEEDS_FIX))
def test_bad_element_at_a_gauge_is_named(name, tmp_path, capsys):
    case = NEEDS_FIX[name]
    code, lines = _run(case, tmp_path, capsys)
    _assert_refused(case, code, lines)


CHECK_MISSES = ["readings-not-a-number", "readings-duplicate-step", "readings-no-zero-load-row",
                "readings-gauge-column-missing", "override-unknown-gauge"]


@pytest.mark.parametrize("name", CHECK_MISSES, ids=CHECK_MISSES)
def test_check_finds_what_run_would_refuse(name, tmp_path, capsys):
    # README: `check` "reads everything, reports every problem". The same bad input as above,
    # given to check instead of run.
    case = CATALOGUE[name]
    code, lines = _run(Bad(case.build, case.expect, command="check"), tmp_path, capsys)
    _assert_refused(case, code, lines)


def test_debug_shows_no_traceback_for_input_problems(tmp_path, capsys):
    # --debug is for internal errors; an input problem stays one line per problem.
    study = _unknown_top(tmp_path)
    assert main(["--debug", "--quiet", "check", str(study)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and err.startswith("error: ")


# --------------------------------------------------------------------------------------------
# inputs that are accepted: not errors


def _run_ok(study: Path, folder: Path, capsys) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    capsys.readouterr()
    code = main(["--quiet", "run", str(study), "--out", str(folder / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == 0, err
    assert "Traceback" not in err
    return (pd.read_csv(folder / "out" / "gauges.csv"), pd.read_csv(folder / "out" / "flags.csv"),
            err)


def _expected_measured(gauges: pd.DataFrame) -> pd.DataFrame:
    # Reference: the analytic readings (strain transformation and TN-509, see builders), tared by
    # the first row, which is zero here.
    return block_readings(gauges).set_index("step")


def test_semicolon_file_with_decimal_commas_is_read(tmp_path, capsys):
    g = gauges3()
    study = small(tmp_path, gauges=g)
    df = block_readings(g)
    text = df.to_csv(sep=";", index=False, decimal=",")
    assert "," in text  # the file really has decimal commas
    (tmp_path / "readings.csv").write_text(text, encoding="utf-8")
    table, flags, _ = _run_ok(study, tmp_path, capsys)
    exp = _expected_measured(g)
    got = table.pivot(index="step", columns="gauge", values="measured_ue")
    # tolerance: readings are written to 0.001 ue and gauges.csv rounds to 0.001 ue
    np.testing.assert_allclose(got[list(g["gauge"])].to_numpy(), exp[list(g["gauge"])].to_numpy(),
                               rtol=0, atol=1e-9)
    assert set(table["status"]) <= {"tare", "pass", "zero-load"}
    assert flags.empty


def test_all_blank_channel_is_flagged_dead_and_kept(tmp_path, capsys):
    g = gauges3()
    study = small(tmp_path, gauges=g)
    df = block_readings(g)
    df["S01"] = np.nan  # written as blank cells
    df.to_csv(tmp_path / "readings.csv", index=False)
    table, flags, _ = _run_ok(study, tmp_path, capsys)
    dead = table[table["gauge"] == "S01"]
    assert len(dead) == len(df)  # kept: one row per step in gauges.csv
    assert not dead["status"].isin(["pass", "fail"]).any()
    assert dead["measured_ue"].isna().all()
    s01 = flags[flags["gauge"] == "S01"]
    assert not s01.empty
    # the other gauges are evaluated and pass (their readings equal the model's)
    others = table[(table["gauge"] != "S01") & ~table["status"].isin(["tare", "zero-load"])]
    assert set(others["status"]) == {"pass"}


def test_sentinel_value_is_flagged_not_an_error(tmp_path, capsys):
    g = gauges3()
    study = small(tmp_path, gauges=g)
    df = block_readings(g).astype({"S02": object})
    df.loc[2, "S02"] = "OVER"        # an overranged channel at step 2
    df.loc[3, "S00"] = -999999.0     # an open channel's numeric code at step 3
    df.to_csv(tmp_path / "readings.csv", index=False)
    table, flags, _ = _run_ok(study, tmp_path, capsys)
    sent = flags[flags["flag"] == "sentinel"]
    assert {(r.gauge, r.step) for r in sent.itertuples()} == {("S02", 2), ("S00", 3)}
    # the step is dropped for that gauge (not evaluated), the others are not touched
    row = table[(table["gauge"] == "S02") & (table["step"] == 2)].iloc[0]
    assert row["status"] in ("sentinel", "missing") and np.isnan(row["measured_ue"])
    assert table[(table["gauge"] == "S01") & (table["step"] == 2)].iloc[0]["status"] == "pass"


def test_readings_in_strain_warn_with_the_evidence(tmp_path, capsys):
    g = gauges3()
    study = small(tmp_path, gauges=g)
    df = block_readings(g)
    df[list(g["gauge"])] = df[list(g["gauge"])] * 1e-6   # exported in m/m
    df.to_csv(tmp_path / "readings.csv", index=False, float_format="%.6e")
    _, _, err = _run_ok(study, tmp_path, capsys)
    largest = np.abs(df[list(g["gauge"])].to_numpy()).max()
    warn = [ln for ln in err.splitlines() if ln.startswith("warning: ") and "microstrain" in ln]
    assert warn, err
    assert "readings.csv" in warn[0] and f"{largest:.3g}" in warn[0]


def test_mixed_solid_and_surface_cells_are_read(tmp_path, capsys):
    # A solid with a skin of triangles (as mesh writers add for groups): the solid is used.
    study = small(tmp_path)
    m = meshio.read(tmp_path / "block.vtu")
    top = np.flatnonzero(m.points[:, 2] == 2.0)[:3]
    m = meshio.Mesh(m.points, [(m.cells[0].type, m.cells[0].data), ("triangle", top[None, :])],
                    point_data=m.point_data)
    meshio.write(tmp_path / "block.vtu", m)
    capsys.readouterr()
    assert main(["--quiet", "check", str(study)]) == 0, capsys.readouterr().err


def test_nan_away_from_the_gauges_is_accepted(tmp_path, capsys):
    # NaN on the bottom face, far from every gauge: nothing a gauge reads is missing.
    study = small(tmp_path)
    m = meshio.read(tmp_path / "block.vtu")
    m.point_data["E_pull"][m.points[:, 2] == 0.0] = np.nan
    meshio.write(tmp_path / "block.vtu", m)
    capsys.readouterr()
    assert main(["--quiet", "check", str(study)]) == 0, capsys.readouterr().err


def test_rosette_at_valid_angles_passes_the_angle_check(tmp_path, capsys):
    # 0/60/120 (delta) and 0/45/90 (rectangular) rosettes are standard (ASTM E1561).
    for k, angles in enumerate(((0, 45, 90), (0, 60, 120))):
        folder = tmp_path / str(k)
        folder.mkdir()
        study = small(folder, gauges=rosette_gauges(angles))
        capsys.readouterr()
        assert main(["--quiet", "check", str(study)]) == 0, capsys.readouterr().err


def test_indicated_reference_agrees_with_the_tool(tmp_path):
    # Guards the helper the accepted-input tests rely on: the analytic readings of builders are
    # what the tool predicts for the block (both from the same closed forms, no tool output used).
    from correlate.model_readings.model import prepare
    from correlate.model_readings.table import predict_table
    from correlate.readers.study import read_study

    g = gauges3()
    study = small(tmp_path, gauges=g, readings=False)
    table = predict_table(prepare(read_study(study)))
    got = table[table["case"] == "pull"].set_index("gauge")["predicted_ue"]
    # tolerance: linear fields are exact on hexahedra; round-off on ~1000 ue
    np.testing.assert_allclose(got[list(g["gauge"])].to_numpy(), block_indicated(g, "pull"),
                               rtol=1e-9, atol=0)



def _semicolon_map(folder: Path) -> Path:
    """A small study whose gauge map is saved with semicolons, decimal commas and a BOM."""
    import re

    study = with_gauges(folder, lambda g: g)
    path = folder / "gauges.csv"
    text = re.sub(r"(?<=\d)\.(?=\d)", ",", path.read_text(encoding="utf-8").replace(",", ";"))
    assert ";" in text and "0,6" in text
    path.write_bytes(("\ufeff" + text).encode("utf-8"))
    return study


@pytest.mark.parametrize("saved", ["stray-delimiters", "semicolons"])
def test_a_gauge_map_as_a_spreadsheet_saves_it_reads_as_the_plain_one(saved, tmp_path, capsys):
    # a spreadsheet's empty trailing fields are no extra column; a spreadsheet in a locale whose
    # decimal mark is the comma saves ';'-separated text with decimal commas, often with a
    # byte-order mark. Either way the same gauges at the same places as the plain map
    # (model_readings.csv byte for byte).
    builds = {"plain": _gauge_lines(""),
              saved: _gauge_lines(",,") if saved == "stray-delimiters" else _semicolon_map}
    for name, build in builds.items():
        (tmp_path / name).mkdir()
        study = build(tmp_path / name)
        assert main(["--quiet", "predict", str(study), "--out", str(tmp_path / name / "o")]) == 0
    capsys.readouterr()
    assert (tmp_path / saved / "o" / "model_readings.csv").read_bytes() == \
        (tmp_path / "plain" / "o" / "model_readings.csv").read_bytes()
