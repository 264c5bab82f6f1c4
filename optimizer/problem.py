"""The problem file: schema, validation and loading.

A problem file is TOML. Every physical quantity is a string with a unit, converted once
here to the internal base (mm, mm^2, defects per cm^2, GB/s). Money is a plain number in
the file's one currency. All validation lives in this module: later layers may assume a
loaded :class:`Problem` is consistent (names resolve, numbers are in range).

One rule for numbers: every number read from a file is finite and inside a stated
physical range, checked here with the field named. The ranges are the ``MIN_``/``MAX_``
constants below; each field's range is in its description. Integers must be whole, and
true/false or quoted text is not a number. Quantity strings are one number and one unit
(see ``optimizer/units.py``).
"""

from __future__ import annotations

import math
import numbers
import tomllib
from pathlib import Path
from typing import Annotated, Literal

import numpy as np
from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    StrictBool,
    ValidationError,
    field_validator,
    model_validator,
)

from optimizer.errors import ProblemError  # defined there to stay light; re-exported
from optimizer.units import (
    AREA,
    BANDWIDTH,
    DEFECT_DENSITY,
    INTERFACE_DENSITY,
    LENGTH,
    QuantityKind,
    UnitError,
    shorten,
    to_base,
)

BLOCK_KINDS = ("logic", "memory", "analog", "io")
YIELD_MODEL_NAMES = (
    "poisson",
    "murphy",
    "exponential",
    "sqrt_exponential",
    "negative_binomial",
    "bose_einstein",
)
PACKAGING_KINDS = ("single_die", "organic_substrate", "silicon_interposer", "stacked")

# ---------------------------------------------------------------- physical ranges
# Lengths [mm]. 450 mm is the largest wafer ever tooled; smaller than one inch is not a
# production wafer. Reticle sides above the wafer size are allowed and mean "no field
# limit" (idealised studies use 1000 mm).
MIN_WAFER_DIAMETER_MM = 25.0
MAX_WAFER_DIAMETER_MM = 450.0
MAX_EDGE_EXCLUSION_MM = 50.0
MAX_SCRIBE_WIDTH_MM = 2.0
MIN_RETICLE_MM = 1.0
MAX_RETICLE_MM = 1000.0
# Areas [mm^2]: nothing on a wafer is larger than a 450 mm wafer (159,043 mm^2). Per-item
# areas (a link's port, one repair element) stay below 100 mm^2. A block is at least
# 10 um x 10 um.
MAX_AREA_MM2 = 160_000.0
MAX_ITEM_AREA_MM2 = 100.0
MIN_BLOCK_AREA_MM2 = 1e-4
# Defect density [/cm^2]: 0 (the defect-free limit) to 1000 /cm^2, ten thousand times a
# poor early process; reduction targets (floor, points) are above 0.
MAX_DEFECT_DENSITY_PER_CM2 = 1000.0
# Bandwidth [GB/s] of one link: 1 PB/s; interface density [GB/s/mm^2]: far above any
# die-to-die interface.
MAX_BANDWIDTH_GBPS = 1e6
MAX_INTERFACE_DENSITY = 1e5
# Money (any one currency) and unit volumes. A selling price is at least a millionth of
# the currency unit and a volume at least one unit, so revenue never underflows to 0.
MAX_MONEY = 1e15
MIN_PRICE = 1e-6
MIN_VOLUME = 1.0
MAX_VOLUME = 1e12
# Counts: instances of a block, dies in a package, copies; spare units per block; repair
# elements per instance; entries of an option list.
MAX_COUNT = 4096
MAX_SPARES = 64
MAX_REPAIR = 4096
MAX_OPTIONS = 64
MAX_ITEMS = 256  # entries of [[block]], [[link]], [[design]], [[uncertain]], keep groups
# Dimensionless factors.
MAX_AREA_SCALE = 100.0
MIN_AREA_SCALE = 0.01
MAX_SIGMA = 20.0
MAX_ASPECT_RATIO = 20.0
MAX_INTERPOSER_FACTOR = 10.0
MIN_CLUSTERING_ALPHA = 0.05
MAX_CLUSTERING_ALPHA = 1000.0
MAX_CRITICAL_LAYERS = 100
# The exact gross-die count takes time growing as (sites per wafer)^1.5: about 0.5 s at
# 1.7 million sites, 2 s at 4 million. Smaller dies need die_count = "formula".
MAX_EXACT_SITES = 4_000_000
# Text and file limits.
MAX_NAME_CHARS = 64
MAX_FILE_BYTES = 10_000_000
MAX_NESTING = 12  # tables and lists inside each other; real files need 6


def _clip(text: str, limit: int) -> str:
    return text if len(text) <= limit else text[:limit] + "..."


def _label(name: object, limit: int = 32) -> str:
    """A name for a field path: as written if short, else cut."""
    return _clip(str(name), limit)


def _one_of(names) -> str:
    """``'a', 'b' or 'c'`` for a message; long lists are cut."""
    names = [shorten(str(n), 24) for n in names]
    if len(names) > 8:
        return ", ".join(names[:8]) + f" ... ({len(names)} in all)"
    return ", ".join(names)


# ---------------------------------------------------------------- number validators
def _range_text(lo: float, hi: float, low_open: bool, unit: str) -> str:
    unit = f" {unit}" if unit else ""
    if low_open:
        return f"above {lo:g} and at most {hi:g}{unit}"
    return f"from {lo:g} to {hi:g}{unit}"


def _check_range(value: float, lo: float, hi: float, low_open: bool, unit: str, shown: str) -> None:
    too_low = value <= lo if low_open else value < lo
    if too_low or value > hi:
        # pydantic's words for bounds, which users and tests already know
        bound = (
            f"greater than {lo:g}"
            if too_low and low_open
            else f"greater than or equal to {lo:g}"
            if too_low
            else f"less than or equal to {hi:g}"
        )
        unit_text = f" {unit}" if unit else ""
        raise ValueError(
            f"must be {bound}{unit_text} (got {shown}); use a value "
            f"{_range_text(lo, hi, low_open, unit)}"
        )


def _number(lo: float, hi: float, *, low_open: bool = False, whole: bool = False):
    """A plain number (TOML integer or float) in [lo, hi] (or (lo, hi]), finite."""
    kind = "whole number" if whole else "number"

    def check(value: object) -> object:
        if value is None:  # only from Python callers; the field's type decides
            return value
        if isinstance(value, bool):
            raise ValueError(
                f"must be a {kind}, not {str(value).lower()}; write a {kind} "
                f"{_range_text(lo, hi, low_open, '')}"
            )
        if isinstance(value, str):
            raise ValueError(
                f"must be a plain {kind}, not text (got {shorten(value)}); remove the quotes"
                " and any unit"
            )
        if not isinstance(value, numbers.Real):
            raise ValueError(
                f"must be a {kind} (got {shorten(value)}); write a {kind} "
                f"{_range_text(lo, hi, low_open, '')}"
            )
        if not isinstance(value, int) and not math.isfinite(value):
            raise ValueError(
                f"must be a finite number (got {value}); write a {kind} "
                f"{_range_text(lo, hi, low_open, '')}"
            )
        shown = shorten(value) if isinstance(value, int) and abs(value) > 1e15 else f"{value:g}"
        _check_range(value, lo, hi, low_open, "", shown)
        if whole:
            if not isinstance(value, int) and not float(value).is_integer():
                raise ValueError(f"must be a whole number (got {value:g}); write an integer")
            return int(value)
        return float(value)

    return BeforeValidator(check)


