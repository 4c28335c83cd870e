"""The whole correlation of a study, from the readings to the summary; nothing is written.

Stage: comparison (orchestration). The steps, in order: read and tare the test data, with the
channels' health and dispositions (:func:`measured_side`, which depends on the test only), the
model readings for the test loads (:func:`model_readings`), statuses and statistics, diagnosis of
the failing gauges (and the installation flags it raises), rosettes and the summary. The maths
lives in the stage modules; the result is a :class:`Correlation` that the outputs and the report
read.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.budget import GAUGE_COLUMNS, ValidationBudget, validation_budget
from correlate.comparison.criteria import Statuses, reference_step, status_table
from correlate.comparison.dispositions import (
    Exclusions,
    dispose_health,
    flag_installation,
    flag_reversed,
    health_flags,
    reverse_signs,
)
from correlate.comparison.evidence import (
    diagnose_failures,
    installation_faults,
    load_checks,
    rosette_diagnoses,
)
from correlate.comparison.fits import core_fits, detail_fits
from correlate.comparison.pairing import Steps, pair_series, read_test_data
from correlate.comparison.rosette_budget import rosette_uncertainty, with_uncertainty
from correlate.comparison.rosettes import rosette_table
from correlate.comparison.verdict import judge, summarise
from correlate.core import progress
from correlate.core.errors import StudyError
from correlate.core.units import MICROSTRAIN
from correlate.measurement.channels import (
    ChainApplied,
    apply_chain,
    chain_used,
    corrections_table,
    range_flags,
)
from correlate.measurement.corrections import channel_scale
from correlate.measurement.tare import tare_readings
from correlate.model_readings.channels import compared_model, open_channels
from correlate.model_readings.model import Model, case_rows, prepare
from correlate.model_readings.other_models import variant_study
from correlate.model_readings.table import band_limits
from correlate.readers.study import Study

CHAIN_ORDER = ("polarity", "gauge-factor ratio and lead-wire factor (or shunt gain)",
               "quarter-bridge non-linearity", "thermal output since the tare temperature",
               "gauge factor at temperature", "tare")


@dataclass
class Correlation:
    """Everything a run computed; the report and the outputs read from it."""

    study: Study
    model: Model
    steps: Steps
    gauges: list[str]
    measured: NDArray[np.float64]        # (s, g) tared, corrected, microstrain
    predicted: NDArray[np.float64]       # (s, g) microstrain
    predicted_axial: NDArray[np.float64]  # (s, g) true grid-averaged strain, microstrain
    band_low: NDArray[np.float64]
    band_high: NDArray[np.float64]
    contributions: NDArray[np.float64]   # (s, g, C)
    status: Statuses
    flags: pd.DataFrame
    gauge_table: pd.DataFrame            # gauges.csv
    per_gauge: pd.DataFrame
    rosettes: pd.DataFrame
    diagnoses: pd.DataFrame
    summary: dict[str, Any]
    readings_info: dict[str, Any] = field(default_factory=dict)
    rows_by_case: dict[str, dict[str, NDArray]] = field(default_factory=dict)
    chain: ChainApplied | None = None    # the measurement chain, when the study uses it
    corrections: pd.DataFrame | None = None  # corrections.csv, when the study uses it
    validation: ValidationBudget | None = None   # None: the study has no [uncertainty]

    @property
    def reference(self) -> int:
        """Index in ``steps`` of the reference step named in the summary."""
        ref = self.summary["reference_step"]
        hit = np.flatnonzero((self.steps.step == ref["step"])
                             & (self.steps.sequence == ref["sequence"]))
        return int(hit[0]) if len(hit) else 0


@dataclass(frozen=True)
class ModelForTest:
    """The model's readings at the test's steps (microstrain)."""

    predicted: NDArray[np.float64]       # (s, g) what each gauge indicates
    axial: NDArray[np.float64]           # (s, g) true grid-averaged strain
    low: NDArray[np.float64]             # (g, s) placement band
    high: NDArray[np.float64]
    contributions: NDArray[np.float64]   # (s, g, C) per case
    not_modelled: NDArray[np.bool_]      # (s,) rows a series case does not reach
    rows_by_case: dict[str, dict[str, NDArray]]
    height: NDArray[np.float64] | None = None  # (s, g) grid-height correction, microstrain
    transverse: NDArray[np.float64] | None = None  # (s, g) strain across the grid


def measured_readings(study: Study, model: Model) -> tuple[Any, Steps, NDArray[np.float64]]:
    """Read the test data, tare it and apply the channel corrections and reverse overrides.

    Returns the readings record, the steps and the measured readings (s, g) in microstrain.
    """
    readings, steps, measured, _ = chain_readings(study, model.gauges)
    return readings, steps, measured


def chain_readings(study: Study, gauges: pd.DataFrame
                   ) -> tuple[Any, Steps, NDArray[np.float64], ChainApplied | None]:
    """:func:`measured_readings` with the measurement chain's record (None when not used);
    ``gauges`` is the gauge map (``check`` calls it before any gauge is located)."""
    with progress.step("reading the test data"):
        readings, steps, _ = read_test_data(study, gauges)
    names = gauges["gauge"].tolist()
    signs = reverse_signs(gauges, study)
    if chain_used(gauges, study.chain):
        signs = signs * gauges["polarity"].fillna(1.0).to_numpy(dtype=float)
        chain = apply_chain(readings.table[names].to_numpy(dtype=float), signs, gauges,
                            study.chain, readings.table, steps, units=readings.load_units,
                            source=Path(readings.path).name)
        return readings, steps, chain.measured_ue, chain
    scale = channel_scale(gauges) * signs
    raw = readings.table[names].to_numpy(dtype=float) * scale[None, :]
    return readings, steps, tare_readings(raw, steps), None


def model_readings(study: Study, model: Model, steps: Steps) -> ModelForTest:
    """Combine the cases with the steps' factors (series cases matched by load), then the band."""
    op = model.operator
    case_names = [c.name for c in study.cases]
    series = [c for c in study.cases if c.is_series]
    rows_by_case = {}
    for case in progress.bar([c for c in study.cases if c not in series],
                             desc="evaluating the cases"):
        rows_by_case[case.name] = case_rows(model, case, case.time_index
                                            if isinstance(case.time_index, int) else None)
    key = "axial" if study.kt_corrected else "indicated"
    n_rows = len(op.row_kind)
    R = np.stack([rows_by_case[c][key] if c in rows_by_case else np.zeros(n_rows)
                  for c in case_names], axis=1)                               # (rows, C)
    R_axial, R_trans = (np.stack([rows_by_case[c][k] if c in rows_by_case else np.zeros(n_rows)
                                  for c in case_names], axis=1) for k in ("axial", "transverse"))
    combined = R @ steps.factors.T * MICROSTRAIN                              # (rows, s)
    combined_axial = R_axial @ steps.factors.T * MICROSTRAIN
    combined_trans = R_trans @ steps.factors.T * MICROSTRAIN
    nominal = op.row_kind == 0
    contributions = steps.factors[:, None, :] * R[nominal][None, :, :] * MICROSTRAIN
    not_modelled = np.zeros(len(steps.step), dtype=bool)
    for case in series:
        pairing = pair_series(study, model, case, steps)
        per_state = [case_rows(model, case, k) for k in pairing.fe_index]
        add, modelled = pairing.apply(np.stack([r[key] for r in per_state], axis=1))
        add_axial, _ = pairing.apply(np.stack([r["axial"] for r in per_state], axis=1))
        add_trans, _ = pairing.apply(np.stack([r["transverse"] for r in per_state], axis=1))
        add, add_axial = add * MICROSTRAIN, add_axial * MICROSTRAIN
        combined += np.nan_to_num(add)
        combined_axial += np.nan_to_num(add_axial)
        combined_trans += np.nan_to_num(add_trans * MICROSTRAIN)
        contributions[:, :, case_names.index(case.name)] = np.nan_to_num(add[nominal]).T
        not_modelled |= ~modelled
    low, high = band_limits(op, combined)
    return ModelForTest(predicted=combined[nominal].T, axial=combined_axial[nominal].T, low=low,
                        high=high, contributions=contributions, not_modelled=not_modelled,
                        rows_by_case=rows_by_case, transverse=combined_trans[nominal].T,
                        height=height_correction(study, model, steps, rows_by_case))


