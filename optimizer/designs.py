"""Complete designs: a few die designs with copies on one packaging option.

Turns an explicit design (from the problem file, or chosen by the solver) into the
evaluator's arrays, prices it and returns one named, JSON-ready result.

A design that cannot be made at all (a die over its reticle field or with no whole die
on the wafer, an interposer over its limit, two defect targets on one process) is an
error. A design that can be made and priced but breaks a rule or mandate of the problem
is priced, with every broken rule listed by :func:`design_violations`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from optimizer.evaluator import COST_COMPONENTS, DieBatch, Evaluator
from optimizer.problem import Design, Problem, ProblemError, Requirements
from optimizer.toml_quote import toml_key, toml_string


@dataclass(frozen=True)
class DieSpec:
    """One die design: process, block instances, spares and repairs per block (by name)."""

    process: str
    blocks: dict[str, int]
    spares: dict[str, int]
    repair: dict[str, int]
    copies: int = 1
    name: str = ""
    defect_density_per_cm2: float | None = None  # None: the process's base density
    sigma_margin: float | None = None  # None: no design margin modelled (no soft loss)
    critical_area_option: int = 0

    def key(self) -> tuple:
        return (
            self.process,
            tuple(sorted(self.blocks.items())),
            tuple(sorted((k, v) for k, v in self.spares.items() if v)),
            tuple(sorted((k, v) for k, v in self.repair.items() if v)),
            self.defect_density_per_cm2,
            self.sigma_margin,
            self.critical_area_option,
        )


@dataclass(frozen=True)
class DieResult:
    name: str
    process: str
    copies: int
    blocks: dict[str, int]
    spares: dict[str, int]
    repair: dict[str, int]
    defect_density_per_cm2: float
    sigma_margin: float
    critical_area_option: int
    area_mm2: float
    width_mm: float
    height_mm: float
    interface_area_mm2: float
    gross_dies_per_wafer: float
    hard_yield: float
    soft_yield: float
    die_yield: float
    pass_fraction: float
    defect_level: float
    raw_cost: float
    sort_cost: float
    cost_per_passed_die: float
    nre: float


@dataclass(frozen=True)
class DesignResult:
    """The full breakdown of one design, every figure from the evaluator."""

    design: str
    packaging: str
    packaging_kind: str
    currency: str
    dies: list[DieResult]
    n_dies: int
    total_die_area_mm2: float
    carrier_area_mm2: float
    package_yield: float
    manufacturing_cost_per_good_unit: float
    cost_per_good_unit: float
    breakdown: dict[str, float]
    nre: float
    improvement_spend: float
    unit_price: float
    volume: float
    revenue: float
    salvage_units: dict[str, float]
    salvage_revenue: float
    profit: float
    profit_margin: float  # profit / revenue (not the sigma margin of a die)
    breakeven_volume: float
    violations: list[str]

    def to_dict(self) -> dict:
        return asdict(self)


def design_text(result: DesignResult) -> str:
    """The one text of a design used in every table, list and legend.

    Process first, so that a cut column never hides it; every choice that tells two
    designs apart is stated (defect target, margin, critical-area option), e.g.
    ``"2x leading [compute_core x16, cache_slice x8; +1 spare compute_core] D=0.08/cm^2
    margin 3 sigma + 1x legacy [io_hub] D=0.1/cm^2"``.
    """
    items = []
    for die in result.dies:
        inner = ", ".join(
            f"{name} x{count}" if count > 1 else name for name, count in die.blocks.items()
        )
        extras = [f"+{v} spare {k}" for k, v in die.spares.items() if v]
        extras += [f"{v} repairs {k}" for k, v in die.repair.items() if v]
        if extras:
            inner += "; " + ", ".join(extras)
        text = f"{die.copies}x {die.process} [{inner}] D={die.defect_density_per_cm2:.4g}/cm^2"
        if math.isfinite(die.sigma_margin):
            text += f" margin {die.sigma_margin:g} sigma"
        if die.critical_area_option:
            text += f" critical-area option {die.critical_area_option}"
        items.append(text)
    return " + ".join(items)


def specs_from_design(design: Design) -> list[DieSpec]:
    """Die specs of an explicit design, identical die designs merged (one NRE)."""
    merged: dict[tuple, DieSpec] = {}
    for j, die in enumerate(design.die):
        spec = DieSpec(
            process=die.process,
            blocks=dict(die.blocks),
            spares=dict(die.spares),
            repair=dict(die.repair),
            copies=die.copies,
            name=die.name or f"die{j + 1}",
            defect_density_per_cm2=design.defect_targets.get(die.process),
            sigma_margin=die.sigma_margin,
            critical_area_option=die.critical_area_option,
        )
        if spec.key() in merged:
            old = merged[spec.key()]
            spec = DieSpec(**{**asdict(old), "copies": old.copies + spec.copies})
        merged[spec.key()] = spec
    return list(merged.values())


def die_batch(evaluator: Evaluator, specs: list[DieSpec], packaging_index: int) -> DieBatch:
    problem = evaluator.problem
    n, b = len(specs), evaluator.blocks.n_blocks
    instances = np.zeros((n, b), dtype=np.int64)
    spares = np.zeros((n, b), dtype=np.int64)
    repairs = np.zeros((n, b), dtype=np.int64)
    for i, spec in enumerate(specs):
        for table, target in (
            (spec.blocks, instances),
            (spec.spares, spares),
            (spec.repair, repairs),
        ):
            for name, value in table.items():
                target[i, problem.block_index(name)] = value
    packaging = problem.packaging[packaging_index]
    choices = np.array([die_choices(problem, spec) for spec in specs], dtype=float).reshape(-1, 7)
    return DieBatch(
        process=np.array([problem.process_index(s.process) for s in specs], dtype=np.int64),
        instances=instances,
        spares=spares,
        repairs=repairs,
        interface_area_mm2=evaluator.interface_area_mm2(instances, packaging),
        defect_density_per_cm2=choices[:, 0],
        wafer_cost_adder=choices[:, 1],
        improvement_one_time=choices[:, 2],
        sigma_margin=choices[:, 3],
        margin_overhead=choices[:, 4],
        sensitivity_factor=choices[:, 5],
        critical_overhead=choices[:, 6],
    )


def die_choices(problem, spec: DieSpec) -> tuple[float, ...]:
    """Numbers behind a die's choices: (D target, per-wafer adder, one-time cost,
    sigma margin, margin area overhead, sensitivity factor, critical-area overhead)."""
    process = problem.process[problem.process_index(spec.process)]
    base = process.defect_density_per_cm2
    density = base if spec.defect_density_per_cm2 is None else spec.defect_density_per_cm2
    adder = one_time = 0.0
    if density < base * (1 - 1e-12):
        curve = process.defect_reduction
        if curve is None:
            raise ValueError(f"process '{process.name}' has no defect_reduction curve")
        if curve.form == "log_ratio":
            _, one_time, adder = process.improvement_cost(density)
        else:
            match = [p for p in process.defect_targets() if abs(p[0] - density) <= 1e-9 * base]
            if not match:
                raise ValueError(
                    f"defect target {density:g} /cm^2 is not a point of process "
                    f"'{process.name}' defect_reduction table"
                )
            _, one_time, adder = match[0]
    sigma = math.inf if spec.sigma_margin is None else spec.sigma_margin
    overhead = 0.0
    if math.isfinite(sigma) and process.margin is not None:
        overhead = float(np.interp(sigma, process.margin.sigma, process.margin.area_overhead))
    sens, crit_overhead = 1.0, 0.0
    if problem.critical_area_reduction is not None:
        sens, crit_overhead = problem.critical_area_reduction.options()[spec.critical_area_option]
    return (density, adder, one_time, sigma, overhead, sens, crit_overhead)


def evaluate_specs(
    evaluator: Evaluator,
    specs: list[DieSpec],
    packaging_name: str,
    design_name: str = "design",
    source: str = "<problem>",
    requirements: Requirements | None = None,
) -> DesignResult:
    """Price one complete design given as die specs on a named packaging option.

    Its ``violations`` list the rules it breaks (:func:`design_violations`, checked
    against ``requirements``, default the file's).
    """
    problem = evaluator.problem
    g = problem.packaging_index(packaging_name)
    packaging = problem.packaging[g]
    prices = evaluator.price_dies(die_batch(evaluator, specs, g))
    where = f"design[{design_name}]"
    for i, spec in enumerate(specs):
        process = problem.process[problem.process_index(spec.process)]
        if not prices.fits_reticle[i]:
            raise ProblemError(
                source,
                f"{where}.die[{spec.name}]",
                f"die of {prices.area_mm2[i]:.1f} mm^2 ({prices.width_mm[i]:.1f} x "
                f"{prices.height_mm[i]:.1f} mm) exceeds the {process.reticle_width_mm:g} x "
                f"{process.reticle_height_mm:g} mm reticle field of process '{process.name}'; "
                "split it over more dies",
            )
    copies = np.array([[s.copies for s in specs]])
    product = evaluator.assemble(g, prices, np.arange(len(specs))[None, :], copies)
    if not product.carrier_feasible[0]:
        raise ProblemError(
            source,
            f"{where}.packaging",
            f"interposer of {product.carrier_area_mm2[0]:.0f} mm^2 exceeds the limit of "
            f"{packaging.interposer_max_area_mm2:g} mm^2 of '{packaging.name}'; "
            "use less silicon or another packaging",
        )
    n_dies = int(copies.sum())
    dies = [
        DieResult(
            name=spec.name,
            process=spec.process,
            copies=spec.copies,
            blocks=dict(spec.blocks),
            spares={k: v for k, v in spec.spares.items() if v},
            repair={k: v for k, v in spec.repair.items() if v},
            defect_density_per_cm2=float(prices.defect_density_per_cm2[i]),
            sigma_margin=float(prices.sigma_margin[i]),
            critical_area_option=spec.critical_area_option,
            area_mm2=float(prices.area_mm2[i]),
            width_mm=float(prices.width_mm[i]),
            height_mm=float(prices.height_mm[i]),
            interface_area_mm2=float(prices.interface_area_mm2[i]),
            gross_dies_per_wafer=float(prices.gross_dies_per_wafer[i]),
            hard_yield=float(np.exp(prices.log_hard_yield[i])),
            soft_yield=float(np.exp(prices.log_soft_yield[i])),
            die_yield=float(prices.die_yield[i]),
            pass_fraction=float(prices.pass_fraction[i]),
            defect_level=float(prices.defect_level[i]),
            raw_cost=float(prices.raw_cost[i]),
            sort_cost=float(prices.sort_cost[i]),
            cost_per_passed_die=float(prices.cost_per_passed_die[i]),
            nre=float(prices.nre[i]),
        )
        for i, spec in enumerate(specs)
    ]
    market = problem.market
    unit_margin = market.unit_price - float(product.manufacturing_cost_per_good_unit[0])
    profit = float(product.profit[0])
    if not product.targets_consistent[0]:
        raise ProblemError(
            source,
            f"{where}.defect_targets",
            "dies on one process use different defect-density targets; one fab line has one "
            "target, so give each process one target",
        )
    one_time = float(product.nre[0] + product.improvement_spend[0])
    result = DesignResult(
        design=design_name,
        packaging=packaging.name,
        packaging_kind=packaging.kind,
        currency=market.currency,
        dies=dies,
        n_dies=n_dies,
        total_die_area_mm2=float(product.total_die_area_mm2[0]),
        carrier_area_mm2=float(product.carrier_area_mm2[0]),
        package_yield=float(product.package_yield[0]),
        manufacturing_cost_per_good_unit=float(product.manufacturing_cost_per_good_unit[0]),
        cost_per_good_unit=float(product.cost_per_good_unit[0]),
        breakdown={name: float(getattr(product, name)[0]) for name in COST_COMPONENTS},
        nre=float(product.nre[0]),
        improvement_spend=float(product.improvement_spend[0]),
        unit_price=market.unit_price,
        volume=market.volume,
        revenue=float(product.revenue[0]),
        salvage_units={
            b.name: float(product.salvage_units[0, j]) for j, b in enumerate(market.salvage_bin)
        },
        salvage_revenue=float(product.salvage_revenue[0]),
        profit=profit,
        profit_margin=profit / float(product.revenue[0]),
        breakeven_volume=one_time / unit_margin if unit_margin > 0 else float("inf"),
        violations=[],
    )
    return replace(result, violations=design_violations(problem, result, requirements))


def design_violations(
    problem: Problem, result: DesignResult, requirements: Requirements | None = None
) -> list[str]:
    """Every rule and mandate of ``problem`` that a priced design breaks ([] if none).

    Each entry starts with the rule's place in the problem file, e.g.
    ``"constraints.max_dies: 5 dies, more than 4"``. ``requirements`` replaces the file's
    [requirements] (None: the file's own). Checked: die area within
    [min_die_area, max_die_area], each die inside its process's reticle field, the die
    count within constraints.max_dies and the packaging's max_dies, keep_together and
    keep_apart groups, the interposer within its limit, and the mandated die yield,
    sigma margin and defect level of every die. Tolerances match the solver's.
    """
    found: list[str] = []
    limits = problem.constraints
    packaging = problem.packaging[problem.packaging_index(result.packaging)]
    need = problem.requirements if requirements is None else requirements
    count = {b.name: b.count for b in problem.block}
    for die in result.dies:
        name = f"die '{die.name}'"
        if die.area_mm2 < limits.min_die_area_mm2 - 1e-9:
            found.append(
                f"constraints.min_die_area: {name} is {die.area_mm2:.1f} mm^2, below "
                f"{limits.min_die_area_mm2:g} mm^2"
            )
        if die.area_mm2 > limits.max_die_area_mm2 + 1e-9:
            found.append(
                f"constraints.max_die_area: {name} is {die.area_mm2:.1f} mm^2, above "
                f"{limits.max_die_area_mm2:g} mm^2"
            )
        process = problem.process[problem.process_index(die.process)]
        rw, rh = process.reticle_width_mm + 1e-9, process.reticle_height_mm + 1e-9
        w, h = die.width_mm, die.height_mm
        if not ((w <= rw and h <= rh) or (w <= rh and h <= rw)):
            found.append(
                f"process[{process.name}].reticle: {name} of {w:.1f} x {h:.1f} mm exceeds "
                f"the {process.reticle_width_mm:g} x {process.reticle_height_mm:g} mm field"
            )
        for group in limits.keep_together:
            if len({die.blocks.get(b, 0) / count[b] for b in group}) > 1:
                found.append(f"constraints.keep_together: {name} splits group {group}")
        for group in limits.keep_apart:
            if sum(1 for b in group if die.blocks.get(b, 0)) > 1:
                found.append(f"constraints.keep_apart: {name} joins group {group}")
        if need.min_die_yield is not None and not (
            die.die_yield >= need.min_die_yield * (1 - 1e-12)
        ):
            found.append(
                f"requirements.min_die_yield: {name} yields {100 * die.die_yield:.2f}%, "
                f"below {100 * need.min_die_yield:.2f}%"
            )
        if need.min_sigma_margin is not None:
            if not math.isfinite(die.sigma_margin):
                found.append(
                    f"requirements.min_sigma_margin: {name} has no design margin set, "
                    f"{need.min_sigma_margin:g} sigma required"
                )
            elif die.sigma_margin < need.min_sigma_margin * (1 - 1e-12):
                found.append(
                    f"requirements.min_sigma_margin: {name} has {die.sigma_margin:g} sigma, "
                    f"below {need.min_sigma_margin:g}"
                )
        if need.max_defect_level is not None and not (
            die.defect_level <= need.max_defect_level * (1 + 1e-12)
        ):
            found.append(
                f"requirements.max_defect_level: {name} has defect level "
                f"{1e6 * die.defect_level:.3g} ppm, above {1e6 * need.max_defect_level:.3g} ppm"
            )
    if result.n_dies > limits.max_dies:
        found.append(f"constraints.max_dies: {result.n_dies} dies, more than {limits.max_dies}")
    if result.n_dies > packaging.max_dies:
        found.append(
            f"packaging[{packaging.name}].max_dies: {result.n_dies} dies, more than "
            f"{packaging.max_dies}"
        )
    if (
        packaging.kind == "silicon_interposer"
        and result.carrier_area_mm2 > packaging.interposer_max_area_mm2 + 1e-9
    ):
        found.append(
            f"packaging[{packaging.name}].interposer_max_area: interposer of "
            f"{result.carrier_area_mm2:.0f} mm^2, above {packaging.interposer_max_area_mm2:g} "
            "mm^2"
        )
    return found


def evaluate_design(
    evaluator: Evaluator, design: Design, source: str = "<problem>"
) -> DesignResult:
    """Price an explicit design from the problem file."""
    return evaluate_specs(
        evaluator, specs_from_design(design), design.packaging, design.name, source
    )


def specs_from_result(result: DesignResult) -> list[DieSpec]:
    """Die specs that reproduce a priced design (to re-price it under other inputs)."""
    return [
        DieSpec(
            process=die.process,
            blocks=dict(die.blocks),
            spares=dict(die.spares),
            repair=dict(die.repair),
            copies=die.copies,
            name=die.name,
            defect_density_per_cm2=die.defect_density_per_cm2,
            sigma_margin=die.sigma_margin if math.isfinite(die.sigma_margin) else None,
            critical_area_option=die.critical_area_option,
        )
        for die in result.dies
    ]


# ---------------------------------------------------------------- designs as TOML
TOML_HEADER = (
    "# Written by dieplan. Paste under the problem file; `dieplan evaluate` then re-prices\n"
    "# each design from these choices to the figures the run reported.\n"
)


def _toml_float(x: float) -> str:
    # repr is the shortest text that parses back to the same float: at most 17
    # significant digits, an exponent below 1e-4, so within the 20-digit quantity grammar
    return repr(float(x))


def _inline(table: dict[str, int]) -> str:
    items = ", ".join(f"{toml_key(k)} = {int(v)}" for k, v in table.items() if v)
    return "{ " + items + " }" if items else "{}"


def _design_body(problem: Problem | None, result: DesignResult, name: str) -> str:
    targets = {}
    for die in result.dies:
        process = (
            problem.process[problem.process_index(die.process)] if problem is not None else None
        )
        # without a curve the base density is the only target and the file may not name one
        if process is not None and process.defect_reduction is None:
            continue
        targets.setdefault(die.process, f"{_toml_float(die.defect_density_per_cm2)} /cm^2")
    lines = [
        "[[design]]",
        f"name = {toml_string(name)}",
        f"packaging = {toml_string(result.packaging)}",
    ]
    if targets:
        pairs = ", ".join(f"{toml_key(p)} = {toml_string(d)}" for p, d in targets.items())
        lines.append(f"defect_targets = {{ {pairs} }}")
    for die in result.dies:
        lines += [
            "",
            "[[design.die]]",
            f"name = {toml_string(die.name)}",
            f"process = {toml_string(die.process)}",
            f"copies = {int(die.copies)}",
            f"blocks = {_inline(die.blocks)}",
            f"spares = {_inline(die.spares)}",
            f"repair = {_inline(die.repair)}",
        ]
        # no key means no margin modelled (no soft-yield loss), as the solver's inf
        if math.isfinite(die.sigma_margin):
            lines.append(f"sigma_margin = {_toml_float(die.sigma_margin)}")
        lines.append(f"critical_area_option = {int(die.critical_area_option)}")
    return "\n".join(lines) + "\n"


def design_toml(
    result: DesignResult, name: str | None = None, *, problem: Problem | None = None
) -> str:
    """A ``[[design]]`` TOML snippet stating every choice of a priced design.

    Appended to the problem file it came from, ``evaluate`` re-prices it to the same
    figures: numbers are written exactly (shortest round-trip text). Defect targets are
    written for every process used; with ``problem`` given, processes without a
    defect_reduction curve are left out, since their base density is the only target and
    the file may not name it.
    """
    return TOML_HEADER + "\n" + _design_body(problem, result, name or result.design)


def designs_toml(
    results: list[DesignResult],
    *,
    problem: Problem | None = None,
    prefix: str = "solved_rank",
    names: list[str] | None = None,
) -> str:
    """Designs as one paste-ready TOML text, named ``names`` or ``<prefix>1``, ``<prefix>2``..."""
    if names is None:
        names = [f"{prefix}{rank}" for rank in range(1, len(results) + 1)]
    bodies = [
        _design_body(problem, result, name) for result, name in zip(results, names, strict=True)
    ]
    return TOML_HEADER + "\n" + "\n".join(bodies)
