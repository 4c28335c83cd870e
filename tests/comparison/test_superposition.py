"""Superposition of FE load cases to the test loads (comparison.pairing)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from correlate.comparison.pairing import case_factors, make_steps
from correlate.readers.study import Load


def test_factors_are_tared_load_over_reference_summed_per_case():
    # Linear elasticity: the prediction for loads P and S is P/P_ref x case_P + S/S_ref x case_S
    # (superposition, common practice for linear FE load cases). Hand values below.
    loads = np.array([[0.0, 0.0], [5.0, 1.0], [10.0, 2.0]])
    mapping = (Load("P", "pull", 10.0), Load("S", "side", 2.0))
    f = case_factors(loads, ("P", "S"), mapping, ["pull", "side"])
    np.testing.assert_allclose(f, [[0, 0], [0.5, 0.5], [1.0, 1.0]], rtol=0, atol=1e-15)


def test_two_loads_on_one_case_add():
    loads = np.array([[2.0, 3.0]])
    mapping = (Load("A", "c", 10.0), Load("B", "c", 5.0))
    f = case_factors(loads, ("A", "B"), mapping, ["c"])
    np.testing.assert_allclose(f, [[2.0 / 10.0 + 3.0 / 5.0]], rtol=1e-15, atol=0)


def test_make_steps_factors_use_the_tared_loads():
    # A 1 kN seating load at the tare row must not be counted as test load.
    table = pd.DataFrame({"step": [0, 1, 2], "sequence": [0, 0, 0], "P": [1.0, 6.0, 11.0]})
    steps = make_steps(table, ("P",), (Load("P", "pull", 10.0),), ["pull"], rule="first",
                       zero_tol=0.01, source="t")
    np.testing.assert_allclose(steps.factors[:, 0], [0.0, 0.5, 1.0], rtol=0, atol=1e-15)
    assert steps.active.tolist() == [False, True, True]