def height_correction(study: Study, model: Model, steps: Steps,
                      rows_by_case: dict[str, dict[str, NDArray]]) -> NDArray[np.float64] | None:
    """The grid-height correction of the model reading (s, g) in microstrain, superposed like
    the readings; None without heights. Series cases: NaN (their states pair row by row)."""
    if not any("height_indicated" in r for r in rows_by_case.values()):
        return None
    nominal = model.operator.row_kind == 0
    n = int(nominal.sum())
    out = np.zeros((len(steps.step), n))
    for j, case in enumerate(study.cases):
        if case.is_series:
            return np.full((len(steps.step), n), np.nan)
        rows = rows_by_case[case.name].get("height_indicated")
        if rows is not None:
            out += np.outer(steps.factors[:, j], rows[nominal]) * MICROSTRAIN
    return out


def require_loads(study: Study) -> None:
    """Refuse a run without readings or [[load]], or with a superposed case no [[load]] drives
    (also used by `check`)."""
    matched = [c.match["column"] for c in study.cases if c.match and "column" in c.match]
    if study.readings_file is None or not (study.loads or matched):
        raise StudyError(f"{study.path.name}: run needs [readings] file = \"...\" and at least one "
                         "[[load]] mapping a load column to a case; use predict for model "
                         "readings alone")
    loaded = {ld.case for ld in study.loads}
    unused = [c.name for c in study.cases if not c.is_series and c.name not in loaded]
    if unused:
        raise StudyError(*[f"{study.path.name}: case '{n}' has no [[load]], so it would add "
                           "nothing to any step; add a [[load]] naming it, or remove the case "
                           "from the study" for n in unused])


