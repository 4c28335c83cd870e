"""Convention checks: evidence that a strain array's component order or shear convention is wrong.

Stage: model readings (used by ``check``, ``predict`` and ``run``; they warn, never refuse). Three
tests:

* Hooke's law against a stress array the case names (``check_stress``): the strain read with the
  declared order and convention must match the strain from the stress; if another common order or
  convention fits far better, say which.
* Compatibility with a displacement array the case names (``check_displacement``): the same
  comparison against the small strain of the displacement field, ``(grad u + grad u^T) / 2`` from
  the elements' shape-function gradients at the gauge centres. It needs no material, and it sees
  what the traction-free test cannot: the in-plane shear of a face whose normal is an axis (a
  tensor shear read as engineering shear there leaves the traction-free condition as it was).
* The traction-free condition at free-surface gauges: the normal components of stress vanish, so for
  an isotropic material e_nt = 0 and e_nn = -nu/(1 - nu) (e_11 + e_22) in the gauge's surface frame.
  Near load introduction it fails for good reasons, hence a warning only.

Each alternative is judged on the gauges where it matters: a gauge counts with the weight
|reading(alternative) - reading(declared)| / strain magnitude (its reading is the strain along its
grid), so that a wrong shear convention is seen even when most gauges sit where shear vanishes (a
median over all gauges would hide it). Gauges whose reading an alternative changes by less than
MATTERS of the strain do not count for it. Besides, the median over all gauges of the declared
convention's residual is reported when it is large and no alternative explains it.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import CorrelateError
from correlate.mechanics.tensors import DEFAULT_ORDER, from_voigt, strain_from_stress
from correlate.readers.model import component_names, component_of, find_array

# The orders and conventions tried when the declared ones do not fit.
ALTERNATIVE_ORDERS = (("xx", "yy", "zz", "xy", "yz", "xz"), ("xx", "yy", "zz", "xy", "xz", "yz"),
                      ("xx", "yy", "zz", "yz", "xz", "xy"), ("xx", "xy", "xz", "yy", "yz", "zz"))
RESIDUAL_LIMIT = 0.25   # share of the in-plane strain magnitude (common practice for this check)
BETTER_BY = 3.0          # an alternative is reported when it fits this many times better
FLOOR = 20e-6            # ignore gauges whose in-plane strain is below this (m/m)
MATTERS = 0.02           # an alternative that moves a reading by less than this share: no evidence
TIE = 0.01               # alternatives whose residuals differ by less than this share fit alike


@dataclass(frozen=True)
class Alternative:
    """An order and shear convention that fits better on the gauges where it differs.

    ``gauges``: positions of those gauges; ``declared`` and ``residual``: the weighted mean
    residual there of the declared convention and of this one (shares of the strain).
    """

    order: tuple[str, ...]
    shear: str
    declared: float
    residual: float
    gauges: tuple[int, ...]


def _surface_parts(strain: NDArray, normal: NDArray, direction: NDArray, nu: float
                   ) -> tuple[NDArray, NDArray]:
    """Traction-free residual and in-plane strain magnitude of each gauge [m/m]."""
    t2 = np.cross(normal, direction)

    def comp(a: NDArray, b: NDArray) -> NDArray:
        return np.einsum("gi,gij,gj->g", a, strain, b)

    e11, e22, e12 = comp(direction, direction), comp(t2, t2), comp(direction, t2)
    e1n, e2n, enn = comp(direction, normal), comp(t2, normal), comp(normal, normal)
    expected_nn = -nu / (1 - nu) * (e11 + e22)
    size = np.sqrt(e11 ** 2 + e22 ** 2 + 2 * e12 ** 2)
    resid = np.sqrt(e1n ** 2 + e2n ** 2 + (enn - expected_nn) ** 2)
    return resid, size


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
    resid, size = _surface_parts(strain, normal, direction, nu)
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


def _residual(eps: NDArray, normal: NDArray, direction: NDArray, nu: float,
              stress_strain: NDArray | None) -> tuple[NDArray, NDArray]:
    """Per gauge: the check's residual as a share of the strain (NaN below FLOOR), and the
    strain magnitude it is a share of [m/m]."""
    if stress_strain is not None:
        size = np.linalg.norm(stress_strain, axis=(1, 2))
        resid = np.linalg.norm(eps - stress_strain, axis=(1, 2))
    else:
        resid, size = _surface_parts(eps, normal, direction, nu)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(size > FLOOR, resid / size, np.nan), size


def _reading(eps: NDArray, direction: NDArray) -> NDArray:
    """Strain along each gauge's grid [m/m]."""
    return np.einsum("gi,gij,gj->g", direction, eps, direction)