def _quantity(kind: QuantityKind, lo: float, hi: float, *, low_open: bool = False):
    """A quantity string converted to ``kind``'s base unit, in [lo, hi] (or (lo, hi])."""

    def convert(value: object) -> float:
        try:
            base = to_base(value, kind)
        except UnitError as exc:
            raise ValueError(str(exc)) from None
        shown = shorten(value)
        if kind.base_text not in str(value):  # written in another unit: show it converted
            shown = f"{shown} = {base:g} {kind.base_text}"
        _check_range(base, lo, hi, low_open, kind.base_text, shown)
        return base

    return BeforeValidator(convert)


def _optional(check: BeforeValidator) -> BeforeValidator:
    """The same check, letting None (an absent optional field) through."""
    inner = check.func
    return BeforeValidator(lambda value: value if value is None else inner(value))


def _name(value: str) -> str:
    if not value.strip():
        raise ValueError("is empty; give it a name")
    if len(value) > MAX_NAME_CHARS:
        raise ValueError(
            f"is {len(value)} characters long; use at most {MAX_NAME_CHARS} characters"
        )
    if not value.isprintable():
        raise ValueError("holds a line break or other control character; use plain text")
    return value


def _text(limit: int):
    def check(value: str) -> str:
        if len(value) > limit:
            raise ValueError(f"is {len(value)} characters long; shorten it to {limit} or fewer")
        return value

    return AfterValidator(check)


Name = Annotated[str, AfterValidator(_name)]
AreaMm2 = Annotated[float, _quantity(AREA, 0, MAX_AREA_MM2)]
DefectDensityPerCm2 = Annotated[
    float, _quantity(DEFECT_DENSITY, 0, MAX_DEFECT_DENSITY_PER_CM2, low_open=True)
]
BandwidthGBps = Annotated[float, _quantity(BANDWIDTH, 0, MAX_BANDWIDTH_GBPS, low_open=True)]
InterfaceDensityGBpsPerMm2 = Annotated[
    float, _quantity(INTERFACE_DENSITY, 0, MAX_INTERFACE_DENSITY, low_open=True)
]
Money = Annotated[float, _number(0, MAX_MONEY)]
Price = Annotated[float, _number(MIN_PRICE, MAX_MONEY)]  # what a unit sells for
Cost = Annotated[float, _number(0, MAX_MONEY, low_open=True)]
Fraction = Annotated[float, _number(0, 1)]
PositiveFraction = Annotated[float, _number(0, 1, low_open=True)]
Overhead = Annotated[float, _number(0, 1)]  # extra area as a fraction of the area
Sigma = Annotated[float, _number(0, MAX_SIGMA, low_open=True)]
Count = Annotated[int, _number(1, MAX_COUNT, whole=True)]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SalvageBin(_Section):
    """A lower bin: one-die products that miss full spec but keep enough good units.

    ``min_good`` at least 1 (a die with no good unit of the block is not a product);
    price 1e-6 to 1e15; demand 0 to 1e12 units.
    """

    name: Name
    block: Name
    min_good: Count
    unit_price: Price
    demand: Annotated[float, _number(0, MAX_VOLUME)]


class Market(_Section):
    """What the product sells for and how many good units the market takes.

    Price 1e-6 to 1e15; volume 1 to 1e12 units.
    """

    currency: Annotated[str, _text(12), AfterValidator(_name)] = "USD"
    unit_price: Price
    volume: Annotated[float, _number(MIN_VOLUME, MAX_VOLUME)]
    salvage_bin: list[SalvageBin] = Field(default_factory=list, max_length=MAX_OPTIONS)


class Constraints(_Section):
    """Limits every design must respect (die areas up to 160,000 mm^2; 1 to 4096 dies)."""

    min_die_area_mm2: AreaMm2 = Field(default=0.0, alias="min_die_area")
    max_die_area_mm2: Annotated[float, _quantity(AREA, 0, MAX_AREA_MM2, low_open=True)] = Field(
        default=math.inf, alias="max_die_area"
    )
    max_dies: Count = 16
    keep_together: list[list[Name]] = Field(default_factory=list, max_length=MAX_ITEMS)
    keep_apart: list[list[Name]] = Field(default_factory=list, max_length=MAX_ITEMS)

    @model_validator(mode="after")
    def _range(self) -> Constraints:
        if self.min_die_area_mm2 > self.max_die_area_mm2:
            raise ValueError("min_die_area exceeds max_die_area; swap or widen them")
        return self


Scale = Annotated[float, _number(MIN_AREA_SCALE, MAX_AREA_SCALE)]


class AreaScale(_Section):
    """Area of each block kind on this process relative to the reference area (0.01-100)."""

    logic: Scale = 1.0
    memory: Scale = 1.0
    analog: Scale = 1.0
    io: Scale = 1.0

    def of(self, kind: str) -> float:
        return float(getattr(self, kind))


class DefectReduction(_Section):
    """What lowering this process's defect density costs (a yield-improvement curve).

    ``log_ratio``: one-time cost one_time_per_log x ln(D_base / D) and a per-wafer adder
    per_wafer_per_log x ln(D_base / D), for any target D in [floor, D_base]; the solver
    tries ``levels`` targets spaced geometrically and refines the winner's continuously.
    ``table``: the listed targets only, each [defect density, one-time cost, per-wafer adder].
    Costs are money (0 to 1e15); densities as for ``defect_density``; 2 to 64 levels.
    """

    form: Literal["log_ratio", "table"]
    floor_per_cm2: DefectDensityPerCm2 | None = Field(default=None, alias="floor")
    one_time_per_log: Money = 0.0
    per_wafer_per_log: Money = 0.0
    levels: Annotated[int, _number(2, MAX_OPTIONS, whole=True)] = 4
    points: list[tuple[DefectDensityPerCm2, Money, Money]] = Field(
        default_factory=list, max_length=MAX_OPTIONS
    )

    @model_validator(mode="after")
    def _form_fields(self) -> DefectReduction:
        if self.form == "log_ratio" and self.floor_per_cm2 is None:
            raise ValueError(
                "form 'log_ratio' needs floor, the lowest reachable defect density; add it"
            )
        if self.form == "table" and not self.points:
            raise ValueError(
                "form 'table' needs its targets; add points = "
                '[["0.08 /cm^2", one_time, per_wafer], ...]'
            )
        return self

    def table(self) -> list[tuple[float, float, float]]:
        """Points as (defect density per cm^2, one-time cost, per-wafer adder)."""
        return [(float(d), float(a), float(b)) for d, a, b in self.points]


