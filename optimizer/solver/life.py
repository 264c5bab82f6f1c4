"""The design with the most net present value over a life plan, proven.

One design (partition, processes, packaging, spares, repair, margins, targets) serves
the whole life; period k prices it with its own numbers. With c the one-time discount
and op_k(d) the operating profit of period k (revenue + salvage - volume x
manufacturing cost),

    NPV(d) = sum_k disc_k op_k(d) - c (NRE(d) + S(d)).

For any shares w_k >= 0 summing to one, NPV(d) = sum_k pi_k(d) with pi_k(d) = disc_k
op_k(d) - w_k c (NRE(d) + S(d)): the profit of period k's problem with its volume and
salvage demand scaled by disc_k (profit is linear in both) and its one-time costs by
w_k c, an ordinary problem. So sum_k max_d pi_k(d) bounds every design's NPV (each max
proven by the ordinary search), and a design better than U must have
pi_j(d) >= U - sum_{k != j} max pi_k in every period j: the search of one period j to
that ceiling lists every such design (candidate dies unpruned there, since a die
dominated in one period may not be in another), each is priced exactly over the whole
life, and the best is the optimum over the stated choices.

A design's targets are held by level: the plan scales each process's targets with its
period's density, so target level l is one choice for the whole life (its one-time cost
and per-wafer adder are the same in every period). A design must keep the file's rules
and mandates in every period.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

from optimizer.designs import DieSpec, evaluate_specs
from optimizer.errors import ProblemError
from optimizer.evaluator import Evaluator
from optimizer.invariants import InvariantViolation
from optimizer.life import LifePlan, one_time_discount, periods
from optimizer.life_value import LifeValue, life_value
from optimizer.problem import Problem
from optimizer.solver.candidates import OutOfTime, build_candidates, enumerate_contents
from optimizer.solver.search import PROFIT_RTOL, milp_search, profit_bound
from optimizer.solver.selection import Selection

# designs listed in the ceiling search before the proof is given up
MAX_LISTED = 20_000


@dataclass
class LifeSolution:
    best: LifeValue
    proven: bool
    npv_bound: float
    seconds: float
    first_period_best: LifeValue | None  # the design picked on the first period's numbers
    listed: int
    log: list[str] = field(default_factory=list)

    @property
    def gap(self) -> float:
        return max(0.0, (self.npv_bound - self.best.npv) / max(abs(self.best.npv), 1.0))


def bound_problem(problem: Problem, discount: float, one_time_factor: float) -> Problem:
    """Period ``problem`` with volume and salvage demand times ``discount`` and its
    one-time costs (target spend, package design) times ``one_time_factor`` (die NRE is
    scaled on the die prices)."""
    market = problem.market
    bins = [b.model_copy(update={"demand": b.demand * discount}) for b in market.salvage_bin]
    market = market.model_copy(update={"volume": market.volume * discount, "salvage_bin": bins})
    processes = []
    for p in problem.process:
        curve = p.defect_reduction
        if curve is None:
            processes.append(p)
            continue
        if curve.form == "log_ratio":
            curve = curve.model_copy(
                update={"one_time_per_log": curve.one_time_per_log * one_time_factor}
            )
        else:
            points = [(d, c * one_time_factor, w) for d, c, w in curve.points]
            curve = curve.model_copy(update={"points": points})
        processes.append(p.model_copy(update={"defect_reduction": curve}))
    packaging = [
        g.model_copy(update={"design_cost": g.design_cost * one_time_factor})
        for g in problem.packaging
    ]
    return problem.model_copy(
        update={"market": market, "process": processes, "packaging": packaging}
    )


def _scaled_nre(factor: float):
    def adjust(prices, *_):
        return dataclasses.replace(prices, nre=prices.nre * factor)

    return adjust


def _specs(problem: Problem, cset, sel: Selection) -> list[tuple[DieSpec, int]]:
    """A selection of one period's candidates as (die spec, target level) pairs: the
    level, not the density, is the design's choice (:func:`_in_period` reads each
    period's density of it)."""
    names = [b.name for b in problem.block]
    out = []
    for j, (c, k) in enumerate(sel.dies):
        inst = cset.instances[c]
        sigma = float(cset.prices.sigma_margin[c])
        spec = DieSpec(
            process=problem.process[int(cset.process[c])].name,
            blocks={names[b]: int(inst[b]) for b in range(len(names)) if inst[b]},
            spares={names[b]: int(v) for b, v in enumerate(cset.spares[c]) if v},
            repair={names[b]: int(v) for b, v in enumerate(cset.repairs[c]) if v},
            copies=int(k),
            name=f"die{j + 1}",
            sigma_margin=sigma if math.isfinite(sigma) else None,
            critical_area_option=int(cset.critical_option[c]),
        )
        out.append((spec, int(cset.level[c])))
    return out