def convention_evidence(raw_at_gauges: NDArray, components: tuple[str, ...] | None, shear: str,
                        normal: NDArray, direction: NDArray, nu: float, *,
                        stress_strain: NDArray | None = None) -> dict[str, Any]:
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
        ``declared`` (median residual over all gauges), ``best`` (order, shear, median residual),
        ``method``, and ``weighted``: the :class:`Alternative` that fits best on the gauges whose
        readings it changes, when it fits BETTER_BY times better than the declared convention
        there and the declared one misses by more than RESIDUAL_LIMIT (else None).

    Notes
    -----
    For alternative A and declared convention D, gauge g weighs
    w_g = |e_A,g - e_D,g| / s_g (the readings along the grid, s_g the strain magnitude), counted
    when above MATTERS; the score of a convention is sum(w_g r_g) / sum(w_g) over its residuals
    r_g.
    """
    components = tuple(components or DEFAULT_ORDER)
    candidates = _candidates(components, shear)
    scores, fits, weighted = [], [], None
    tensor_d = from_voigt(raw_at_gauges, components, shear=shear)
    resid_d, size_d = _residual(tensor_d, normal, direction, nu, stress_strain)
    reading_d = _reading(tensor_d, direction)
    for order, sh in candidates:
        eps = tensor_d if (order, sh) == (components, shear) else from_voigt(raw_at_gauges, order,
                                                                             shear=sh)
        r, size = _residual(eps, normal, direction, nu, stress_strain)
        scores.append((order, sh, float(np.nanmedian(r)) if np.isfinite(r).any() else np.nan))
        if (order, sh) == (components, shear):
            continue
        with np.errstate(invalid="ignore", divide="ignore"):
            change = np.abs(_reading(eps, direction) - reading_d) / np.maximum(size_d, size)
        w = np.where((change > MATTERS) & np.isfinite(r) & np.isfinite(resid_d), change, 0.0)
        if not w.sum() > 0:
            continue
        declared_w = float(np.sum(w * np.nan_to_num(resid_d)) / w.sum())
        alt_w = float(np.sum(w * np.nan_to_num(r)) / w.sum())
        if declared_w > RESIDUAL_LIMIT and alt_w * BETTER_BY <= declared_w:
            fits.append(Alternative(order=order, shear=sh, declared=declared_w, residual=alt_w,
                                    gauges=tuple(int(k) for k in np.flatnonzero(w))))
    if fits:
        # alternatives that fit equally well (within TIE): the one nearest the declared wins
        least = min(a.residual for a in fits)
        weighted = min(fits, key=lambda a: (a.residual > least + TIE, a.shear != shear,
                                            a.order != components, a.residual))
    declared = scores[0][2]
    best = min(scores, key=lambda s: np.inf if np.isnan(s[2]) else s[2])
    return {"declared": declared, "best": best, "weighted": weighted,
            "method": "stress-array (Hooke's law)" if stress_strain is not None
            else "traction-free surface"}


def describe(case: str, evidence: dict[str, Any], *, array: str = "",
             components: tuple[str, ...] | None = None, shear: str = "engineering",
             gauges: list[str] | None = None) -> str | None:
    """One warning line when the declared convention does not fit, else None.

    ``array``, ``components``, ``shear`` and ``gauges`` (names in evidence order) make the line
    name the array, the declared convention and the gauges where the alternative matters.
    """
    where = f"case '{case}'" + (f", array '{array}'" if array else "")
    alt: Alternative | None = evidence.get("weighted")
    if alt is not None:
        names = [gauges[k] for k in alt.gauges] if gauges else [f"#{k + 1}" for k in alt.gauges]
        shown = ", ".join(names[:6]) + (f" and {len(names) - 6} more" if len(names) > 6 else "")
        declared = list(components or DEFAULT_ORDER)
        # the components named only when they differ: the same list twice hides the change
        fit, given = f'shear = "{alt.shear}"', f'shear = "{shear}"'
        if list(alt.order) != declared:
            fit, given = f"components = {list(alt.order)} with {fit}", \
                f"components = {declared} with {given}"
        return (f"{where}: on the {len(names)} gauge(s) whose readings the convention changes "
                f"({shown}), the {evidence['method']} check fits {fit} (residual "
                f"{alt.residual:.0%} of the strain) far better than the declared {given} "
                f"({alt.declared:.0%}); check components and shear in the [[case]]")
    declared = evidence["declared"]
    order, best_shear, best = evidence["best"]
    if not isinstance(declared, float) or np.isnan(declared) or declared <= RESIDUAL_LIMIT:
        return None
    line = (f"{where}: the strain components do not pass the {evidence['method']} check "
            f"(median residual {declared:.0%} of the strain, limit {RESIDUAL_LIMIT:.0%})")
    if (best > 0 and declared / max(best, 1e-12) >= BETTER_BY) or best == 0:
        line += f"; components = {list(order)} with shear = \"{best_shear}\" would fit ({best:.0%})"
    return line + "; check components and shear in the study (near load introduction this check " \
                  "fails for good reasons)"


def _first_state(case: Any) -> int | None:
    """The FE state a case's check reads: its own, or the first of its series."""
    ti = case.time_index
    if ti == "all":
        return 0
    if isinstance(ti, tuple):
        return ti[0]
    return ti if isinstance(ti, int) else None


