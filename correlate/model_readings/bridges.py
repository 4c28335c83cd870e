"""Model readings of Wheatstone-bridge channels: the arms' operator rows, combined.

Stage: model readings. In: a :class:`~correlate.model_readings.operator.GaugeOperator` whose
gauges include every arm, and the study's bridges (:class:`Bridge`). Out: a
:class:`BridgeRows` holding one sparse combination matrix (bridge rows x operator rows) and the
row layout of the bridge channels, laid out like the operator's own (``row_gauge``,
``row_kind``, ``row_offset``, ``gauges``), so the placement band and the sensitivities of
:mod:`correlate.model_readings.table` read a bridge as they read a gauge.

A bridge channel reads ``(e1 - e2 + e3 - e4) / factor`` over its active arms, each ``e`` the
arm grid's indicated strain (transverse sensitivity included); a missing arm is a completion
resistor (:func:`correlate.measurement.bridge.bridge_output`, whose arm numbering this module
follows). The reading is linear in the field, so a bridge's row is the same combination of its
arms' rows: cases superpose and series states pair row by row unchanged.

Band: the arms are moved together. Band sample k of a bridge combines sample k of every arm,
the samples being matched by their move (direction on the surface in each arm's own grid frame,
and the sign of the turn), so that each arm moves by its own tolerance in the same sense. A
sample an arm does not have (it has no position or no angle tolerance) is left out of the
bridge's band. For arms on opposite faces of a shell or plate (a bending bridge) each arm's frame
has its own normal, so "the same sense" along the grid is the same direction in space.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import GaugeError
from correlate.mechanics.gauge import BRIDGE_ARM_SIGNS as ARM_SIGNS
from correlate.model_readings.operator import GaugeOperator
from correlate.readers.bridge_map import Bridge


@dataclass(frozen=True)
class BridgeRows:
    """Bridge channels laid out like operator rows: ``rows = matrix @ operator_rows``."""

    matrix: sparse.csr_matrix          # (bridge rows, operator rows)
    row_gauge: NDArray[np.int64]       # bridge index of each row
    row_kind: NDArray[np.int64]        # 0 nominal, 1 centre point, 2 band
    row_offset: NDArray[np.float64]    # (r, 3) the first active arm's move
    gauges: list[str]                  # bridge ids


def _move_keys(op: GaugeOperator, rows: NDArray[np.int64]) -> list[tuple[int, int, int]]:
    """(kind, direction of the move in 1/8 turns or -1, sign of the turn) of each row."""
    off = op.row_offset[rows]
    moved = np.hypot(off[:, 0], off[:, 1]) > 0
    eighth = np.round(np.arctan2(off[:, 1], off[:, 0]) / (np.pi / 4)).astype(int) % 8
    return list(zip(op.row_kind[rows].tolist(), np.where(moved, eighth, -1).tolist(),
                    np.sign(off[:, 2]).astype(int).tolist(), strict=True))


def combine_bridges(op: GaugeOperator, bridges: list[Bridge]) -> BridgeRows:
    """Build the combination of arm rows that gives every bridge channel's rows.

    Parameters
    ----------
    op : GaugeOperator
        The operator of the gauge map, arms included.
    bridges : list of Bridge
        Arm gauge ids must be gauges of ``op``; at least two active arms each.

    Returns
    -------
    BridgeRows
        Per bridge: a nominal row, a centre row, then the band samples all its arms share.

    Raises
    ------
    GaugeError
        An arm naming no gauge of the operator, a bridge with fewer than two arms, or a zero or
        non-finite factor; one line per bridge.

    Notes
    -----
    Row r of a bridge is ``sum_k s_k R[arm_k, r] / factor`` with ``s = (+1, -1, +1, -1)``, the
    small-signal output of a bridge of equal arms, ``Vo/Vex = (k/4)(e1 - e2 + e3 - e4)``, read
    as ``4 (Vo/Vex) / k`` (Hoffmann 1989, the Wheatstone bridge chapter, from memory).
    """
    index = {g: i for i, g in enumerate(op.gauges)}
    problems = []
    for b in bridges:
        active = [a for a in b.arms if a is not None]
        unknown = [a for a in active if a not in index]
        if unknown:
            problems.append(f"bridge '{b.name}': arm gauge(s) {', '.join(unknown)} are not in "
                            "the gauge map; give every arm its own row there")
        if len(active) < 2:
            problems.append(f"bridge '{b.name}' has {len(active)} active arm(s); a bridge needs "
                            "two or more (one active arm is a quarter bridge)")
        if not (np.isfinite(b.factor) and b.factor != 0):
            problems.append(f"bridge '{b.name}': factor {b.factor!r} is not a finite non-zero "
                            "number (1 gives the channel's indication)")
    if problems:
        raise GaugeError(*problems)
    rows_of = [np.flatnonzero(op.row_gauge == g) for g in range(len(op.gauges))]
    out_r, out_c, out_v, row_gauge, row_kind, row_offset = [], [], [], [], [], []
    r = 0
    for j, b in enumerate(bridges):
        arms = [(ARM_SIGNS[k], rows_of[index[a]]) for k, a in enumerate(b.arms) if a is not None]
        keyed = [dict(zip(_move_keys(op, rows), rows.tolist(), strict=True)) for _, rows in arms]
        shared = [key for key in keyed[0] if all(key in d for d in keyed[1:])]
        for key in shared:
            for (sign, _), d in zip(arms, keyed, strict=True):
                out_r.append(r)
                out_c.append(d[key])
                out_v.append(sign / b.factor)
            row_gauge.append(j)
            row_kind.append(key[0])
            row_offset.append(op.row_offset[keyed[0][key]])
            r += 1
    matrix = sparse.csr_matrix((out_v, (out_r, out_c)), shape=(r, len(op.row_kind)))
    return BridgeRows(matrix=matrix, row_gauge=np.asarray(row_gauge, dtype=np.int64),
                      row_kind=np.asarray(row_kind, dtype=np.int64),
                      row_offset=np.asarray(row_offset, dtype=float).reshape(-1, 3),
                      gauges=[b.name for b in bridges])


def bridge_rows(combination: BridgeRows, rows: dict[str, NDArray[np.float64]]
                ) -> dict[str, NDArray[np.float64]]:
    """Apply the combination to a case's operator rows (each (rows,) or (rows, steps)).

    Every numeric entry with one value per operator row is combined (axial, transverse,
    indicated, the height correction); other entries are left out.
    """
    n = combination.matrix.shape[1]
    return {key: combination.matrix @ value for key, value in rows.items()
            if isinstance(value, np.ndarray) and value.dtype.kind == "f" and len(value) == n}


__all__ = ["ARM_SIGNS", "BridgeRows", "bridge_rows", "combine_bridges"]
