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
and per-wafer adder are the same in every period). With ``targets = "per_period"`` each
period buys its own level and pays for it in its own cash flow: pi_k(d, l_k) then
carries disc_k S(l_k), NPV(d) = sum_k max_l pi_k(d, l), and the same bound and listing
hold with the level free in every period. A design must keep the file's rules and
mandates in every period.

The decision table over the life repeats the proof within each architecture (packaging,
die count): per-period bounds of that architecture, then the listing to its own best.
"""

from __future__ import annotations

import dataclasses
import itertools
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
from optimizer.solver import progress
from optimizer.solver.candidates import OutOfTime, build_candidates, enumerate_contents
from optimizer.solver.search import PROFIT_RTOL, milp_search, profit_bound
from optimizer.solver.selection import Selection

# designs listed in the ceiling search before the proof is given up
MAX_LISTED = 20_000
# an architecture row's searches get at least this many seconds of the table's time
ROW_FLOOR = 0.5


@dataclass(frozen=True)
class LifeRow:
    """The design with the most NPV of one architecture (packaging, die count)."""

    packaging: str
    n_dies: int
    value: LifeValue | None
    proven: bool  # best within its architecture
    npv_bound: float  # no design of this architecture is worth more
    optimum: bool = False
    reason: str = ""  # why the row has no design

    @property
    def label(self) -> str:
        return f"{self.packaging}, {'1 die' if self.n_dies == 1 else f'{self.n_dies} dies'}"

    @property
    def npv(self) -> float:
        return self.value.npv if self.value is not None else math.nan

    @property
    def gap(self) -> float:
        if self.value is None:
            return math.nan
        return max(0.0, (self.npv_bound - self.npv) / max(abs(self.npv), 1.0))


@dataclass
class LifeSolution:
    best: LifeValue
    proven: bool
    npv_bound: float
    seconds: float
    first_period_best: LifeValue | None  # the design picked on the first period's numbers
    listed: int
    log: list[str] = field(default_factory=list)
    rows: list[LifeRow] = field(default_factory=list)  # the decision table, best first

    @property
    def gap(self) -> float:
        return max(0.0, (self.npv_bound - self.best.npv) / max(abs(self.best.npv), 1.0))


def bound_problem(
    problem: Problem, discount: float, one_time_factor: float, target_factor: float | None = None
) -> Problem:
    """Period ``problem`` with volume and salvage demand times ``discount``, its package
    design cost times ``one_time_factor`` and its target spend times ``target_factor``
    (default ``one_time_factor``; die NRE is scaled on the die prices)."""
    target_factor = one_time_factor if target_factor is None else target_factor
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
                update={"one_time_per_log": curve.one_time_per_log * target_factor}
            )
        else:
            points = [(d, c * target_factor, w) for d, c, w in curve.points]
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


class LifePricer:
    """Exact life values of designs, each design priced once.

    With targets bought once a design is its dies, their target levels and its
    packaging; with targets bought per period the levels are not part of the design:
    each period takes, per process, the level that earns most there while keeping the
    rules (the periods' costs are separate, so the choices are too).
    """

    def __init__(self, plan: LifePlan, source: str = "<problem>"):
        self.plan = plan
        self.source = source
        self.per_period = plan.targets == "per_period"
        self._evaluators = {id(p): Evaluator(p) for p in plan.problems}
        self._values: dict[tuple, LifeValue | None] = {}

    def key(self, dies: list[tuple[DieSpec, int]], packaging: str) -> tuple:
        return (
            packaging,
            frozenset(
                (spec.key(), spec.copies, None if self.per_period else level)
                for spec, level in dies
            ),
        )

    @property
    def values(self) -> dict[tuple, LifeValue | None]:
        """Every design priced so far (None: it breaks a rule in some period)."""
        return self._values

    def value(self, dies: list[tuple[DieSpec, int]], packaging: str, name: str) -> LifeValue | None:
        """The design's exact life value, or None when it breaks a rule in some period."""
        key = self.key(dies, packaging)
        if key not in self._values:
            self._values[key] = self._price(dies, packaging)
        found = self._values[key]
        return None if found is None else dataclasses.replace(found, design=name)

    def _price(self, dies, packaging: str) -> LifeValue | None:
        broken = []

        def price(problem):
            evaluator = self._evaluators[id(problem)]
            results = [
                evaluate_specs(
                    evaluator, _in_period(problem, chosen), packaging, "design", self.source
                )
                for chosen in self._level_choices(problem, dies)
            ]
            kept = [r for r in results if not r.violations]
            if not kept:
                broken.append(results[0].violations[0])
                return results[0]
            return max(kept, key=lambda r: r.profit)

        try:
            value = life_value(self.plan, price, "design")
        except ProblemError:
            return None  # cannot be built in some period (an interposer over its limit)
        return None if broken else value

    def _level_choices(self, problem: Problem, dies):
        """The dies with their own levels, or, per period, with every level per process."""
        if not self.per_period:
            return [dies]
        processes = sorted({spec.process for spec, _ in dies})
        counts = [
            len(next(p for p in problem.process if p.name == name).defect_targets())
            for name in processes
        ]
        choices = []
        for levels in itertools.product(*(range(n) for n in counts)):
            level_of = dict(zip(processes, levels, strict=True))
            choices.append([(spec, level_of[spec.process]) for spec, _ in dies])
        return choices


def _value(plan: LifePlan, specs, packaging: str, name: str, source: str) -> LifeValue | None:
    """The design's exact life value, or None when it breaks a rule in some period."""
    return LifePricer(plan, source).value(specs, packaging, name)


def _first_period_best(
    pricer: LifePricer, problem: Problem, source: str, deadline: float | None = None
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
    return pricer.value(specs, result.packaging, f"best_for_{pricer.plan.labels[0]}")


class _LifeSearch:
    """Per-period bound problems of a plan, their searches, and the listing."""

    def __init__(self, plan: LifePlan, pricer: LifePricer, source: str):
        self.plan, self.pricer, self.source = plan, pricer, source
        self.items = periods(plan.base, plan)
        n = len(self.items)
        self.share = one_time_discount(plan) / n
        self.evaluators: list[Evaluator] = []
        self.candidates: list[dict | None] = []
        for period in self.items:
            targets = period.discount if pricer.per_period else self.share
            problem = bound_problem(period.problem, period.discount, self.share, targets)
            self.evaluators.append(Evaluator(problem))
            self.candidates.append(None)
        # the period that weighs most lists the designs
        self.heaviest = max(range(n), key=lambda k: self.items[k].discount * self.items[k].volume)
        self._unpruned: dict | None = None

    def price_candidates(self, k: int, deadline: float | None) -> dict:
        if self.candidates[k] is None:
            evaluator = self.evaluators[k]
            contents = enumerate_contents(evaluator)
            self.candidates[k] = {
                g: build_candidates(
                    evaluator, g, contents, adjust=_scaled_nre(self.share), deadline=deadline
                )
                for g in range(len(evaluator.problem.packaging))
            }
        return self.candidates[k]

    def unpruned(self, deadline: float | None) -> dict:
        if self._unpruned is None:
            evaluator = self.evaluators[self.heaviest]
            contents = enumerate_contents(evaluator)
            self._unpruned = {
                g: build_candidates(
                    evaluator,
                    g,
                    contents,
                    prune=False,
                    adjust=_scaled_nre(self.share),
                    deadline=deadline,
                )
                for g in range(len(evaluator.problem.packaging))
            }
        return self._unpruned

    def value_of(self, k: int, cands: dict, sel: Selection, name: str) -> LifeValue | None:
        problem = self.evaluators[k].problem
        specs = _specs(problem, cands[sel.packaging_index], sel)
        packaging = problem.packaging[sel.packaging_index].name
        return self.pricer.value(specs, packaging, name)

    def bounds(
        self, deadline, architecture=None, what: str = "the life"
    ) -> tuple[list[float], list[LifeValue]]:
        """Each period's proven bound (inf where unknown) and each period's best design
        valued over the life, within ``architecture`` if given."""
        bounds: list[float] = []
        found: list[LifeValue] = []
        for k in range(len(self.items)):
            progress.stage(f"{what}: bounding period {self.items[k].label} of {len(self.items)}")
            try:
                if deadline is not None and time.perf_counter() > deadline:
                    raise OutOfTime
                with progress.inner_searches():
                    cands = self.price_candidates(k, deadline)
                    best = milp_search(
                        self.evaluators[k],
                        top=1,
                        candidates=cands,
                        deadline=deadline,
                        architecture=architecture,
                        dp_seeds=False,
                    )
            except OutOfTime:
                bounds.append(math.inf)
                continue
            bounds.append(profit_bound(best, self.evaluators[k]) if best.proven else math.inf)
            if best.ranked:
                value = self.value_of(k, cands, best.ranked[0].selection, "design")
                if value is not None:
                    found.append(value)
        return bounds, found

    def listing(
        self, bounds: list[float], incumbent: float, deadline, architecture=None, what="the life"
    ) -> tuple[list[LifeValue], bool]:
        """Every design that could beat ``incumbent`` over the life, valued; and whether
        the list is known to be complete."""
        j = self.heaviest
        evaluator = self.evaluators[j]
        problem = evaluator.problem
        upper = math.fsum(bounds)
        revenue = problem.market.unit_price * problem.market.volume
        slack = PROFIT_RTOL * max(abs(upper), 1.0)
        floor = incumbent - (upper - bounds[j]) - slack
        ceiling = revenue - floor if math.isfinite(floor) else math.inf
        progress.stage(
            f"{what}: listing every design that could do better, in {self.items[j].label}"
        )
        with progress.inner_searches():
            unpruned = self.unpruned(deadline)
            listed = milp_search(
                evaluator,
                top=1,
                candidates=unpruned,
                ceiling=ceiling,
                deadline=deadline,
                architecture=architecture,
            )
        complete = listed.proven and all(math.isfinite(b) for b in bounds)
        sels = sorted(
            (s for s, total in listed.priced.items() if total <= ceiling),
            key=lambda s: listed.priced[s],
        )
        if len(sels) > MAX_LISTED:
            complete, sels = False, sels[:MAX_LISTED]
        progress.stage(f"{what}: pricing {len(sels)} listed designs over every period")
        values = []
        for sel in sels:
            if deadline is not None and time.perf_counter() > deadline:
                complete = False
                break
            value = self.value_of(j, unpruned, sel, "design")
            if value is not None:
                values.append(value)
        return values, complete


def _best(values) -> LifeValue | None:
    values = [v for v in values if v is not None]
    return max(values, key=lambda v: v.npv) if values else None


def _architecture(value: LifeValue) -> tuple[str, int]:
    result = value.periods[0].result
    return result.packaging, result.n_dies


def solve_life(
    plan: LifePlan,
    time_limit: float | None = None,
    source: str = "<problem>",
    table: bool = False,
    table_time: float | None = None,
) -> LifeSolution:
    """The design with the most NPV over ``plan``, with its bound (see the docstring);
    with ``table``, also the best design of every architecture over the life, each
    proven within it (``table_time`` seconds for those, unlimited when None, and never
    past the time limit; a row still open then carries its bound)."""
    start = time.perf_counter()
    deadline = None if time_limit is None else start + time_limit
    pricer = LifePricer(plan, source)
    search = _LifeSearch(plan, pricer, source)
    items = search.items
    log: list[str] = []
    # first, the design picked on the first period's numbers: a design to report even
    # when the time limit ends the proof (half the time at most)
    half = None if deadline is None else start + 0.5 * (deadline - start)
    progress.begin()
    progress.stage(f"the design picked on {items[0].label}'s numbers alone")
    with progress.inner_searches():
        first_value = _first_period_best(pricer, items[0].problem, source, half)
    bounds, found = search.bounds(deadline)
    upper = math.fsum(bounds)
    # every period's own best design, and the first period's pick, are designs for the life
    best_value = _best([*found, first_value])
    incumbent = best_value.npv if best_value is not None else -math.inf
    if best_value is not None:
        progress.found(best_value.npv)
    progress.bounded(upper)
    if any(b == -math.inf for b in bounds):
        # a period where no design keeps the rules (volume and one-time scaling leave
        # the rules as they are): no design keeps them over the life
        raise ProblemError(
            source, "life", "no design keeps the file's rules in every period of the life"
        )
    timed_out = not all(math.isfinite(b) for b in bounds)
    listed: list[LifeValue] = []
    proven = False
    if not timed_out and (deadline is None or time.perf_counter() <= deadline):
        try:
            listed, proven = search.listing(bounds, incumbent, deadline)
        except OutOfTime:
            listed, proven = [], False
    best_value = _best([best_value, *listed])
    if best_value is None:
        if timed_out or not proven:
            raise ProblemError(
                source,
                "life",
                "no design priced over the whole life within the time limit; allow more time",
            )
        raise ProblemError(
            source, "life", "no design keeps the file's rules in every period of the life"
        )
    proven = proven and best_value is not None
    if not proven:
        log.append("stopped at the time limit before the proof")
    best_value = dataclasses.replace(best_value, design="life_optimum")
    if best_value.npv > upper + 1e-9 * abs(upper) + 1e-6:
        raise InvariantViolation(f"life: NPV {best_value.npv!r} above its bound {upper!r}")
    log.append(
        f"bound {upper:.10g} from {len(items)} periods; {len(listed)} designs listed in "
        f"{items[search.heaviest].label}"
    )
    solution = LifeSolution(
        best=best_value,
        proven=proven,
        npv_bound=best_value.npv if proven else max(upper, best_value.npv),
        seconds=time.perf_counter() - start,
        first_period_best=first_value,
        listed=len(listed),
        log=log,
    )
    progress.settle(solution.best.npv, solution.npv_bound, solution.gap)
    if table:
        ends = [time.perf_counter() + table_time] if table_time is not None else []
        table_deadline = min([*ends, *([deadline] if deadline is not None else [])], default=None)
        solution.rows = _life_table(search, solution, table_deadline)
        solution.seconds = time.perf_counter() - start
    progress.finish()
    return solution


def _life_table(search: _LifeSearch, solution: LifeSolution, deadline) -> list[LifeRow]:
    """The best design of every architecture over the life, best NPV first."""
    problem = search.evaluators[0].problem
    optimum = _architecture(solution.best)
    pairs = [
        (g, n)
        for g, packaging in enumerate(problem.packaging)
        for n in range(1, min(packaging.max_dies, problem.constraints.max_dies) + 1)
    ]
    # the best design of each architecture priced so far seeds its row
    known: dict[tuple[str, int], LifeValue] = {}
    for value in search.pricer.values.values():
        if value is None:
            continue
        arch = _architecture(value)
        if arch not in known or value.npv > known[arch].npv:
            known[arch] = value
    rows = []
    for index, (g, n) in enumerate(pairs):
        name = problem.packaging[g].name
        if (name, n) == optimum:
            rows.append(LifeRow(name, n, solution.best, solution.proven, solution.npv_bound, True))
            continue
        row_deadline = None
        if deadline is not None:
            left = max(deadline - time.perf_counter(), 0.0)
            row_deadline = time.perf_counter() + max(left / (len(pairs) - index), ROW_FLOOR)
        rows.append(_row(search, g, n, known.get((name, n)), row_deadline))
    for row in rows:
        # no architecture is worth more than the proven optimum
        if (
            solution.proven
            and row.value is not None
            and row.npv > solution.best.npv + (1e-9 * abs(solution.best.npv) + 1e-6)
        ):
            raise InvariantViolation(
                f"life table: row '{row.label}' worth {row.npv!r}, above the optimum"
            )
    return sorted(rows, key=lambda r: (r.value is None, -r.npv if r.value else 0.0, r.n_dies))


def _row(search: _LifeSearch, g: int, n: int, seed: LifeValue | None, deadline) -> LifeRow:
    name = search.evaluators[0].problem.packaging[g].name
    try:
        what = f"decision table, {name} with {n} dies"
        bounds, found = search.bounds(deadline, architecture=(g, n), what=what)
    except OutOfTime:
        return LifeRow(name, n, seed, False, math.inf)
    if any(b == -math.inf for b in bounds):
        return LifeRow(
            name, n, None, True, -math.inf, reason="no design of it keeps the rules in every period"
        )
    best = _best([seed, *found])
    incumbent = best.npv if best is not None else -math.inf
    upper = math.fsum(bounds)
    complete = False
    if all(math.isfinite(b) for b in bounds):
        try:
            listed, complete = search.listing(
                bounds, incumbent, deadline, architecture=(g, n), what=what
            )
        except OutOfTime:
            listed = []
        best = _best([best, *listed])
    if best is None:
        reason = (
            "no design of it keeps the rules in every period"
            if complete
            else "no design found within the time"
        )
        return LifeRow(name, n, None, complete, -math.inf if complete else upper, reason=reason)
    best = dataclasses.replace(best, design=f"best {name}, {n} dies")
    if best.npv > upper + 1e-9 * abs(upper) + 1e-6:
        raise InvariantViolation(f"life table: {name}, {n} dies above its bound")
    return LifeRow(name, n, best, complete, best.npv if complete else max(upper, best.npv))


__all__ = ["LifePricer", "LifeRow", "LifeSolution", "bound_problem", "solve_life"]