class MarginCurve(_Section):
    """Design margin (sigma, above 0 and at most 20) against the die-area overhead it
    costs (a fraction, 0 to 1)."""

    two_sided: StrictBool = True
    sigma: list[Sigma] = Field(min_length=1, max_length=MAX_OPTIONS)
    area_overhead: list[Overhead] = Field(min_length=1, max_length=MAX_OPTIONS)

    @model_validator(mode="after")
    def _same_length(self) -> MarginCurve:
        if len(self.sigma) != len(self.area_overhead):
            raise ValueError(
                "sigma and area_overhead need the same number of entries; pair them up"
            )
        if any(b <= a for a, b in zip(self.sigma, self.sigma[1:], strict=False)):
            raise ValueError("sigma values must increase; sort them and drop repeats")
        return self


class Process(_Section):
    """One process option: wafer, defect density, yield model, test and one-time costs.

    Ranges: wafer_diameter 25 to 450 mm; edge_exclusion 0 to 50 mm; scribe_width 0 to
    2 mm; reticle sides 1 to 1000 mm; defect_density 0 to 1000 /cm^2;
    clustering_alpha 0.05 to 1000; critical_layers 1 to 100; die_aspect_ratio 1 to 20;
    money 0 to 1e15 (wafer_cost above 0).
    """

    name: Name
    wafer_diameter_mm: Annotated[
        float, _quantity(LENGTH, MIN_WAFER_DIAMETER_MM, MAX_WAFER_DIAMETER_MM)
    ] = Field(alias="wafer_diameter")
    edge_exclusion_mm: Annotated[float, _quantity(LENGTH, 0, MAX_EDGE_EXCLUSION_MM)] = Field(
        default=3.0, alias="edge_exclusion"
    )
    scribe_width_mm: Annotated[float, _quantity(LENGTH, 0, MAX_SCRIBE_WIDTH_MM)] = Field(
        default=0.1, alias="scribe_width"
    )
    wafer_cost: Cost
    defect_density_per_cm2: Annotated[
        float, _quantity(DEFECT_DENSITY, 0, MAX_DEFECT_DENSITY_PER_CM2)
    ] = Field(alias="defect_density")
    yield_model: Literal[
        "poisson", "murphy", "exponential", "sqrt_exponential", "negative_binomial", "bose_einstein"
    ] = "negative_binomial"
    clustering_alpha: Annotated[
        float | None, _optional(_number(MIN_CLUSTERING_ALPHA, MAX_CLUSTERING_ALPHA))
    ] = None
    critical_layers: Annotated[
        int | None, _optional(_number(1, MAX_CRITICAL_LAYERS, whole=True))
    ] = None
    systematic_yield: PositiveFraction = 1.0
    reticle_width_mm: Annotated[float, _quantity(LENGTH, MIN_RETICLE_MM, MAX_RETICLE_MM)] = Field(
        default=26.0, alias="reticle_width"
    )
    reticle_height_mm: Annotated[float, _quantity(LENGTH, MIN_RETICLE_MM, MAX_RETICLE_MM)] = Field(
        default=33.0, alias="reticle_height"
    )
    mask_set_cost: Money = 0.0
    sort_cost_per_die: Money = 0.0
    fault_coverage: Fraction = 1.0
    # None: square, stretched to the field's short side when a square would not fit.
    die_aspect_ratio: Annotated[float | None, _optional(_number(1, MAX_ASPECT_RATIO))] = None
    area_scale: AreaScale = Field(default_factory=AreaScale)
    # "exact": whole sites on the wafer; "formula": the classic approximation, floored;
    # "area_ratio": usable area / site area, no edge loss (idealised studies and checks).
    die_count: Literal["exact", "formula", "area_ratio"] = "exact"
    defect_reduction: DefectReduction | None = None
    margin: MarginCurve | None = None

    @model_validator(mode="after")
    def _model_parameters(self) -> Process:
        if self.yield_model == "negative_binomial" and self.clustering_alpha is None:
            raise ValueError(
                "yield_model 'negative_binomial' needs clustering_alpha; add it (typically "
                "0.5 to 5)"
            )
        if self.yield_model == "bose_einstein" and self.critical_layers is None:
            raise ValueError(
                "yield_model 'bose_einstein' needs critical_layers; add it (an integer)"
            )
        if 2 * self.edge_exclusion_mm >= self.wafer_diameter_mm:
            raise ValueError("edge_exclusion leaves no usable wafer; make it smaller")
        curve = self.defect_reduction
        if curve is not None and curve.form == "log_ratio":
            if not 0 < curve.floor_per_cm2 <= self.defect_density_per_cm2:
                raise ValueError(
                    "defect_reduction.floor must be above 0 and at most defect_density; lower it"
                )
        if curve is not None and curve.form == "table":
            if any(d > self.defect_density_per_cm2 or d <= 0 for d, _, _ in curve.table()):
                raise ValueError(
                    "defect_reduction.points must lie in (0, defect_density]; the base "
                    "density is always available at no cost, so drop the higher points"
                )
        return self

    def defect_targets(self) -> list[tuple[float, float, float]]:
        """Targets the solver may choose: (defect density, one-time cost, per-wafer adder).

        The first is always the base density at no cost.
        """
        base = self.defect_density_per_cm2
        curve = self.defect_reduction
        targets = [(base, 0.0, 0.0)]
        if curve is None:
            return targets
        if curve.form == "table":
            extra = sorted((p for p in curve.table() if p[0] < base), key=lambda p: -p[0])
            return targets + extra
        densities = base * (curve.floor_per_cm2 / base) ** (
            np.arange(1, curve.levels) / (curve.levels - 1)
        )
        return targets + [self.improvement_cost(d) for d in densities]

    def improvement_cost(self, density: float) -> tuple[float, float, float]:
        """(density, one-time cost, per-wafer adder) on a log_ratio curve."""
        curve = self.defect_reduction
        ratio = math.log(self.defect_density_per_cm2 / density)
        return (density, curve.one_time_per_log * ratio, curve.per_wafer_per_log * ratio)

    def margin_options(self) -> list[tuple[float, float]]:
        """(sigma margin, area overhead fraction) choices; inf sigma = no parametric loss."""
        if self.margin is None:
            return [(math.inf, 0.0)]
        return list(zip(self.margin.sigma, self.margin.area_overhead, strict=True))


