"""A product family chosen together: one die library, each die design paid for once.

Family profit of designs d_1..d_P (one per product, each priced exactly on its own):

    F = sum_i profit_i(d_i) + sum_i (NRE_i + S_i) - NRE(library) - sum_p OT_p,

NRE_i the die NRE product i pays alone (mask set and design of each of its dies), S_i
its one-time yield-improvement spend, NRE(library) that of every distinct die design
once, OT_p the one-time cost of process p's defect-density target once (a process has
one target for the family, so products on one process must agree on it).

The proof. Give each die design's NRE to the products whose block counts could hold
it in shares w_i(die) >= 0 summing to one, and each process's one-time target cost to
all P products equally. A family pays every die it uses once, so NRE(library) >=
sum_i sum_{die in d_i} w_i(die) nre(die), likewise for the targets, and F <= sum_i
pi_i(d_i), where pi_i is product i's profit with each die's NRE scaled by its share and
one-time target costs by 1/P (the same problem with adjusted die prices, solved by the
ordinary search: its bound and its pricing both read the adjusted prices). Any shares
give a valid bound (they are Lagrange multipliers of "a die used is paid for"); the
solve starts from equal shares and takes subgradient steps towards the products whose
bound designs use each die, keeping the lowest bound. With U a
family design's profit, a better family holds for every i a design with
pi_i(d_i) >= U - sum_{j != i} max pi_j: each product's search lists every such design
(a search to a cost ceiling), each is priced exactly, and an integer program over the
lists (a design per product, a die design paid once when any chosen design holds it,
one target per process) picks the best combination. A design left out of a list cannot
be in a family better than U, so the combination is the family optimum over the stated
choices.

Candidate dies are pruned for the family only when a variant of the same content
dominates in every term any product could price (cost, escapes, NRE, area, die yield,
sigma margin and every product's salvage bins): a family using a dominated die does no
worse with its dominator in every product that used it.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import highspy
import numpy as np
import scipy.sparse as sp

from optimizer.designs import DesignResult, evaluate_specs
from optimizer.errors import ProblemError
from optimizer.evaluator import Evaluator
from optimizer.family import Family
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem
from optimizer.solver import progress
from optimizer.solver.candidates import build_candidates, enumerate_contents
from optimizer.solver.search import PROFIT_RTOL, milp_search, profit_bound
from optimizer.solver.selection import selection_specs

# designs listed per product before the family search gives up on a proof
MAX_LISTED = 20_000


@dataclass(frozen=True)
class LibraryDie:
    """One die design of the family's library and who uses it."""

    key: tuple
    process: str
    blocks: dict[str, int]
    area_mm2: float
    nre: float
    users: dict[str, int]  # product -> copies per unit


@dataclass
class FamilySolution:
    """The family optimum, its library and what sharing earns."""

    names: list[str]
    designs: list[DesignResult]  # per product, priced alone (paying its own NRE)
    library: list[LibraryDie]
    profit: float  # family total
    proven: bool
    profit_bound: float
    alone: list[DesignResult]  # each product optimised alone
    alone_profit: float  # the sum of those, each paying its own NRE
    shared_nre: float  # NRE the family saves by paying each shared die once
    shared_targets: float  # one-time target spend saved likewise
    seconds: float
    log: list[str] = field(default_factory=list)
    stats: dict = field(default_factory=dict)

    @property
    def reuse_premium(self) -> float:
        """Family optimum against the products optimised one by one."""
        return self.profit - self.alone_profit

    @property
    def gap(self) -> float:
        return max(0.0, (self.profit_bound - self.profit) / max(abs(self.profit), 1.0))


def die_key(die) -> tuple:
    """What makes two dies one design (one mask set): process, blocks, spares, repair,
    margin, critical-area option and area (which holds the interface ports)."""
    return (
        die.process,
        tuple(sorted(die.blocks.items())),
        tuple(sorted((k, v) for k, v in die.spares.items() if v)),
        tuple(sorted((k, v) for k, v in die.repair.items() if v)),
        None
        if die.sigma_margin is None or not math.isfinite(die.sigma_margin)
        else float(die.sigma_margin),
        die.critical_area_option,
        round(die.area_mm2, 9),
    )


