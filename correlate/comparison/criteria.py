"""The pass rule and the status of every gauge-step under the analyst's criteria.

Stage: comparison. In: measured and predicted readings (s, g) in microstrain, the study's criteria
and which steps and gauges the health checks and dispositions removed. Out: differences, ratios,
the allowed difference and a status per gauge-step (:class:`Statuses`), and the reference step.

The pass rule, written once here: a gauge-step passes when

    |measured - predicted| <= max(relative x |predicted|, absolute_ue)

(the criteria are the analyst's choice for the programme, not a standard).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import StudyError
from correlate.measurement.tare import TaredSteps
from correlate.readers.study import Criteria


def allowed_difference(predicted: ArrayLike, relative: float, absolute_ue: float
                       ) -> NDArray[np.float64]:
    """The largest accepted |measured - predicted|: max(relative |predicted|, absolute_ue).

    Examples
    --------
    >>> allowed_difference([100.0, 1000.0], 0.1, 50.0).tolist()
    [50.0, 100.0]
    """
    return np.maximum(relative * np.abs(np.asarray(predicted, dtype=float)), absolute_ue)


@dataclass(frozen=True)
class Criterion:
    """The analyst's pass criterion: ``|measured - predicted| <= max(relative |p|, absolute_ue)``.

    Parameters
    ----------
    relative : float
        Allowed difference as a fraction of the predicted reading.
    absolute_ue : float
        Allowed difference near zero strain. [microstrain]
    """

    relative: float
    absolute_ue: float

    def __post_init__(self) -> None:
        if not (self.relative >= 0.0 and self.absolute_ue >= 0.0):  # also rejects NaN
            msg = (f"criterion relative={self.relative}, absolute_ue={self.absolute_ue}: both "
                   "must be finite and >= 0; give a fraction and a microstrain floor")
            raise StudyError(msg)

    @classmethod
    def of(cls, criteria: Criteria) -> Criterion:
        """The pass rule of a study's criteria."""
        return cls(relative=criteria.relative, absolute_ue=criteria.absolute_ue)

    def allowed(self, predicted: ArrayLike) -> NDArray[np.float64]:
        """The allowed difference at each predicted reading."""
        return allowed_difference(predicted, self.relative, self.absolute_ue)

    def passes(self, measured: ArrayLike, predicted: ArrayLike) -> NDArray[np.bool_]:
        """Return True where a gauge-step passes; a NaN measured reading is not evaluated (True).

        A NaN predicted reading against a real measurement fails: a model that cannot say what the
        gauge reads does not explain it.

        Examples
        --------
        >>> Criterion(0.1, 5.0).passes([108.0, 115.0, float("nan"), 4.0], [100.0, 100.0, 1.0, 0.0])
        array([ True, False,  True,  True])
        """
        m = np.asarray(measured, dtype=float)
        p = np.asarray(predicted, dtype=float)
        ok = np.abs(m - p) <= self.allowed(p)
        return np.asarray(ok | np.isnan(m))


@dataclass(frozen=True)
class Statuses:
    """Per gauge-step results under the criteria; every array is (s, g).

    ``status``: ``pass`` / ``fail`` for healthy active steps; ``tare``; ``zero-load``;
    ``missing``; otherwise the flag that removed the step or the gauge. ``evaluated``: the
    pass/fail entries. ``basis``: which term of the rule governs (``relative`` / ``floor``).
    """

    difference: NDArray[np.float64]     # measured - predicted [ue]
    ratio: NDArray[np.float64]
    relative: NDArray[np.float64]       # difference / |predicted| where the relative term governs
    allowed: NDArray[np.float64]        # [ue]
    basis: NDArray
    status: NDArray
    unconservative: NDArray[np.bool_]   # failing with |measured| > |predicted|
    evaluated: NDArray[np.bool_]


def status_table(measured: NDArray, predicted: NDArray, criteria: Criteria, steps: TaredSteps,
                 dropped_steps: NDArray[np.bool_], dropped_gauges: NDArray[np.bool_],
                 flag_text: NDArray) -> Statuses:
    """Per gauge-step differences and statuses (see :class:`Statuses`)."""
    diff = measured - predicted
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(predicted != 0, measured / predicted, np.nan)
        relative = diff / np.abs(predicted)
    # relative only where the relative term can govern: |predicted| >= absolute_ue / relative
    rel_floor = criteria.absolute_ue / criteria.relative if criteria.relative > 0 else np.inf
    relative = np.where(np.abs(predicted) >= rel_floor, relative, np.nan)
    allowed = allowed_difference(predicted, criteria.relative, criteria.absolute_ue)
    basis = np.where(criteria.relative * np.abs(predicted) > criteria.absolute_ue, "relative", "floor")
    ok = np.abs(diff) <= allowed
    status = np.where(ok, "pass", "fail").astype(object)
    unconservative = (~ok) & (np.abs(measured) > np.abs(predicted))
    healthy = ~dropped_steps & ~dropped_gauges[None, :]
    status = np.where(np.isnan(measured), "missing", status)
    status = np.where(healthy, status, flag_text)
    status = np.where(steps.zero_load[:, None], "zero-load", status)
    status = np.where(steps.tare[:, None], "tare", status)
    evaluated = (status == "pass") | (status == "fail")
    return Statuses(difference=diff, ratio=ratio, relative=relative, allowed=allowed,
                    basis=np.where(evaluated, basis, ""), status=status,
                    unconservative=unconservative & evaluated, evaluated=evaluated)


def reference_step(predicted: NDArray, steps: TaredSteps) -> int:
    """Index of the step with the largest RMS predicted reading (the reference step)."""
    rms = np.sqrt(np.nanmean(predicted ** 2, axis=1))
    rms = np.where(steps.active, rms, -1.0)
    return int(np.argmax(rms))


__all__ = ["Criterion", "Statuses", "allowed_difference", "reference_step", "status_table"]
