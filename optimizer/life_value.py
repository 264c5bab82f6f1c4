"""A fixed design priced over a product's life: period by period, then as present value.

Each period's problem (:func:`optimizer.life.periods`) prices the design exactly with the
evaluator. The period's cash flow is its operating profit: revenue + salvage revenue -
volume x manufacturing cost, i.e. the evaluator's profit plus the NRE and one-time
yield spend it charged (those are paid once, at the plan's one-time point). With
``targets = "per_period"`` a period's yield spend stays in its cash flow; only the NRE
is paid once. The net
present value discounts each cash flow at its period's end and the one-time costs at
their own point (:func:`optimizer.life.plan_npv`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from optimizer.designs import DesignResult, evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.invariants import InvariantViolation
from optimizer.life import LifePlan, one_time_discount, periods, plan_npv, plan_payback


@dataclass(frozen=True)
class PeriodValue:
    """One period of a design's life."""

    label: str
    volume: float
    unit_price: float
    result: DesignResult  # the design priced on the period's problem
    cash_flow: float  # operating profit (no NRE, no one-time spend)
    discount: float
    cumulative: float  # discounted cash flows to this period's end, one-time costs included


@dataclass(frozen=True)
class LifeValue:
    """A design over the whole life."""

    design: str
    periods: list[PeriodValue]
    one_time: float  # NRE + one-time yield spend (NRE only with targets bought per period)
    one_time_discount: float
    npv: float
    payback: str | None  # label of the first period whose cumulative value is >= 0

    @property
    def die_yields(self) -> list[list[float]]:
        return [[d.die_yield for d in p.result.dies] for p in self.periods]


def design_life_value(plan: LifePlan, design_name: str, source: str = "<problem>") -> LifeValue:
    """The named [[design]] of the file priced over every period of ``plan``."""

    def price(problem):
        return evaluate_design(Evaluator(problem), problem.design_named(design_name), source)

    return life_value(plan, price, design_name)


def life_value(plan: LifePlan, price, name: str) -> LifeValue:
    """A design over the life, ``price(period_problem) -> DesignResult`` pricing it in
    one period."""
    rows: list[tuple] = []
    one_time = None
    # with targets bought per period, a period's target spend is in its own cash flow
    per_period = plan.targets == "per_period"
    for period in periods(plan.base, plan):
        problem = period.problem
        result = price(problem)
        spent = result.nre + (0.0 if per_period else result.improvement_spend)
        if one_time is None:
            one_time = spent
        elif not math.isclose(spent, one_time, rel_tol=1e-12, abs_tol=1e-6):
            # the plan keeps one-time costs equal in every period (targets scale with D)
            raise InvariantViolation(
                f"life: design '{name}' pays {spent!r} once in {period.label}, "
                f"{one_time!r} in the first period"
            )
        rows.append((period, result, result.profit + spent))
    cash = [c for _, _, c in rows]
    npv = plan_npv(plan, cash, one_time)
    factor = one_time_discount(plan)
    paid_at = plan.one_time_period - 1  # paid at the start of this period (0-based)
    out = []
    running = 0.0
    for k, (period, result, flow) in enumerate(rows):
        if k == paid_at:
            running -= one_time * factor
        running += flow * period.discount
        out.append(
            PeriodValue(
                period.label,
                period.volume,
                period.problem.market.unit_price,
                result,
                flow,
                period.discount,
                running,
            )
        )
    if not math.isclose(running, npv, rel_tol=1e-9, abs_tol=1e-6):
        raise InvariantViolation(f"life: cumulative value {running!r} differs from NPV {npv!r}")
    back = plan_payback(plan, cash, one_time)
    return LifeValue(
        name,
        out,
        one_time,
        factor,
        npv,
        None if back is None else plan.labels[back],
    )


__all__ = ["LifeValue", "PeriodValue", "design_life_value", "life_value"]
