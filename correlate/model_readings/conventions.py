"""Convention checks: evidence that a strain array's component order or shear convention is wrong.

Stage: model readings (used by ``check``, ``predict`` and ``run``; they warn, never refuse). Two tests:

* Hooke's law against a stress array the case names (``check_stress``): the strain read with the
  declared order and convention must match the strain from the stress; if another common order or
  convention fits far better, say which.
* The traction-free condition at free-surface gauges: the normal components of stress vanish, so for
  an isotropic material e_nt = 0 and e_nn = -nu/(1 - nu) (e_11 + e_22) in the gauge's surface frame.
  Near load introduction it fails for good reasons, hence a warning only.
"""

from __future__ import annotations

import itertools

import numpy as np
from numpy.typing import NDArray

from correlate.mechanics.tensors import DEFAULT_ORDER, from_voigt, strain_from_stress
from correlate.model_readings.model import Model, case_steps
from correlate.readers.model import find_array

# The orders and conventions tried when the declared ones do not fit.
ALTERNATIVE_ORDERS = (("xx", "yy", "zz", "xy", "yz", "xz"), ("xx", "yy", "zz", "xy", "xz", "yz"),
                      ("xx", "yy", "zz", "yz", "xz", "xy"), ("xx", "xy", "xz", "yy", "yz", "zz"))
RESIDUAL_LIMIT = 0.25   # share of the in-plane strain magnitude (common practice for this check)
BETTER_BY = 3.0          # an alternative is reported when it fits this many times better
FLOOR = 20e-6            # ignore gauges whose in-plane strain is below this (m/m)


def surface_residual(strain: NDArray, normal: NDArray, direction: NDArray, nu: float) -> NDArray:
    """Traction-free residual at each gauge, as a share of the in-plane strain magnitude.

    Parameters
    ----------
    strain : ndarray, shape (g, 3, 3)
        Strain tensors at the gauge centres (tensor shear). [m/m]
    normal, direction : ndarray, shape (g, 3)
        Outward normal and a unit tangent (the grid direction).
    nu : float
        Poisson's ratio.
    """
    t2 = np.cross(normal, direction)
    def comp(a: NDArray, b: NDArray) -> NDArray:
        return np.einsum("gi,gij,gj->g", a, strain, b)
    e11, e22, e12 = comp(direction, direction), comp(t2, t2), comp(direction, t2)
    e1n, e2n, enn = comp(direction, normal), comp(t2, normal), comp(normal, normal)
    expected_nn = -nu / (1 - nu) * (e11 + e22)
    size = np.sqrt(e11 ** 2 + e22 ** 2 + 2 * e12 ** 2)
    resid = np.sqrt(e1n ** 2 + e2n ** 2 + (enn - expected_nn) ** 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(size > FLOOR, resid / size, np.nan)


def _candidates(components: tuple[str, ...], shear: str) -> list[tuple[tuple[str, ...], str]]:
    if len(components) != 6:
        return [(components, shear)]
    out = [(components, shear)]
    for order, sh in itertools.product(ALTERNATIVE_ORDERS, ("engineering", "tensor")):
        if (order, sh) not in out:
            out.append((order, sh))
    return out


def convention_evidence(raw_at_gauges: NDArray, components: tuple[str, ...] | None, shear: str,
                        normal: NDArray, direction: NDArray, nu: float, *,
                        stress_strain: NDArray | None = None) -> dict[str, object]:
    """Compare the declared order/convention with the alternatives on the given evidence.

    Parameters
    ----------
    raw_at_gauges : ndarray, shape (g, 6)
        The strain array's raw components interpolated to the gauge centres.
    stress_strain : ndarray, shape (g, 3, 3), optional
        Strain from the named stress array by Hooke's law at the same points.

    Returns
    -------
    dict
        ``declared`` (median residual), ``best`` (order, shear, median residual), ``method``.
    """
    components = tuple(components or DEFAULT_ORDER)
    scores = []
    for order, sh in _candidates(components, shear):
        eps = from_voigt(raw_at_gauges, order, shear=sh)
        if stress_strain is not None:
            size = np.linalg.norm(stress_strain, axis=(1, 2))
            with np.errstate(invalid="ignore", divide="ignore"):
                r = np.where(size > FLOOR, np.linalg.norm(eps - stress_strain, axis=(1, 2)) / size,
                             np.nan)
        else:
            r = surface_residual(eps, normal, direction, nu)
        scores.append((order, sh, float(np.nanmedian(r)) if np.isfinite(r).any() else np.nan))
    declared = scores[0][2]
    best = min(scores, key=lambda s: np.inf if np.isnan(s[2]) else s[2])
    return {"declared": declared, "best": best,
            "method": "Hooke's law against the stress array" if stress_strain is not None
            else "traction-free surface"}


def describe(case: str, evidence: dict[str, object]) -> str | None:
    """One warning line when the declared convention does not fit, else None."""
    declared = evidence["declared"]
    order, shear, best = evidence["best"]  # type: ignore[misc]
    if not isinstance(declared, float) or np.isnan(declared) or declared <= RESIDUAL_LIMIT:
        return None
    line = (f"case '{case}': the strain components do not pass the {evidence['method']} check "
            f"(median residual {declared:.0%} of the strain, limit {RESIDUAL_LIMIT:.0%})")
    if (best > 0 and declared / max(best, 1e-12) >= BETTER_BY) or best == 0:
        line += f"; components = {list(order)} with shear = \"{shear}\" would fit ({best:.0%})"
    return line + "; check components and shear in the study (near load introduction this check " \
                  "fails for good reasons)"


def convention_warnings(model: Model) -> list[str]:
    """Warnings from the order/convention checks (traction-free surface, Hooke against stress)."""
    study, op = model.study, model.operator
    mat = study.material
    if op.mesh.family != "solid" or mat is None:
        return []
    surface = (op.placement.table["mount"] == "surface").to_numpy()
    pts = op.centre_points
    out = []
    for case in study.cases:
        if case.kind != "strain" or isinstance(case.array, dict):
            continue
        fe_index = case.fe_index
        if case.is_series:
            fe_index = case_steps(model, case)[0][0]
        src = model.source(case)
        location, raw = find_array(src, case.array, fe_index, case=case.name)
        if raw.shape[1] != 6:
            continue

        def at_gauges(values: NDArray, location: str = location) -> NDArray:
            if location == "cell":
                return values[op.cell[pts]]
            return (op.interpolation() @ values)[pts]

        raw_g = at_gauges(raw)[surface]
        stress_strain = None
        if case.check_stress:
            s_loc, s_raw = find_array(src, case.check_stress, fe_index, case=case.name)
            if s_raw.shape[1] == 6:
                sig = from_voigt(at_gauges(s_raw, s_loc)[surface], DEFAULT_ORDER, shear="tensor")
                stress_strain = strain_from_stress(sig, mat.E, mat.nu)
        ev = convention_evidence(raw_g, case.components, case.shear, op.placement.normal[surface],
                                 op.placement.direction[surface], mat.nu,
                                 stress_strain=stress_strain)
        line = describe(case.name, ev)
        if line:
            out.append(line)
    return out

