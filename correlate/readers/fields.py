"""Case fields: turn the arrays a case names into strain tensors or displacements.

Stage: input conversion. In: an opened model and a study case. Out: a :class:`Field` in the package
convention (full symmetric tensors in m/m with tensor shear, global model axes), at nodes or cells.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError
from correlate.mechanics.tensors import DEFAULT_ORDER, PLANE_ORDER, from_voigt, strain_from_stress
from correlate.readers.model import Field, ModelSource, component_names, component_of, find_array
from correlate.readers.study import Case, Material

ROW_MAJOR = ("xx", "xy", "xz", "yx", "yy", "yz", "zx", "zy", "zz")


def _components(case: Case, count: int, source: ModelSource, array: str,
                family: str) -> tuple[str, ...]:
    if case.components is not None:
        if len(case.components) != count:
            raise ModelError(f"{source.path.name}: array '{array}' of case '{case.name}' has {count} "
                             f"components but the case lists {len(case.components)}; fix components")
        return _agree_with_file(case.components, source, array, case, declared=True)
    if count == 6:
        return _agree_with_file(DEFAULT_ORDER, source, array, case, declared=False)
    if count == 9:
        return _agree_with_file(ROW_MAJOR, source, array, case, declared=False)
    if count == 3 and family in ("shell", "plane"):
        return _agree_with_file(PLANE_ORDER, source, array, case, declared=False)
    raise ModelError(f"{source.path.name}: array '{array}' of case '{case.name}' has {count} "
                     "component(s); a strain or stress array needs 6 (Voigt), 9 (full, row-major) "
                     "or 3 (xx, yy, xy; 2D and shell models)")


def _agree_with_file(order: tuple[str, ...], source: ModelSource, array: str, case: Case, *,
                     declared: bool) -> tuple[str, ...]:
    """Refuse a component order that contradicts the names the file gives the components.

    A VTU may name each component of an array (``ComponentName0`` ... as VTK writes them); a
    name such as "XY" or "Ezx" is compared with the order's component at the same position (xz
    and zx are the same shear of a symmetric tensor). Names that are not recognised are ignored.
    """
    stored = component_names(source, array)
    if len(stored) != len(order):
        return order
    ours = [component_of(n) for n in stored]
    differ = [k for k, c in enumerate(ours) if c is not None and sorted(c) != sorted(order[k])]
    if not differ:
        return order
    names = "[" + ", ".join(repr(n) for n in stored) + "]"
    said = (f"declares components = {list(order)}" if declared else
            f"gives no components, so the default order {list(order)} would be read")
    fix = (f"set components = {list(ours)}" if all(ours) else "set components to match")
    k = differ[0]
    raise ModelError(f"{source.path.name}: array '{array}' names its components {names} in the "
                     f"file, but case '{case.name}' {said} (component {k + 1} is "
                     f"'{stored[k]}' in the file, '{order[k]}' in the study); {fix} in the "
                     "[[case]], or correct the file")


def _check_axes(axes: NDArray, source: ModelSource, case: Case) -> None:
    if axes.shape[1] not in (6, 9):
        raise ModelError(f"{source.path.name}: axes array '{case.axes}' of case '{case.name}' has "
                         f"{axes.shape[1]} components; give local x and y axes (6) or the full "
                         "rotation (9, rows = local axes)")


def _rotate_to_global(tensor: NDArray, axes: NDArray) -> NDArray:
    """Rotate per-cell local tensors to global axes; axes rows are local x, y (, z) in global."""
    ex, ey = axes[:, 0:3], axes[:, 3:6]
    ex = ex / np.linalg.norm(ex, axis=1, keepdims=True)
    ey = ey - np.sum(ey * ex, axis=1, keepdims=True) * ex
    ey = ey / np.linalg.norm(ey, axis=1, keepdims=True)
    R = np.stack([ex, ey, np.cross(ex, ey)], axis=1)  # rows: local axes in global
    return np.einsum("cki,ckl,clj->cij", R, tensor, R)


def _material_per_entity(materials: tuple[Material, ...], source: ModelSource, location: str,
                         case: Case) -> tuple[NDArray, NDArray]:
    mesh = source.mesh
    if not materials:
        raise ModelError(f"case '{case.name}' gives stress; add [material] E and nu to the study")
    n_cells = mesh.n_cells
    E = np.full(n_cells, np.nan)
    nu = np.full(n_cells, np.nan)
    offsets = mesh.offsets
    for mat in materials:
        blocks = range(len(mesh.blocks)) if mat.blocks is None else mat.blocks
        for b in blocks:
            if not 0 <= b < len(mesh.blocks):
                raise ModelError(f"[[material]] names cell block {b}; the model has blocks 0 to "
                                 f"{len(mesh.blocks) - 1}")
            E[offsets[b]:offsets[b + 1]] = mat.E
            nu[offsets[b]:offsets[b + 1]] = mat.nu
    if location == "cell":
        return E, nu
    # nodal values: a node shared by two materials takes the first; say so in the docs
    En = np.full(len(mesh.points), np.nan)
    nun = np.full(len(mesh.points), np.nan)
    for b, (_, conn) in enumerate(mesh.blocks):
        sel = np.isnan(En[conn])
        En[conn[sel]] = np.repeat(E[offsets[b]:offsets[b + 1]], conn.shape[1])[sel.ravel()]
        nun[conn[sel]] = np.repeat(nu[offsets[b]:offsets[b + 1]], conn.shape[1])[sel.ravel()]
    return En, nun


def cell_to_nodes(values: NDArray, source: ModelSource) -> NDArray:
    """Average cell values to the nodes (plain mean over the cells that share a node)."""
    mesh = source.mesh
    n = len(mesh.points)
    total = np.zeros((n,) + values.shape[1:])
    count = np.zeros(n)
    start = 0
    for _, conn in mesh.blocks:
        v = values[start:start + len(conn)]
        for k in range(conn.shape[1]):
            np.add.at(total, conn[:, k], v)
            np.add.at(count, conn[:, k], 1.0)
        start += len(conn)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / count.reshape((n,) + (1,) * (values.ndim - 1))


def _tensor_array(source: ModelSource, case: Case, array: str, materials: tuple[Material, ...],
                  time_index: int | None, rows: dict | None = None
                  ) -> tuple[str, NDArray, Callable[[NDArray, NDArray], NDArray], NDArray | None]:
    """The array as read, with the row-by-row conversion to strain tensors in global axes."""
    location, raw = find_array(source, array, time_index, case=case.name, rows=rows)
    index = None
    if rows is not None and len(raw) == len(rows[location]) and \
            len(raw) != (len(source.mesh.points) if location == "point" else source.mesh.n_cells):
        index = rows[location]
    family = source.mesh.family
    comps = _components(case, raw.shape[1], source, array, family)
    shear = "tensor" if case.kind == "stress" else case.shear
    axes = None
    if case.axes:
        axes_loc, axes = find_array(source, case.axes, time_index, case=case.name)
        if index is not None:
            axes = axes[index]
        if axes_loc != "cell":
            raise ModelError(f"{source.path.name}: axes array '{case.axes}' must be cell data "
                             "(one frame per element)")
        if location == "point":
            raise ModelError(f"{source.path.name}: case '{case.name}' has point data in local axes; "
                             "local-axis results must be cell data beside their axes array")
        _check_axes(axes, source, case)
    elif len(comps) == 3 and family == "shell":
        raise ModelError(f"{source.path.name}: case '{case.name}' gives in-plane components (xx, yy, "
                         "xy) on a shell that is not flat in the x-y plane; these are element or "
                         "material axes, so name the per-cell axes array with axes = \"...\"")
    E = nu = None
    if case.kind == "stress":
        E, nu = _material_per_entity(materials, source, location, case)
        if index is not None:
            E, nu = E[index], nu[index]

    def convert(values: NDArray, ids: NDArray) -> NDArray:
        tensor = from_voigt(values, comps, shear=shear)
        if axes is not None:
            tensor = _rotate_to_global(tensor, axes[ids])
        if E is not None and nu is not None:
            tensor = strain_from_stress(tensor, E[ids][:, None, None], nu[ids][:, None, None])
        return tensor

    return location, raw, convert, index


def read_field(source: ModelSource, case: Case, materials: tuple[Material, ...] = (),
               time_index: int | None = None, rows: dict | None = None) -> Field:
    """Read one case's field in the package convention.

    Parameters
    ----------
    source : ModelSource
        The opened model file holding the case.
    case : Case
        The study case (array names, component order, shear convention, axes).
    materials : tuple of Material
        Needed when the case gives stress (Hooke's law, isotropic).
    time_index : int, optional
        Step of a time series; defaults to the case's own.
    rows : dict, optional
        {"point": node ids, "cell": cell ids} the gauges touch (sorted): a time series then reads
        only those rows and the Field's ``index`` says which they are.

    Returns
    -------
    Field
        Strain tensors (n, 3, 3) [m/m, tensor shear] or displacements (n, 3) [length unit].
    """
    if time_index is None and isinstance(case.time_index, int):
        time_index = case.time_index
    notes: list[str] = []
    if case.kind == "displacement":
        if isinstance(case.array, dict):
            raise ModelError(f"case '{case.name}': displacement of the top and bottom faces cannot "
                             "give surface strain without rotations and thickness; give the shell's "
                             "strain arrays per face instead")
        location, raw = find_array(source, case.array, time_index, case=case.name, rows=rows)
        index = rows["point"] if rows is not None and len(raw) != len(source.mesh.points) else None
        if location != "point":
            raise ModelError(f"{source.path.name}: displacement '{case.array}' of case '{case.name}' "
                             "is cell data; displacement must be given at the nodes")
        if raw.shape[1] == 2:
            raw = np.c_[raw, np.zeros(len(raw))]
        if raw.shape[1] != 3:
            raise ModelError(f"{source.path.name}: displacement '{case.array}' of case '{case.name}' "
                             f"has {raw.shape[1]} components; expected 3 (or 2 for plane models)")
        return Field(case=case.name, kind="displacement", location="point", data=raw,
                     source_kind="displacement", array=case.array, index=index)
    arrays = case.array if isinstance(case.array, dict) else {"": case.array}
    data: dict[str, NDArray] = {}
    location = "point"
    index = None
    convert: Callable[[NDArray, NDArray], NDArray] | None = None
    if case.average == "nodal":
        rows = None  # nodal averaging needs every cell
    for face, name in arrays.items():
        location, raw, convert, index = _tensor_array(source, case, name, materials, time_index,
                                                      rows)
        if location == "cell" and case.average == "nodal":
            raw = cell_to_nodes(convert(raw, np.arange(len(raw))), source)
            convert, location = None, "point"
            notes.append("cell data averaged to nodes")
        elif location == "cell":
            notes.append("cell data: constant per element")
        data[face] = raw
    single = data.get("", data)
    return Field(case=case.name, kind="strain", location=location, data=single,
                 source_kind=case.kind, array=str(case.array), notes=tuple(notes), index=index,
                 convert=convert)
