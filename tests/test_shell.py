"""Shell and plane models: faces, per-face arrays, normals."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import gauge_frame

from correlate import elements
from correlate.config import Case
from correlate.errors import GaugeError
from correlate.fields import read_field
from correlate.io.model import Mesh, ModelSource
from correlate.predict import build_operator, evaluate_rows


def panel(ctype: str = "quad", flip: int | None = None, z0: float = 5.0) -> Mesh:
    """A flat 6 x 4 shell panel at height z0 (normal +z by the right-hand rule), 6 x 4 cells."""
    xs, ys = np.linspace(0, 6, 7), np.linspace(0, 4, 5)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), np.full(X.size, z0)]
    nid = np.arange(len(pts)).reshape(X.shape)
    quads = np.array([[nid[i, j], nid[i + 1, j], nid[i + 1, j + 1], nid[i, j + 1]]
                      for i in range(6) for j in range(4)])
    if ctype == "quad8":
        ref = elements.ELEMENTS["quad8"].reference_nodes
        new = elements.map_to_physical("quad", np.repeat(pts[quads], len(ref), axis=0),
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
    from conftest import solid_mesh

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