def _in_period(problem: Problem, dies: list[tuple[DieSpec, int]]) -> list[DieSpec]:
    """Die specs with ``problem``'s target density of each die's level."""
    out = []
    for spec, level in dies:
        process = next(p for p in problem.process if p.name == spec.process)
        density = None if level == 0 else process.defect_targets()[level][0]
        out.append(dataclasses.replace(spec, defect_density_per_cm2=density))
    return out


def _value(plan: LifePlan, specs, packaging: str, name: str, source: str) -> LifeValue | None:
    """The design's exact life value, or None when it breaks a rule in some period."""
    broken = []

    def price(problem):
        result = evaluate_specs(
            Evaluator(problem), _in_period(problem, specs), packaging, name, source
        )
        if result.violations:
            broken.append(result.violations[0])
        return result

    try:
        value = life_value(plan, price, name)
    except ProblemError:
        return None  # cannot be built in some period (an interposer over its limit)
    return None if broken else value


def _unproven(plan, best_value, upper, first_value, start, log, source) -> LifeSolution:
    """The best design found when the time limit ended the proof."""
    if best_value is None:
        raise ProblemError(
            source,
            "life",
            "no design priced over the whole life within the time limit; allow more time",
        )
    log.append("stopped at the time limit before the proof")
    return LifeSolution(
        best=dataclasses.replace(best_value, design="life_optimum"),
        proven=False,
        npv_bound=max(upper, best_value.npv),
        seconds=time.perf_counter() - start,
        first_period_best=first_value,
        listed=0,
        log=log,
    )


def _first_period_best(
    plan: LifePlan, problem: Problem, source: str, deadline: float | None = None
) -> LifeValue | None:
    """The design the ordinary solve picks on the first period's numbers, over the life."""
    from optimizer.solver import solve

    try:
        result = solve(problem, top=1, refine=False, source=source, deadline=deadline).best
    except ProblemError:
        return None
    specs = []
    for die in result.dies:
        process = next(p for p in problem.process if p.name == die.process)
        targets = [d for d, _, _ in process.defect_targets()]
        level = min(range(len(targets)), key=lambda i: abs(targets[i] - die.defect_density_per_cm2))
        sigma = die.sigma_margin
        spec = DieSpec(
            process=die.process,
            blocks=dict(die.blocks),
            spares={k: v for k, v in die.spares.items() if v},
            repair={k: v for k, v in die.repair.items() if v},
            copies=die.copies,
            name=die.name,
            sigma_margin=sigma if sigma is not None and math.isfinite(sigma) else None,
            critical_area_option=die.critical_area_option,
        )
        specs.append((spec, level))
    return _value(plan, specs, result.packaging, f"best_for_{plan.labels[0]}", source)