def _require_pairs(study: Study, steps: Steps, measured: NDArray) -> None:
    """Refuse a test with nothing to compare, saying what is missing (never a NaN verdict)."""
    name = study.readings_file.name if study.readings_file else study.path.name
    if not steps.active.any():
        what = ("only one row" if len(steps.step) < 2 else
                "every load is zero (within zero_tol of its peak) or every row is a tare row")
        raise StudyError(f"{name}: no loaded step to compare: {what}; a run needs rows with the "
                         "loads applied beside the tare row")
    if not np.isfinite(measured[steps.active]).any():
        raise StudyError(f"{name}: no gauge has a reading at a loaded step (every gauge column "
                         "is blank there); check the gauge columns or the channel names")


@dataclass(frozen=True)
class MeasuredSide:
    """The test's half of a comparison, which depends on the test and the gauge map only: the
    readings as compared (tared, corrected by the measurement chain), their channel-health flags
    and what the flags and overrides leave out. A sweep makes it once for all its variants
    (:func:`measured_side`); the comparison adds to ``flags`` and ``excl`` in place, so each
    variant is given a copy."""

    names: tuple[str, ...]               # the channels, in the order of the columns below
    readings: Any
    steps: Steps
    measured: NDArray[np.float64]        # (s, g) microstrain
    chain: ChainApplied | None
    flags: pd.DataFrame
    excl: Exclusions


@dataclass(frozen=True)
class _Compared:
    """A study's test against its model up to the statuses, the pooled fits and the diagnosis:
    what both a run (:func:`correlate_study`) and a variant's ranking (:func:`rank_study`) need."""

    model: Model
    side: MeasuredSide               # the test's half (its channels' names, readings, flags)
    m: ModelForTest
    out_of_fit: NDArray[np.bool_]    # the gauges reversed or suspect, out of the pooled fit
    status: Statuses
    core: dict[str, Any]             # :func:`core_fits` of the final statuses
    diagnoses: pd.DataFrame


