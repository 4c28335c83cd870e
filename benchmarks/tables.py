"""Writing a long model-readings table: the bulk CSV writer beside the pandas path, one run.

A table shaped like ``model_readings.csv`` of a long series (invented values: 1,000,000 rows by
default, gauge and case as categories, eleven float columns, an integer) is written three ways:
the pandas path (``tables.pandas_csv``, one Python call per value), ``tables.write_csv`` (bulk,
byte-identical: checked here) and ``tables.write_parquet``. Run:
    python benchmarks/tables.py [rows]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from correlate.core import tables


def readings_table(rows: int, gauges: int = 500, seed: int = 18) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    steps = -(-rows // gauges)
    n = steps * gauges

    def ue() -> np.ndarray:
        return rng.normal(0.0, 800.0, n)[:rows]

    names = pd.Index([f"SG-{i:04d}" for i in range(gauges)])
    return pd.DataFrame({
        "gauge": pd.Categorical.from_codes(np.tile(np.arange(gauges), steps)[:rows], names),
        "case": pd.Categorical.from_codes(np.zeros(rows, dtype=np.int8), ["series"]),
        "predicted_ue": ue(), "axial_ue": ue(), "transverse_ue": ue(), "point_ue": ue(),
        "band_low_ue": ue(), "band_high_ue": ue(),
        "snap_distance": np.abs(rng.normal(0.0, 0.01, rows)),
        "element": rng.integers(0, 10**7, rows),
        "sens_position_ue_per_unit": rng.lognormal(0.0, 3.0, rows),
        "sens_angle_ue_per_deg": rng.normal(0.0, 30.0, rows),
        "fe_time": np.repeat(np.arange(steps) * 0.001, gauges)[:rows],
    })


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    df = readings_table(rows)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        figures = {}
        for name, write in (("pandas path (baseline)", lambda p: tables.pandas_csv(df, p)),
                            ("write_csv (bulk)", lambda p: tables.write_csv(df, p)),
                            ("write_parquet", lambda p: tables.write_parquet(df, p))):
            path = folder / name.split()[0]
            t = time.perf_counter()
            write(path)
            figures[name] = (time.perf_counter() - t, path.stat().st_size / 1e6)
        same = (folder / "pandas").read_bytes() == (folder / "write_csv").read_bytes()
    print(f"{rows:,} rows x {df.shape[1]} columns")
    for name, (seconds, mb) in figures.items():
        print(f"  {name:<24} {seconds:7.2f} s  {mb:8.1f} MB")
    base = figures["pandas path (baseline)"][0]
    print(f"  bulk CSV {base / figures['write_csv (bulk)'][0]:.1f} x faster; "
          f"byte-identical: {same}")


if __name__ == "__main__":
    main()