def _stress_order(source: Any, array: str) -> tuple[str, ...]:
    """The stress array's component order: the names the file gives, else the default."""
    ours = tuple(component_of(n) for n in component_names(source, array))
    return ours if len(ours) == 6 and all(ours) else DEFAULT_ORDER  # type: ignore[return-value]


def convention_warnings(model: Any) -> list[str]:
    """Warnings from the order/convention checks (traction-free surface, Hooke against stress).

    ``model`` is a :class:`~correlate.model_readings.model.Model` (its study, operator and
    sources). A case whose arrays cannot be read is left to the reading of the case, which
    reports it.
    """
    study, op = model.study, model.operator
    mat = study.material
    if op.mesh.family != "solid":
        return []
    surface = (op.placement.table["mount"] == "surface").to_numpy()
    out = []
    for case in study.cases:
        if case.kind != "strain" or isinstance(case.array, dict):
            continue
        if mat is None and not case.check_displacement:
            continue   # the traction-free and Hooke tests need the material
        try:
            out += _case_warnings(model, case, surface, mat)
        except CorrelateError:
            continue
    return out


def _case_warnings(model: Any, case: Any, surface: NDArray, mat: Any) -> list[str]:
    op = model.operator
    src = model.source(case)
    pts = op.centre_points
    fe_index = _first_state(case)
    touched = op.touched() if src.times else None
    rows = None if touched is None else {"point": touched.point, "cell": touched.cell}

    def at_gauges(name: str) -> NDArray:
        location, values = find_array(src, name, fe_index, case=case.name, rows=rows)
        whole = len(values) == (len(op.mesh.points) if location == "point" else op.mesh.n_cells)
        if location == "cell":
            cells = op.cell[pts]
            return values[cells if whole or touched is None
                          else np.searchsorted(touched.cell, cells)]
        if whole or touched is None:
            return (op.interpolation() @ values)[pts]
        return (touched.compact @ values)[pts]

    def gradient_strain(name: str) -> NDArray | str:
        """Small strain of displacement array ``name`` at the gauge centres (g, 3, 3), or why
        it cannot be had."""
        location, values = find_array(src, name, fe_index, case=case.name, rows=rows)
        if location != "point" or values.ndim != 2 or values.shape[1] != 3:
            return (f"case '{case.name}': check_displacement array '{name}' is "
                    f"{'cell' if location == 'cell' else 'point'} data of "
                    f"{values.shape[1] if values.ndim == 2 else 1} component(s); the check needs "
                    "the nodal displacement (3 components)")
        whole = len(values) == len(op.mesh.points)
        grads = []
        for G in op.gradients():   # d/dx, d/dy, d/dz of the shape functions (points x nodes)
            G = G[pts]
            if not whole:   # the nodes a time-series step was read at (the cells' nodes)
                assert touched is not None
                G = sparse.csr_matrix((G.data, np.searchsorted(touched.point, G.indices),
                                       G.indptr), shape=(len(pts), len(touched.point)))
            grads.append(G @ values)
        H = np.stack(grads, axis=2)                 # H[g, i, k] = d u_i / d x_k
        return 0.5 * (H + H.transpose(0, 2, 1))

    raw_g = at_gauges(case.array)[surface]
    if raw_g.shape[1] != 6:
        return []
    references: list[tuple[str, NDArray | None]] = []
    if case.check_stress and mat is not None:
        s_raw = at_gauges(case.check_stress)[surface]
        if s_raw.shape[1] == 6:
            sig = from_voigt(s_raw, _stress_order(src, case.check_stress), shear="tensor")
            references.append(("stress-array (Hooke's law)",
                               strain_from_stress(sig, mat.E, mat.nu)))
    if case.check_displacement:
        got = gradient_strain(case.check_displacement)
        if isinstance(got, str):
            return [got]
        references.append(("displacement-gradient", got[surface]))
    if not references:
        references.append(("traction-free surface", None))
    names = [g for g, keep in zip(op.gauges, surface, strict=True) if keep]
    nu = mat.nu if mat is not None else 0.0   # only the traction-free test reads it
    out = []
    for method, reference in references:
        ev = convention_evidence(raw_g, case.components, case.shear,
                                 op.placement.normal[surface], op.placement.direction[surface],
                                 nu, stress_strain=reference)
        if reference is not None:
            ev["method"] = method
        line = describe(case.name, ev, array=case.array, components=case.components,
                        shear=case.shear, gauges=names)
        out += [line] if line else []
    return out