def measured_side(study: Study, gauges: pd.DataFrame) -> MeasuredSide:
    """Read, tare and correct the test's readings of the gauge map's channels, refuse a test
    with nothing to compare, and judge the channels' health with the study's dispositions."""
    names = gauges["gauge"].tolist()
    readings, steps, measured, chain = chain_readings(study, gauges)
    _require_pairs(study, steps, measured)
    progress.pause("readings")
    flags = health_flags(measured, names, steps, gauges, study, readings.flags,
                         raw=None if chain is None else chain.raw_ue,
                         chain_rows=None if chain is None else range_flags(chain, steps))
    excl = dispose_health(flags, study, names, steps)
    progress.pause("health")
    return MeasuredSide(names=tuple(names), readings=readings, steps=steps, measured=measured,
                        chain=chain, flags=flags, excl=excl)


def _compare_test(study: Study, model: Model | None, side: MeasuredSide | None) -> _Compared:
    require_loads(study)
    model = compared_model(model or prepare(study))
    names = model.gauges["gauge"].tolist()
    side = side or measured_side(study, model.gauges)
    if side.names != tuple(names):   # made for another gauge map: the columns would not pair
        raise RuntimeError(f"internal error: the test's readings are of the channels "
                           f"{side.names[:3]}..., the model's are {tuple(names[:3])}...")
    steps, measured, flags, excl = side.steps, side.measured, side.flags, side.excl
    m = model_readings(study, model, steps)
    progress.pause("model")
    reversed_ = flag_reversed(measured, m.predicted, names, steps, excl, flags, study)
    excl.text[:] = np.where(excl.text == "", "flagged", excl.text)
    excl.steps[m.not_modelled] = True
    excl.text[m.not_modelled] = "not-modelled"
    st, core, diag, out_of_fit = _compare(study, model, steps, names, measured, m, excl, flags,
                                          reversed_)
    return _Compared(model=model, side=side, m=m, out_of_fit=out_of_fit, status=st, core=core,
                     diagnoses=diag)


def correlate_study(study: Study, model: Model | None = None, *,
                    hashes: dict[Path, str] | None = None) -> Correlation:
    """Run the correlation of a study; nothing is written. ``hashes``: input files' SHA-256
    already computed (the provenance hashes the others)."""
    c = _compare_test(study, model, None)
    model, names, m, st = c.model, list(c.side.names), c.m, c.status
    steps, measured, readings, chain = c.side.steps, c.side.measured, c.side.readings, c.side.chain
    ref = reference_step(m.predicted, steps)
    detail = detail_fits(steps, names, measured, m.predicted, st, c.out_of_fit, ref)
    result = {**detail, "fit": c.core["fit"],
              "metrics": {**c.core["metrics"], **detail["metrics"]}}
    per_gauge = with_arms(c.core["per_gauge_table"], model.gauges)
    ros = rosette_table(study, model, model.gauges, steps, measured, m.axial, st.evaluated)
    result["load_checks"] = load_checks(study, steps, measured, st, m.rows_by_case,
                                        model.operator)
    summary = summarise(study, model, readings, steps, names, result, per_gauge, c.side.flags,
                        c.diagnoses, ref, st, c.out_of_fit, hashes=hashes)
    corrections = None if chain is None else corrections_table(chain, ref, m.height)
    if corrections is not None:
        summary["measurement_chain"] = {
            "order": CHAIN_ORDER, "reference_step": summary["reference_step"],
            "channels": corrections.to_dict(orient="records")}
    budget = _budget(study, model, steps, names, measured, m, st, ref, summary)
    if budget is not None and budget.rosettes is not None:
        ros = with_uncertainty(ros, budget.rosettes)
    return Correlation(study=study, model=model, steps=steps, gauges=names, measured=measured,
                       predicted=m.predicted, predicted_axial=m.axial, band_low=m.low.T,
                       band_high=m.high.T, contributions=m.contributions, status=st,
                       flags=c.side.flags,
                       gauge_table=with_arms(gauge_table(names, steps, measured, m, st, chain,
                                                         budget), model.gauges),
                       per_gauge=per_gauge, rosettes=ros, diagnoses=c.diagnoses,
                       summary=summary, rows_by_case=m.rows_by_case, chain=chain,
                       corrections=corrections, validation=budget,
                       readings_info={"ignored": list(readings.ignored),
                                      "load_units": readings.load_units})