@dataclass(frozen=True)
class _Priced:
    """One product design as the family prices it."""

    design: DesignResult
    own: float  # profit + the NRE and target spend it would share
    dies: dict[tuple, float]  # die key -> NRE
    targets: dict[str, tuple[float, float]]  # process -> (defect density, one-time cost)


def family_profit(
    problems: list[Problem], designs: list[DesignResult]
) -> tuple[float, float, float]:
    """(family profit, NRE saved, target spend saved) of one design per product;
    profit -inf when two products hold one process to different targets."""
    priced = [_price(p, d) for p, d in zip(problems, designs, strict=True)]
    return _combine(priced)


def _price(problem: Problem, design: DesignResult) -> _Priced:
    dies: dict[tuple, float] = {}
    targets: dict[str, tuple[float, float]] = {}
    for die in design.dies:
        dies[die_key(die)] = die.nre
        one_time = _one_time(problem, die.process, die.defect_density_per_cm2)
        known = targets.get(die.process)
        targets[die.process] = (
            die.defect_density_per_cm2,
            max(one_time, known[1] if known else 0.0),
        )
    spend = sum(t[1] for t in targets.values())
    own = design.profit + sum(dies.values()) + spend
    if not math.isclose(spend, design.improvement_spend, rel_tol=1e-9, abs_tol=1e-6):
        raise InvariantViolation(
            f"family: target spend {spend!r} of design '{design.design}' differs from the "
            f"evaluator's {design.improvement_spend!r}"
        )
    return _Priced(design, own, dies, targets)


def _one_time(problem: Problem, process_name: str, density: float) -> float:
    """One-time cost of holding a process at ``density`` (0 at its base density)."""
    process = next(p for p in problem.process if p.name == process_name)
    if process.defect_reduction is None:
        return 0.0
    for d, one_time, _ in process.defect_targets():
        if abs(d - density) <= 1e-12 * max(abs(d), 1e-300):
            return float(one_time)
    raise InvariantViolation(
        f"family: process '{process_name}' has no listed target at {density!r} /cm^2"
    )


def _combine(priced: list[_Priced]) -> tuple[float, float, float]:
    library: dict[tuple, float] = {}
    targets: dict[str, tuple[float, float]] = {}
    total_own = 0.0
    paid_nre = paid_targets = 0.0
    for item in priced:
        total_own += item.own
        paid_nre += sum(item.dies.values())
        library.update(item.dies)
        for process, (density, one_time) in item.targets.items():
            if process in targets:
                if abs(targets[process][0] - density) > 1e-12 * abs(density):
                    return -math.inf, 0.0, 0.0
                targets[process] = (density, max(targets[process][1], one_time))
            else:
                targets[process] = (density, one_time)
            paid_targets += one_time
    nre = sum(library.values())
    spend = sum(t[1] for t in targets.values())
    return total_own - nre - spend, paid_nre - nre, paid_targets - spend


def scaled_problem(problem: Problem, share: int, bins_from: list[Problem]) -> Problem:
    """``problem`` with its one-time target costs divided by ``share``, and every
    salvage bin of ``bins_from`` (on blocks it holds) added at zero demand: they earn
    nothing and only keep the dies another product's bins would want. (Die NRE is split
    per die, by :func:`nre_split`.)"""
    f = 1.0 / share
    processes = []
    for p in problem.process:
        update: dict = {}
        curve = p.defect_reduction
        if curve is not None:
            if curve.form == "log_ratio":
                update["defect_reduction"] = curve.model_copy(
                    update={"one_time_per_log": curve.one_time_per_log * f}
                )
            else:
                points = [(d, c * f, w) for d, c, w in curve.points]
                update["defect_reduction"] = curve.model_copy(update={"points": points})
        processes.append(p.model_copy(update=update))
    present = {b.name for b in problem.block}
    bins = list(problem.market.salvage_bin)
    names = {b.name for b in bins}
    for other in bins_from:
        for b in other.market.salvage_bin:
            if b.block in present and b.name not in names:
                bins.append(b.model_copy(update={"demand": 0.0}))
                names.add(b.name)
    market = problem.market.model_copy(update={"salvage_bin": bins})
    return problem.model_copy(update={"process": processes, "market": market})


