"""Convention checks on the gauges where the convention matters, and grid averaging on fine meshes.

The convention fields are analytic: a block under a uniform stress sigma_yy with a beam-like
transverse shear sigma_yz = tau0 z (2 - z) that vanishes on the top and bottom faces (z = 0, 2) and
is largest at mid-height of the side faces. The top face, where most gauges sit, sees no shear, so
a median over all gauges cannot tell a wrong shear convention; the two 45-degree gauges on the side
face x = 4 can. The grid-averaging fields are a quadratic and a sinusoidal strain along a bar.
"""

from __future__ import annotations

from pathlib import Path

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import gauge_frame, solid_mesh

from correlate.commands.cli import main
from correlate.mechanics.tensors import strain_from_stress, to_voigt
from correlate.model_readings.conventions import RESIDUAL_LIMIT, convention_evidence, describe
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator, grid_point_count
from correlate.readers.model import Field

E, NU = 70000.0, 0.3
SIGMA_YY, TAU0 = 70.0, 40.0   # MPa
SWAPPED = ("xx", "yy", "zz", "xy", "xz", "yz")   # the shear order of a general-purpose converter


def beam_stress(x: np.ndarray) -> np.ndarray:
    """Stress tensors (n, 3, 3) [MPa]: uniform sigma_yy and sigma_yz = tau0 z (2 - z)."""
    sig = np.zeros((len(x), 3, 3))
    sig[:, 1, 1] = SIGMA_YY
    sig[:, 1, 2] = sig[:, 2, 1] = TAU0 * x[:, 2] * (2.0 - x[:, 2])
    return sig


def beam_gauges() -> pd.DataFrame:
    """Ten gauges on the top face z = 2 (no shear there) and two at 45 degrees on the side x = 4."""
    rows = []
    for i in range(10):
        th = np.radians(18.0 * i)
        rows.append(dict(gauge=f"T{i}", x=0.5 + 0.3 * i, y=0.5 + 0.2 * (i % 5), z=2.0,
                         dir_x=round(np.cos(th), 9), dir_y=round(np.sin(th), 9), dir_z=0,
                         length=0.2, kt=0))
    for k, y in enumerate((1.0, 2.0)):
        rows.append(dict(gauge=f"S{k}", x=4.0, y=y, z=1.0, dir_x=0, dir_y=0.707106781,
                         dir_z=0.707106781, length=0.2, kt=0))
    return pd.DataFrame(rows)


def write_beam_study(folder: Path, *, order=("xx", "yy", "zz", "xy", "yz", "xz"),
                     file_shear: str = "engineering", case_toml: str = "") -> Path:
    """The beam-shear block on linear hexahedra; the strain array written in ``order`` and
    ``file_shear``, the stress array (tensor shear, default order) beside it."""
    mesh = solid_mesh("hexahedron", n=(8, 6, 4), size=(4.0, 3.0, 2.0))
    x = mesh.points
    sig = beam_stress(x)
    eps = strain_from_stress(sig, E, NU)
    meshio.write(folder / "block.vtu", meshio.Mesh(x, [("hexahedron", mesh.blocks[0][1])], point_data={
        "E": to_voigt(eps, order, shear=file_shear),
        "S": to_voigt(sig, ("xx", "yy", "zz", "xy", "yz", "xz"), shear="tensor")}))
    beam_gauges().to_csv(folder / "gauges.csv", index=False)
    study = folder / "study.toml"
    study.write_text('title = "Beam shear block"\n[model]\nfile = "block.vtu"\nlength_unit = "mm"\n'
                     '[[case]]\nname = "beam"\nstrain = "E"\n' + case_toml
                     + f"[material]\nE = {E}\nnu = {NU}\n"
                     '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.0\nangle_tol = 0.0\n',
                     encoding="utf-8")
    return study


def warnings_of(args: list[str], capsys) -> list[str]:
    capsys.readouterr()
    code = main(["--quiet", *args])
    err = capsys.readouterr().err
    assert code == 0, err
    assert "Traceback" not in err
    return [ln for ln in err.splitlines() if ln.startswith("warning: ")]


# ---------------------------------------------------------------------------------------------
# (a) tensor shear read as engineering shear (the default)


