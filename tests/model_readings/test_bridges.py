"""Bridge channels on the model: the arms' operator rows combined (correlate.model_readings.bridges).

A cantilever of length L = 10 along x, section 2 x 2 (y, z), clamped at x = 0 and loaded at the
tip, carries the Euler-Bernoulli bending strain e_xx = -P (L - x)(z - 1) / (E I) with
e_yy = e_zz = -nu e_xx, or in tension e_xx = e0, e_yy = e_zz = -nu e0 (Timoshenko & Gere,
Mechanics of Materials, the flexure formula and Poisson's ratio). Both fields are bilinear in x
and z, which trilinear hexahedra reproduce exactly, and the grid average of a field linear along
the grid is its centre value, so the model rows carry the closed forms to round-off.
Bridge outputs (Hoffmann 1989, An Introduction to Measurements using Strain Gages, HBM, the
Wheatstone bridge circuits table; from memory, page not confirmed), with e_b the bending surface
strain and e the axial strain:
  half bridge, arm 1 on top and arm 2 below:    bending 2 e_b, tension 0;
  full bridge, arms 1, 3 on top and 2, 4 below: bending 4 e_b, tension 0;
  Poisson half bridge, arm 1 along, arm 2 across x on one face: tension (1 + nu) e;
  Poisson full bridge (1, 3 along on top and below, 2, 4 across): tension 2 (1 + nu) e, bending 0.
Tolerance: atol 1e-12 m/m (1e-6 microstrain): the references are exact and only round-off of
sums of about 1e-3 remains.
"""

from __future__ import annotations

import numpy as np
import pytest
from builders import gauge_frame, solid_mesh

from correlate.core.errors import GaugeError
from correlate.mechanics.gauge import indicated_strain
from correlate.model_readings.bridges import bridge_rows, combine_bridges
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.model_readings.table import _sensitivities, band_limits
from correlate.readers.bridge_map import Bridge
from correlate.readers.model import Field

L, NU, X0 = 10.0, 0.3, 4.0
ATOL = 1e-12


def _beam():
    return solid_mesh("hexahedron", n=(10, 2, 4), size=(L, 2.0, 2.0))


def _field(mesh, kind: str, e0: float = 1e-3):
    x, z = mesh.points[:, 0], mesh.points[:, 2]
    E = np.zeros((len(x), 3, 3))
    exx = -e0 * (L - x) / (L - X0) * (z - 1.0) if kind == "bending" else np.full(len(x), e0)
    E[:, 0, 0], E[:, 1, 1], E[:, 2, 2] = exx, -NU * exx, -NU * exx
    return Field("c", "strain", "point", E, "strain", "E")


def _gauges(kt: float = 0.0, position_tol: str = "", angle_tol: str = ""):
    rows = []
    for name, y, z, dx, dy in (("TA", 1.0, 2.0, 1, 0), ("BA", 1.0, 0.0, 1, 0),
                               ("TT", 0.6, 2.0, 0, 1), ("BT", 0.6, 0.0, 0, 1),
                               ("TA2", 1.4, 2.0, 1, 0), ("BA2", 1.4, 0.0, 1, 0)):
        rows.append(dict(gauge=name, x=X0, y=y, z=z, dir_x=dx, dir_y=dy, dir_z=0, length=0.5,
                         kt=kt, position_tol=position_tol, angle_tol=angle_tol))
    return gauge_frame(rows)


BRIDGES = [Bridge("half", ("TA", "BA", None, None), 1.0),
           Bridge("full", ("TA", "BA", "TA2", "BA2"), 1.0),
           Bridge("poisson-half", ("TA", "TT", None, None), 1.0),
           Bridge("poisson-full", ("TA", "TT", "BA", "BT"), 1.0)]
# e_b = e0 at x = X0 on top (z = 2): e_xx = -e0 (z - 1) -> top -e0 (compressive), bottom +e0
EXPECTED = {"bending": (2 * -1e-3, 4 * -1e-3, (1 + NU) * -1e-3, 0.0),
            "tension": (0.0, 0.0, (1 + NU) * 1e-3, 2 * (1 + NU) * 1e-3)}


def _bridged(kind, gauges=None, bridges=BRIDGES):
    mesh = _beam()
    op = build_operator(mesh, _gauges() if gauges is None else gauges)
    combo = combine_bridges(op, bridges)
    return op, combo, bridge_rows(combo, evaluate_rows(op, _field(mesh, kind)))


@pytest.mark.parametrize("kind", ["bending", "tension"])
def test_bridge_outputs_of_a_cantilever_match_the_closed_forms(kind):
    # References and tolerance: the module docstring (Hoffmann 1989 table; flexure formula).
    _, combo, rows = _bridged(kind)
    nominal = combo.row_kind == 0
    np.testing.assert_allclose(rows["indicated"][nominal], EXPECTED[kind], rtol=0, atol=ATOL)
    # the centre-point rows of a field linear along the grid equal the grid average
    np.testing.assert_allclose(rows["indicated"][combo.row_kind == 1], EXPECTED[kind],
                               rtol=0, atol=ATOL)


