"""Shell and plane models: faces, per-face arrays, normals."""

from __future__ import annotations

import numpy as np
import pytest
from builders import flat_panel, gauge_frame

from correlate.core.errors import GaugeError
from correlate.mechanics import elements, mapping
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.fields import read_field
from correlate.readers.model import Mesh, ModelSource
from correlate.readers.study import Case


def panel(ctype: str = "quad", flip: int | None = None, z0: float = 5.0) -> Mesh:
    """A flat 6 x 4 shell panel at height z0 (normal +z by the right-hand rule), 6 x 4 cells."""
    pts, quads = flat_panel(z0)
    if ctype == "quad8":
        ref = elements.ELEMENTS["quad8"].reference_nodes
        new = mapping.map_to_physical("quad", np.repeat(pts[quads], len(ref), axis=0),
                                       np.tile(ref, (len(quads), 1)))
        uniq, inv = np.unique(np.round(new, 9), axis=0, return_inverse=True)
        pts, quads = uniq, inv.reshape(len(quads), len(ref))
    if flip is not None:
        order = [0, 3, 2, 1] if ctype == "quad" else [0, 3, 2, 1, 7, 6, 5, 4]
        quads[flip] = quads[flip][order]
    family = "plane" if z0 == 0 else "shell"
    return Mesh(points=pts, blocks=((ctype, quads),), block_ids=(0,), family=family, source="panel")


def fields(mesh: Mesh):
    n = len(mesh.points)
    top = np.zeros((n, 6))
    top[:, 0] = 800e-6
    top[:, 1] = -240e-6
    bot = -top
    return {"E_top": top, "E_bot": bot}


@pytest.mark.parametrize("ctype", ["quad", "quad8"])
def test_top_and_bottom_gauges_read_their_own_face(ctype):
    # Reference: bending of a plate: the top face in tension, the bottom in compression, equal and
    # opposite (the arrays given). A gauge reads its face's array along its grid.
    mesh = panel(ctype)
    gauges = gauge_frame([
        dict(gauge="T", x=2.2, y=1.9, z=5.0, dir_x=1, dir_y=0, dir_z=0, length=1.0, face="top"),
        dict(gauge="B", x=2.2, y=1.9, z=5.0, dir_x=1, dir_y=0, dir_z=0, length=1.0, face="bottom"),
        dict(gauge="B90", x=4.1, y=2.3, z=5.0, dir_x=0, dir_y=1, dir_z=0, length=1.0, face="bottom"),
    ])
    op = build_operator(mesh, gauges)
    np.testing.assert_allclose(op.placement.normal, [[0, 0, 1], [0, 0, -1], [0, 0, -1]], atol=1e-12)
    src = ModelSource(path=__import__("pathlib").Path("panel.vtu"), mesh=mesh,
                      point_data=fields(mesh), cell_data={})
    case = Case(name="bend", kind="strain", array={"top": "E_top", "bottom": "E_bot"}, components=None)
    got = evaluate_rows(op, read_field(src, case))["axial"][op.row_kind == 0]
    np.testing.assert_allclose(got, [800e-6, -800e-6, 240e-6], rtol=1e-12, atol=0)


def test_grid_over_opposed_shell_normals_is_refused():
    # cell 9 spans x in [2, 3], y in [1, 2]: a grid from x = 1.6 to 2.4 at y = 1.5 crosses into it
    mesh = panel("quad", flip=9)
    gauges = gauge_frame([dict(gauge="FLIP", x=2.0, y=1.5, z=5.0, dir_x=1, dir_y=0, dir_z=0,
                               length=0.8, face="top")])
    with pytest.raises(GaugeError, match=r"FLIP.*opposed normals"):
        build_operator(mesh, gauges)


def test_face_on_a_solid_is_refused():
    from builders import solid_mesh

    gauges = gauge_frame([dict(gauge="S", x=1.0, y=1.0, z=2.0, dir_x=1, dir_y=0, dir_z=0, face="top")])
    with pytest.raises(GaugeError, match=r"'S' has face 'top'.*solid"):
        build_operator(solid_mesh("hexahedron"), gauges)


def test_plane_model_gauge_reads_in_plane_components():
    # Reference: plane strain transformation (Gere & Goodno, Mechanics of Materials) at 30 degrees:
    # e = (ex + ey)/2 + (ex - ey)/2 cos 60 + gxy/2 sin 60.
    mesh = panel("quad", z0=0.0)
    n = len(mesh.points)
    plane = np.tile([500e-6, -100e-6, 300e-6], (n, 1))      # xx, yy, xy (engineering)
    src = ModelSource(path=__import__("pathlib").Path("plate.vtu"), mesh=mesh,
                      point_data={"E": plane}, cell_data={})
    t = np.radians(30)
    gauges = gauge_frame([dict(gauge="P", x=3.0, y=2.0, z=0.0, dir_x=np.cos(t), dir_y=np.sin(t),
                               dir_z=0, length=1.0)])
    op = build_operator(mesh, gauges)
    got = evaluate_rows(op, read_field(src, Case("c", "strain", "E", None)))["axial"][0]
    expected = 200e-6 + 300e-6 * np.cos(2 * t) + 150e-6 * np.sin(2 * t)
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)


def test_gauge_on_the_wrong_face_is_diagnosed(tmp_path):
    # A gauge mapped on the top face but bonded on the bottom reads the bottom array (built in:
    # membrane 300 ue plus bending +-500 ue, so top 800 and bottom -200), which fails the
    # criterion; the diagnosis names the other face because the bottom-face reading fits.
    import meshio
    import pandas as pd

    from correlate.commands.cli import main

    mesh = panel("quad")
    f = fields(mesh)
    f["E_bot"] = f["E_top"].copy()
    f["E_bot"][:, 0] = -200e-6
    meshio.write(tmp_path / "panel.vtu", meshio.Mesh(mesh.points, [("quad", mesh.blocks[0][1])],
                                                     point_data=f))
    rows = [dict(gauge=f"T{i}", x=1.0 + i, y=2.0, z=5.0, dir_x=1, dir_y=0, dir_z=0, length=0.5,
                 face="top") for i in range(4)]
    pd.DataFrame(rows).to_csv(tmp_path / "gauges.csv", index=False)
    loads = [0.0, 5.0, 10.0, 0.0]
    data = {"step": range(4), "F_kN": loads}
    for i in range(4):
        strain = -200.0 if i == 2 else 800.0          # T2 is really on the bottom face
        data[f"T{i}"] = [strain * v / 10.0 for v in loads]
    pd.DataFrame(data).to_csv(tmp_path / "readings.csv", index=False)
    (tmp_path / "study.toml").write_text(
        'title = "panel"\n[model]\nfile = "panel.vtu"\nlength_unit = "mm"\n'
        '[[case]]\nname = "bend"\nstrain = { top = "E_top", bottom = "E_bot" }\n'
        '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.1\nangle_tol = 1.0\n'
        '[readings]\nfile = "readings.csv"\n[[load]]\ncolumn = "F_kN"\ncase = "bend"\n'
        "reference = 10.0\n[criteria]\nrelative = 0.1\nabsolute_ue = 20.0\n")
    assert main(["--quiet", "run", str(tmp_path / "study.toml"), "--out", str(tmp_path / "o"),
                 "--no-report"]) == 0
    import json

    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    found = {(d["gauge"], d["explanation"]) for d in summary["diagnoses"]}
    flags = {(f["gauge"], f["flag"]) for f in summary["flags"]}
    assert ("T2", "gauge on the other face") in found
    assert ("T2", "reversed") not in flags
