"""The library call and the package surface."""

from __future__ import annotations

import subprocess
import sys

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import solid_mesh

import correlate


def test_every_public_name_exists():
    for name in correlate.__all__:
        assert getattr(correlate, name) is not None


@pytest.mark.parametrize("kind", ["meshio", "pyvista"])
def test_predict_readings_from_python_objects(kind):
    # Reference: a uniform strain field; a gauge along x on the top face reads e_xx exactly, with
    # transverse sensitivity by the TN-509 relation (from memory): (e_a + Kt e_t) / (1 - nu0 Kt).
    import pyvista as pv

    mesh = solid_mesh("tetra10")
    strain = np.tile([1e-3, -3e-4, -3e-4, 0, 0, 0], (len(mesh.points), 1))
    m = meshio.Mesh(mesh.points, [("tetra10", mesh.blocks[0][1])], point_data={"E": strain})
    obj = m if kind == "meshio" else pv.from_meshio(m)
    g = pd.DataFrame([dict(gauge="A", x=1.5, y=1.2, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=0.5,
                           kt=0.02)])
    out = correlate.predict_readings(obj, g, {"c": "E"})
    expected = (1000 - 0.02 * 300) / (1 - 0.285 * 0.02)
    assert out["predicted_ue"].iloc[0] == pytest.approx(expected, abs=1e-6)
    assert out["axial_ue"].iloc[0] == pytest.approx(1000.0, abs=1e-6)


def test_import_and_help_stay_light():
    # heavy modules are imported lazily: `import correlate` must not pull in pyvista, VTK,
    # statsmodels or matplotlib (measured as modules loaded, not as time)
    code = ("import sys, correlate, correlate.commands.cli; "
            "print(sorted(m for m in ('pyvista', 'vtkmodules', 'statsmodels', 'matplotlib', "
            "'scipy', 'pandas', 'meshio') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_run_study_gives_the_tables_run_writes(tmp_path):
    # The library call and the command are one computation: each table the call returns, written
    # by the same writer, is byte for byte the file `correlate run` wrote.
    from builders import block_readings, default_gauges, write_block_study

    from correlate.commands.cli import main
    from correlate.core.tables import write_csv

    gauges = default_gauges()
    study = write_block_study(tmp_path, readings_rows=block_readings(gauges, offset=3.0),
                              gauges=gauges)
    result = correlate.run_study(study)
    assert not (tmp_path / "lib").exists()                      # nothing written without out
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "cli"),
                 "--no-report"]) == 0
    for table, file in (("gauges", "gauges.csv"), ("per_gauge", "gauge_stats.csv"),
                        ("flags", "flags.csv"), ("rosettes", "rosettes.csv")):
        write_csv(getattr(result, table), tmp_path / f"lib-{file}")
        assert (tmp_path / f"lib-{file}").read_bytes() == (tmp_path / "cli" / file).read_bytes()
    assert result.verdict["state"] in ("meets", "does not meet", "provisional")
    assert repr(result).startswith("<StudyResult 'Synthetic block': ")
    written = correlate.run_study(study, out=tmp_path / "lib", report=False)
    assert (tmp_path / "lib" / "gauges.csv").read_bytes() == \
        (tmp_path / "cli" / "gauges.csv").read_bytes()
    assert written.summary["fit"] == result.summary["fit"]