def nre_split(problem: Problem, problems: list[Problem]):
    """A candidate-price adjustment (see ``build_candidates``) dividing each die's NRE
    by the number of products whose block counts could hold it: no more products can
    share it, so the library pays at least that share per product using it."""
    names = [b.name for b in problem.block]
    counts = np.array(
        [[next((b.count for b in q.block if b.name == n), 0) for n in names] for q in problems]
    )

    def adjust(prices, process, instances, spares, repairs, critical):
        holders = (instances[:, None, :] <= counts[None, :, :]).all(axis=2).sum(axis=1)
        return dataclasses.replace(prices, nre=prices.nre / np.maximum(holders, 1))

    return adjust


def solve_family(
    family: Family,
    time_limit: float | None = None,
    source: str = "<problem>",
    method: str = "milp",
) -> FamilySolution:
    """The most profitable family design, proven over the stated choices."""
    # the listener hears the family's profit; the products' searches tell only the
    # dies they price
    tell = progress.current()
    tell.begin()
    with progress.inner_searches():
        solution = _solve_family(family, time_limit, source, method, tell)
    tell.settle(solution.profit, solution.profit_bound, solution.gap)
    tell.finish()
    return solution


def _solve_family(family: Family, time_limit, source: str, method: str, tell) -> FamilySolution:
    from optimizer.solver import solve

    start = time.perf_counter()
    deadline = None if time_limit is None else start + time_limit
    problems = [m.problem for m in family.members]
    names = family.names
    share = len(problems)
    log: list[str] = []
    # 1. each product alone: the premium's reference and a first family design
    alone = []
    for name, problem in zip(names, problems, strict=True):
        tell.stage(f"product {name} alone")
        try:
            found = solve(
                problem, top=1, refine=False, method=method, source=source, deadline=deadline
            )
        except ProblemError as exc:
            raise ProblemError(source, f"product '{name}': {exc.field}", exc.message) from None
        alone.append(found.best)
    alone_profit = sum(d.profit for d in alone)
    priced_alone = [_price(p, d) for p, d in zip(problems, alone, strict=True)]
    incumbent = _combine(priced_alone)[0]
    chosen = list(priced_alone)
    if not math.isfinite(incumbent):
        # the products' own optima disagree on a shared process's target
        incumbent = -math.inf
    # 2. each product's bound with shared costs split among the products that could share
    scaled = [scaled_problem(p, share, problems) for p in problems]
    evaluators = [Evaluator(p) for p in scaled]
    if math.isfinite(incumbent):
        tell.found(incumbent)
    candidates = []
    bounds = []
    tell.stage("pricing candidate dies with shared NRE split over the products")
    for problem, evaluator in zip(scaled, evaluators, strict=True):
        contents = enumerate_contents(evaluator)
        split = nre_split(problem, problems)
        cands = {
            g: build_candidates(
                evaluator,
                g,
                contents,
                depth=1,
                mandate_metrics=True,
                deadline=deadline,
                adjust=split,
            )
            for g in range(len(problem.packaging))
        }
        candidates.append(cands)
    # the NRE shares are multipliers: any split of each die's NRE over the products gives
    # a bound; a few subgradient steps move each die's NRE towards the products whose
    # bound designs use it (the bound falls to the best found)
    shares = _Shares(scaled, problems, candidates)
    bounds, upper = [], math.inf
    best_fractions = shares.fractions()
    for step in range(max(SUBGRADIENT_STEPS, 1)):
        tell.stage(f"bounding each product, NRE shares step {step + 1}")
        found = [
            milp_search(ev, top=1, candidates=c, deadline=deadline)
            for ev, c in zip(evaluators, candidates, strict=True)
        ]
        now = [
            profit_bound(f, ev) if f.proven else math.inf
            for f, ev in zip(found, evaluators, strict=True)
        ]
        if sum(now) < upper:
            upper, bounds, best_fractions = sum(now), now, shares.fractions()
            tell.bounded(upper)
        picks = [f.ranked[0].selection if f.ranked else None for f in found]
        if any(p is None for p in picks) or not math.isfinite(sum(now)):
            break
        # the bound designs are a family design too
        items = [
            _price(
                problems[i],
                _design_of(evaluators[i], problems[i], candidates[i], sel, names[i], source),
            )
            for i, sel in enumerate(picks)
        ]
        value = _combine(items)[0]
        if value > incumbent:
            incumbent, chosen = value, items
            tell.found(incumbent)
        if upper - incumbent <= PROFIT_RTOL * max(abs(incumbent), 1.0):
            break
        if not shares.step(picks, 0.5 / (step + 1)):
            break
        if deadline is not None and time.perf_counter() > deadline:
            break
    shares.set(best_fractions)
    log.append(f"bound {upper:.10g} after the NRE shares' steps; family found {incumbent:.10g}")
    # 3. every design of each product that could be in a better family: those within
    # delta of their product's bound; proven once a combination is within delta of the
    # sum of the bounds (with no incumbent yet, delta grows until one is)
    proven = all(math.isfinite(b) for b in bounds)
    delta = upper - incumbent if math.isfinite(incumbent) else 0.01 * max(abs(upper), 1.0)
    seeds: list[dict] = [{} for _ in problems]
    while True:
        tell.stage("listing each product's designs that could be in a better family")
        lists, complete = _lists(
            names,
            problems,
            scaled,
            evaluators,
            candidates,
            bounds,
            delta,
            seeds,
            priced_alone,
            source,
            deadline,
            log,
        )
        tell.stage(f"choosing the best combination of {sum(len(x) for x in lists)} designs")
        pick, value, exact = _best_combination(lists, deadline)
        complete &= exact
        if value > incumbent:
            chosen = [lists[i][j] for i, j in enumerate(pick)]
            incumbent = value
        slack = PROFIT_RTOL * max(abs(incumbent), 1.0)
        if not proven or not complete or incumbent >= upper - delta - slack:
            proven &= complete
            break
        if deadline is not None and time.perf_counter() > deadline:
            proven = False
            break
        delta = upper - incumbent if math.isfinite(incumbent) else 4 * delta
    profit, saved_nre, saved_targets = _combine(chosen)
    if not math.isfinite(profit):
        raise ProblemError(
            source,
            "product",
            "no family design was found that holds each shared process to one "
            "defect-density target"
            + (" within the time limit; allow more time" if not proven else "")
            + "; check the products' requirements and each process's defect_reduction",
        )
    if not math.isclose(profit, incumbent, rel_tol=1e-9, abs_tol=1e-6):
        raise InvariantViolation(
            f"family: combination says {incumbent!r}, the designs price at {profit!r}"
        )
    bound = profit if proven else max(profit, upper)
    lists_sizes = [len(x) for x in lists]
    if profit > upper + 1e-9 * abs(upper) + 1e-6:
        raise InvariantViolation(f"family: profit {profit!r} above its own bound {upper!r}")
    designs = [c.design for c in chosen]
    return FamilySolution(
        names=names,
        designs=designs,
        library=_library(names, designs),
        profit=profit,
        proven=proven,
        profit_bound=bound,
        alone=alone,
        alone_profit=alone_profit,
        shared_nre=saved_nre,
        shared_targets=saved_targets,
        seconds=time.perf_counter() - start,
        log=log,
        stats={"listed": lists_sizes, "bounds": bounds},
    )