class Packaging(_Section):
    """One packaging option and its costs, yields and die-to-die interface figures.

    Ranges: max_dies 1 to 4096; money 0 to 1e15; yields above 0 and at most 1;
    interface_density above 0 and at most 1e5 GB/s/mm^2; port_area 0 to 100 mm^2 (zero
    means no fixed area per cut link); interposer_area_factor 1 to 10; interposer areas
    up to 160,000 mm^2.
    """

    name: Name
    kind: Literal["single_die", "organic_substrate", "silicon_interposer", "stacked"]
    max_dies: Count = 1
    bond_cost_per_die: Money = 0.0
    bond_yield: PositiveFraction = 1.0
    carrier_cost: Money = 0.0
    carrier_yield: PositiveFraction = 1.0
    package_cost: Money = 0.0
    package_yield: PositiveFraction = 1.0
    final_test_cost: Money = 0.0
    interface_density_gbps_per_mm2: InterfaceDensityGBpsPerMm2 | None = Field(
        default=None, alias="interface_density"
    )
    port_area_mm2: Annotated[float, _quantity(AREA, 0, MAX_ITEM_AREA_MM2)] = Field(
        default=0.0, alias="port_area"
    )
    design_cost: Money = 0.0
    interposer_process: Name | None = None
    interposer_area_factor: Annotated[float, _number(1, MAX_INTERPOSER_FACTOR)] = 1.1
    interposer_extra_area_mm2: AreaMm2 = Field(default=0.0, alias="interposer_extra_area")
    interposer_max_area_mm2: Annotated[float, _quantity(AREA, 0, MAX_AREA_MM2, low_open=True)] = (
        Field(default=math.inf, alias="interposer_max_area")
    )
    interposer_defect_sensitivity: Fraction = 0.1

    @model_validator(mode="after")
    def _kind_fields(self) -> Packaging:
        if self.kind == "single_die" and self.max_dies != 1:
            raise ValueError("a single_die packaging holds exactly one die; set max_dies = 1")
        if self.kind != "single_die" and self.interface_density_gbps_per_mm2 is None:
            raise ValueError(
                f"packaging kind '{self.kind}' needs interface_density; add it, e.g. "
                '"200 GB/s/mm^2"'
            )
        if self.kind == "silicon_interposer" and self.interposer_process is None:
            raise ValueError(
                "a silicon_interposer needs interposer_process; name the process it is made on"
            )
        return self


class ArrayRepair(_Section):
    """Spare rows/columns for a memory array block (0 to 4096 repairs per instance; area
    per repair element 0 to 100 mm^2)."""

    repairable_fraction: Fraction
    repair_choices: list[Annotated[int, _number(0, MAX_REPAIR, whole=True)]] = Field(
        min_length=1, max_length=MAX_OPTIONS
    )
    area_per_repair_mm2: Annotated[float, _quantity(AREA, 0, MAX_ITEM_AREA_MM2)] = Field(
        default=0.0, alias="area_per_repair"
    )
    test_cost_per_die: Money = 0.0


class Block(_Section):
    """A functional block of the design; ``count`` identical instances of it.

    Ranges: area 1e-4 to 160,000 mm^2; count 1 to 4096; spare choices 0 to 64 each.
    """

    name: Name
    kind: Literal["logic", "memory", "analog", "io"] = "logic"
    area_mm2: Annotated[float, _quantity(AREA, MIN_BLOCK_AREA_MM2, MAX_AREA_MM2)] = Field(
        alias="area"
    )
    count: Count = 1
    defect_sensitivity: Fraction = 1.0
    spare_choices: list[Annotated[int, _number(0, MAX_SPARES, whole=True)]] = Field(
        default_factory=lambda: [0], max_length=MAX_OPTIONS
    )
    repair: ArrayRepair | None = None

    @field_validator("spare_choices")
    @classmethod
    def _spares_include_none(cls, value: list[int]) -> list[int]:
        return sorted(set(value) | {0})


class Link(_Section):
    """Bandwidth between two blocks (above 0 and at most 1e6 GB/s); paid as interface
    area when the blocks are split."""

    blocks: Annotated[list[Name], Field(min_length=2, max_length=2)]
    bandwidth_gbps: BandwidthGBps = Field(alias="bandwidth")


class CriticalAreaReduction(_Section):
    """Design-side yield options: lower defect sensitivity bought with die area."""

    sensitivity_factor: list[PositiveFraction] = Field(min_length=1, max_length=MAX_OPTIONS)
    area_overhead: list[Overhead] = Field(min_length=1, max_length=MAX_OPTIONS)

    @model_validator(mode="after")
    def _same_length(self) -> CriticalAreaReduction:
        if len(self.sensitivity_factor) != len(self.area_overhead):
            raise ValueError(
                "sensitivity_factor and area_overhead need the same length; pair them up"
            )
        return self

    def options(self) -> list[tuple[float, float]]:
        pairs = list(zip(self.sensitivity_factor, self.area_overhead, strict=True))
        return pairs if (1.0, 0.0) in pairs else [(1.0, 0.0), *pairs]


class Requirements(_Section):
    """Mandated targets, to price them (solve under them and report the profit lost)."""

    min_die_yield: Annotated[float | None, _optional(_number(0, 1, low_open=True))] = None
    min_sigma_margin: Annotated[float | None, _optional(_number(0, MAX_SIGMA, low_open=True))] = (
        None
    )
    max_defect_level: Annotated[float | None, _optional(_number(0, 1))] = None

    @field_validator("max_defect_level")
    @classmethod
    def _below_one(cls, value: float | None) -> float | None:
        if value is not None and value >= 1:
            raise ValueError(f"must be below 1 (got {value:g}); use a value from 0 to below 1")
        return value

    def any(self) -> bool:
        return any(
            v is not None
            for v in (self.min_die_yield, self.min_sigma_margin, self.max_defect_level)
        )


class DesignCost(_Section):
    """One-time design cost of each distinct die design (money, 0 to 1e15)."""

    per_die_design: Money = 0.0
    per_mm2: Money = 0.0


class DieChoice(_Section):
    """One die design in an explicit design: its blocks, process, options and copies."""

    name: Name | None = None
    process: Name
    copies: Count = 1
    blocks: dict[str, Count] = Field(min_length=1)
    spares: dict[str, Annotated[int, _number(0, MAX_SPARES, whole=True)]] = Field(
        default_factory=dict
    )
    repair: dict[str, Annotated[int, _number(0, MAX_REPAIR, whole=True)]] = Field(
        default_factory=dict
    )
    sigma_margin: Annotated[float | None, _optional(_number(0, MAX_SIGMA, low_open=True))] = None
    critical_area_option: Annotated[int, _number(0, MAX_OPTIONS, whole=True)] = 0


class Design(_Section):
    """An explicit named design to evaluate."""

    name: Name
    packaging: Name
    die: list[DieChoice] = Field(min_length=1, max_length=MAX_ITEMS)
    defect_targets: dict[str, DefectDensityPerCm2] = Field(default_factory=dict)


class Problem(_Section):
    """A whole problem file, validated and in base units."""

    title: Annotated[str, _text(200)] = "untitled problem"
    note: Annotated[str, _text(10_000)] = ""
    market: Market
    constraints: Constraints = Field(default_factory=Constraints)
    process: list[Process] = Field(min_length=1, max_length=MAX_OPTIONS)
    packaging: list[Packaging] = Field(min_length=1, max_length=MAX_OPTIONS)
    design_cost: DesignCost = Field(default_factory=DesignCost)
    critical_area_reduction: CriticalAreaReduction | None = None
    requirements: Requirements = Field(default_factory=Requirements)
    block: list[Block] = Field(min_length=1, max_length=MAX_ITEMS)
    link: list[Link] = Field(default_factory=list, max_length=MAX_COUNT)
    design: list[Design] = Field(default_factory=list, max_length=MAX_ITEMS)
    uncertain: list[UncertainInput] = Field(default_factory=list, max_length=MAX_ITEMS)

    # Lookups used by later layers; names are unique (checked in validate_references).
    def process_index(self, name: str) -> int:
        return [p.name for p in self.process].index(name)

    def packaging_index(self, name: str) -> int:
        return [p.name for p in self.packaging].index(name)

    def block_index(self, name: str) -> int:
        return [b.name for b in self.block].index(name)

    def design_named(self, name: str) -> Design:
        for design in self.design:
            if design.name == name:
                return design
        raise KeyError(name)