def test_tensor_shear_left_at_the_default_is_named_by_the_hooke_check(tmp_path, capsys):
    # Reference: isotropic Hooke's law eps = ((1 + nu) sigma - nu tr(sigma) I) / E against the
    # stress array; engineering shear gamma = 2 eps_yz, so reading tensor shear as engineering
    # halves the side gauges' shear term (Timoshenko & Goodier, Theory of Elasticity, ch. 1).
    study = write_beam_study(tmp_path, file_shear="tensor", case_toml='check_stress = "S"\n')
    for command in (["check", str(study)], ["predict", str(study), "--out", str(tmp_path / "p")]):
        lines = [ln for ln in warnings_of(command, capsys) if "case 'beam'" in ln]
        assert len(lines) == 1, lines
        assert "array 'E'" in lines[0] and 'shear = "tensor"' in lines[0]
        assert "the stress-array (Hooke's law) check fits shear" in lines[0]
        assert "components =" not in lines[0]   # only the shear differs, so only it is named
        assert "S0" in lines[0] and "S1" in lines[0] and "T3" not in lines[0]


def test_tensor_shear_declared_right_gives_no_warning(tmp_path, capsys):
    study = write_beam_study(tmp_path, file_shear="tensor",
                             case_toml='shear = "tensor"\ncheck_stress = "S"\n')
    assert not [ln for ln in warnings_of(["check", str(study)], capsys) if "case 'beam'" in ln]