@dataclass(frozen=True)
class Ranking:
    """What ranks a model variant: the figures :func:`correlate_study` gives for the same model,
    without the tables, per-step fits and provenance a report needs.

    ``summary`` has the run summary's ``fit``, ``metrics`` (concordance), ``verdict`` and, with
    ``[uncertainty]``, ``validation`` entries, equal to a run's.
    """

    steps: Steps
    gauges: list[str]
    measured: NDArray[np.float64]        # (s, g) microstrain
    predicted: NDArray[np.float64]       # (s, g) microstrain
    status: Statuses
    summary: dict[str, Any]
    rows_by_case: dict[str, dict[str, NDArray]]
    validation: ValidationBudget | None = None


def rank_study(study: Study, model: Model | None = None, *,
               side: MeasuredSide | None = None) -> Ranking:
    """The statuses, pooled fit, concordance, verdict and validation states of a study: the
    same computation as :func:`correlate_study` (health, dispositions, diagnosis and its
    second pass included), stopping before the figures only a report shows. ``side``: the
    test's half already made for this study's test and gauge map (:func:`measured_side`; it is
    changed in place), else made here."""
    c = _compare_test(study, model, side)
    names, steps, measured = list(c.side.names), c.side.steps, c.side.measured
    ref = reference_step(c.m.predicted, steps)
    summary: dict[str, Any] = {"fit": c.core["fit"], "metrics": c.core["metrics"],
                               "verdict": judge(study, names, c.core["fit"], c.status,
                                                c.side.flags)}
    budget = _budget(study, c.model, steps, names, measured, c.m, c.status, ref, summary,
                     rosettes=False)
    return Ranking(steps=steps, gauges=names, measured=measured, predicted=c.m.predicted,
                   status=c.status, summary=summary, rows_by_case=c.m.rows_by_case,
                   validation=budget)


def _budget(study: Study, model: Model, steps: Steps, names: list[str], measured: NDArray,
            m: ModelForTest, st: Statuses, ref: int, summary: dict[str, Any],
            rosettes: bool = True) -> ValidationBudget | None:
    """The validation budget (None without [uncertainty]); it adds ``validation`` to the summary.

    Each coarser mesh or input variant is opened, evaluated at the test's steps with the same
    gauge map, and dropped before the next is opened.
    """
    if study.uncertainty is None:
        return None

    def predict(file: Any) -> NDArray[np.float64]:
        other = open_channels(study, file, model)
        return model_readings(variant_study(study, file), other, steps).predicted

    with progress.step("validation budget (other meshes and input variants included)"):
        budget = validation_budget(
            study, names, steps, measured, m.predicted,
            (model.gauges["kt"].to_numpy(dtype=float), m.axial, m.transverse),
            (m.low, m.high), st, ref,
            statistical_se=float(summary["fit"].get("se_slope_origin", np.nan)), predict=predict)
        if budget is None:
            return None
        if not rosettes:
            summary["validation"] = budget.summary
            return budget
        rosettes = rosette_uncertainty(study, model, model.gauges, steps, measured, m.axial,
                                       st.evaluated, budget.measurement, budget.inputs,
                                       m.predicted, budget.u_num, study.uncertainty.load)
    summary["validation"] = budget.summary
    return replace(budget, rosettes=rosettes)


