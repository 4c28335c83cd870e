"""Property tests: invariants of gauge evaluation and rosette algebra, and fuzzed input parsers.

Every property is checked against something outside the code under test: the tensor transformation
law (a rotated model must read the same), linearity of the readings in the field (superposition),
the strain transformation e(t) = ex cos^2 t + ey sin^2 t + gxy sin t cos t (ASTM E1561; Gere &
Goodno, Mechanics of Materials, ch. 7), numpy.linalg.eigvalsh for principal values, and the analytic
reading of a linear field at the placement-band positions. Hypothesis runs derandomized with fixed
example counts; the fuzzers only assert that bad text gives a CorrelateError, never another
exception.
"""

from __future__ import annotations

import functools
import string
import warnings

import numpy as np
import pandas as pd
import pytest
from builders import gauge_frame, solid_mesh
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

from correlate.core.errors import CorrelateError
from correlate.mechanics.rosette import principal, reduce_grids
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.model_readings.table import band_limits
from correlate.readers.gauges import KNOWN, validate_gauges
from correlate.readers.model import Field, Mesh
from correlate.readers.study import SCHEMA, parse_study

FAST = {"derandomize": True, "deadline": None, "suppress_health_check": [HealthCheck.too_slow]}
SIZE = (4.0, 3.0, 2.0)  # the builders box: top face z = 2, outward normal +z


@functools.cache
def box(ctype: str = "hexahedron") -> Mesh:
    return solid_mesh(ctype, n=(3, 2, 1), size=SIZE)


