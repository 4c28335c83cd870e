"""Every supported input format gives the same model readings as the VTU original.

Reference: the VTU file (meshio's own writer) and, for Exodus II hexahedron20, VTK's own Exodus
reader (the ordering meshio gets wrong; see ../shared/LIBRARY-NOTES.md).
"""

from __future__ import annotations

import os

import meshio
import numpy as np
import pytest
from builders import gauge_frame, solid_mesh

from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.fields import read_field
from correlate.readers.model import EXODUS_HEX20, open_model
from correlate.readers.study import Case


def field_values(x: np.ndarray) -> np.ndarray:
    e = np.zeros((len(x), 6))
    e[:, 0] = 1e-3 * (1 + 0.2 * x[:, 0] + 0.05 * x[:, 1] ** 2)
    e[:, 1] = -3e-4 * (1 + 0.1 * x[:, 2])
    e[:, 3] = 2e-4 * x[:, 1]
    return e


GAUGES = [dict(gauge="T1", x=1.3, y=1.1, z=2.0, dir_x=1, dir_y=0.4, dir_z=0, length=0.5, kt=0.01),
          dict(gauge="S1", x=2.2, y=0.0, z=0.9, dir_x=0.3, dir_y=0, dir_z=1, length=0.4),
          dict(gauge="E1", x=4.0, y=1.7, z=1.2, dir_x=0, dir_y=1, dir_z=0.2, length=0.0)]


def readings(path) -> np.ndarray:
    src = open_model(path)
    op = build_operator(src.mesh, gauge_frame(GAUGES))
    case = Case(name="c", kind="strain", array="E", components=None,
                time_index=1 if src.times else None)
    return evaluate_rows(op, read_field(src, case))["indicated"][op.row_kind == 0]


@pytest.fixture(scope="module")
def original(tmp_path_factory):
    folder = tmp_path_factory.mktemp("formats")
    mesh = solid_mesh("tetra10", n=(3, 2, 2))
    x = mesh.points
    m = meshio.Mesh(x, [("tetra10", mesh.blocks[0][1])], point_data={"E": field_values(x)})
    meshio.write(folder / "model.vtu", m)
    return folder, m, readings(folder / "model.vtu")


@pytest.mark.parametrize("suffix,fmt", [(".vtk", "vtk"), (".xdmf", "xdmf"), (".msh", "gmsh"),
                                        (".med", "med"), (".exo", "exodus")],
                         ids=["legacy-vtk", "xdmf", "gmsh-4.1", "med", "exodus"])
def test_format_gives_the_vtu_readings(original, suffix, fmt):
    folder, m, expected = original
    path = folder / f"model{suffix}"
    if fmt == "gmsh":
        # Gmsh stores 1, 3 or 9 components: write the full tensor, row-major (read as 9 components)
        from correlate.mechanics.tensors import from_voigt

        full = from_voigt(m.point_data["E"], ("xx", "yy", "zz", "xy", "yz", "xz")).reshape(-1, 9)
        m = meshio.Mesh(m.points, m.cells, point_data={"E": full})
    meshio.write(path, m, file_format=fmt)
    # tolerance: formats that store float64 reproduce exactly; round-off only
    np.testing.assert_allclose(readings(path), expected, rtol=1e-12, atol=0)


def test_xdmf_time_series_step(original):
    folder, m, expected = original
    cwd = os.getcwd()
    os.chdir(folder)  # meshio writes the .h5 beside the current folder (meshio issue 1442)
    try:
        with meshio.xdmf.TimeSeriesWriter("series.xdmf") as w:
            w.write_points_cells(m.points, m.cells)
            w.write_data(0.0, point_data={"E": 0.5 * m.point_data["E"]})
            w.write_data(1.0, point_data={"E": m.point_data["E"]})
    finally:
        os.chdir(cwd)
    np.testing.assert_allclose(readings(folder / "series.xdmf"), expected, rtol=1e-12, atol=0)


def test_exodus_hexahedron20_follows_vtks_reader(tmp_path):
    # Reference: VTK's own Exodus II reader (pyvista.read) on a file whose hex20 nodes are in the
    # Exodus order; our reader must give the same cell volumes and the same nodal field.
    import pyvista as pv

    mesh = solid_mesh("hexahedron20", n=(2, 2, 1), curve=0.05)
    conn_vtk = mesh.blocks[0][1]
    conn_exo = conn_vtk[:, EXODUS_HEX20]  # the map is its own inverse (swaps 12-15 and 16-19)
    x = mesh.points
    meshio.write(tmp_path / "h20.exo", meshio.Mesh(x, [("hexahedron20", conn_exo)],
                                                   point_data={"EXX": x[:, 0] ** 2}))
    ref = pv.read(tmp_path / "h20.exo")
    ref = ref.combine() if isinstance(ref, pv.MultiBlock) else ref
    ref_volume = ref.compute_cell_sizes(length=False, area=False)["Volume"]
    ours = open_model(tmp_path / "h20.exo").mesh
    ours_grid = pv.UnstructuredGrid({pv.CellType.QUADRATIC_HEXAHEDRON: ours.blocks[0][1]}, ours.points)
    our_volume = ours_grid.compute_cell_sizes(length=False, area=False)["Volume"]
    # tolerance: VTK's Exodus reader keeps coordinates in single precision (~1e-7 relative); a
    # wrong mid-node order changes these curved cells' volumes by far more (checked below)
    np.testing.assert_allclose(np.sort(our_volume), np.sort(ref_volume), rtol=1e-6, atol=0)
    wrong = pv.UnstructuredGrid({pv.CellType.QUADRATIC_HEXAHEDRON: conn_exo}, x)
    wrong_volume = wrong.compute_cell_sizes(length=False, area=False)["Volume"]
    assert np.max(np.abs(np.sort(wrong_volume) - np.sort(ref_volume)) / ref_volume) > 1e-3
    # and the VTU original's volumes are ours
    orig = pv.UnstructuredGrid({pv.CellType.QUADRATIC_HEXAHEDRON: conn_vtk}, x)
    np.testing.assert_allclose(our_volume, orig.compute_cell_sizes(length=False, area=False)["Volume"],
                               rtol=1e-12, atol=0)
