"""Exploration of a file with a ``[life]`` plan: the objective is net present value.

Every solve is a proven life solve (:func:`optimizer.solver.life.solve_life`). The
design it finds is labelled as a single-product winner is (its kind and summary from
:mod:`optimizer.explore.fixed`), read off its first period's price, so crossovers between
designs are found the same way. A design held fixed over the life
(:class:`LifeDesign`) keeps its dies, processes, copies, spares, repairs, margins and
packaging, and its defect-density targets *by level*: the plan scales a process's targets
with each period's density, so one level is one choice for the whole life, and it stays
that choice when an input moves the densities. It is priced over a changed plan by the
code the life solver prices with; where it breaks a rule in some period, or cannot be
built, it has no NPV (NaN).

Tables show cost per good unit averaged over the life's units (:func:`life_average`):
each period's manufacturing cost weighted by its volume, plus the one-time costs over
the life's volume; die and package yields are the first period's.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from optimizer.designs import DesignResult, DieSpec
from optimizer.explore.fixed import PriceTask, ScenarioPrices, design_kind, design_summary
from optimizer.explore.life_paths import (
    AnyPath,
    LifeStudy,
    apply_life_values,
    parse_life_file_path,
    plan_with,
    read_life_value,
)
from optimizer.explore.objective import Objective, Winner
from optimizer.explore.sweep import (
    Crossing,
    CrossingTask,
    ScenarioOutcome,
    SolveTask,
    crossing_of,
    scenario_source,
)
from optimizer.invariants import InvariantViolation
from optimizer.life import LifePlan, life_plan
from optimizer.life_value import LifeValue
from optimizer.problem import Problem

# a die's density in the first period must be one of its process's target levels there
_LEVEL_RTOL = 1e-9


def _targets_once(plan: LifePlan) -> bool:
    """Whether a design's target levels are one choice for the life (the default), not
    bought anew by each period."""
    return getattr(plan, "targets", "once") == "once"


def _level(problem: Problem, process: str, density: float) -> int:
    """The target level of ``density`` on ``process`` (0: the base density)."""
    targets = [d for d, _, _ in problem.process[problem.process_index(process)].defect_targets()]
    level = min(range(len(targets)), key=lambda i: abs(targets[i] - density))
    if abs(targets[level] - density) > _LEVEL_RTOL * max(density, 1e-300):
        raise InvariantViolation(
            f"life exploration: density {density!r} on {process} is no target level ({targets!r})"
        )
    return level


@dataclass(frozen=True)
class LifeDesign:
    """A design held fixed over a life: packaging, die specs and target levels."""

    packaging: str
    specs: tuple[DieSpec, ...]  # densities unset: ``levels`` hold the targets
    levels: tuple[int, ...]
    kind: str
    summary: str
    levels_per_period: bool = False  # each period picks its own levels: not the design's

    @classmethod
    def from_value(cls, value: LifeValue, plan: LifePlan) -> LifeDesign:
        """Keep a design priced over ``plan`` (its first period's result says which)."""
        result = value.periods[0].result
        problem = plan.problems[0]
        specs, levels = [], []
        for die in result.dies:
            sigma = die.sigma_margin
            specs.append(
                DieSpec(
                    process=die.process,
                    blocks=dict(die.blocks),
                    spares={k: v for k, v in die.spares.items() if v},
                    repair={k: v for k, v in die.repair.items() if v},
                    copies=die.copies,
                    name=die.name,
                    sigma_margin=sigma if math.isfinite(sigma) else None,
                    critical_area_option=die.critical_area_option,
                )
            )
            levels.append(_level(problem, die.process, die.defect_density_per_cm2))
        return cls(
            result.packaging,
            tuple(specs),
            tuple(levels),
            design_kind(result),
            design_summary(result),
            not _targets_once(plan),
        )

    def key(self) -> tuple:
        """Identity of the design: its dies with their target levels, and packaging (the
        densities of a level move with the inputs; the choice does not)."""
        held = zip(self.specs, self.levels, strict=True)
        own = (lambda level: None) if self.levels_per_period else (lambda level: level)
        dies = sorted((spec.key(), own(level), spec.copies) for spec, level in held)
        return (self.packaging, tuple(dies))

    def price(self, plan: LifePlan, source: str, name: str = "held") -> LifeValue | None:
        """The design over ``plan``; None where it breaks a rule in some period or cannot
        be built (the life solver's own test)."""
        from optimizer.solver.life import _value

        if any(
            level >= len(p.defect_targets())
            for spec, level in zip(self.specs, self.levels, strict=True)
            for p in plan.base.process
            if p.name == spec.process
        ):
            return None  # the process offers fewer target levels under these inputs
        dies = list(zip(self.specs, self.levels, strict=True))
        return _value(plan, dies, self.packaging, name, source)


def life_average(value: LifeValue, plan: LifePlan) -> DesignResult:
    """The first period's result with its money figures over the whole life: cost per
    good unit averaged over the life's units (what is paid once, over the life's
    volume), revenue and salvage summed, ``profit`` the NPV. Die and package yields,
    areas and the design itself are the first period's."""
    first = value.periods[0].result
    volume = math.fsum(p.volume for p in value.periods)

    def mean(get) -> float:
        return math.fsum(p.volume * get(p.result) for p in value.periods) / volume

    # each period's result charges the one-time costs in full; they are paid once
    once = {"nre_per_unit": first.nre}
    if _targets_once(plan):
        once["improvement_per_unit"] = first.improvement_spend
    breakdown = {
        c: once[c] / volume if c in once else mean(lambda r, c=c: r.breakdown.get(c, 0.0))
        for c in first.breakdown
    }
    manufacturing = mean(lambda r: r.manufacturing_cost_per_good_unit)
    one_time_per_unit = breakdown.get("nre_per_unit", 0.0) + breakdown.get(
        "improvement_per_unit", 0.0
    )
    revenue = math.fsum(p.result.revenue for p in value.periods)
    salvage = {
        name: math.fsum(p.result.salvage_units.get(name, 0.0) for p in value.periods)
        for name in first.salvage_units
    }
    return dataclasses.replace(
        first,
        design=value.design,
        manufacturing_cost_per_good_unit=manufacturing,
        cost_per_good_unit=manufacturing + one_time_per_unit,
        breakdown=breakdown,
        unit_price=revenue / volume,
        volume=volume,
        revenue=revenue,
        salvage_units=salvage,
        salvage_revenue=math.fsum(p.result.salvage_revenue for p in value.periods),
        profit=value.npv,
        profit_margin=math.nan,
        breakeven_volume=math.nan,
    )


# ---------------------------------------------------------------- pricing held designs
class LifePricer:
    """NPV of held :class:`LifeDesign` objects in scenarios that set ``paths``."""

    def __init__(
        self, data: dict, source: str, designs: Sequence[LifeDesign], paths: Sequence[AnyPath]
    ):
        self.data, self.source = data, source
        self.designs, self.paths = list(designs), list(paths)

    def price(self, values: np.ndarray) -> ScenarioPrices:
        """NPV and life-average cost per good unit, (n scenarios, designs); NaN where a
        design has no NPV."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        n, k = values.shape[0], len(self.designs)
        npv, cost = np.full((n, k), np.nan), np.full((n, k), np.nan)
        for i, row in enumerate(values):
            plan = plan_with(self.data, list(zip(self.paths, row, strict=True)), self.source)
            for j, design in enumerate(self.designs):
                value = design.price(plan, self.source, f"held{j + 1}")
                if value is not None:
                    npv[i, j] = value.npv
                    cost[i, j] = life_average(value, plan).cost_per_good_unit
        return ScenarioPrices(npv, cost, np.isfinite(npv))


def price_life_scenarios(task: PriceTask) -> tuple[np.ndarray, np.ndarray]:
    """(NPV, life-average cost per good unit), each (scenarios, designs)."""
    paths = [parse_life_file_path(p) for p in task.paths]
    values = np.array(task.values, dtype=float).reshape(len(task.values), len(paths))
    prices = LifePricer(task.data, task.source, task.designs, paths).price(values)
    return prices.profit, prices.cost_per_good_unit


# ---------------------------------------------------------------- solving a scenario
def _outcome(values: tuple[float, ...], solution, plan: LifePlan) -> ScenarioOutcome:
    best = solution.best
    average = life_average(best, plan)
    return ScenarioOutcome(
        values=tuple(values),
        design=LifeDesign.from_value(best, plan),
        profit=best.npv,
        cost_per_good_unit=average.cost_per_good_unit,
        manufacturing_cost_per_good_unit=average.manufacturing_cost_per_good_unit,
        nre=best.one_time,
        package_yield=average.package_yield,
        n_dies=average.n_dies,
        proven_optimal=solution.proven,
        gap=solution.gap,
        extra=(("payback", best.payback), ("npv_bound", solution.npv_bound)),
    )


def solve_life_scenario(task: SolveTask) -> ScenarioOutcome:
    """The life optimum of one scenario (module-level, so worker processes can run it)."""
    from optimizer.solver.life import solve_life

    paths = [parse_life_file_path(p) for p in task.paths]
    source = scenario_source(task.source, task.paths, task.values)
    plan = plan_with(task.data, list(zip(paths, task.values, strict=True)), source)
    solution = solve_life(plan, time_limit=task.time_limit, source=source)
    return _outcome(task.values, solution, plan)


def locate_life_crossing(task: CrossingTask) -> Crossing:
    """Where two held designs earn the same NPV along one axis."""
    if task.integer:
        return Crossing(float("nan"), float("nan"), "grid")
    paths = [parse_life_file_path(p) for p in (task.path, *task.fixed_paths)]
    return crossing_of(LifePricer(task.data, task.source, [task.before, task.after], paths), task)


# ---------------------------------------------------------------- the objective
def _validate_life(data: dict, assignments, source: str) -> LifePlan:
    return life_plan(apply_life_values(data, assignments), source)


def _read_life_value(study: LifeStudy, path: AnyPath) -> float | None:
    return read_life_value(study.plan, study.data, path)


def _life_winner(label: str, value: LifeValue, plan: LifePlan, proven: bool, gap: float, bound):
    from optimizer.life_report import life_dict

    return Winner(
        label,
        life_average(value, plan),
        LifeDesign.from_value(value, plan),
        value.npv,
        proven,
        gap,
        extra={"payback": value.payback, "npv_bound": bound, "gap": gap},
        record=life_dict(value),
    )


def _life_winners(
    study: LifeStudy, top: int, method: str, time_limit: float | None
) -> list[Winner]:
    """The life optimum and, when another design, the one picked on the first period's
    numbers alone (what planning for the life changes). ``method`` is the life solver's
    own; ``top`` caps the list."""
    from optimizer.solver.life import solve_life

    plan = study.plan
    solution = solve_life(plan, time_limit=time_limit, source=study.source)
    winners = [
        _life_winner(
            "life optimum", solution.best, plan, solution.proven, solution.gap, solution.npv_bound
        )
    ]
    first = solution.first_period_best
    if first is not None and top > 1:
        pick = _life_winner(
            f"best on {plan.labels[0]}'s numbers", first, plan, False, math.nan, math.nan
        )
        if pick.design.key() != winners[0].design.key():
            winners.append(pick)
    return winners[:top]


NPV = Objective(
    name="npv",
    words="net present value",
    solve_scenario=solve_life_scenario,
    locate_crossing=locate_life_crossing,
    price_scenarios=price_life_scenarios,
    pricer=LifePricer,
    validate=_validate_life,
    read_value=_read_life_value,
    winners=_life_winners,
    single_period=False,
)


__all__ = [
    "NPV",
    "LifeDesign",
    "LifePricer",
    "life_average",
    "locate_life_crossing",
    "price_life_scenarios",
    "solve_life_scenario",
]