# ---------------------------------------------------------------- error messages
def _field_path(loc: tuple, data: object) -> str:
    """Turn a pydantic location into ``process[n3].defect_density`` style text."""
    parts: list[str] = []
    node: object = data
    for item in loc:
        if isinstance(item, int):
            label = str(item)
            if isinstance(node, list) and item < len(node):
                element = node[item]
                if isinstance(element, dict) and isinstance(element.get("name"), str):
                    label = _label(element["name"])
                node = element
            else:
                node = None
            parts[-1] = f"{parts[-1]}[{label}]" if parts else f"[{label}]"
        else:
            key = str(item)
            if key.startswith("function-") or key in {"constrained-float", "int", "float"}:
                continue
            parts.append(_label(key))
            node = node.get(key) if isinstance(node, dict) else None
    return ".".join(parts)


# pydantic type errors in words: what the field takes and how to write it
_TYPE_WORDS = {
    "string": 'text in quotes; write it like "name"',
    "bool": "true or false; write true or false without quotes",
    "dict": "a table; write it as [section] or { key = value }",
    "model": "a table; write it as [section] or { key = value }",
    "model_attributes": "a table; write it as [section] or { key = value }",
    "list": "a list; write it in square brackets, [ ... ]",
    "tuple": "a list; write it in square brackets, [ ... ]",
    "int": "a whole number; write an integer",
    "float": "a number; write a plain number",
}


def _first_error(exc: ValidationError, data: object) -> tuple[str, str]:
    error = exc.errors()[0]
    loc = tuple(x for x in error["loc"] if not (isinstance(x, str) and x.startswith("literal")))
    field = _field_path(loc, data)
    kind = error["type"]
    message = error["msg"]
    got = shorten(error.get("input"))
    ctx = error.get("ctx") or {}
    if message.startswith("Value error, "):
        message = message[len("Value error, ") :]
    if kind == "missing":
        message = "is required but missing; add it to the file"
    elif kind == "extra_forbidden":
        message = "is not a known field; check its spelling against the README"
    elif kind == "literal_error":
        expected = message.replace("Input should be ", "")
        message = f"got {got}; use one of {expected}"
    elif kind in {"greater_than_equal", "greater_than", "less_than_equal", "less_than"}:
        limit = message.replace("Input should be ", "")
        message = f"must be {limit} (got {got}); change the value"
    elif kind == "too_short":
        least = ctx.get("min_length", 1)
        message = (
            f"needs at least {least} {'entry' if least == 1 else 'entries'} (got "
            f"{ctx.get('actual_length', 0)}); add {'one' if least == 1 else 'more'}"
        )
    elif kind == "too_long":
        message = (
            f"takes at most {ctx.get('max_length')} entries (got {ctx.get('actual_length')}); "
            "remove some"
        )
    elif kind.endswith("_type") or kind.endswith("_parsing"):
        base = kind.rsplit("_", 1)[0]
        words = _TYPE_WORDS.get(base, "another type; see the README for this field")
        what, fix = words.split("; ", 1)
        message = f"must be {what} (got {got}); {fix}"
    elif kind != "value_error":
        message = f"{message} (got {got}); fix the value"
    return field, message


def _duplicates(names: list[str]) -> str | None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            return name
        seen.add(name)
    return None


def validate_references(problem: Problem, source: str) -> None:
    """Check that every name used in the file resolves, every design is complete and the
    keep rules do not contradict each other."""

    def fail(field: str, message: str) -> None:
        raise ProblemError(source, field, message)

    for section, items in (
        ("process", problem.process),
        ("packaging", problem.packaging),
        ("block", problem.block),
        ("design", problem.design),
    ):
        twice = _duplicates([item.name for item in items])
        if twice is not None:
            fail(
                f"{section}[{_label(twice)}].name",
                f"the name {shorten(twice)} is used twice; make it unique",
            )

    processes = {p.name: p for p in problem.process}
    blocks = {b.name: b for b in problem.block}
    packagings = {p.name: p for p in problem.packaging}

    def unknown(kind: str, name: str, known) -> str:
        return f"unknown {kind} {shorten(name)}; use one of {_one_of(sorted(known))}"

    for pack in problem.packaging:
        if pack.interposer_process is not None and pack.interposer_process not in processes:
            fail(
                f"packaging[{_label(pack.name)}].interposer_process",
                unknown("process", pack.interposer_process, processes),
            )
    for pack in problem.packaging:
        via = processes.get(pack.interposer_process)
        if pack.kind == "silicon_interposer" and via is not None:
            room = _wafer_room_mm2(via)
            if pack.interposer_extra_area_mm2 > room:
                fail(
                    f"packaging[{_label(pack.name)}].interposer_extra_area",
                    f"{pack.interposer_extra_area_mm2:g} mm^2 is more than one wafer of process "
                    f"{shorten(via.name)} holds ({room:.0f} mm^2); lower it",
                )
    for i, link in enumerate(problem.link):
        for name in link.blocks:
            if name not in blocks:
                fail(f"link[{i}].blocks", unknown("block", name, blocks))
        if link.blocks[0] == link.blocks[1]:
            fail(f"link[{i}].blocks", "a link joins two different blocks; name two blocks")
    _check_keep_rules(problem, blocks, fail)
    for block in problem.block:
        if block.repair is not None and block.kind != "memory":
            fail(
                f"block[{_label(block.name)}].repair",
                'array repair applies to memory blocks only; set kind = "memory" or drop it',
            )
    for sbin in problem.market.salvage_bin:
        where = f"market.salvage_bin[{_label(sbin.name)}]"
        if sbin.block not in blocks:
            fail(f"{where}.block", unknown("block", sbin.block, blocks))
        if sbin.min_good >= blocks[sbin.block].count:
            fail(
                f"{where}.min_good",
                f"must be below the block's count ({blocks[sbin.block].count}), since a die "
                "with all instances good is full spec; lower it",
            )
    n_critical = (
        len(problem.critical_area_reduction.options())
        if problem.critical_area_reduction is not None
        else 1
    )
    for design in problem.design:
        where = f"design[{_label(design.name)}]"
        for pname, density in design.defect_targets.items():
            if pname not in processes:
                fail(
                    f"{where}.defect_targets.{_label(pname)}",
                    unknown("process", pname, processes),
                )
            process = processes[pname]
            allowed = [d for d, _, _ in process.defect_targets()]
            curve = process.defect_reduction
            base = process.defect_density_per_cm2
            # the base density is always on offer (no reduction bought), curve or not
            at_base = abs(density - base) <= 1e-12 * base
            if not at_base and (
                curve is None
                or (
                    curve.form == "table" and not any(abs(a - density) <= 1e-9 * a for a in allowed)
                )
                or (
                    curve.form == "log_ratio"
                    and not (
                        curve.floor_per_cm2 * (1 - 1e-12)
                        <= density
                        <= process.defect_density_per_cm2 * (1 + 1e-12)
                    )
                )
            ):
                fail(
                    f"{where}.defect_targets.{_label(pname)}",
                    f"{density:g} /cm^2 is not a target process {shorten(pname)} offers; see "
                    "its defect_reduction curve",
                )
        if design.packaging not in packagings:
            fail(f"{where}.packaging", unknown("packaging", design.packaging, packagings))
        placed: dict[str, int] = {}
        for j, die in enumerate(design.die):
            die_where = f"{where}.die[{_label(die.name or j)}]"
            if die.process not in processes:
                fail(f"{die_where}.process", unknown("process", die.process, processes))
            if die.critical_area_option >= n_critical:
                fail(
                    f"{die_where}.critical_area_option",
                    f"only options 0 to {n_critical - 1} exist; see [critical_area_reduction]",
                )
            for table in ("blocks", "spares", "repair"):
                for name in getattr(die, table):
                    if name not in blocks:
                        fail(f"{die_where}.{table}.{_label(name)}", unknown("block", name, blocks))
            for name in die.spares:
                if name not in die.blocks:
                    fail(
                        f"{die_where}.spares.{_label(name)}",
                        f"block {shorten(name)} is not on this die; add it to blocks or drop "
                        "the spares",
                    )
            for name in die.repair:
                if blocks[name].repair is None:
                    fail(
                        f"{die_where}.repair.{_label(name)}",
                        f"block {shorten(name)} has no [block.repair] section; add one or drop "
                        "this",
                    )
                if name not in die.blocks:
                    fail(
                        f"{die_where}.repair.{_label(name)}",
                        f"block {shorten(name)} is not on this die; add it to blocks or drop "
                        "the repair",
                    )
            for name, count in die.blocks.items():
                placed[name] = placed.get(name, 0) + count * die.copies
        for name, block in blocks.items():
            got = placed.get(name, 0)
            if got == 0:
                fail(
                    f"{where}.die",
                    f"block {shorten(name)} is placed on no die; add it to one die's blocks",
                )
            if got != block.count:
                fail(
                    f"{where}.die",
                    f"block {shorten(name)} is placed {got} times (copies x instances) but the "
                    f"design has {block.count}; place each instance exactly once",
                )
        n_dies = sum(die.copies for die in design.die)
        pack = packagings[design.packaging]
        if n_dies > pack.max_dies:
            fail(
                f"{where}.die",
                f"{n_dies} dies exceed packaging {shorten(pack.name)} max_dies = "
                f"{pack.max_dies}; use fewer copies or another packaging",
            )


