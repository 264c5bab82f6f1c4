"""The problem file: schema, validation and loading.

A problem file is TOML. Every physical quantity is a string with a unit, converted once
here to the internal base (mm, mm^2, defects per cm^2, GB/s). Money is a plain number in
the file's one currency. All validation lives in this module: later layers may assume a
loaded :class:`Problem` is consistent (names resolve, numbers are in range).
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path
from typing import Annotated, Literal

import numpy as np
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from optimizer.units import (
    AREA,
    BANDWIDTH,
    DEFECT_DENSITY,
    INTERFACE_DENSITY,
    LENGTH,
    QuantityKind,
    UnitError,
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


class ProblemError(Exception):
    """A problem file that cannot be used, with the field at fault and what to do."""

    def __init__(self, source: str, field: str, message: str):
        self.source = source
        self.field = field
        self.message = message
        super().__init__(self.line())

    def line(self) -> str:
        where = f"{self.source}: {self.field}" if self.field else self.source
        return f"{where}: {self.message}"


def _quantity(kind: QuantityKind):
    def convert(value: object) -> float:
        try:
            return to_base(value, kind)
        except UnitError as exc:
            raise ValueError(str(exc)) from None

    return BeforeValidator(convert)


LengthMm = Annotated[float, _quantity(LENGTH)]
AreaMm2 = Annotated[float, _quantity(AREA)]
DefectDensityPerCm2 = Annotated[float, _quantity(DEFECT_DENSITY)]
BandwidthGBps = Annotated[float, _quantity(BANDWIDTH)]
InterfaceDensityGBpsPerMm2 = Annotated[float, _quantity(INTERFACE_DENSITY)]
Money = Annotated[float, Field(ge=0)]
Fraction = Annotated[float, Field(ge=0, le=1)]
PositiveFraction = Annotated[float, Field(gt=0, le=1)]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SalvageBin(_Section):
    """A lower bin: one-die products that miss full spec but keep enough good units."""

    name: str
    block: str
    min_good: Annotated[int, Field(ge=0)]
    unit_price: Annotated[float, Field(gt=0)]
    demand: Annotated[float, Field(ge=0)]


class Market(_Section):
    """What the product sells for and how many good units the market takes."""

    currency: str = "USD"
    unit_price: Annotated[float, Field(gt=0)]
    volume: Annotated[float, Field(gt=0)]
    salvage_bin: list[SalvageBin] = Field(default_factory=list)


class Constraints(_Section):
    """Limits every design must respect."""

    min_die_area_mm2: AreaMm2 = Field(default=0.0, alias="min_die_area")
    max_die_area_mm2: AreaMm2 = Field(default=math.inf, alias="max_die_area")
    max_dies: Annotated[int, Field(ge=1)] = 16
    keep_together: list[list[str]] = Field(default_factory=list)
    keep_apart: list[list[str]] = Field(default_factory=list)

    @model_validator(mode="after")
    def _range(self) -> Constraints:
        if self.min_die_area_mm2 > self.max_die_area_mm2:
            raise ValueError("min_die_area exceeds max_die_area; swap or widen them")
        return self


class AreaScale(_Section):
    """Area of each block kind on this process relative to the reference area."""

    logic: Annotated[float, Field(gt=0)] = 1.0
    memory: Annotated[float, Field(gt=0)] = 1.0
    analog: Annotated[float, Field(gt=0)] = 1.0
    io: Annotated[float, Field(gt=0)] = 1.0

    def of(self, kind: str) -> float:
        return float(getattr(self, kind))


class DefectReduction(_Section):
    """What lowering this process's defect density costs (a yield-improvement curve).

    ``log_ratio``: one-time cost one_time_per_log x ln(D_base / D) and a per-wafer adder
    per_wafer_per_log x ln(D_base / D), for any target D in [floor, D_base]; the solver
    tries ``levels`` targets spaced geometrically and refines the winner's continuously.
    ``table``: the listed targets only, each [defect density, one-time cost, per-wafer adder].
    """

    form: Literal["log_ratio", "table"]
    floor_per_cm2: DefectDensityPerCm2 | None = Field(default=None, alias="floor")
    one_time_per_log: Money = 0.0
    per_wafer_per_log: Money = 0.0
    levels: Annotated[int, Field(ge=2, le=64)] = 4
    points: list[tuple[str, float, float]] = Field(default_factory=list)

    @model_validator(mode="after")
    def _form_fields(self) -> DefectReduction:
        if self.form == "log_ratio" and self.floor_per_cm2 is None:
            raise ValueError("form 'log_ratio' needs floor, the lowest reachable defect density")
        if self.form == "table" and not self.points:
            raise ValueError(
                "form 'table' needs points = [[\"0.08 /cm^2\", one_time, per_wafer], ...]"
            )
        return self

    def table(self) -> list[tuple[float, float, float]]:
        """Points as (defect density per cm^2, one-time cost, per-wafer adder)."""
        return [(to_base(d, DEFECT_DENSITY), float(a), float(b)) for d, a, b in self.points]


class MarginCurve(_Section):
    """Design margin (sigma) against the die-area overhead it costs."""

    two_sided: bool = True
    sigma: list[Annotated[float, Field(gt=0)]] = Field(min_length=1)
    area_overhead: list[Annotated[float, Field(ge=0)]] = Field(min_length=1)

    @model_validator(mode="after")
    def _same_length(self) -> MarginCurve:
        if len(self.sigma) != len(self.area_overhead):
            raise ValueError("sigma and area_overhead need the same number of entries")
        if any(b <= a for a, b in zip(self.sigma, self.sigma[1:], strict=False)):
            raise ValueError("sigma values must increase")
        return self


class Process(_Section):
    """One process option: wafer, defect density, yield model, test and one-time costs."""

    name: str
    wafer_diameter_mm: LengthMm = Field(alias="wafer_diameter")
    edge_exclusion_mm: LengthMm = Field(default=3.0, alias="edge_exclusion")
    scribe_width_mm: LengthMm = Field(default=0.1, alias="scribe_width")
    wafer_cost: Money
    defect_density_per_cm2: DefectDensityPerCm2 = Field(alias="defect_density")
    yield_model: Literal[
        "poisson", "murphy", "exponential", "sqrt_exponential", "negative_binomial", "bose_einstein"
    ] = "negative_binomial"
    clustering_alpha: Annotated[float, Field(gt=0)] | None = None
    critical_layers: Annotated[int, Field(ge=1)] | None = None
    systematic_yield: PositiveFraction = 1.0
    reticle_width_mm: LengthMm = Field(default=26.0, alias="reticle_width")
    reticle_height_mm: LengthMm = Field(default=33.0, alias="reticle_height")
    mask_set_cost: Money = 0.0
    sort_cost_per_die: Money = 0.0
    fault_coverage: Fraction = 1.0
    # None: square, stretched to the field's short side when a square would not fit.
    die_aspect_ratio: Annotated[float, Field(ge=1)] | None = None
    area_scale: AreaScale = Field(default_factory=AreaScale)
    # "exact": whole sites on the wafer; "formula": the classic approximation, floored;
    # "area_ratio": usable area / site area, no edge loss (idealised studies and checks).
    die_count: Literal["exact", "formula", "area_ratio"] = "exact"
    defect_reduction: DefectReduction | None = None
    margin: MarginCurve | None = None

    @field_validator("wafer_diameter_mm", "reticle_width_mm", "reticle_height_mm", "wafer_cost")
    @classmethod
    def _positive(cls, value: float) -> float:
        if not value > 0:
            raise ValueError("must be positive")
        return value

    @field_validator("defect_density_per_cm2", "edge_exclusion_mm", "scribe_width_mm")
    @classmethod
    def _not_negative(cls, value: float) -> float:
        if not value >= 0:
            raise ValueError("must not be negative")
        return value

    @model_validator(mode="after")
    def _model_parameters(self) -> Process:
        if self.yield_model == "negative_binomial" and self.clustering_alpha is None:
            raise ValueError(
                "yield_model 'negative_binomial' needs clustering_alpha (typically 0.5 to 5)"
            )
        if self.yield_model == "bose_einstein" and self.critical_layers is None:
            raise ValueError("yield_model 'bose_einstein' needs critical_layers (an integer)")
        if 2 * self.edge_exclusion_mm >= self.wafer_diameter_mm:
            raise ValueError("edge_exclusion leaves no usable wafer; make it smaller")
        curve = self.defect_reduction
        if curve is not None and curve.form == "log_ratio":
            if not 0 < curve.floor_per_cm2 <= self.defect_density_per_cm2:
                raise ValueError(
                    "defect_reduction.floor must be above 0 and at most defect_density"
                )
        if curve is not None and curve.form == "table":
            try:
                points = curve.table()
            except UnitError as exc:
                raise ValueError(f"defect_reduction.points: {exc}") from None
            if any(d > self.defect_density_per_cm2 or d <= 0 for d, _, _ in points):
                raise ValueError(
                    "defect_reduction.points must lie in (0, defect_density]; the base "
                    "density is always available at no cost"
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
    """One packaging option and its costs, yields and die-to-die interface figures."""

    name: str
    kind: Literal["single_die", "organic_substrate", "silicon_interposer", "stacked"]
    max_dies: Annotated[int, Field(ge=1)] = 1
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
    port_area_mm2: AreaMm2 = Field(default=0.0, alias="port_area")
    design_cost: Money = 0.0
    interposer_process: str | None = None
    interposer_area_factor: Annotated[float, Field(ge=1)] = 1.1
    interposer_extra_area_mm2: AreaMm2 = Field(default=0.0, alias="interposer_extra_area")
    interposer_max_area_mm2: AreaMm2 = Field(default=math.inf, alias="interposer_max_area")
    interposer_defect_sensitivity: Fraction = 0.1

    @model_validator(mode="after")
    def _kind_fields(self) -> Packaging:
        if self.kind == "single_die" and self.max_dies != 1:
            raise ValueError("a single_die packaging holds exactly one die; set max_dies = 1")
        if self.kind != "single_die" and self.interface_density_gbps_per_mm2 is None:
            raise ValueError(
                f"packaging kind '{self.kind}' needs interface_density, e.g. \"200 GB/s/mm^2\""
            )
        if self.kind == "silicon_interposer" and self.interposer_process is None:
            raise ValueError("a silicon_interposer needs interposer_process (a process name)")
        return self


class ArrayRepair(_Section):
    """Spare rows/columns for a memory array block."""

    repairable_fraction: Fraction
    repair_choices: list[Annotated[int, Field(ge=0)]] = Field(min_length=1)
    area_per_repair_mm2: AreaMm2 = Field(default=0.0, alias="area_per_repair")
    test_cost_per_die: Money = 0.0


class Block(_Section):
    """A functional block of the design; ``count`` identical instances of it."""

    name: str
    kind: Literal["logic", "memory", "analog", "io"] = "logic"
    area_mm2: AreaMm2 = Field(alias="area")
    count: Annotated[int, Field(ge=1)] = 1
    defect_sensitivity: Fraction = 1.0
    spare_choices: list[Annotated[int, Field(ge=0)]] = Field(default_factory=lambda: [0])
    repair: ArrayRepair | None = None

    @field_validator("area_mm2")
    @classmethod
    def _positive_area(cls, value: float) -> float:
        if not value > 0:
            raise ValueError('area must be positive, e.g. "12 mm^2"')
        return value

    @field_validator("spare_choices")
    @classmethod
    def _spares_include_none(cls, value: list[int]) -> list[int]:
        return sorted(set(value) | {0})


class Link(_Section):
    """Bandwidth between two blocks; paid as interface area when the blocks are split."""

    blocks: Annotated[list[str], Field(min_length=2, max_length=2)]
    bandwidth_gbps: BandwidthGBps = Field(alias="bandwidth")


class CriticalAreaReduction(_Section):
    """Design-side yield options: lower defect sensitivity bought with die area."""

    sensitivity_factor: list[Annotated[float, Field(gt=0, le=1)]] = Field(min_length=1)
    area_overhead: list[Annotated[float, Field(ge=0)]] = Field(min_length=1)

    @model_validator(mode="after")
    def _same_length(self) -> CriticalAreaReduction:
        if len(self.sensitivity_factor) != len(self.area_overhead):
            raise ValueError("sensitivity_factor and area_overhead need the same length")
        return self

    def options(self) -> list[tuple[float, float]]:
        pairs = list(zip(self.sensitivity_factor, self.area_overhead, strict=True))
        return pairs if (1.0, 0.0) in pairs else [(1.0, 0.0), *pairs]


class Requirements(_Section):
    """Mandated targets, to price them (solve under them and report the profit lost)."""

    min_die_yield: Annotated[float, Field(gt=0, le=1)] | None = None
    min_sigma_margin: Annotated[float, Field(gt=0)] | None = None
    max_defect_level: Annotated[float, Field(ge=0, lt=1)] | None = None

    def any(self) -> bool:
        return any(
            v is not None
            for v in (self.min_die_yield, self.min_sigma_margin, self.max_defect_level)
        )


class DesignCost(_Section):
    """One-time design cost of each distinct die design."""

    per_die_design: Money = 0.0
    per_mm2: Money = 0.0


class DieChoice(_Section):
    """One die design in an explicit design: its blocks, process, options and copies."""

    name: str | None = None
    process: str
    copies: Annotated[int, Field(ge=1)] = 1
    blocks: dict[str, Annotated[int, Field(ge=1)]] = Field(min_length=1)
    spares: dict[str, Annotated[int, Field(ge=0)]] = Field(default_factory=dict)
    repair: dict[str, Annotated[int, Field(ge=0)]] = Field(default_factory=dict)
    sigma_margin: Annotated[float, Field(gt=0)] | None = None
    critical_area_option: Annotated[int, Field(ge=0)] = 0


class Design(_Section):
    """An explicit named design to evaluate."""

    name: str
    packaging: str
    die: list[DieChoice] = Field(min_length=1)
    defect_targets: dict[str, DefectDensityPerCm2] = Field(default_factory=dict)


class Problem(_Section):
    """A whole problem file, validated and in base units."""

    title: str = "untitled problem"
    note: str = ""
    market: Market
    constraints: Constraints = Field(default_factory=Constraints)
    process: list[Process] = Field(min_length=1)
    packaging: list[Packaging] = Field(min_length=1)
    design_cost: DesignCost = Field(default_factory=DesignCost)
    critical_area_reduction: CriticalAreaReduction | None = None
    requirements: Requirements = Field(default_factory=Requirements)
    block: list[Block] = Field(min_length=1)
    link: list[Link] = Field(default_factory=list)
    design: list[Design] = Field(default_factory=list)
    uncertain: list[UncertainInput] = Field(default_factory=list)

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


def _field_path(loc: tuple, data: dict) -> str:
    """Turn a pydantic location into ``process[n3].defect_density`` style text."""
    parts: list[str] = []
    node: object = data
    for item in loc:
        if isinstance(item, int):
            label = str(item)
            if isinstance(node, list) and item < len(node):
                element = node[item]
                if isinstance(element, dict) and isinstance(element.get("name"), str):
                    label = element["name"]
                node = element
            else:
                node = None
            parts[-1] = f"{parts[-1]}[{label}]" if parts else f"[{label}]"
        else:
            key = str(item)
            if key.startswith("function-") or key in {"constrained-float", "int", "float"}:
                continue
            parts.append(key)
            node = node.get(key) if isinstance(node, dict) else None
    return ".".join(parts)


def _first_error(exc: ValidationError, data: dict) -> tuple[str, str]:
    error = exc.errors()[0]
    loc = tuple(x for x in error["loc"] if not (isinstance(x, str) and x.startswith("literal")))
    field = _field_path(loc, data)
    kind = error["type"]
    message = error["msg"]
    if message.startswith("Value error, "):
        message = message[len("Value error, ") :]
    if kind == "missing":
        message = "is required but missing; add it to the file"
    elif kind == "extra_forbidden":
        message = "is not a known field; check its spelling against the README"
    elif kind == "literal_error":
        expected = message.replace("Input should be ", "")
        message = f"got {error.get('input')!r}; use one of {expected}"
    elif kind in {"greater_than_equal", "greater_than", "less_than_equal", "less_than"}:
        limit = message.replace("Input should be ", "")
        message = f"must be {limit} (got {error.get('input')!r}); change the value"
    elif kind.endswith("_type") or kind.endswith("_parsing"):
        message = f"{message.replace('Input should be', 'must be')} (got {error.get('input')!r})"
    return field, message


def _duplicates(names: list[str]) -> str | None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            return name
        seen.add(name)
    return None


def validate_references(problem: Problem, source: str) -> None:
    """Check that every name used in the file resolves and every design is complete."""

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
            fail(f"{section}[{twice}].name", f"the name '{twice}' is used twice; make it unique")

    processes = {p.name: p for p in problem.process}
    blocks = {b.name: b for b in problem.block}
    packagings = {p.name: p for p in problem.packaging}

    for pack in problem.packaging:
        if pack.interposer_process is not None and pack.interposer_process not in processes:
            fail(
                f"packaging[{pack.name}].interposer_process",
                f"unknown process '{pack.interposer_process}'; use one of {sorted(processes)}",
            )
    for i, link in enumerate(problem.link):
        for name in link.blocks:
            if name not in blocks:
                fail(f"link[{i}].blocks", f"unknown block '{name}'; use one of {sorted(blocks)}")
        if link.blocks[0] == link.blocks[1]:
            fail(f"link[{i}].blocks", "a link joins two different blocks; name two blocks")
    for group_name in ("keep_together", "keep_apart"):
        for i, group in enumerate(getattr(problem.constraints, group_name)):
            for name in group:
                if name not in blocks:
                    fail(
                        f"constraints.{group_name}[{i}]",
                        f"unknown block '{name}'; use one of {sorted(blocks)}",
                    )
    for block in problem.block:
        if block.repair is not None and block.kind != "memory":
            fail(f"block[{block.name}].repair", "array repair applies to memory blocks only")
    for sbin in problem.market.salvage_bin:
        where = f"market.salvage_bin[{sbin.name}]"
        if sbin.block not in blocks:
            fail(f"{where}.block", f"unknown block '{sbin.block}'; use one of {sorted(blocks)}")
        if sbin.min_good >= blocks[sbin.block].count:
            fail(
                f"{where}.min_good",
                f"must be below the block's count ({blocks[sbin.block].count}); a die with all "
                "instances good is full spec",
            )
    n_critical = (
        len(problem.critical_area_reduction.options())
        if problem.critical_area_reduction is not None
        else 1
    )
    for design in problem.design:
        where = f"design[{design.name}]"
        for pname, density in design.defect_targets.items():
            if pname not in processes:
                fail(
                    f"{where}.defect_targets.{pname}",
                    f"unknown process '{pname}'; use one of {sorted(processes)}",
                )
            process = processes[pname]
            allowed = [d for d, _, _ in process.defect_targets()]
            curve = process.defect_reduction
            if (
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
                    f"{where}.defect_targets.{pname}",
                    f"{density:g} /cm^2 is not a target process '{pname}' offers; see its "
                    "defect_reduction curve",
                )
        if design.packaging not in packagings:
            fail(
                f"{where}.packaging",
                f"unknown packaging '{design.packaging}'; use one of {sorted(packagings)}",
            )
        placed: dict[str, int] = {}
        for j, die in enumerate(design.die):
            die_where = f"{where}.die[{die.name or j}]"
            if die.process not in processes:
                fail(
                    f"{die_where}.process",
                    f"unknown process '{die.process}'; use one of {sorted(processes)}",
                )
            if die.critical_area_option >= n_critical:
                fail(
                    f"{die_where}.critical_area_option",
                    f"only options 0 to {n_critical - 1} exist; see [critical_area_reduction]",
                )
            for table in ("blocks", "spares", "repair"):
                for name in getattr(die, table):
                    if name not in blocks:
                        fail(
                            f"{die_where}.{table}.{name}",
                            f"unknown block '{name}'; use one of {sorted(blocks)}",
                        )
            for name in die.spares:
                if name not in die.blocks:
                    fail(f"{die_where}.spares.{name}", f"block '{name}' is not on this die")
            for name in die.repair:
                if blocks[name].repair is None:
                    fail(
                        f"{die_where}.repair.{name}",
                        f"block '{name}' has no [block.repair] section; add one or drop this",
                    )
                if name not in die.blocks:
                    fail(f"{die_where}.repair.{name}", f"block '{name}' is not on this die")
            for name, count in die.blocks.items():
                placed[name] = placed.get(name, 0) + count * die.copies
        for name, block in blocks.items():
            got = placed.get(name, 0)
            if got == 0:
                fail(
                    f"{where}.die",
                    f"block '{name}' is placed on no die; add it to one die's blocks",
                )
            if got != block.count:
                fail(
                    f"{where}.die",
                    f"block '{name}' is placed {got} times (copies x instances) but the "
                    f"design has {block.count}; place each instance exactly once",
                )
        n_dies = sum(die.copies for die in design.die)
        pack = packagings[design.packaging]
        if n_dies > pack.max_dies:
            fail(
                f"{where}.die",
                f"{n_dies} dies exceed packaging '{pack.name}' max_dies = {pack.max_dies}",
            )


def parse_problem(data: dict, source: str = "<problem>") -> Problem:
    """Validate a decoded TOML document into a :class:`Problem` (raises ProblemError)."""
    try:
        problem = Problem.model_validate(data)
    except ValidationError as exc:
        field, message = _first_error(exc, data)
        raise ProblemError(source, field, message) from None
    validate_references(problem, source)
    return problem


def load_problem(path: str | Path) -> Problem:
    """Read and validate a problem file (raises ProblemError with file, field and fix)."""
    data, source = read_problem_data(path)
    return parse_problem(data, source)


def read_problem_data(path: str | Path) -> tuple[dict, str]:
    """Decode a problem file's TOML; the file's name is the source of later messages."""
    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProblemError(source, "", "file not found; check the path") from None
    except OSError as exc:
        raise ProblemError(source, "", f"cannot read the file ({exc.strerror})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProblemError(source, "", f"not valid TOML ({exc}); fix the syntax there") from None
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


class UncertainInput(_Section):
    """An input known only as a distribution, for Monte Carlo and sensitivity ranges.

    Parameters are numbers in the field's base unit, or quantities with their unit for
    unit fields (``median = "0.2 /cm^2"``). ``low`` and ``high`` give the sensitivity
    range: the distribution's own bounds for uniform and triangular; by default
    mean -/+ 2 std for normal and median x exp(-/+ 2 sigma_log) for lognormal.
    """

    path: str
    distribution: Literal["normal", "lognormal", "uniform", "triangular"]
    mean: float | None = None
    std: Annotated[float, Field(gt=0)] | None = None
    median: Annotated[float, Field(gt=0)] | None = None
    sigma_log: Annotated[float, Field(gt=0)] | None = None
    mode: float | None = None
    low: float | None = None
    high: float | None = None

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
            raise ValueError(f"path '{value}': {exc}") from None

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
