"""Interpolation against an independent general-purpose reference: VTK's probe (pyvista `sample`)."""

from __future__ import annotations

import numpy as np
import pytest
from builders import gauge_frame, solid_mesh

from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.model import Field


@pytest.mark.parametrize("ctype,curve,rtol", [("tetra", 0.0, 1e-10), ("hexahedron", 0.0, 1e-10),
                                              ("tetra10", 0.0, 1e-5), ("hexahedron20", 0.0, 1e-4),
                                              ("tetra10", 0.05, 1e-4), ("hexahedron20", 0.05, 1e-3)],
                         ids=["tet4", "hex8", "tet10", "hex20", "tet10-curved", "hex20-curved"])
def test_interior_values_agree_with_vtk_probe(ctype, curve, rtol):
    # Reference: VTK's probe filter through pyvista's `sample`, which interpolates with VTK's own
    # shape functions. On linear cells both are exact to round-off; on quadratic cells, straight
    # or curved, VTK's inverse map is a damped Newton stopped at ~1e-5 (tet10) / ~1e-4 (hex20) in
    # natural coordinates (see LIBRARY-NOTES.md), which bounds the agreement (rtol per case above).
    import pyvista as pv

    mesh = solid_mesh(ctype, n=(3, 2, 2), curve=curve)
    x = mesh.points
    # a smooth non-polynomial field in e_xx only, so readings along x compare one scalar
    s = 1e-3 * (1.5 + np.sin(0.8 * x[:, 0]) * np.cos(0.6 * x[:, 1]) + 0.2 * x[:, 2])
    E = np.zeros((len(x), 3, 3))
    E[:, 0, 0] = s
    rng = np.random.default_rng(11)
    pts = np.c_[rng.uniform(0.4, 3.6, 25), rng.uniform(0.4, 2.6, 25), rng.uniform(0.3, 1.7, 25)]
    rows = [dict(gauge=f"P{i}", x=p[0], y=p[1], z=p[2], dir_x=1, dir_y=0, dir_z=0, mount="embedded")
            for i, p in enumerate(pts)]
    op = build_operator(mesh, gauge_frame(rows))
    ours = evaluate_rows(op, Field("c", "strain", "point", E, "strain", "E"))["axial"][op.row_kind == 0]
    celltype = {"tetra": pv.CellType.TETRA, "hexahedron": pv.CellType.HEXAHEDRON,
                "tetra10": pv.CellType.QUADRATIC_TETRA,
                "hexahedron20": pv.CellType.QUADRATIC_HEXAHEDRON}[ctype]
    grid = pv.UnstructuredGrid({celltype: mesh.blocks[0][1]}, x)
    grid.point_data["s"] = s
    probe = pv.PolyData(pts).sample(grid)
    assert probe["vtkValidPointMask"].all()
    np.testing.assert_allclose(ours, probe["s"], rtol=rtol, atol=0)