def _keep_components(groups: list[list[str]]) -> dict[str, str]:
    """Blocks tied by keep_together groups, directly or through chains: block -> root."""
    root: dict[str, str] = {}

    def find(name: str) -> str:
        root.setdefault(name, name)
        while root[name] != name:
            root[name] = root[root[name]]
            name = root[name]
        return name

    for group in groups:
        for name in group[1:]:
            root[find(name)] = find(group[0])
    return {name: find(name) for name in list(root)}


def _check_keep_rules(problem: Problem, blocks: dict, fail) -> None:
    limits = problem.constraints
    for group_name in ("keep_together", "keep_apart"):
        for i, group in enumerate(getattr(limits, group_name)):
            where = f"constraints.{group_name}[{i}]"
            for name in group:
                if name not in blocks:
                    fail(
                        where,
                        f"unknown block {shorten(name)}; use one of {_one_of(sorted(blocks))}",
                    )
            if len(group) < 2:
                fail(where, "a group names at least two blocks; add one or drop the group")
            twice = _duplicates(group)
            if twice is not None:
                fail(where, f"names block {shorten(twice)} twice; list each block once")
    component = _keep_components(limits.keep_together)
    for i, group in enumerate(limits.keep_apart):
        for k, a in enumerate(group):
            for b in group[k + 1 :]:
                if a in component and component.get(b) == component[a]:
                    fail(
                        f"constraints.keep_apart[{i}]",
                        f"blocks {shorten(a)} and {shorten(b)} must also share a die by "
                        "keep_together (directly or through chained groups); drop one rule",
                    )


# ---------------------------------------------------------------- static feasibility
def _growth(process: Process) -> float:
    """Least area growth a die on this process takes (its cheapest margin option)."""
    return 1.0 + min(overhead for _, overhead in process.margin_options())


def _wafer_room_mm2(process: Process) -> float:
    """The largest rectangle on the usable wafer: a square inscribed in the circle."""
    usable = max(0.5 * process.wafer_diameter_mm - process.edge_exclusion_mm, 0.0)
    return 2 * usable**2


def _largest_die_mm2(process: Process, max_die_area: float) -> float:
    """An upper bound on the area of any die this process can make under max_die_area."""
    field = process.reticle_width_mm * process.reticle_height_mm
    return min(max_die_area, field, _wafer_room_mm2(process))


def _die_fits(area: float, process: Process, max_die_area: float) -> bool:
    """Whether a die of ``area`` mm^2 can be exposed in the field, fits the usable wafer
    and respects max_die_area (the evaluator's shape rule; see evaluator.die_shape_mm)."""
    if area > max_die_area * (1 + 1e-9):
        return False
    rw, rh = process.reticle_width_mm, process.reticle_height_mm
    short, long = min(rw, rh), max(rw, rh)
    if process.die_aspect_ratio is None:
        width = min(math.sqrt(area), short)
        height = area / width
    else:
        width = math.sqrt(area * process.die_aspect_ratio)
        height = area / width
    small, big = min(width, height), max(width, height)
    if small > short * (1 + 1e-9) or big > long * (1 + 1e-9):
        return False
    usable = 0.5 * process.wafer_diameter_mm - process.edge_exclusion_mm
    scribe = process.scribe_width_mm
    return math.hypot(width + scribe, height + scribe) <= 2 * usable * (1 + 1e-9)


def _fullest_die_mm2(problem: Problem, process: Process) -> float:
    """An upper bound on a die's area on ``process``: every block instance with its largest
    spare and repair choices, the largest area options, and every link cut."""
    content = 0.0
    for block in problem.block:
        unit = block.area_mm2 * process.area_scale.of(block.kind)
        content += (block.count + max(block.spare_choices)) * unit
        if block.repair is not None:
            content += (
                block.count * max(block.repair.repair_choices) * (block.repair.area_per_repair_mm2)
            )
    margin = max(overhead for _, overhead in process.margin_options())
    critical = problem.critical_area_reduction
    design_side = max(o for _, o in critical.options()) if critical is not None else 0.0
    interface = 0.0
    for pack in problem.packaging:
        if pack.kind != "single_die" and problem.link:
            bandwidth = sum(link.bandwidth_gbps for link in problem.link)
            interface = max(
                interface,
                bandwidth / pack.interface_density_gbps_per_mm2
                + len(problem.link) * pack.port_area_mm2,
            )
    return content * (1 + margin) * (1 + design_side) + interface


