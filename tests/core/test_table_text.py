"""Byte identity of the bulk CSV writer (correlate.core.table_text) with the pandas writer.

The reference throughout is the pandas path that correlate has always written with,
``tables.pandas_csv``: ``round_table`` (microstrain to 0.001, lengths to 1e-6, other floats
through ``float(f"{v:.6g}")`` after round-off below 1e-12 of the column's scale is set to 0, no
negative zero) then ``pandas.DataFrame.to_csv(index=False, lineterminator="\\n",
float_format="%.10g")`` (pandas, reference library). Where single numbers are checked, the
reference is Python's own ``"%.10g" % v`` (printf-style formatting, ISO C ``%g``). Outputs are
text or bit patterns: every comparison is exact, no tolerance.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from correlate.core import floattext, table_text, tables

# Rounding 1.8e308 to 3 decimals overflows inside numpy (in the pandas writer too), and the hard
# values do not all fit float16/float32: those warnings are expected here.
pytestmark = pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")


def pandas_csv(df: pd.DataFrame) -> bytes:
    """Reference bytes: the pandas path (round_table, then DataFrame.to_csv)."""
    return tables.pandas_csv(df).encode("utf-8")


def bulk_csv(df: pd.DataFrame) -> bytes:
    text = table_text.format_csv(df)
    assert text is not None, "the table went to the pandas writer"
    return text


HARD = [0.0, -0.0, 1e-17, 6.5e-17, 123456.5, 0.0005, 1e21, 1e-5, math.nan, math.inf, -math.inf,
        2.0 ** 53, -0.0004, 1e-6, 1e-7, 12345.6789012, 999999.6, 0.1234565, 1.0000005, 2.5e-7,
        5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, -1.7976931348623157e308,
        math.pi, -math.e * 1e9, 0.1 + 0.2, 1e10, 9999999999.5, 123.4565, -0.0005, 0.00015,
        1e100, 1e-100, 1e-300, 1e300, -1e-300, 4.35, 1e22, 1e23, 1e-22, 1e-23, 7e-5, 99999.95,
        0.00999995, 0.0015, 0.0025, -0.0035, 2.5, 0.5, 1.5e-6, 2.0 ** 63, 123456789012345.0,
        9007199254740993.0, -123456789.0]
# a column scaled near 1 beside the hard values, so that round-off below NOISE is exercised
SCALED = [v * 1e-3 if math.isfinite(v) else v for v in HARD[: len(HARD) - 1]] + [45.0]
TEXTS = ["plain", "with,comma", 'with "quote"', "", " lead and trail ", "'=HYPERLINK(1)",
         "ünï©ødé", "line\nbreak", "cr\rreturn", "tab\there", "x" * 5000 + ',"' * 300,
         "\x00nul", "SG-01"]


def hard_frame() -> pd.DataFrame:
    n = len(HARD)
    text = (TEXTS * n)[:n]
    with np.errstate(over="ignore"):    # the hard values do not all fit float16/float32
        f32, f16 = np.array(HARD, dtype=np.float32), np.array(HARD, dtype=np.float16)
    return pd.DataFrame({
        "gauge": pd.Categorical((["SG,1", "SG2", None, 'q"g'] * n)[:n]),
        "predicted_ue": HARD,
        "snap_distance": HARD,
        "x": [-v for v in HARD],
        "ratio": HARD,
        "angle_deg": SCALED,
        "element": np.arange(n, dtype=np.int64) * -7919 + 2 ** 40,
        "small": np.arange(n, dtype=np.uint8),
        "flag": [bool(i % 3) for i in range(n)],
        "label": pd.Series(text, dtype=object),
        "mixed": pd.Series(([1, 2.5, None, "s,t", True, math.nan, -0.0, b"by"] * n)[:n],
                           dtype=object),
        "note": pd.Series(([None, "a", "b,c"] * n)[:n], dtype="string"),
        "count": pd.array(([1, None, -3] * n)[:n], dtype="Int64"),
        "ok": pd.array(([True, None, False] * n)[:n], dtype="boolean"),
        "f32_ue": f32,
        "f32_ratio": f32,
        "f16_ratio": f16,
        "f16_ue": f16,
        "inferred": pd.Series(text),                        # pandas' default text dtype
        "py_text": pd.Series(text, dtype=pd.StringDtype("python")),
        "int_cat": pd.Categorical(([3, None, -1] * n)[:n]),
    })


def test_hard_values_match_pandas():
    df = hard_frame()
    assert bulk_csv(df) == pandas_csv(df)   # reference: the pandas path


@pytest.mark.parametrize("column", list(hard_frame().columns))
def test_each_hard_column_alone_matches_pandas(column):
    # one column alone: csv.writer writes an empty single field as "" (reference: pandas)
    df = hard_frame()[[column]]
    assert bulk_csv(df) == pandas_csv(df)


def test_write_csv_gives_the_pandas_file_with_formula_escape(tmp_path):
    df = hard_frame()
    df["gauge2"] = ["=SUM(1)", "-G3", "+1", "-5", "@x"] * (len(df) // 5) + ["G"] * (len(df) % 5)
    tables.write_csv(df, tmp_path / "ours.csv")
    # reference: the pandas path on the table with its text cells escaped (OWASP CSV injection)
    tables.pandas_csv(tables.safe_text(df), tmp_path / "theirs.csv")
    assert (tmp_path / "ours.csv").read_bytes() == (tmp_path / "theirs.csv").read_bytes()
    assert "'=SUM(1)" in (tmp_path / "ours.csv").read_text(encoding="utf-8")


def test_tables_left_to_pandas_still_match(tmp_path):
    df = pd.DataFrame({
        "when": pd.to_datetime(["2024-01-02 03:04:05", None, "2024-06-30 00:00:00"]),
        "z": [1.0, -0.0, 2.5e-7],
        "c": np.array([1 + 2j, 0j, -1j]),
    })
    assert table_text.format_csv(df) is None          # datetimes: pandas' own text
    tables.write_csv(df, tmp_path / "t.csv")
    assert (tmp_path / "t.csv").read_bytes() == pandas_csv(df)
    empty = hard_frame().iloc[:0]
    assert bulk_csv(empty) == pandas_csv(empty)


def test_many_rows_many_blocks_match_pandas():
    # more rows than one block, so the threaded, block-wise path and the newline trick run
    rng = np.random.default_rng(20240611)
    n = 140_000
    df = pd.DataFrame({
        "gauge": pd.Categorical(rng.choice(["SG1", "SG,2", "SG3"], n)),
        "a_ue": np.round(rng.normal(0, 900, n), 4),
        "snap_distance": np.abs(rng.normal(0, 0.01, n)),
        "ratio": rng.lognormal(0, 6, n) * rng.choice([-1, 1], n),
        "element": rng.integers(-5, 10**9, n),
    })
    df.loc[rng.random(n) < 0.05, "a_ue"] = np.nan
    assert bulk_csv(df) == pandas_csv(df)   # reference: the pandas path
    df2 = df[["a_ue", "gauge"]]                        # no look-up column first
    assert bulk_csv(df2) == pandas_csv(df2)


def _six(v: float) -> float:
    return v if not math.isfinite(v) or v == 0 else float(f"{v:.6g}")


@pytest.mark.parametrize("kind", ["ue", "length", "sig"])
def test_float_text_matches_python_g_on_a_wide_sweep(kind):
    # reference: Python's "%.10g" % v (ISO C %g) after the same rounding; seeded values over
    # 26 decades, values at decimal ties (k / 10**d + 5e-7) and the hard values
    rng = np.random.default_rng({"ue": 1, "length": 2, "sig": 3}[kind])
    raw = rng.uniform(-1, 1, 40_000) * 10.0 ** rng.integers(-12, 14, 40_000)
    ties = rng.integers(-10**7, 10**7, 20_000) / 10.0 ** rng.integers(0, 10, 20_000) + 5e-7
    values = np.concatenate([raw, ties, np.array(HARD)])
    if kind == "sig":
        cells = floattext.sig_cells(values, 6).fill_null("").to_pylist()   # null: NaN
        expect = ["" if math.isnan(v) else "%.10g" % _six(v) for v in values]  # noqa: UP031
    else:
        d = 3 if kind == "ue" else 6
        shown = np.round(values, d) + 0.0
        cells = floattext.grid_cells(shown, d).fill_null("").to_pylist()
        expect = ["" if math.isnan(v) else "%.10g" % v for v in shown]  # noqa: UP031
    assert cells == expect


def test_format_g10_matches_python_g():
    # reference: Python's "%.10g" on the double nearest to c * 10**e (exact for these ranges)
    rng = np.random.default_rng(7)
    c = rng.integers(0, 10**10, 20_000) // 10 ** rng.integers(0, 10, 20_000)
    e = rng.integers(-22, 23, 20_000)
    neg = rng.random(20_000) < 0.5
    got = floattext.format_g10(neg, c, e).to_pylist()
    v = [(-1.0 if s else 1.0) * (float(ci) * 10.0 ** ei if ei >= 0 else float(ci) / 10.0 ** -ei)
         for s, ci, ei in zip(neg, c, e, strict=True)]
    assert got == ["%.10g" % x for x in v]  # noqa: UP031


def test_rounded_table_gives_the_doubles_of_round_table():
    rng = np.random.default_rng(11)
    n = 30_000
    df = pd.DataFrame({
        "r": np.concatenate([rng.normal(0, 1, n) * 10.0 ** rng.integers(-20, 25, n), HARD]),
        "a_ue": np.concatenate([rng.normal(0, 500, n), HARD]),
        "x": np.concatenate([rng.normal(0, 50, n), HARD]),
        "k": np.arange(n + len(HARD)),
    })
    ours, ref = table_text.rounded_table(df), tables.round_table(df)
    for col in df.columns:   # bit for bit: the same rounding must give the same doubles
        assert np.array_equal(ours[col].to_numpy().view(np.int64),
                              ref[col].to_numpy().view(np.int64))


def test_parquet_holds_the_rounded_typed_columns(tmp_path):
    df = hard_frame().drop(columns=["mixed"])
    tables.write_parquet(df, tmp_path / "t.parquet")
    back = pq.read_table(tmp_path / "t.parquet").to_pandas()   # read back with pyarrow
    ref = tables.round_table(df)
    assert list(back.columns) == list(ref.columns)
    assert isinstance(back["gauge"].dtype, pd.CategoricalDtype)
    assert back["element"].dtype == np.int64 and back["flag"].dtype == bool
    # exact: the Parquet file stores the very doubles the CSV was written from
    pd.testing.assert_frame_equal(back, ref, check_exact=True, check_dtype=False,
                                  check_categorical=False)


# ---------------------------------------------------------------- random frames (hypothesis)
FLOAT_NAMES = ["a_ue", "snap_distance", "x", "ratio", "b_ue", "y", "slope"]
floats = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-1e7, max_value=1e7),
    st.integers(-10**9, 10**9).flatmap(lambda k: st.sampled_from([k / 10**d for d in range(12)])),
    st.sampled_from(HARD),
)
texts = st.text(st.characters(exclude_categories=("Cs",)), max_size=12)


def column(kind: str, n: int):
    if kind == "float":
        return st.lists(floats, min_size=n, max_size=n).map(np.array)
    if kind == "float32":
        return st.lists(st.floats(width=32), min_size=n, max_size=n).map(
            lambda v: np.array(v, dtype=np.float32))
    if kind == "int":
        return st.lists(st.integers(-2**63, 2**63 - 1), min_size=n, max_size=n).map(
            lambda v: np.array(v, dtype=np.int64))
    if kind == "bool":
        return st.lists(st.booleans(), min_size=n, max_size=n).map(np.array)
    if kind == "str":
        return st.lists(st.one_of(texts, st.none()), min_size=n, max_size=n).map(
            lambda v: pd.Series(v, dtype=object))
    if kind == "mixed":
        item = st.one_of(texts, st.none(), st.integers(), st.floats(), st.booleans())
        return st.lists(item, min_size=n, max_size=n).map(lambda v: pd.Series(v, dtype=object))
    if kind == "string":
        return st.lists(st.one_of(texts, st.none()), min_size=n, max_size=n).map(
            lambda v: pd.Series(v, dtype="string"))
    if kind == "Int64":
        return st.lists(st.one_of(st.integers(-10**12, 10**12), st.none()), min_size=n,
                        max_size=n).map(lambda v: pd.array(v, dtype="Int64"))
    pool = st.lists(texts, min_size=1, max_size=4, unique=True)
    return pool.flatmap(lambda cats: st.lists(st.one_of(st.sampled_from(cats), st.none()),
                                              min_size=n, max_size=n).map(pd.Categorical))


KINDS = ["float", "float32", "int", "bool", "str", "mixed", "string", "Int64", "category"]


@st.composite
def frames(draw):
    n = draw(st.integers(0, 12))
    kinds = draw(st.lists(st.sampled_from(KINDS), min_size=1, max_size=5))
    data = {}
    for j, kind in enumerate(kinds):
        name = draw(st.sampled_from(FLOAT_NAMES)) if kind.startswith("float") else f"c{j}"
        if name in data:
            name = f"{name}{j}" if not name.endswith("_ue") else f"n{j}_ue"
        data[name] = draw(column(kind, n))
    return pd.DataFrame(data)


@settings(max_examples=300, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(frames())
def test_random_frames_match_pandas(df):
    assert bulk_csv(df) == pandas_csv(df)   # reference: the pandas path
