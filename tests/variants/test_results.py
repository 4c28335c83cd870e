"""variants.csv rows and the identification of a sweep, from fabricated variant results.

The readings of each variant are an exact polynomial in the parameters, so the truth of every
check is known from algebra alone (no cluster, no model files).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from correlate.core.errors import StudyError
from correlate.variants.evaluate import VariantResult
from correlate.variants.results import identify_sweep, variants_table
from correlate.variants.sweep_file import Identify, Sweep, Variant

GAUGES = ["A", "B", "C"]
STEPS = np.array([0, 1, 2, 3])
SENS_K = np.array([[0, 0, 0], [10, -4, 2], [20, -8, 4], [30, -12, 6]], dtype=float)  # ue per k
SENS_C = np.array([[0, 0, 0], [1, 5, -3], [2, 10, -6], [3, 15, -9]], dtype=float)    # ue per c


def readings(k: float, c: float) -> np.ndarray:
    """(steps, gauges) readings: linear in k, quadratic in c, with a k c cross term."""
    return 100.0 + SENS_K * k + SENS_C * c**2 + 0.5 * k * c * SENS_K


def sweep_of(grid, identify=None, base=None, problems=None) -> tuple[Sweep, dict]:
    variants, results = [], {}
    for i, (k, c) in enumerate(grid):
        name = f"v{i}"
        problem = (problems or {}).get(name, "")
        variants.append(Variant(name=name, row=i + 2, file=Path(f"/x/{name}.vtu"), case_files={},
                                parameters={"k": k, "c": c}, problem=problem))
        if problem:
            results[name] = VariantResult(name=name, failure=problem)
            continue
        p = readings(k, c)
        results[name] = VariantResult(
            name=name, metrics={"rms_ue": float(abs(k - 2.2) + abs(c - 1.5)),
                                "pass_fraction": 1.0, "verdict": "meets"},
            predicted=p, evaluated=np.broadcast_to(STEPS[:, None] > 0, p.shape).copy(),
            measured=np.zeros_like(p), steps=STEPS, gauges=tuple(GAUGES))
    sweep = Sweep(path=Path("/x/sweep.toml"), study=None, table_file=Path("/x/variants.csv"),
                  parameters=("k", "c"), variants=tuple(variants), identify=identify,
                  base=base or {})
    return sweep, results


GRID = [(k, c) for k in (1.0, 2.0, 3.0) for c in (1.0, 1.5, 2.0)]


def test_held_parameter_is_fixed_at_its_base_value():
    # c held at 1.5 (a variant value), k identified: noise-free readings of k = 2.37 must give
    # k = 2.37 back; the reduced surface is exact (linear in k at fixed c), so round-off only
    spec = Identify(parameters=("k",), response="quadratic", bounds={}, log=())
    sweep, results = sweep_of(GRID, identify=spec, base={"c": 1.5})
    ident = identify_sweep(sweep, results, readings(2.37, 1.5), gauges=GAUGES, steps=STEPS)
    assert ident["held"] == {"c": 1.5}
    # tolerance: the solver's xtol 1e-12 in scaled coordinates on a well-conditioned problem
    assert ident["estimate"]["k"] == pytest.approx(2.37, rel=1e-9)
    assert ident["surface_loo_rms_ue_max"] < 1e-9   # the quadratic surface is exact here
    assert len(ident["readings"]) == 9              # steps 1-3 x 3 gauges (step 0 not evaluated)


def test_held_value_outside_the_variants_is_refused():
    spec = Identify(parameters=("k",), response="quadratic", bounds={}, log=())
    sweep, results = sweep_of(GRID, identify=spec, base={"c": 2.5})
    with pytest.raises(StudyError, match="held parameter 'c' lies outside the variants"):
        identify_sweep(sweep, results, readings(2.0, 1.5), gauges=GAUGES, steps=STEPS)


def test_both_parameters_identified_together():
    spec = Identify(parameters=("k", "c"), response="quadratic", bounds={}, log=())
    sweep, results = sweep_of(GRID, identify=spec)
    ident = identify_sweep(sweep, results, readings(1.6, 1.8), gauges=GAUGES, steps=STEPS)
    assert ident["estimate"]["k"] == pytest.approx(1.6, rel=1e-8)
    assert ident["estimate"]["c"] == pytest.approx(1.8, rel=1e-8)
    assert ident["identifiable"]


def test_table_ranks_successes_and_lists_failures_last_with_their_reason():
    problems = {"v1": "variants.csv: row 3, column k: 'x' is not a number"}
    sweep, results = sweep_of(GRID, problems=problems)
    table = variants_table(sweep, results)
    assert list(table["variant"].iloc[:-1]) == sorted(
        [f"v{i}" for i in range(9) if i != 1],
        key=lambda n: (results[n].metrics["rms_ue"], int(n[1:])))
    last = table.iloc[-1]
    assert last["variant"] == "v1" and last["failure"] == problems["v1"]
    assert last["rank"] is pd.NA
    assert list(table["rank"].iloc[:-1]) == list(range(1, 9))


def test_a_variant_file_that_is_missing_or_a_folder_gets_its_own_reason(tmp_path):
    # each reason names the file and says what to do (the project's bad-input rule)
    from correlate.variants.evaluate import missing_file

    folder = tmp_path / "v1"
    folder.mkdir()
    made = tmp_path / "v2.vtu"
    made.write_text("x")
    as_folder = Variant(name="a", row=2, file=folder, case_files={}, parameters={})
    absent = Variant(name="b", row=3, file=tmp_path / "none.vtu", case_files={}, parameters={})
    present = Variant(name="c", row=4, file=made, case_files={}, parameters={})
    assert "is a folder" in missing_file(as_folder) and "v1" in missing_file(as_folder)
    assert "does not exist" in missing_file(absent) and "none.vtu" in missing_file(absent)
    assert missing_file(present) == ""