# subgradient steps on the products' NRE shares before the listing
SUBGRADIENT_STEPS = 8


def _design_of(evaluator, member: Problem, cands, sel, name: str, source: str) -> DesignResult:
    """A selection of a product's split-cost search, priced on the product itself."""
    specs = selection_specs(evaluator, cands[sel.packaging_index], sel)
    packaging = evaluator.problem.packaging[sel.packaging_index].name
    return evaluate_specs(Evaluator(member), specs, packaging, name, source)


class _Shares:
    """Each candidate die's NRE share per product, written into the candidates' prices.

    A die design (its key) may be held by several products; its NRE is split over those
    holders by fractions summing to one (initially equal), any split giving a valid
    bound (see the module docstring).
    """

    def __init__(self, scaled: list[Problem], problems: list[Problem], candidates: list[dict]):
        self.candidates = candidates
        self.raw: list[dict] = []  # per product and packaging: full NRE of each candidate
        self.keys: list[dict] = []  # ... and its die key
        self.holders: dict[tuple, np.ndarray] = {}
        self.frac: dict[tuple, np.ndarray] = {}
        for problem, cands in zip(scaled, candidates, strict=True):
            names = [b.name for b in problem.block]
            counts = np.array(
                [
                    [next((b.count for b in q.block if b.name == n), 0) for n in names]
                    for q in problems
                ]
            )
            raw, keys = {}, {}
            for g, cset in cands.items():
                held = (cset.instances[:, None, :] <= counts[None, :, :]).all(axis=2)
                h = np.maximum(held.sum(axis=1), 1)
                raw[g] = cset.prices.nre * h
                keys[g] = [_candidate_key(problem, cset, c) for c in range(len(cset))]
                for c, key in enumerate(keys[g]):
                    self.holders.setdefault(key, held[c])
            self.raw.append(raw)
            self.keys.append(keys)

    def fractions(self) -> dict[tuple, np.ndarray]:
        return {k: v.copy() for k, v in self.frac.items()}

    def _frac(self, key: tuple) -> np.ndarray:
        if key not in self.frac:
            held = self.holders[key].astype(float)
            self.frac[key] = held / max(held.sum(), 1.0)
        return self.frac[key]

    def set(self, fractions: dict[tuple, np.ndarray]) -> None:
        self.frac = {k: v.copy() for k, v in fractions.items()}
        for i, cands in enumerate(self.candidates):
            for g, cset in cands.items():
                shares = np.array([self._frac(k)[i] for k in self.keys[i][g]])
                cset.prices.nre[:] = self.raw[i][g] * shares

    def step(self, picks, size: float) -> bool:
        """Move each used die's NRE towards the products whose bound designs use it;
        whether anything moved."""
        users: dict[tuple, set[int]] = {}
        for i, sel in enumerate(picks):
            for c, _ in sel.dies:
                users.setdefault(self.keys[i][sel.packaging_index][c], set()).add(i)
        moved = False
        for key, who in users.items():
            held = self.holders[key]
            frac = self._frac(key).copy()
            target = np.zeros(held.size)
            target[list(who)] = 1.0 / len(who)
            new = np.where(held, (1 - size) * frac + size * target, 0.0)
            new /= max(new.sum(), 1e-300)
            if not np.allclose(new, frac, atol=1e-12):
                moved = True
            self.frac[key] = new
        self.set(self.frac)
        return moved