def linear_field(points: np.ndarray, seed: int) -> np.ndarray:
    """E(x) = A0 + sum_k x_k G_k with seeded symmetric A0, G_k (~1e-4): tensors (n, 3, 3)."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(4, 3, 3)) * 1e-4
    a = 0.5 * (a + np.swapaxes(a, 1, 2))
    return a[0] + np.einsum("nk,kij->nij", points, a[1:] * 0.3)


def strain_field(values: np.ndarray) -> Field:
    return Field(case="c", kind="strain", location="point", data=values, source_kind="strain",
                 array="E")


gauge_rows = st.lists(
    st.tuples(st.floats(0.0, 1.0), st.floats(0.0, 1.0), st.floats(0.0, 180.0),
              st.sampled_from([0.0, 0.3, 0.6]), st.sampled_from([0.0, 0.01, -0.02])),
    min_size=1, max_size=4)


def top_gauges(rows, *, margin: float = 0.9) -> pd.DataFrame:
    """Gauges on the top face, kept ``margin`` inside its edges (grid, band and snap included)."""
    out = []
    for k, (u, v, deg, length, kt) in enumerate(rows):
        t = np.radians(deg)
        out.append({"gauge": f"G{k}", "x": margin + u * (SIZE[0] - 2 * margin),
                    "y": margin + v * (SIZE[1] - 2 * margin), "z": SIZE[2], "dir_x": np.cos(t),
                    "dir_y": np.sin(t), "dir_z": 0.0, "length": length, "kt": kt})
    return gauge_frame(out)


# --------------------------------------------------------------------------------------------
# evaluation


@settings(max_examples=20, **FAST)
@given(rows=gauge_rows, seed=st.integers(0, 2**31 - 1), field_seed=st.integers(0, 1000))
def test_readings_do_not_change_when_the_model_frame_is_rotated(rows, seed, field_seed):
    # Reference: a gauge reading is the scalar d.E.d (and t.E.t), invariant under any rotation R
    # applied to the mesh, the tensors (E' = R E R^T), the gauge positions and the directions.
    # scipy's Rotation.random draws R. Tolerance: the closest-point Newton stops near 1e-12 in
    # natural coordinates; strains are ~1e-4, so 1e-13 m/m is round-off.
    mesh = box()
    gauges = top_gauges(rows)
    E = linear_field(mesh.points, field_seed)
    op = build_operator(mesh, gauges, position_tol=0.1, angle_tol=2.0, snap_tol=0.5)
    ref = evaluate_rows(op, strain_field(E))

    R = Rotation.random(random_state=seed).as_matrix()
    turned = Mesh(points=mesh.points @ R.T, blocks=mesh.blocks, block_ids=mesh.block_ids,
                  family=mesh.family, source="rotated")
    g2 = gauges.copy()
    g2[["x", "y", "z"]] = gauges[["x", "y", "z"]].to_numpy() @ R.T
    g2[["dir_x", "dir_y", "dir_z"]] = gauges[["dir_x", "dir_y", "dir_z"]].to_numpy() @ R.T
    op2 = build_operator(turned, g2, position_tol=0.1, angle_tol=2.0, snap_tol=0.5)
    got = evaluate_rows(op2, strain_field(R @ E @ R.T))
    np.testing.assert_array_equal(op2.row_kind, op.row_kind)
    for key in ("axial", "transverse", "indicated"):
        np.testing.assert_allclose(got[key], ref[key], rtol=0, atol=1e-13)


@functools.cache
def _superposition_operator(ctype: str):
    mesh = box(ctype)
    gauges = top_gauges([(0.1, 0.2, 10.0, 0.6, 0.01), (0.8, 0.7, 75.0, 0.3, 0.0),
                         (0.5, 0.5, 135.0, 0.0, -0.02)])
    return mesh, build_operator(mesh, gauges, position_tol=0.2, angle_tol=3.0)


@settings(max_examples=30, **FAST)
@given(ctype=st.sampled_from(["hexahedron", "tetra10"]), kind=st.sampled_from(["strain",
                                                                                "displacement"]),
       a=st.floats(-5, 5), b=st.floats(-5, 5), seed=st.integers(0, 2**31 - 1))
def test_readings_are_linear_in_the_load(ctype, kind, a, b, seed):
    # Reference: superposition (linear elasticity): the reading of a*F1 + b*F2 is a*r1 + b*r2 for
    # arbitrary (here random, non-smooth) nodal fields. Tolerance: round-off of sums of ~1e-3 terms.
    mesh, op = _superposition_operator(ctype)
    rng = np.random.default_rng(seed)
    n = len(mesh.points)
    if kind == "strain":
        f1, f2 = rng.normal(size=(2, n, 3, 3)) * 1e-4
        f1, f2 = f1 + np.swapaxes(f1, 1, 2), f2 + np.swapaxes(f2, 1, 2)
    else:
        f1, f2 = rng.normal(size=(2, n, 3)) * 1e-4

    def rows(values):
        fld = Field(case="c", kind=kind, location="point", data=values, source_kind=kind,
                    array="F")
        return evaluate_rows(op, fld)

    r1, r2, r12 = rows(f1), rows(f2), rows(a * f1 + b * f2)
    for key in ("axial", "transverse", "indicated"):
        np.testing.assert_allclose(r12[key], a * r1[key] + b * r2[key], rtol=0, atol=1e-15)


def _analytic_reading(E: np.ndarray, centre, d, n, kt, nu0):
    # linear field: the grid average is the value at the grid centre (the field is linear along
    # the grid); e_ind = (e_a + Kt e_t) / (1 - nu0 Kt) (Vishay Micro-Measurements TN-509)
    t = np.cross(n, d)
    ea, et = d @ E @ d, t @ E @ t
    return (ea + kt * et) / (1 - nu0 * kt)


@settings(max_examples=25, **FAST)
@given(row=gauge_rows.map(lambda r: r[:1]), ptol=st.sampled_from([0.0, 0.1, 0.25]),
       atol=st.sampled_from([0.0, 1.0, 4.0]), field_seed=st.integers(0, 1000))
def test_placement_band_is_the_reading_range_over_the_placement_tolerance(row, ptol, atol,
                                                                          field_seed):
    # Reference: the analytic reading of a linear field at every placement the tolerances allow
    # (centre moved by ptol in 8 directions in the tangent plane, grid turned by 0, +/- atol): the
    # band must be their lowest and highest, and must contain the centre reading.
    mesh = box()
    gauges = top_gauges(row)
    op = build_operator(mesh, gauges, position_tol=ptol, angle_tol=atol)
    field = linear_field(mesh.points, field_seed)
    A = linear_field(np.zeros((1, 3)), field_seed)[0]
    G = [linear_field(np.eye(3)[k:k + 1], field_seed)[0] - A for k in range(3)]
    ind = evaluate_rows(op, strain_field(field))["indicated"]
    low, high = band_limits(op, ind)

    g = gauges.iloc[0]
    c = g[["x", "y", "z"]].to_numpy(dtype=float)
    d0 = g[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    n = np.array([0.0, 0.0, 1.0])
    across = np.cross(n, d0)
    offsets = [(0.0, 0.0)] + ([(ptol * np.cos(p), ptol * np.sin(p))
                               for p in np.linspace(0, 2 * np.pi, 8, endpoint=False)]
                              if ptol > 0 else [])
    angles = [0.0] + ([-atol, atol] if atol > 0 else [])
    values = []
    for a, b in offsets:
        x = c + a * d0 + b * across
        E = A + sum(x[k] * G[k] for k in range(3))
        for ang in angles:
            th = np.radians(ang)
            d = np.cos(th) * d0 + np.sin(th) * np.cross(n, d0)
            values.append(_analytic_reading(E, x, d, n, g["kt"], 0.285))
    centre = _analytic_reading(A + sum(c[k] * G[k] for k in range(3)), c, d0, n, g["kt"], 0.285)
    # tolerance: round-off on ~1e-4 strains
    np.testing.assert_allclose([low[0], high[0]], [min(values), max(values)], rtol=0, atol=1e-15)
    assert low[0] - 1e-15 <= centre <= high[0] + 1e-15
    point = ind[(op.row_kind == 1) & (op.row_gauge == 0)][0]
    np.testing.assert_allclose(point, centre, rtol=0, atol=1e-15)  # the centre row itself


# --------------------------------------------------------------------------------------------
# rosettes


def _design(angles_deg: np.ndarray) -> np.ndarray:
    t = np.radians(angles_deg)
    return np.c_[np.cos(t) ** 2, np.sin(t) ** 2, np.sin(t) * np.cos(t)]


strain_ue = st.floats(-3000.0, 3000.0)


@settings(max_examples=100, **FAST)
@given(ex=strain_ue, ey=strain_ue, gxy=strain_ue,
       angles=st.lists(st.floats(0.0, 180.0), min_size=3, max_size=4),
       kt=st.sampled_from([None, 0.0, 0.012, -0.03]))
def test_rosette_reduction_recovers_any_plane_strain_state(ex, ey, gxy, angles, kt):
    # Reference: the strain transformation e(t) = ex cos^2 t + ey sin^2 t + gxy sin t cos t (ASTM
    # E1561) gives each grid's strain; with Kt the grid indicates (e(t) + Kt e(t + 90)) / (1 - nu0
    # Kt) (TN-509). Angles are any set whose design matrix is well conditioned (numpy.linalg.cond
    # below 30, a margin under the tool's own limit of 35, mechanics.rosette.MAX_CONDITION, which
    # it measures on its own scaling). Tolerance: condition number x round-off on 3000 ue.
    a = np.array(angles) - angles[0]  # grid A at 0, as the tool measures angles
    assume(np.linalg.cond(_design(a)) < 30.0)
    strain = np.array([ex, ey, gxy])
    e = _design(a) @ strain
    if kt:
        e = (e + kt * (_design(a + 90.0) @ strain)) / (1 - 0.285 * kt)
    out = reduce_grids(e, a, kt=kt, nu0=0.285)
    np.testing.assert_allclose([out["ex"], out["ey"], out["gxy"]], strain, rtol=0, atol=1e-8)
    np.testing.assert_allclose(out["residual"], 0.0, rtol=0, atol=1e-8)


@settings(max_examples=100, **FAST)
@given(ex=strain_ue, ey=strain_ue, gxy=strain_ue)
def test_principal_values_are_the_eigenvalues_of_the_in_plane_tensor(ex, ey, gxy):
    # Reference: numpy.linalg.eigvalsh of [[ex, gxy/2], [gxy/2, ey]] (tensor shear). The direction
    # at angle_deg is an eigenvector for e1. Tolerance: round-off on 3000 ue.
    T = np.array([[ex, gxy / 2], [gxy / 2, ey]])
    w = np.linalg.eigvalsh(T)
    out = principal(ex, ey, gxy, noise=1.0)
    np.testing.assert_allclose([out["e1"], out["e2"]], [w[1], w[0]], rtol=0, atol=1e-9)
    np.testing.assert_allclose(out["shear_max"], w[1] - w[0], rtol=0, atol=1e-9)
    if w[1] - w[0] > 1.0:
        th = np.radians(float(out["angle_deg"]))
        v = np.array([np.cos(th), np.sin(th)])
        np.testing.assert_allclose(T @ v, w[1] * v, rtol=0, atol=1e-8)
        assert -90.0 < out["angle_deg"] <= 90.0
    else:
        assert np.isnan(out["angle_deg"])


# --------------------------------------------------------------------------------------------
# parsers: any text gives a Study / a table, or a CorrelateError; never another exception

_words = st.text(string.ascii_letters + "_-", min_size=1, max_size=8)
_keys = st.one_of(st.sampled_from(sorted(set().union(*SCHEMA.values()))), _words)
_scalars = st.one_of(
    st.integers(-10**6, 10**6), st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
    st.text(max_size=12), st.sampled_from(["block.vtu", "gauges.csv", "readings.csv", "mm", "in",
                                           "first", "zero-load", "pull", "engineering", "top"]))
_values = st.recursive(_scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=3), st.dictionaries(_keys, inner, max_size=3)), max_leaves=6)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return {"nan": "nan", "inf": "inf", "-inf": "-inf"}.get(str(v), repr(v))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').encode(
            "ascii", "backslashreplace").decode().replace("\\x", "\\u00") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return "{" + ", ".join(f'"{k}" = {_toml_value(x)}' for k, x in v.items()) + "}"


BASE_STUDY = {
    "title": "Fuzz",
    "model": {"file": "block.vtu", "length_unit": "mm", "stress_unit": "MPa"},
    "case": [{"name": "pull", "strain": "E_pull"}, {"name": "side", "strain": "E_side"}],
    "material": {"E": 70000.0, "nu": 0.3},
    "gauges": {"file": "gauges.csv", "position_tol": 0.2, "angle_tol": 2.0},
    "readings": {"file": "readings.csv", "zero": "first"},
    "load": [{"column": "P_kN", "case": "pull", "reference": 10.0}],
    "criteria": {"relative": 0.1, "absolute_ue": 20.0},
    "override": [{"gauge": "S00", "action": "keep", "reason": "r"}],
}


def _to_toml(doc: dict) -> str:
    """Write a dict as TOML: scalars first, then tables and arrays of tables (one level)."""
    lines = [f'"{k}" = {_toml_value(v)}' for k, v in doc.items()
             if not isinstance(v, dict) and not (isinstance(v, list) and v
                                                 and all(isinstance(x, dict) for x in v))]
    for k, v in doc.items():
        for table, array in ([(v, False)] if isinstance(v, dict) else
                             [(x, True) for x in v] if isinstance(v, list) and v
                             and all(isinstance(x, dict) for x in v) else []):
            lines.append(f'[["{k}"]]' if array else f'["{k}"]')
            lines += [f'"{kk}" = {_toml_value(vv)}' for kk, vv in table.items()]
    return "\n".join(lines) + "\n"


@st.composite
def toml_studies(draw) -> str:
    """A valid study with keys deleted, replaced or added (odd values, invented names), written
    as TOML; now and then the text itself is damaged."""
    doc = {k: ([dict(x) for x in v] if isinstance(v, list) else dict(v) if isinstance(v, dict)
               else v) for k, v in BASE_STUDY.items()}
    for _ in range(draw(st.integers(1, 4))):
        section = draw(st.sampled_from(sorted(doc) + ["health", "report", "test", "extra"]))
        action = draw(st.sampled_from(["drop", "replace", "set", "set"]))
        if action == "drop":
            doc.pop(section, None)
        elif action == "replace" or section not in doc or not isinstance(doc[section],
                                                                          dict | list):
            doc[section] = draw(_values)
        else:
            tables = doc[section] if isinstance(doc[section], list) else [doc[section]]
            tables = [t for t in tables if isinstance(t, dict)] or [{}]
            target = draw(st.sampled_from(tables))
            keys = sorted(target) + sorted(SCHEMA.get(section, set())) + ["zzz"]
            target[draw(st.sampled_from(keys))] = draw(_values)
    text = _to_toml(doc)
    if draw(st.integers(0, 4)) == 0:
        cut = draw(st.integers(0, len(text)))
        text = text[:cut] + draw(st.text(max_size=5)) + text[cut:]
    return text


@settings(max_examples=200, **FAST)
@given(text=st.one_of(toml_studies(), st.text(max_size=80)))
def test_study_parser_gives_a_study_or_a_correlate_error(text, tmp_path_factory):
    folder = tmp_path_factory.getbasetemp()
    for name in ("block.vtu", "gauges.csv", "readings.csv"):  # so paths in the text can exist
        (folder / name).touch()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            parse_study(text, folder / "study.toml")
        except CorrelateError as exc:
            assert exc.problems and all(p and "\n" not in p for p in exc.problems)


_cells = st.one_of(
    st.sampled_from(["", " ", "0", "1", "-1", "0.5", "1e3", "nan", "inf", "-inf", "1,5", "top",
                     "bottom", "upper", "surface", "embedded", "R", "A", "0.9", "1e400", "x",
                     "2-wire", "3-wire", "quarter-bridge"]),
    st.text(max_size=6), st.floats(allow_nan=True, allow_infinity=True).map(str))


VALID_ROW = {"gauge": "G", "x": "1.0", "y": "2.0", "z": "2.0", "dir_x": "1", "dir_y": "0.5",
             "dir_z": "0", "length": "0.3", "kt": "0.01", "rosette": "", "face": "", "mount": "",
             "grid": "", "channel": "", "position_tol": "", "angle_tol": "", "nu0": "",
             "normal_x": "", "normal_y": "", "normal_z": "", "gauge_factor": "",
             "daq_gauge_factor": "", "polarity": "", "range_ue": "",
             # measurement-chain columns (issue 14)
             "gauge_ohm": "350", "lead_ohm": "", "wiring": "", "shunt_gain": "",
             "nonlinearity": "", "lot": "", "temperature": "", "height": "",
             "bridge": "", "arm": ""}  # bridge columns (issue 14 item 1)


@st.composite
def gauge_tables(draw) -> pd.DataFrame:
    """Valid maps with a few cells replaced (most of the time), or arbitrary column sets."""
    if draw(st.integers(0, 3)):
        known = draw(st.lists(st.sampled_from(list(KNOWN)), unique=True, max_size=6))
        columns = list(dict.fromkeys(["gauge", "x", "y", "z", "dir_x", "dir_y", "dir_z"] + known))
        n = draw(st.integers(1, 5))
        data = {c: [f"G{i}" if c == "gauge" else VALID_ROW[c] for i in range(n)] for c in columns}
        for _ in range(draw(st.integers(0, 3))):
            c, i = draw(st.sampled_from(columns)), draw(st.integers(0, n - 1))
            data[c][i] = draw(_cells)
        if draw(st.booleans()):  # a rosette group of every row
            data["rosette"] = ["R"] * n
            data["dir_y"] = [str(draw(st.floats(-2, 2))) for _ in range(n)]
    else:
        known = draw(st.lists(st.sampled_from(list(KNOWN)), unique=True, max_size=len(KNOWN)))
        extra = draw(st.lists(_words, unique=True, max_size=2))
        columns = list(dict.fromkeys(known + extra))
        n = draw(st.integers(0, 5))
        data = {c: [draw(_cells) for _ in range(n)] for c in columns}
    return pd.DataFrame(data, columns=list(data), dtype=str)


@settings(max_examples=150, **FAST)
@given(table=gauge_tables())
def test_gauge_map_validation_gives_a_table_or_a_correlate_error(table):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        # a random map may give gauge_factor without daq_gauge_factor: warned about, by design
        warnings.filterwarnings("ignore", message=".*gauge_factor is given without")
        try:
            out = validate_gauges(table, source="fuzz.csv")
        except CorrelateError as exc:
            assert exc.problems and all(p and "\n" not in p for p in exc.problems)
            return
    # accepted: unit grid directions and finite coordinates, one row per input row
    assert len(out) == len(table)
    d = out[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    np.testing.assert_allclose(np.linalg.norm(d, axis=1), 1.0, rtol=0, atol=1e-12)
    assert np.isfinite(out[["x", "y", "z"]].to_numpy(dtype=float)).all()


def test_fuzz_tables_reach_the_valid_path():
    # The fuzzer above is only useful if valid maps are among its inputs: a hand-made one passes.
    table = pd.DataFrame({"gauge": ["A"], "x": ["1"], "y": ["2"], "z": ["3"], "dir_x": ["1"],
                          "dir_y": ["0"], "dir_z": ["0"]})
    out = validate_gauges(table)
    assert out["gauge"].tolist() == ["A"]


@pytest.mark.parametrize("text", ["[load]\ncolumn = 'P'\ncase = 'c'\nreference = 1\n",
                                  "readings = 'r.csv'\n", "criteria = 3\n",
                                  "[criteria]\nslope = ['a', 'b']\n",
                                  "[[material]]\nE = 1\nnu = 0.3\nblocks = 2\n", "test = 'x'\n",
                                  "[[override]]\naction = 'keep'\nreason = 'r'\n",
                                  "[readings]\nsentinels = 5\n"],
                         ids=["load-as-table", "readings-as-text", "criteria-as-number",
                              "slope-as-words", "blocks-as-number", "test-as-text",
                              "override-without-gauge", "sentinels-as-number"])
def test_study_sections_of_the_wrong_shape_are_input_errors(text, tmp_path):
    # Shapes the fuzzer tends to find, pinned: each is a problem with the study, never a crash.
    with pytest.raises(CorrelateError):
        parse_study(text, tmp_path / "study.toml")