def _compare(study: Study, model: Model, steps: Steps, names: list[str], measured: NDArray,
             m: ModelForTest, excl: Exclusions, flags: pd.DataFrame, reversed_: NDArray
             ) -> tuple[Statuses, dict[str, Any], pd.DataFrame, NDArray[np.bool_]]:
    """Statuses and the pooled fits, the diagnosis of failing gauges, and a second pass when the
    diagnosis flags installation faults (those gauges leave the fit until disposed of).
    Returns the statuses, :func:`core_fits`, the diagnoses and the gauges out of the fit."""
    st = status_table(measured, m.predicted, study.criteria, steps, excl.steps, excl.gauges,
                      excl.text)
    core = core_fits(steps, names, measured, m.predicted, st)
    with progress.step("diagnosing the failing gauges"):
        diag = diagnose_failures(study, model, steps, names, measured, m.predicted, st,
                                 m.rows_by_case, m.contributions, core["per_gauge_table"])
        ros_diag = rosette_diagnoses(study, model, steps, measured, st, m.predicted)
    if len(ros_diag):
        diag = pd.concat([diag, ros_diag[[c for c in diag.columns if c in ros_diag.columns]]],
                         ignore_index=True)
    suspect = flag_installation(installation_faults(diag), names, reversed_, excl, flags, study)
    if suspect.any():
        st = status_table(measured, m.predicted, study.criteria, steps, excl.steps, excl.gauges,
                          excl.text)
        core = core_fits(steps, names, measured, m.predicted, st)
    return st, core, diag, reversed_ | suspect


def with_arms(table: pd.DataFrame, gauges: pd.DataFrame) -> pd.DataFrame:
    """``table`` with an ``arms`` column naming each bridge channel's arm grids (``1:G1 2:G2``;
    blank for a single grid) when the gauge map has bridges; unchanged otherwise."""
    if "arms" not in gauges or "gauge" not in table:
        return table
    arms = dict(zip(gauges["gauge"], gauges["arms"].fillna(""), strict=True))
    return table.assign(arms=table["gauge"].map(arms).fillna(""))


def gauge_table(names: list[str], steps: Steps, measured: NDArray, m: ModelForTest,
                st: Statuses, chain: ChainApplied | None = None,
                budget: ValidationBudget | None = None) -> pd.DataFrame:
    """The rows of ``gauges.csv``: one per gauge and step (``raw_ue`` beside ``measured_ue``
    when the measurement chain is used; the budget's columns when given)."""
    s, g = measured.shape
    low, high = m.low, m.high
    in_band = (measured >= low.T - 1e-9) & (measured <= high.T + 1e-9)
    status = st.status
    flag = np.where(np.isin(status, ["pass", "fail", "tare", "zero-load"]), "", status)
    table = pd.DataFrame({
        "gauge": np.tile(names, s),
        "step": np.repeat(steps.step, g),
        "sequence": np.repeat(steps.sequence, g),
        "predicted_ue": m.predicted.ravel(),
        "measured_ue": measured.ravel(),
        **({} if chain is None else {"raw_ue": chain.raw_ue.ravel()}),
        "difference_ue": st.difference.ravel(),
        "ratio": st.ratio.ravel(),
        "relative": st.relative.ravel(),
        "band_low_ue": low.T.ravel(),
        "band_high_ue": high.T.ravel(),
        "in_band": np.where(np.isfinite(measured), in_band, False).ravel(),
        "status": status.ravel(),
        "basis": st.basis.ravel(),
        "unconservative": st.unconservative.ravel(),
        "flag": flag.ravel(),
    })
    if budget is not None:
        table[list(GAUGE_COLUMNS)] = budget.columns[list(GAUGE_COLUMNS)].to_numpy()
    return table


__all__ = [
    "Correlation",
    "ModelForTest",
    "Ranking",
    "chain_readings",
    "correlate_study",
    "gauge_table",
    "measured_readings",
    "model_readings",
    "rank_study",
]