def _candidate_key(problem: Problem, cset, c: int) -> tuple:
    """The die key (see :func:`die_key`) of candidate ``c``."""
    return priced_die_key(
        problem,
        cset.prices,
        cset.process,
        cset.instances,
        cset.spares,
        cset.repairs,
        cset.critical_option,
        c,
    )


def priced_die_key(problem: Problem, prices, process, instances, spares, repairs, critical, c):
    """The die key (see :func:`die_key`) of row ``c`` of priced die arrays."""
    names = [b.name for b in problem.block]

    def held(row) -> tuple:
        return tuple(sorted((names[b], int(row[b])) for b in np.flatnonzero(row)))

    sigma = float(prices.sigma_margin[c])
    return (
        problem.process[int(process[c])].name,
        held(instances[c]),
        held(spares[c]),
        held(repairs[c]),
        sigma if math.isfinite(sigma) else None,
        int(critical[c]),
        round(float(prices.area_mm2[c]), 9),
    )


def _lists(
    names,
    problems,
    scaled,
    evaluators,
    candidates,
    bounds,
    delta,
    seeds,
    priced_alone,
    source,
    deadline,
    log,
) -> tuple[list[list[_Priced]], bool]:
    """Per product, every design whose split-cost profit is within ``delta`` of the
    product's bound, priced as the family prices it; and whether every list is whole."""
    lists = []
    complete = True
    for i, (problem, evaluator) in enumerate(zip(scaled, evaluators, strict=True)):
        revenue = problem.market.unit_price * problem.market.volume
        slack = PROFIT_RTOL * max(abs(bounds[i]), 1.0)
        ceiling = revenue - (bounds[i] - delta) + slack
        listed = milp_search(
            evaluator,
            top=1,
            candidates=candidates[i],
            ceiling=ceiling,
            deadline=deadline,
            seed=seeds[i],
        )
        seeds[i].update(listed.priced)
        complete &= listed.proven
        sels = sorted(
            (s for s, total in listed.priced.items() if total <= ceiling),
            key=lambda s: listed.priced[s],
        )
        if len(sels) > MAX_LISTED:
            complete = False
            sels = sels[:MAX_LISTED]
        member = Evaluator(problems[i])
        items = []
        for sel in sels:
            if deadline is not None and time.perf_counter() > deadline:
                complete = False  # designs left unpriced: the list is not whole
                break
            cset = candidates[i][sel.packaging_index]
            specs = selection_specs(evaluator, cset, sel)
            packaging = problem.packaging[sel.packaging_index].name
            design = evaluate_specs(member, specs, packaging, names[i], source)
            if math.isfinite(design.profit):
                items.append(_price(problems[i], design))
        # the product's own optimum stays a choice whatever the ceiling
        items.append(priced_alone[i])
        lists.append(items)
        log.append(f"product '{names[i]}': {len(items)} designs within {delta:.6g} of its bound")
    return lists, complete