def test_median_over_all_gauges_misses_what_the_weighted_check_finds():
    # The same state at the gauge centres without a mesh: ten top gauges with no shear and two side
    # gauges at mid-height. The median of the declared residual stays under the limit (why the
    # median check missed it); the weighted check names tensor shear, fitting exactly.
    g = beam_gauges()
    x = g[["x", "y", "z"]].to_numpy(dtype=float)
    d = g[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    normal = np.where(x[:, [2]] == 2.0, [0.0, 0.0, 1.0], [1.0, 0.0, 0.0])
    sig = beam_stress(x)
    eps = strain_from_stress(sig, E, NU)
    raw = to_voigt(eps, ("xx", "yy", "zz", "xy", "yz", "xz"), shear="tensor")
    ev = convention_evidence(raw, None, "engineering", normal, d, NU, stress_strain=eps)
    assert ev["declared"] <= RESIDUAL_LIMIT
    alt = ev["weighted"]
    assert alt is not None and alt.shear == "tensor" and alt.gauges == (10, 11)
    # tolerance: exact arithmetic up to float64 rounding of strains of about 1e-3
    assert alt.residual == pytest.approx(0.0, abs=1e-12)
    # weighted residual of the declared convention, by hand: at a side gauge the engineering
    # reading halves eps_yz, so |eps - eps_stress| = sqrt(2) eps_yz / 2 (both off-diagonal terms)
    eps_yz = (1 + NU) / E * TAU0
    size = np.linalg.norm(eps[10])
    # tolerance: float64 rounding only
    assert alt.declared == pytest.approx(np.sqrt(2) * eps_yz / 2 / size, rel=1e-12)
    line = describe("c", ev, array="E", gauges=list(g["gauge"]))
    assert line is not None and "S0, S1" in line and 'shear = "tensor"' in line


# ---------------------------------------------------------------------------------------------
# (b) a permuted shear order (xy xz yz in the file, xy yz xz declared)


def test_permuted_shear_order_is_named_by_the_traction_free_check(tmp_path, capsys):
    # Reference: the traction-free condition sigma . n = 0 on the free face x = 4 gives
    # eps_xy = eps_xz = 0 there (Timoshenko & Goodier); read in the wrong order, the side face's
    # eps_yz lands in eps_xz and breaks it.
    study = write_beam_study(tmp_path, order=SWAPPED)
    for command in (["check", str(study)], ["predict", str(study), "--out", str(tmp_path / "p")]):
        lines = [ln for ln in warnings_of(command, capsys) if "case 'beam'" in ln]
        assert len(lines) == 1, lines
        assert "array 'E'" in lines[0] and str(list(SWAPPED)) in lines[0]
        assert "traction-free" in lines[0]


def test_permuted_shear_order_declared_right_gives_no_warning(tmp_path, capsys):
    study = write_beam_study(tmp_path, order=SWAPPED,
                             case_toml=f"components = {list(SWAPPED)!r}\n".replace("'", '"'))
    assert not [ln for ln in warnings_of(["check", str(study)], capsys) if "case 'beam'" in ln]


def test_a_convention_that_changes_no_reading_is_not_reported():
    # Gauges along x on the top face read eps_xx alone: no shear convention changes their
    # readings, so no alternative has weight and none is named.
    g = 6
    eps = np.zeros((g, 3, 3))
    eps[:, 0, 0], eps[:, 1, 1] = 1e-3, -3e-4
    eps[:, 2, 2] = -NU / (1 - NU) * (eps[:, 0, 0] + eps[:, 1, 1])
    eps[:, 0, 1] = eps[:, 1, 0] = 2e-4
    raw = to_voigt(eps, ("xx", "yy", "zz", "xy", "yz", "xz"), shear="tensor")
    ev = convention_evidence(raw, None, "engineering", np.tile([0, 0, 1.0], (g, 1)),
                             np.tile([1.0, 0, 0], (g, 1)), NU)
    assert ev["weighted"] is None


# ---------------------------------------------------------------------------------------------
# (c) in-plane shear on a face whose normal is an axis: only the displacement field tells

# u = (A x + G y, G x + B y, C z): small strain eps = (grad u + grad u^T) / 2 (Timoshenko &
# Goodier, Theory of Elasticity, ch. 1) is uniform, eps_xx = A, eps_yy = B, eps_xy = G, eps_zz = C,
# with C = -nu / (1 - nu) (A + B) so the top face z = 2 is traction-free (plane stress there).
# Trilinear hexahedra reproduce a linear displacement exactly, so its gradient at any point is.
A_, B_, G_ = 8e-4, -2e-4, 6e-4
C_ = -NU / (1 - NU) * (A_ + B_)


def write_shear_study(folder: Path, *, file_shear: str, case_toml: str) -> Path:
    mesh = solid_mesh("hexahedron", n=(8, 6, 4), size=(4.0, 3.0, 2.0))
    x = mesh.points
    u = np.c_[A_ * x[:, 0] + G_ * x[:, 1], G_ * x[:, 0] + B_ * x[:, 1], C_ * x[:, 2]]
    eps = np.zeros((len(x), 3, 3))
    eps[:, 0, 0], eps[:, 1, 1], eps[:, 2, 2] = A_, B_, C_
    eps[:, 0, 1] = eps[:, 1, 0] = G_
    meshio.write(folder / "block.vtu", meshio.Mesh(x, [("hexahedron", mesh.blocks[0][1])],
                                                   point_data={"E": to_voigt(
                                                       eps, ("xx", "yy", "zz", "xy", "yz", "xz"),
                                                       shear=file_shear), "U": u}))
    beam_gauges().iloc[:10].to_csv(folder / "gauges.csv", index=False)   # the top face only
    study = folder / "study.toml"
    study.write_text('title = "Sheared block"\n[model]\nfile = "block.vtu"\nlength_unit = "mm"\n'
                     '[[case]]\nname = "shear"\nstrain = "E"\n' + case_toml
                     + f"[material]\nE = {E}\nnu = {NU}\n"
                     '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.0\nangle_tol = 0.0\n',
                     encoding="utf-8")
    return study


def test_tensor_shear_on_an_axis_face_is_named_by_the_displacement_check_alone(tmp_path, capsys):
    # tensor shear in the file, engineering (the default) declared: the top gauges at angles read
    # eps_xy halved, yet e_xz = e_yz = 0 and e_zz = -nu/(1-nu)(e_xx + e_yy) hold either way, so
    # the traction-free check cannot see it (no warning: the blind spot the new check covers)
    study = write_shear_study(tmp_path, file_shear="tensor", case_toml="")
    assert not [ln for ln in warnings_of(["check", str(study)], capsys) if "case 'shear'" in ln]
    study = write_shear_study(tmp_path, file_shear="tensor", case_toml='check_displacement = "U"\n')
    for command in (["check", str(study)], ["predict", str(study), "--out", str(tmp_path / "p")]):
        lines = [ln for ln in warnings_of(command, capsys) if "case 'shear'" in ln]
        assert len(lines) == 1, lines
        assert "displacement-gradient check" in lines[0] and 'shear = "tensor"' in lines[0]
        # T0 (0 deg) and T5 (90 deg) read no shear at all: no evidence there, the other 8 are
        assert "on the 8 gauge(s) whose readings the convention changes (T1, T2," in lines[0]
        assert "(residual 0% of the strain)" in lines[0]     # exact: a linear field on hexahedra


def test_the_displacement_check_passes_a_strain_declared_right(tmp_path, capsys):
    for shear in ("tensor", "engineering"):
        toml = f'shear = "{shear}"\ncheck_displacement = "U"\n'
        study = write_shear_study(tmp_path, file_shear=shear, case_toml=toml)
        assert not [ln for ln in warnings_of(["check", str(study)], capsys)
                    if "case 'shear'" in ln]


def test_a_check_displacement_array_of_strain_is_named(tmp_path, capsys):
    study = write_shear_study(tmp_path, file_shear="engineering",
                              case_toml='check_displacement = "E"\n')
    lines = [ln for ln in warnings_of(["check", str(study)], capsys) if "case 'shear'" in ln]
    assert lines == ["warning: case 'shear': check_displacement array 'E' is point data of 6 "
                     "component(s); the check needs the nodal displacement (3 components)"]


# ---------------------------------------------------------------------------------------------
# grid averaging over many small elements


def bar_average(values_at, nx: int, a: float = 1.0, b: float = 8.6, grid_points: int = 5) -> float:
    """Grid-averaged axial strain of a gauge from x = a to b on the top face of a 10 mm bar of
    nx linear hexahedra, for a nodal strain field eps_xx = values_at(x)."""
    mesh = solid_mesh("hexahedron", n=(nx, 1, 1), size=(10.0, 1.0, 1.0))
    e = np.zeros((len(mesh.points), 3, 3))
    e[:, 0, 0] = values_at(mesh.points[:, 0])
    fld = Field(case="c", kind="strain", location="point", data=e, source_kind="strain",
                array="E")
    g = gauge_frame([dict(gauge="L", x=(a + b) / 2, y=0.5, z=1.0, dir_x=1, dir_y=0, dir_z=0,
                          length=b - a)])
    op = build_operator(mesh, g, grid_points=grid_points, band=False)
    return float(evaluate_rows(op, fld)["axial"][op.row_kind == 0][0])


@pytest.mark.parametrize("nx", [20, 40, 80], ids=["h0.5", "h0.25", "h0.125"])
def test_long_grid_over_small_elements_averages_a_quadratic_field(nx):
    # Reference: the closed-form mean of eps = c x^2 over [a, b] is c (b^3 - a^3) / (3 (b - a)).
    # The model's field is the linear interpolant of the nodal values, which differs from the
    # parabola by at most h^2 |eps''| / 8 (the linear interpolation error bound, e.g. Burden &
    # Faires, Numerical Analysis, theorem 3.3): the tolerance, and it shrinks as h^2.
    c, a, b = 3e-5, 1.0, 8.6
    got = bar_average(lambda x: c * x ** 2, nx, a, b)
    exact = c * (b ** 3 - a ** 3) / (3 * (b - a))
    h = 10.0 / nx
    assert abs(got - exact) <= h ** 2 * 2 * c / 8


@pytest.mark.parametrize("nx", [40, 80, 160], ids=["h0.25", "h0.125", "h0.0625"])
def test_long_grid_follows_a_field_that_varies_along_it(nx):
    # Reference: the mean of A sin(2 pi x / L) over [a, b] is
    # A L (cos(2 pi a / L) - cos(2 pi b / L)) / (2 pi (b - a)). Tolerance: the interpolation
    # bound h^2 |eps''| / 8 = h^2 A (2 pi / L)^2 / 8 (as above). A grid of 7.6 mm over a wave
    # of 2 mm: five Gauss points alone (the study's default count) miss the mean by far more
    # than that (checked below on the exact field), so the count must follow the mesh.
    A, L, a, b = 1e-3, 2.0, 1.0, 8.6
    exact = A * L * (np.cos(2 * np.pi * a / L) - np.cos(2 * np.pi * b / L)) / (2 * np.pi * (b - a))
    bound = (10.0 / nx) ** 2 * A * (2 * np.pi / L) ** 2 / 8
    got = bar_average(lambda x: A * np.sin(2 * np.pi * x / L), nx, a, b)
    assert abs(got - exact) <= bound
    points, weights = np.polynomial.legendre.leggauss(5)
    five = float(np.sum(weights / 2 * A * np.sin(2 * np.pi * ((a + b) / 2 + points * (b - a) / 2)
                                                  / L)))
    assert abs(five - exact) > bound


def test_grid_point_count_keeps_the_study_count_on_one_or_two_elements():
    # The rule n = max(grid_points, ceil(2 L / h) + 1): a grid of 1.5 elements keeps 5 points, a
    # grid of 8 elements gets 17; a grid over a very fine mesh stops at the cap (64).
    mesh = solid_mesh("hexahedron", n=(10, 1, 1), size=(10.0, 1.0, 1.0))
    cells = np.array([0, 0, 0])
    d = np.tile([1.0, 0, 0], (3, 1))
    got = grid_point_count(mesh, cells, d, np.array([1.5, 8.0, 500.0]), 5)
    np.testing.assert_array_equal(got, [5, 17, 64])