def solve_life(
    plan: LifePlan, time_limit: float | None = None, source: str = "<problem>"
) -> LifeSolution:
    """The design with the most NPV over ``plan``, with its bound (see the docstring)."""
    start = time.perf_counter()
    deadline = None if time_limit is None else start + time_limit
    items = periods(plan.base, plan)
    n = len(items)
    c = one_time_discount(plan)
    log: list[str] = []
    share = c / n
    # first, the design picked on the first period's numbers: a design to report even
    # when the time limit ends the proof (half the time at most)
    half = None if deadline is None else start + 0.5 * (deadline - start)
    first_value = _first_period_best(plan, items[0].problem, source, half)
    bounds, evaluators, candidates, found = [], [], [], []
    timed_out = False
    for period in items:
        problem = bound_problem(period.problem, period.discount, share)
        evaluator = Evaluator(problem)
        try:
            if timed_out:
                raise OutOfTime
            contents = enumerate_contents(evaluator)
            cands = {
                g: build_candidates(
                    evaluator, g, contents, adjust=_scaled_nre(share), deadline=deadline
                )
                for g in range(len(problem.packaging))
            }
            best = milp_search(evaluator, top=1, candidates=cands, deadline=deadline)
        except OutOfTime:
            # out of time while pricing this period's dies: nothing is known of it
            timed_out = True
            bounds.append(math.inf)
            evaluators.append(evaluator)
            candidates.append(None)
            found.append(None)
            continue
        bounds.append(profit_bound(best, evaluator) if best.proven else math.inf)
        evaluators.append(evaluator)
        candidates.append(cands)
        found.append(best)
    upper = math.fsum(bounds)
    # every period's own best design is a design for the life
    incumbent, best_value = -math.inf, None
    for k, outcome in enumerate(found):
        if outcome is None or not outcome.ranked:
            continue
        sel = outcome.ranked[0].selection
        problem = evaluators[k].problem
        specs = _specs(problem, candidates[k][sel.packaging_index], sel)
        packaging = problem.packaging[sel.packaging_index].name
        value = _value(plan, specs, packaging, f"best_{items[k].label}", source)
        if value is not None and value.npv > incumbent:
            incumbent, best_value = value.npv, value
    # the design one would pick on the first period's numbers alone (full one-time costs)
    if first_value is not None and first_value.npv > incumbent:
        incumbent, best_value = first_value.npv, first_value
    # the period that weighs most lists every design that could beat the incumbent
    j = max(range(n), key=lambda k: items[k].discount * items[k].volume)
    if timed_out or (deadline is not None and time.perf_counter() > deadline):
        return _unproven(plan, best_value, upper, first_value, start, log, source)
    evaluator = evaluators[j]
    problem = evaluator.problem
    contents = enumerate_contents(evaluator)
    try:
        unpruned = {
            g: build_candidates(
                evaluator, g, contents, prune=False, adjust=_scaled_nre(share), deadline=deadline
            )
            for g in range(len(problem.packaging))
        }
    except OutOfTime:
        return _unproven(plan, best_value, upper, first_value, start, log, source)
    revenue = problem.market.unit_price * problem.market.volume
    slack = PROFIT_RTOL * max(abs(upper), 1.0)
    floor = incumbent - (upper - bounds[j]) - slack
    ceiling = revenue - floor if math.isfinite(floor) else math.inf
    listed = milp_search(evaluator, top=1, candidates=unpruned, ceiling=ceiling, deadline=deadline)
    proven = listed.proven and all(math.isfinite(b) for b in bounds) and best_value is not None
    sels = sorted(
        (s for s, total in listed.priced.items() if total <= ceiling),
        key=lambda s: listed.priced[s],
    )
    if len(sels) > MAX_LISTED:
        proven, sels = False, sels[:MAX_LISTED]
    for sel in sels:
        if deadline is not None and time.perf_counter() > deadline:
            proven = False
            break
        specs = _specs(problem, unpruned[sel.packaging_index], sel)
        packaging = problem.packaging[sel.packaging_index].name
        value = _value(plan, specs, packaging, "life_optimum", source)
        if value is not None and value.npv > incumbent:
            incumbent, best_value = value.npv, value
    if best_value is None:
        raise ProblemError(
            source, "life", "no design keeps the file's rules in every period of the life"
        )
    best_value = dataclasses.replace(best_value, design="life_optimum")
    if best_value.npv > upper + 1e-9 * abs(upper) + 1e-6:
        raise InvariantViolation(f"life: NPV {best_value.npv!r} above its bound {upper!r}")
    log.append(
        f"bound {upper:.10g} from {n} periods; {len(sels)} designs listed in {items[j].label}"
    )
    return LifeSolution(
        best=best_value,
        proven=proven,
        npv_bound=best_value.npv if proven else max(upper, best_value.npv),
        seconds=time.perf_counter() - start,
        first_period_best=first_value,
        listed=len(sels),
        log=log,
    )


__all__ = ["LifeSolution", "bound_problem", "solve_life"]