def _library(names: list[str], designs: list[DesignResult]) -> list[LibraryDie]:
    out: dict[tuple, LibraryDie] = {}
    for name, design in zip(names, designs, strict=True):
        for die in design.dies:
            key = die_key(die)
            if key not in out:
                out[key] = LibraryDie(key, die.process, dict(die.blocks), die.area_mm2, die.nre, {})
            out[key].users[name] = out[key].users.get(name, 0) + die.copies
    return sorted(out.values(), key=lambda d: (-len(d.users), -d.nre))


def _best_combination(
    lists: list[list[_Priced]], deadline: float | None = None
) -> tuple[list[int], float, bool]:
    """One design per product maximising the family profit, by an integer program:
    x (a design per product), u (a die design paid once), z (a target per process).
    Returns the picks, their family profit and whether the program was solved to
    optimality (not stopped by the deadline)."""
    dies: dict[tuple, int] = {}
    targets: dict[tuple[str, float], int] = {}
    x_of = []
    for items in lists:
        x_of.append(list(range(sum(len(x) for x in x_of), sum(len(x) for x in x_of) + len(items))))
        for item in items:
            for key in item.dies:
                dies.setdefault(key, len(dies))
            for process, (density, _) in item.targets.items():
                targets.setdefault((process, density), len(targets))
    n_x = sum(len(items) for items in lists)
    best_own = [max(item.own for item in items) for items in lists]
    n_u, n_z = len(dies), len(targets)
    n = n_x + n_u + n_z
    cost = np.zeros(n)
    nre = {}
    one_time = {}
    rows, cols, vals, lo, hi = [], [], [], [], []
    r = 0
    for i, items in enumerate(lists):
        for j, item in enumerate(items):
            xi = x_of[i][j]
            # own profit relative to the product's best listed one: the program then
            # works on differences of the size of the NRE, not of the revenue, so its
            # tolerances stay far below the tie tolerance
            cost[xi] = -(item.own - best_own[i])
            rows.append(r)
            cols.append(xi)
            vals.append(1.0)
            for key, value in item.dies.items():
                nre[key] = value
            for process, (density, ot) in item.targets.items():
                one_time[(process, density)] = max(one_time.get((process, density), 0.0), ot)
        lo.append(1.0)
        hi.append(1.0)
        r += 1
    for key, k in dies.items():
        cost[n_x + k] = nre[key]
    for key, k in targets.items():
        cost[n_x + n_u + k] = one_time[key]
    # a chosen design needs its dies and its targets: x - u <= 0, x - z <= 0
    for i, items in enumerate(lists):
        for j, item in enumerate(items):
            xi = x_of[i][j]
            for key in item.dies:
                rows += [r, r]
                cols += [xi, n_x + dies[key]]
                vals += [1.0, -1.0]
                lo.append(-np.inf)
                hi.append(0.0)
                r += 1
            for process, (density, _) in item.targets.items():
                rows += [r, r]
                cols += [xi, n_x + n_u + targets[(process, density)]]
                vals += [1.0, -1.0]
                lo.append(-np.inf)
                hi.append(0.0)
                r += 1
    # one target per process
    by_process: dict[str, list[int]] = {}
    for (process, _), k in targets.items():
        by_process.setdefault(process, []).append(k)
    for ks in by_process.values():
        if len(ks) > 1:
            for k in ks:
                rows.append(r)
                cols.append(n_x + n_u + k)
                vals.append(1.0)
            lo.append(-np.inf)
            hi.append(1.0)
            r += 1
    matrix = sp.csr_matrix((vals, (rows, cols)), shape=(r, n))
    scale = max(float(np.abs(cost).max(initial=1.0)), 1.0)
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("mip_rel_gap", 0.0)
    h.setOptionValue("mip_abs_gap", 0.0)
    for name in (
        "mip_feasibility_tolerance",
        "primal_feasibility_tolerance",
        "dual_feasibility_tolerance",
    ):
        h.setOptionValue(name, 1e-9)
    lp = highspy.HighsLp()
    lp.num_col_ = n
    lp.num_row_ = r
    lp.col_cost_ = cost / scale
    lp.col_lower_ = np.zeros(n)
    lp.col_upper_ = np.ones(n)
    lp.row_lower_ = np.array(lo)
    lp.row_upper_ = np.array(hi)
    csc = matrix.tocsc()
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = csc.indptr
    lp.a_matrix_.index_ = csc.indices
    lp.a_matrix_.value_ = csc.data
    lp.integrality_ = [highspy.HighsVarType.kInteger] * n
    if deadline is not None:
        h.setOptionValue("time_limit", max(deadline - time.perf_counter(), 0.01))
    h.passModel(lp)
    h.run()
    status = h.getModelStatus()
    if status != highspy.HighsModelStatus.kOptimal and h.getInfo().primal_solution_status != 2:
        return [], -math.inf, False
    x = np.asarray(h.getSolution().col_value)
    pick = [int(np.argmax(x[x_of[i]])) for i in range(len(lists))]
    value = _combine([lists[i][j] for i, j in enumerate(pick)])[0]
    return pick, value, status == highspy.HighsModelStatus.kOptimal


__all__ = [
    "FamilySolution",
    "LibraryDie",
    "die_key",
    "priced_die_key",
    "family_profit",
    "scaled_problem",
    "solve_family",
]