def check_tractable(problem: Problem, source: str) -> None:
    """Refuse inputs whose exact gross-die count would run for minutes.

    The count tries about (sites per wafer)^1.5 grid positions; a block so small that the
    wafer holds more than MAX_EXACT_SITES of its dies needs die_count = "formula".
    """
    for process in problem.process:
        if process.die_count != "exact":
            continue
        usable = 0.5 * process.wafer_diameter_mm - process.edge_exclusion_mm
        ratio = process.die_aspect_ratio or 1.0
        for block in problem.block:
            area = block.area_mm2 * process.area_scale.of(block.kind) * _growth(process)
            width, height = math.sqrt(area * ratio), math.sqrt(area / ratio)
            site = (width + process.scribe_width_mm) * (height + process.scribe_width_mm)
            sites = math.pi * usable**2 / site
            if sites > MAX_EXACT_SITES:
                raise ProblemError(
                    source,
                    f"process[{_label(process.name)}].die_count",
                    f"block {shorten(block.name)} alone makes dies of {area:.3g} mm^2, about "
                    f"{sites:.2g} per wafer: too many to count exactly (at most "
                    f'{MAX_EXACT_SITES:,}); set die_count = "formula" or use larger blocks',
                )


def check_feasible(problem: Problem, source: str) -> None:
    """Refuse a file whose constraints admit no design, for reasons known before solving.

    Each test is a necessary condition, so a file it refuses has no design at all: a block
    (or a keep_together group) that fits no die on any process, a min_die_area no die can
    reach, more silicon than the allowed dies can hold, more blocks kept apart than dies
    allowed, or an interposer over its limit when it is the only packaging. One more
    refuses an option rather than the file: an interposer no wafer of its process can
    hold could never be built. Exploration applies this to the file as written, not to
    the scenarios derived from it, where "no feasible design" is a finding.
    """
    limits = problem.constraints
    max_area = limits.max_die_area_mm2
    processes = problem.process

    def unit_area(block: Block, process: Process) -> float:
        return block.area_mm2 * process.area_scale.of(block.kind) * _growth(process)

    largest = max(_largest_die_mm2(p, max_area) for p in processes)
    for block in problem.block:
        if not any(_die_fits(unit_area(block, p), p, max_area) for p in processes):
            smallest = min(unit_area(block, p) for p in processes)
            raise ProblemError(
                source,
                f"block[{_label(block.name)}].area",
                f"block {shorten(block.name)} needs at least {smallest:.1f} mm^2 on its most "
                f"compact process, over the largest die allowed, {largest:.1f} mm^2 (reticle, "
                "wafer, max_die_area); split the block or raise the limit",
            )
    blocks = {b.name: b for b in problem.block}
    component = _keep_components(limits.keep_together)
    seen: set[str] = set()
    for i, group in enumerate(limits.keep_together):
        root = component[group[0]]
        if root in seen:
            continue
        seen.add(root)
        members = [blocks[n] for n in component if component[n] == root]
        share = math.gcd(*(b.count for b in members))
        need = [sum(b.count // share * unit_area(b, p) for b in members) for p in processes]
        if not any(_die_fits(a, p, max_area) for a, p in zip(need, processes, strict=True)):
            raise ProblemError(
                source,
                f"constraints.keep_together[{i}]",
                f"the blocks kept together ({_one_of(b.name for b in members)}) need at least "
                f"{min(need):.1f} mm^2 on one die, over the largest allowed die of "
                f"{largest:.1f} mm^2; loosen the group or raise max_die_area",
            )
    if limits.min_die_area_mm2 > largest * (1 + 1e-9):
        raise ProblemError(
            source,
            "constraints.min_die_area",
            f"{limits.min_die_area_mm2:g} mm^2 is above the largest die any process can make "
            f"({largest:.1f} mm^2: reticle field, wafer and max_die_area); lower it",
        )
    fullest = max(
        min(_fullest_die_mm2(problem, p), _largest_die_mm2(p, max_area)) for p in processes
    )
    if limits.min_die_area_mm2 > fullest * (1 + 1e-9):
        raise ProblemError(
            source,
            "constraints.min_die_area",
            f"{limits.min_die_area_mm2:g} mm^2 is more than any die can reach: every block with "
            f"every spare, repair and option on one die makes at most {fullest:.1f} mm^2 "
            "within the limits; lower it",
        )
    total = sum(b.count * min(unit_area(b, p) for p in processes) for b in problem.block)
    allowed = min(limits.max_dies, max(p.max_dies for p in problem.packaging))
    for i, group in enumerate(limits.keep_apart):
        if len(group) > allowed:
            raise ProblemError(
                source,
                f"constraints.keep_apart[{i}]",
                f"keeping {len(group)} blocks apart needs {len(group)} dies, but only "
                f"{allowed} may be used (max_dies here and in packaging); allow more dies or "
                "drop the rule",
            )
    needed = math.ceil(total / largest - 1e-9)
    if needed > allowed:
        raise ProblemError(
            source,
            "constraints.max_dies",
            f"the blocks need at least {total:.0f} mm^2 of silicon, so {needed} dies of at "
            f"most {largest:.0f} mm^2, but only {allowed} may be used (here and in packaging "
            "max_dies); allow more dies",
        )
    for pack in problem.packaging:
        if pack.kind != "silicon_interposer":
            continue
        via = processes[problem.process_index(pack.interposer_process)]
        need = pack.interposer_area_factor * total + pack.interposer_extra_area_mm2
        if len(problem.packaging) == 1 and need > pack.interposer_max_area_mm2 * (1 + 1e-9):
            raise ProblemError(
                source,
                f"packaging[{_label(pack.name)}].interposer_max_area",
                f"an interposer for at least {total:.0f} mm^2 of dies needs {need:.0f} mm^2, "
                f"over this limit of {pack.interposer_max_area_mm2:g} mm^2; raise it",
            )
        # an interposer no wafer can hold makes the option unusable, whatever else exists
        if need > _wafer_room_mm2(via) * (1 + 1e-9):
            raise ProblemError(
                source,
                f"packaging[{_label(pack.name)}].interposer_process",
                f"an interposer for at least {total:.0f} mm^2 of dies needs {need:.0f} mm^2, "
                f"more than one wafer of process {shorten(via.name)} holds "
                f"({_wafer_room_mm2(via):.0f} mm^2); use a larger wafer or less silicon",
            )


# ---------------------------------------------------------------- loading
def _nesting_depth(data: object) -> int:
    """Depth of tables and lists inside each other (iterative: no recursion limit)."""
    deepest, stack = 0, [(data, 0)]
    while stack:
        node, depth = stack.pop()
        deepest = max(deepest, depth)
        if deepest > MAX_NESTING:
            break
        if isinstance(node, dict):
            stack.extend((v, depth + 1) for v in node.values())
        elif isinstance(node, list | tuple):
            stack.extend((v, depth + 1) for v in node)
    return deepest


def _check_nesting(data: dict, source: str) -> None:
    if _nesting_depth(data) > MAX_NESTING:
        raise ProblemError(
            source,
            "",
            f"tables and lists are nested more than {MAX_NESTING} deep; a problem file needs "
            "far fewer, so remove the extra levels",
        )


def parse_problem(data: dict, source: str = "<problem>") -> Problem:
    """Validate a decoded TOML document into a :class:`Problem` (raises ProblemError)."""
    if not isinstance(data, dict):
        raise ProblemError(source, "", "is not a table of sections; start from a demo file")
    _check_nesting(data, source)
    try:
        problem = Problem.model_validate(data)
    except ValidationError as exc:
        field, message = _first_error(exc, data)
        raise ProblemError(source, field, message) from None
    except RecursionError:
        raise ProblemError(source, "", "is nested too deeply to read; simplify it") from None
    validate_references(problem, source)
    check_tractable(problem, source)
    return problem


def load_problem(path: str | Path) -> Problem:
    """Read and validate a problem file (raises ProblemError with file, field and fix).

    Besides the schema, the file as written must admit a design (:func:`check_feasible`).
    """
    data, source = read_problem_data(path)
    problem = parse_problem(data, source)
    check_feasible(problem, source)
    return problem


def read_problem_data(path: str | Path) -> tuple[dict, str]:
    """Decode a problem file's TOML; the file's name is the source of later messages."""
    path = Path(path)
    source = str(path)
    try:
        size = path.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ProblemError(
                source,
                "",
                f"the file is {size / 1e6:.1f} MB, over the {MAX_FILE_BYTES / 1e6:g} MB a "
                "problem file may have; check that it is the right file",
            )
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ProblemError(source, "", "file not found; check the path") from None
    except OSError as exc:
        raise ProblemError(
            source, "", f"cannot read the file ({exc.strerror}); check the path and permissions"
        ) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProblemError(
            source,
            "",
            f"is not UTF-8 text (byte {exc.start}); save it as UTF-8",
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProblemError(
            source, "", f"not valid TOML ({_clip(str(exc), 120)}); fix the syntax there"
        ) from None
    except RecursionError:
        raise ProblemError(
            source,
            "",
            f"tables or lists are nested too deeply; a problem file needs at most {MAX_NESTING}"
            " levels",
        ) from None
    except ValueError as exc:  # e.g. an integer of thousands of digits
        raise ProblemError(
            source, "", f"not valid TOML ({_clip(str(exc), 80)}); fix the value there"
        ) from None
    _check_nesting(data, source)
    return data, source


# ---------------------------------------------------------------- uncertain inputs
# Exploration addition ([[uncertain]] entries). Paths follow the grammar of
# optimizer/explore/paths.py, which is derived from the classes above; it is imported
# when a path is checked, after this module has loaded. Item names in paths are checked
# against the problem by optimizer.explore.paths.check_uncertain.

DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "std"),
    "lognormal": ("median", "sigma_log"),
    "uniform": ("low", "high"),
    "triangular": ("low", "mode", "high"),
}
_DISTRIBUTION_PARAMETERS = ("mean", "std", "median", "sigma_log", "mode", "low", "high")
Parameter = Annotated[float | None, _optional(_number(-MAX_MONEY, MAX_MONEY))]
PositiveParameter = Annotated[float | None, _optional(_number(0, MAX_MONEY, low_open=True))]


class UncertainInput(_Section):
    """An input known only as a distribution, for Monte Carlo and sensitivity ranges.

    Parameters are numbers in the field's base unit, or quantities with their unit for
    unit fields (``median = "0.2 /cm^2"``). ``low`` and ``high`` give the sensitivity
    range: the distribution's own bounds for uniform and triangular; by default
    mean -/+ 2 std for normal and median x exp(-/+ 2 sigma_log) for lognormal.
    Parameters are finite, within -/+ 1e15 (std and median above 0; sigma_log above 0 and
    at most 5).
    """

    path: Annotated[str, _text(200)]
    distribution: Literal["normal", "lognormal", "uniform", "triangular"]
    mean: Parameter = None
    std: PositiveParameter = None
    median: PositiveParameter = None
    sigma_log: Annotated[float | None, _optional(_number(0, 5, low_open=True))] = None
    mode: Parameter = None
    low: Parameter = None
    high: Parameter = None

    @model_validator(mode="before")
    @classmethod
    def _quantities(cls, data: object) -> object:
        from optimizer.explore.paths import PathError, parse_path

        if not isinstance(data, dict):
            return data
        try:
            path = parse_path(data.get("path"))
        except PathError:
            return data  # reported against the path by _known_path
        if path.unit is None:
            return data
        out = dict(data)
        for key in _DISTRIBUTION_PARAMETERS:
            if key != "sigma_log" and isinstance(out.get(key), str):
                try:
                    out[key] = to_base(out[key], path.unit)
                except UnitError as exc:
                    raise ValueError(f"{key}: {exc}") from None
        return out

    @field_validator("path")
    @classmethod
    def _known_path(cls, value: str) -> str:
        from optimizer.explore.paths import PathError, parse_path

        try:
            return parse_path(value).text
        except PathError as exc:
            raise ValueError(f"path {shorten(value)}: {exc}") from None

    @model_validator(mode="after")
    def _parameters(self) -> UncertainInput:
        needed = DISTRIBUTIONS[self.distribution]
        missing = [key for key in needed if getattr(self, key) is None]
        if missing:
            raise ValueError(f"a {self.distribution} distribution needs {missing}; add them")
        allowed = set(needed) | {"low", "high"}
        extra = [
            key
            for key in _DISTRIBUTION_PARAMETERS
            if key not in allowed and getattr(self, key) is not None
        ]
        if extra:
            raise ValueError(
                f"{extra} do not belong to a {self.distribution} distribution (it takes "
                f"{list(needed)}, and low/high for its range); remove them"
            )
        low, high = self.range()
        if not (math.isfinite(low) and math.isfinite(high) and low < high):
            raise ValueError(f"low ({low:g}) must be below high ({high:g}); fix the range")
        if self.distribution == "triangular" and not low <= self.mode <= high:
            raise ValueError(f"mode ({self.mode:g}) must lie within [low, high]; move it")
        return self

    def range(self) -> tuple[float, float]:
        """Sensitivity range (low, high) in the field's base unit."""
        if self.distribution == "normal":
            default = (self.mean - 2 * self.std, self.mean + 2 * self.std)
        elif self.distribution == "lognormal":
            spread = math.exp(2 * self.sigma_log)
            default = (self.median / spread, self.median * spread)
        else:
            default = (self.low, self.high)
        return (
            default[0] if self.low is None else self.low,
            default[1] if self.high is None else self.high,
        )


Problem.model_rebuild()
