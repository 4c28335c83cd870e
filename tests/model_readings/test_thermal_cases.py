"""Thermo-mechanical cases: the model reading is the mechanical strain, total minus alpha dT.

Reference: the total strain of a linear thermo-elastic solid is the mechanical strain plus the
free thermal strain alpha (T - T_ref) on the normal components, shear untouched (Timoshenko and
Goodier, Theory of Elasticity, ch. 13, from memory). The block's mechanical field is the analytic
'pull' case of tests/builders.py, so the expected readings come from the field, not the tool.
"""

from __future__ import annotations

import meshio
import numpy as np
import pytest
from builders import block_indicated, block_strain, default_gauges, solid_mesh

from correlate.core.errors import CorrelateWarning, StudyError
from correlate.model_readings.model import prepare
from correlate.model_readings.table import predict_table
from correlate.readers.study import read_study

ALPHA, T_REF = 23e-6, 20.0   # aluminium-like, invented


def hot_block(folder, thermal: str) -> object:
    mesh = solid_mesh("hexahedron20", n=(4, 3, 2))
    x = mesh.points
    temperature = 45.0 + 10.0 * x[:, 0] - 4.0 * x[:, 1]          # degC, linear: exact on hex20
    mech = block_strain("pull", x)
    total = np.zeros((len(x), 6))
    for k, (i, j) in enumerate(((0, 0), (1, 1), (2, 2))):
        total[:, k] = mech[:, i, j] + ALPHA * (temperature - T_REF)
    total[:, 3] = 2 * mech[:, 0, 1]                                  # engineering shear xy
    meshio.write(folder / "hot.vtu", meshio.Mesh(x, [("hexahedron20", mesh.blocks[0][1])],
                                                 point_data={"E_hot": total, "T": temperature}))
    gauges = default_gauges()
    gauges.to_csv(folder / "gauges.csv", index=False)
    study = folder / "study.toml"
    study.write_text('[model]\nfile = "hot.vtu"\nlength_unit = "mm"\n'
                     f'[[case]]\nname = "hot"\nstrain = "E_hot"\n{thermal}'
                     '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.2\nangle_tol = 2.0\n',
                     encoding="utf-8")
    return study, gauges


def test_thermal_case_reads_the_mechanical_strain(tmp_path):
    study, gauges = hot_block(tmp_path, 'thermal = { temperature = "T", alpha = 23e-6, '
                                        'reference_C = 20.0 }\n')
    table = predict_table(prepare(read_study(study))).set_index("gauge")
    expected = block_indicated(gauges, "pull")
    # atol 1e-6 ue: linear fields on quadratic elements are reproduced to rounding (~1e-9 ue);
    # the thermal part removed is alpha dT = 23e-6 x 25..65 degC, 575..1500 ue
    assert np.allclose(table.loc[gauges["gauge"], "predicted_ue"], expected, rtol=0, atol=1e-6)


def test_case_without_thermal_on_a_file_with_temperature_is_warned(tmp_path):
    study, gauges = hot_block(tmp_path, "")
    with pytest.warns(CorrelateWarning, match="carries a temperature field"):
        table = predict_table(prepare(read_study(study))).set_index("gauge")
    # the total strain is read: the free thermal expansion shows (hundreds of ue here)
    assert (table.loc[gauges["gauge"], "predicted_ue"] - block_indicated(gauges, "pull")).min() > 500


@pytest.mark.parametrize(("thermal", "expected"), [
    ('thermal = { temperature = "T", alpha = 23, reference_C = 20.0 }\n', "alpha = 23"),
    ('thermal = { temperature = "T", alpha = 23e-6 }\n', "reference_C"),
    ('thermal = { temperature = "", alpha = 23e-6, reference_C = 20.0 }\n', "temperature"),
    ('thermal = { temperature = "T", alpha = "23e-6", reference_C = 20.0 }\n', "without quotes"),
    ('thermal = { temperature = "T", alpha = 23e-6, reference_C = 20.0, beta = 1 }\n',
     "unknown key 'beta'"),
], ids=["alpha-not-per-degree", "no-reference", "no-array", "quoted", "unknown-key"])
def test_bad_thermal_settings_are_one_line(tmp_path, thermal, expected):
    study, _ = hot_block(tmp_path, thermal)
    with pytest.raises(StudyError, match=expected) as err:
        read_study(study)
    assert all("[[case]] 'hot'" in line for line in err.value.problems)
