"""The records a study file becomes: cases, materials, loads, criteria, overrides, the study.

Stage: readers. Made by :func:`correlate.readers.study.read_study`; every later stage reads them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from correlate.readers.fullfield_study import FullFieldSettings


@dataclass(frozen=True)
class CaseThermal:
    """A thermo-mechanical case's ``thermal = {...}``: the temperature array, the gauged
    material's expansion coefficient [1/degC] and the model's stress-free temperature [degC]."""

    temperature: str
    alpha: float
    reference_C: float


@dataclass(frozen=True)
class Case:
    """One FE load case: which array holds it and how to read it."""

    name: str
    kind: str                                # strain, displacement or stress
    array: str | dict[str, str]              # array name, or {"top": ..., "bottom": ...} for shells
    components: tuple[str, ...] | None       # None: the default for the component count
    shear: str = "engineering"
    time_index: int | str | tuple[int, int] | None = None
    file: Path | None = None
    average: str = "cell"                    # for cell data: "cell" (constant) or "nodal"
    axes: str | None = None
    check_stress: str | None = None
    check_displacement: str | None = None     # a displacement array: the strain checked against it
    match: dict[str, Any] | None = None
    thermal: CaseThermal | None = None       # thermo-mechanical: mechanical strain is read

    @property
    def is_series(self) -> bool:
        """The case holds a load history (matched by load, not superposed)."""
        return self.time_index == "all" or isinstance(self.time_index, tuple)

    @property
    def fe_index(self) -> int | None:
        """The one FE state of a case that is not a series (None: the file's only state)."""
        return self.time_index if isinstance(self.time_index, int) else None


@dataclass(frozen=True)
class Material:
    E: float
    nu: float
    blocks: tuple[int, ...] | None = None


@dataclass(frozen=True)
class Load:
    column: str
    case: str
    reference: float


@dataclass(frozen=True)
class Criteria:
    relative: float = 0.10
    absolute_ue: float = 50.0
    slope: tuple[float, float] = (0.90, 1.10)
    pass_fraction: float = 0.90
    min_healthy_fraction: float = 0.80


@dataclass(frozen=True)
class Override:
    """An analyst's disposition of a gauge: keep, exclude or reverse, with the reason, who decided
    (``by``) and when (``date``, free text)."""

    gauge: str
    action: str
    reason: str
    by: str = ""
    date: str = ""


@dataclass(frozen=True)
class GaugeLot:
    """A ``[[gauge_lot]]``: the data sheet of one lot of gauges (thermal output, gauge factor).

    ``thermal_output`` holds a0 .. a4 [microstrain / degC^j] at a gauge factor of 2.00,
    ``gauge_factor_tc`` is in % per 100 degC (None: not given), temperatures in degC.
    """

    name: str
    thermal_output: tuple[float, ...]
    gauge_factor: float
    range_C: tuple[float, float]
    gauge_factor_tc: float | None = None
    reference_C: float = 24.0


@dataclass(frozen=True)
class ChainSettings:
    """The study's measurement-chain tables: lots, the thermocouple column, non-linearity."""

    lots: dict[str, GaugeLot] = field(default_factory=dict)
    thermal_column: str | None = None      # [thermal] column: default thermocouple column
    nonlinearity: str = ""                 # [gauges] nonlinearity: "quarter-bridge" or ""

    @property
    def used(self) -> bool:
        """Whether the study gives any measurement-chain key."""
        return bool(self.lots or self.thermal_column or self.nonlinearity)


@dataclass(frozen=True)
class UncertainInput:
    """One uncertain model input of ``[[uncertainty.input]]``: its relative standard uncertainty
    and how it moves the prediction (``exponent``, or a ``variant`` file raised by ``step``)."""

    name: str
    relative: float
    exponent: float | None = None
    variant: Path | None = None
    step: float | None = None


@dataclass(frozen=True)
class Uncertainty:
    """The ``[uncertainty]`` table: standard uncertainties (one standard deviation) of the
    measurement and of the model's inputs, and the coverage factor k."""

    coverage: float = 2.0
    gauge_factor: float = 0.0        # relative, on the reading
    transverse: float = 0.0          # absolute, on Kt
    daq_ue: float = 0.0              # microstrain
    daq_relative: float = 0.0        # relative, on the reading
    load: float = 0.0                # relative, on the applied loads
    placement: bool = False          # the placement band as a rectangular distribution
    inputs: tuple[UncertainInput, ...] = ()


@dataclass(frozen=True)
class GridMesh:
    """One coarser mesh of ``[numerical] meshes``: its file and element size."""

    file: Path
    h: float


@dataclass(frozen=True)
class Numerical:
    """The ``[numerical]`` table: the study model's element size and the coarser meshes
    (coarsest last after reading), for the grid convergence index."""

    h: float
    meshes: tuple[GridMesh, ...]
    formal_order: float = 2.0


@dataclass(frozen=True)
class Study:
    """Everything the study file says, validated, with absolute paths."""

    path: Path
    title: str
    model_file: Path
    length_unit: str
    stress_unit: str | None
    plane: str | None
    model_info: dict[str, Any]
    cases: tuple[Case, ...]
    materials: tuple[Material, ...]
    gauges_file: Path
    position_tol: float
    angle_tol: float
    snap_tol: float | None
    calibration_poisson: float
    grid_points: int
    band: bool
    test: dict[str, Any] = field(default_factory=dict)
    readings_file: Path | None = None
    zero: str = "first"
    zero_tol: float = 0.01
    sentinels: tuple[Any, ...] | None = None
    kt_corrected: bool = False
    newest_first: bool = False
    loads: tuple[Load, ...] = ()
    criteria: Criteria = Criteria()
    criteria_given: bool = True  # False: no [criteria] table, the tool's defaults apply
    overrides: tuple[Override, ...] = ()
    health: dict[str, float] = field(default_factory=dict)
    report: dict[str, Any] = field(default_factory=dict)
    raw: dict[str, Any] = field(default_factory=dict)
    chain: ChainSettings = ChainSettings()
    uncertainty: Uncertainty | None = None   # None: no [uncertainty] table, no budget
    numerical: Numerical | None = None       # None: no [numerical] table, u_num = 0
    bridge_tables: dict[str, tuple[str, float, float]] = field(default_factory=dict)  # [[bridge]]
    fullfield: FullFieldSettings | None = None   # None: no [fullfield] table, no DIC outputs

    @property
    def material(self) -> Material | None:
        """The single material, or the first when several are given per block."""
        return self.materials[0] if self.materials else None