def test_bridge_factor_divides_the_output():
    # Reference: a bending half bridge divided by its factor 2 reads the surface strain
    # (Hoffmann 1989, from memory); exact arithmetic, atol as in the module docstring.
    _, _, rows = _bridged("bending", bridges=[Bridge("b", ("TA", "BA", None, None), 2.0)])
    np.testing.assert_allclose(rows["indicated"][0], -1e-3, rtol=0, atol=ATOL)


def test_poisson_half_bridge_with_transverse_sensitivity():
    # Each arm reads its indicated strain e = (e_a + Kt e_t) / (1 - nu0 Kt) (Vishay TN-509,
    # from memory). Along x: e_a = e, e_t = -nu e; across: e_a = -nu e, e_t = e. So
    # e1 - e2 = e (1 + nu)(1 - Kt) / (1 - nu0 Kt); checked against the formula written out here
    # and against mechanics.gauge.indicated_strain, atol as in the module docstring.
    kt, nu0, e = 0.03, 0.285, 1e-3
    mesh = _beam()
    op = build_operator(mesh, _gauges(kt=kt), calibration_poisson=nu0)
    combo = combine_bridges(op, [BRIDGES[2]])
    rows = bridge_rows(combo, evaluate_rows(op, _field(mesh, "tension")))
    expected = e * (1 + NU) * (1 - kt) / (1 - nu0 * kt)
    np.testing.assert_allclose(rows["indicated"][0], expected, rtol=0, atol=ATOL)
    by_arm = indicated_strain(e, -NU * e, kt, nu0) - indicated_strain(-NU * e, e, kt, nu0)
    np.testing.assert_allclose(rows["indicated"][0], by_arm, rtol=0, atol=ATOL)
    # the true-strain (Kt-corrected) combination stays (1 + nu) e
    np.testing.assert_allclose(rows["axial"][0], e * (1 + NU), rtol=0, atol=ATOL)


def test_cases_superpose_through_the_combination():
    # Linearity (the bridge is a linear combination of linear readings): bending + 0.5 tension
    # combined after the bridge equals the bridge of the combined field; round-off tolerance.
    mesh = _beam()
    op = build_operator(mesh, _gauges())
    combo = combine_bridges(op, BRIDGES)
    b, t = (evaluate_rows(op, _field(mesh, k))["indicated"] for k in ("bending", "tension"))
    both = Field("c", "strain", "point", _field(mesh, "bending").data + 0.5 * _field(
        mesh, "tension").data, "strain", "E")
    np.testing.assert_allclose(combo.matrix @ np.c_[b, t] @ [1.0, 0.5],
                               bridge_rows(combo, evaluate_rows(op, both))["indicated"],
                               rtol=0, atol=ATOL)


def test_band_moves_the_arms_together():
    # A move along x by position_tol on both arms of the bending half bridge: the output is
    # 2 e0 (L - x)/(L - X0) at the moved x, so the band over the eight moves of 0.5 spans
    # x0 -/+ 0.5 exactly (the flexure field is linear in x); the position sensitivity is the
    # slope 2 e0 / (L - X0) per unit length. atol as in the module docstring.
    _, combo, rows = _bridged("bending", gauges=_gauges(position_tol="0.5"),
                               bridges=[BRIDGES[0]])
    low, high = band_limits(combo, rows["indicated"])
    e0 = 1e-3
    np.testing.assert_allclose([low[0], high[0]],
                               [-2 * e0 * (L - X0 + 0.5) / (L - X0), -2 * e0 * (L - X0 - 0.5) / (L - X0)],
                               rtol=0, atol=ATOL)
    sens_pos, _ = _sensitivities(combo, rows["indicated"])
    np.testing.assert_allclose(sens_pos[0], 2 * e0 / (L - X0), rtol=0, atol=1e-12)
    # every band sample of both arms is used: 8 moves, plus nominal and centre
    assert len(combo.row_kind) == 10 and (combo.matrix.getnnz(axis=1) == 2).all()


def test_opposite_face_arms_on_a_bending_bridge_are_accepted():
    # Common practice: the arms of a bending half bridge sit on opposite faces. The bottom
    # arm's normal is -z: the combination still pairs every move (same move counts as the top).
    op, combo, _ = _bridged("bending", gauges=_gauges(position_tol="0.5", angle_tol="2"),
                            bridges=[BRIDGES[0]])
    top = int((op.row_gauge == 0).sum())
    assert len(combo.row_kind) == top


def test_bad_bridges_are_refused_in_one_line_each():
    op = build_operator(_beam(), _gauges())
    with pytest.raises(GaugeError) as exc:
        combine_bridges(op, [Bridge("lonely", ("TA", None, None, None)),
                             Bridge("ghost", ("TA", "XX", None, None)),
                             Bridge("zero", ("TA", "BA", None, None), 0.0)])
    text = str(exc.value)
    assert "'lonely' has 1 active arm" in text and "XX" in text and "'zero'" in text
    assert len(exc.value.problems) == 3
