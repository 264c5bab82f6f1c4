"""Candidate dies generated on demand, against brute force.

Outside truth, all of it the project's own and none a published formula:

* the exhaustive reference (:mod:`optimizer.solver.exhaustive`), which prices every
  partition x process x option x packaging with the same evaluator and prunes nothing,
  for the optimum, the top 3 and the best design of each (packaging, die count);
* the exact evaluator, pricing every content with ``build_candidates(prune=False)``,
  for the cost floor (:mod:`optimizer.solver.cost_floor`);
* a brute-force listing of every content, process and copy count, for the branch and
  bound of :mod:`optimizer.solver.content_search`.

The problems are the feature-rich random draws of ``tests/random_problems.py``
(invented numbers: salvage bins with spares and repair, defect-density targets of both
forms, margins, critical-area options, low fault coverage, interposers, near ties, keep
rules, die-area limits and mandates). The seeds are those of ``test_solver_random`` and
a few four-block draws with more contents, each solved by brute force in well under a
second.
"""

from __future__ import annotations

import dataclasses
import itertools
import math

import numpy as np
import pytest

from optimizer.evaluator import Evaluator
from optimizer.problem import Requirements, parse_problem
from optimizer.solver.candidates import build_candidates, enumerate_contents
from optimizer.solver.content_search import DualPrices, contents_below
from optimizer.solver.cost_floor import CostFloor
from optimizer.solver.exhaustive import exhaustive_search
from optimizer.solver.generation import generated_search
from tests.random_problems import features_of, random_problem
from tests.test_solver_random import SEEDS, TOP3_SEEDS

RTOL = 1e-9

# what the seeds must hold between them (the features this brief names, read back from
# each draw by `features_of`)
REQUIRED_FEATURES = {
    "salvage",
    "salvage+spares",
    "salvage+repair",
    "spares",
    "repair",
    "defect_log_ratio",
    "defect_table",
    "margin_one_sided",
    "margin_two_sided",
    "critical_area",
    "critical_zero_overhead",
    "low_coverage",
    "pack_silicon_interposer",
    "tie_process_exact",
    "tie_process_1e-7",
    "tie_packaging_exact",
    "tie_packaging_1e-7",
    "keep_together",
    "keep_apart",
    "die_area_limits",
    "requirements",
}

# A draw is (seed, block count or None for the generator's 2 to 4). The draws of
# test_solver_random have few contents; these four-block draws (60 to 130 contents,
# brute force under 0.2 s) leave the generation most contents to find or to rule out.
FOUR_BLOCKS = [(s, 4) for s in (2, 8, 11, 18, 26, 29, 31, 49, 50, 53, 56)]
OPTIMUM_DRAWS = [(s, None) for s in SEEDS] + FOUR_BLOCKS
TOP3_DRAWS = [(s, None) for s in TOP3_SEEDS + SEEDS[:8]] + FOUR_BLOCKS
# a few draws with several packagings and die counts, for the architecture rows
ARCHITECTURE_DRAWS = [(s, None) for s in (8, 12, 13, 23, 40, 64, 73)] + [(26, 4), (31, 4)]
# draws for the floor and the content search (cheap to price whole)
FLOOR_DRAWS = [(s, None) for s in range(10)] + [(13, 4), (31, 4)]
SEARCH_DRAWS = [(s, None) for s in range(8)] + [(13, 4), (31, 4)]
# draws for the restart from an earlier search's candidates and designs
RESTART_DRAWS = [(s, None) for s in (8, 12, 13, 23, 40, 64)] + [(2, 4), (50, 4)]


def name(case: tuple[int, int | None]) -> str:
    seed, blocks = case
    return f"{seed}" if blocks is None else f"{seed}-b{blocks}"


def tolerance(profit: float) -> float:
    # the solver's own tie tolerance: 1e-9 of |profit|, at least 1e-9 money
    return RTOL * max(abs(profit), 1.0)


def draw(case: tuple[int, int | None]) -> tuple[dict, object]:
    seed, blocks = case
    data = random_problem(seed, blocks=blocks)
    return data, parse_problem(data, f"seed{name(case)}")


def describe(case: tuple[int, int | None], data: dict) -> str:
    return f"draw {case}: {' '.join(features_of(data))}"


def profits(outcome) -> list[float]:
    return [r.profit for r in outcome.ranked]


def assert_same_profits(mine: list[float], theirs: list[float], where: str) -> None:
    assert len(mine) == len(theirs), f"{where}: generated {mine} vs exhaustive {theirs}"
    for a, b in zip(mine, theirs, strict=True):
        assert abs(a - b) <= tolerance(b), f"{where}: generated {mine!r} vs exhaustive {theirs!r}"


def broken_keep_rules(problem, evaluator: Evaluator, outcome) -> list[str]:
    """Dies of the ranked designs that break a keep-together or keep-apart rule."""
    index = {block: i for i, block in enumerate(evaluator.blocks.names)}
    count = evaluator.blocks.count
    broken = []
    for ranked in outcome.ranked:
        cset = outcome.candidates[ranked.selection.packaging_index]
        for c, _ in ranked.selection.dies:
            q = cset.instances[c]
            for group in problem.constraints.keep_apart:
                if sum(int(q[index[b]] > 0) for b in group) > 1:
                    broken.append(f"keep_apart {group}: die {q.tolist()}")
            for group in problem.constraints.keep_together:
                shares = {round(float(q[index[b]]) / float(count[index[b]]), 9) for b in group}
                if len(shares) > 1:
                    broken.append(f"keep_together {group}: die {q.tolist()}")
    return broken


# ------------------------------------------------------------------ 1. optimum and top 3


def test_seeds_cover_the_features():
    seen = set().union(*(features_of(draw(case)[0]) for case in OPTIMUM_DRAWS + TOP3_DRAWS))
    assert REQUIRED_FEATURES <= seen, sorted(REQUIRED_FEATURES - seen)


@pytest.mark.parametrize("case", OPTIMUM_DRAWS, ids=name)
def test_generated_optimum_equals_exhaustive(case):
    data, problem = draw(case)
    where = describe(case, data)
    brute = exhaustive_search(Evaluator(problem), top=1)
    evaluator = Evaluator(problem)
    ours = generated_search(evaluator, top=1)
    if not brute.ranked:
        assert not ours.ranked, (
            f"{where}: generated {profits(ours)}, exhaustive found none; "
            f"{broken_keep_rules(problem, evaluator, ours)}"
        )
        return
    assert ours.ranked, f"{where}: generated found no design, exhaustive {profits(brute)}"
    assert not broken_keep_rules(problem, evaluator, ours), (
        f"{where}: {broken_keep_rules(problem, evaluator, ours)}"
    )
    assert ours.proven, f"{where}: not proven; {ours.log}"
    assert_same_profits(profits(ours), profits(brute), where)
    # its own bound holds its design
    best = ours.ranked[0]
    assert ours.bound_total_cost <= best.total_cost + tolerance(best.total_cost), where


@pytest.mark.parametrize("case", TOP3_DRAWS, ids=name)
def test_generated_top3_equals_exhaustive(case):
    data, problem = draw(case)
    where = describe(case, data)
    brute = exhaustive_search(Evaluator(problem), top=3)
    ours = generated_search(Evaluator(problem), top=3)
    if not brute.ranked:
        assert not ours.ranked, f"{where}: generated {profits(ours)}, exhaustive found none"
        return
    assert ours.proven, f"{where}: not proven; {ours.log}"
    assert_same_profits(profits(ours), profits(brute), where)
    # three distinct designs, best first
    assert len(set(r.selection for r in ours.ranked)) == len(ours.ranked), where
    assert profits(ours) == sorted(profits(ours), reverse=True), where


# ------------------------------------------------------------------ 2. architecture rows


def best_by_architecture(problem) -> dict[tuple[int, int], float]:
    """Brute force's best profit of every (packaging index, die count) with a design."""
    brute = exhaustive_search(Evaluator(problem), top=10**9)
    revenue = problem.market.unit_price * problem.market.volume
    best: dict[tuple[int, int], float] = {}
    for sel, total in brute.priced.items():
        if math.isfinite(total):
            key = (sel.packaging_index, sel.n_dies)
            best[key] = max(best.get(key, -math.inf), revenue - total)
    return best


@pytest.mark.parametrize("case", ARCHITECTURE_DRAWS, ids=name)
def test_each_architecture_equals_the_brute_force_best_of_it(case):
    data, problem = draw(case)
    where = describe(case, data)
    best = best_by_architecture(problem)
    checked = 0
    for g, packaging in enumerate(problem.packaging):
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        for n in range(1, n_max + 1):
            evaluator = Evaluator(problem)
            ours = generated_search(evaluator, top=1, architecture=(g, n))
            key = f"{where} (packaging {g}, {n} dies)"
            assert all(
                (r.selection.packaging_index, r.selection.n_dies) == (g, n) for r in ours.ranked
            ), key
            broken = broken_keep_rules(problem, evaluator, ours)
            if (g, n) not in best:
                assert not ours.ranked, (
                    f"{key}: generated {profits(ours)}, exhaustive none; {broken}"
                )
                continue
            assert not broken, f"{key}: {broken}"
            assert ours.ranked, f"{key}: generated none, exhaustive {best[g, n]!r}"
            assert ours.proven, f"{key}: not proven; {ours.log}"
            assert_same_profits(profits(ours)[:1], [best[g, n]], key)
            checked += 1
    assert checked >= 2, f"{where}: fewer than two architectures with designs"


# ------------------------------------------------------------------ 3. the floor holds


@pytest.mark.parametrize("case", FLOOR_DRAWS, ids=name)
def test_every_priced_die_is_above_its_floor(case):
    data, problem = draw(case)
    where = describe(case, data)
    evaluator = Evaluator(problem)
    floor = CostFloor(evaluator)
    cheapest, _, largest = floor.program_floors()
    contents = enumerate_contents(evaluator)
    priced = 0
    for g in range(len(problem.packaging)):
        # no mandates: every die the evaluator prices, admissible or not under them
        cset = build_candidates(evaluator, g, contents, prune=False, requirements=Requirements())
        floor.check(cset.process, cset.instances, cset.prices)
        prices = cset.prices
        for p in range(len(problem.process)):
            rows = np.flatnonzero(cset.process == p)
            if rows.size == 0:
                continue
            area, crit = floor.content_area(p, cset.instances[rows])
            die = floor.die_cost(p, area, crit)
            cost = prices.cost_per_passed_die[rows]
            finite = np.isfinite(cost)
            low = finite & (cost < die * (1 - RTOL))
            assert not low.any(), (
                f"{where} packaging {g} process {p}: content "
                f"{cset.instances[rows][low][0].tolist()} costs "
                f"{cost[low][0]!r} < floor {die[low][0]!r}"
            )
            nre = floor.nre(p, area)
            assert np.all(prices.nre[rows] >= nre * (1 - RTOL) - 1e-9), where
            # the die's own area holds its blocks (the floor's area)
            assert np.all(prices.area_mm2[rows] >= area * (1 - RTOL)), where
            # test escapes: -ln(1 - DL) of the die at least its floor
            escape = floor.escape(p, crit)
            assert np.all(-prices.log1m_defect_level[rows][finite] >= escape[finite] - 1e-12), (
                f"{where} packaging {g} process {p}: escape below its floor"
            )
            assert np.all(cost[finite] >= cheapest * (1 - RTOL)), where
            assert np.all(prices.area_mm2[rows] <= largest + 1e-9), where
            priced += int(finite.sum())
    assert priced > 0, where


@pytest.mark.parametrize("case", FLOOR_DRAWS[:6], ids=name)
def test_floor_does_not_fall_as_blocks_are_added(case):
    # the branch and bound uses only this: more area and more critical area, no less cost
    _, problem = draw(case)
    floor = CostFloor(Evaluator(problem))
    rng = np.random.default_rng(case[0])
    for p, f in enumerate(floor.processes):
        a = np.sort(rng.uniform(0, f.max_area * 1.1, 400))
        c = np.sort(rng.uniform(0, f.crit_step * len(f.penalty) * 1.1, 400))
        for cost in (
            floor.die_cost(p, a, c),
            floor.die_cost(p, np.full(c.size, a[0]), c),
            floor.die_cost(p, np.full(c.size, a[200]), c),
            floor.die_cost(p, a, np.full(a.size, c[200])),
            floor.nre(p, a),
            floor.escape(p, c),
        ):
            # infinite above the largest die: compared, not subtracted
            assert np.all(cost[1:] >= cost[:-1]), f"draw {case} process {p}"
        assert np.isinf(floor.die_cost(p, np.array([f.max_area * 1.01]), np.zeros(1))[0])


# ------------------------------------------------------------------ 4. content search


def all_contents(counts: np.ndarray, keep_apart: list[list[int]]) -> np.ndarray:
    rows = np.array(list(itertools.product(*(range(int(c) + 1) for c in counts))), dtype=np.int64)
    rows = rows[rows.any(axis=1)]
    for group in keep_apart:
        rows = rows[(rows[:, group] > 0).sum(axis=1) <= 1]
    return rows


def brute_force_floor(floor: CostFloor, prices: DualPrices, contents: np.ndarray, counts):
    """Least reduced-cost floor of each content over every process and copy count
    allowed, listed one by one (the formula of the content_search module docstring)."""
    best = np.full(len(contents), np.inf)
    allowed = (
        np.ones(len(floor.processes), dtype=bool)
        if prices.processes is None
        else np.asarray(prices.processes)
    )
    prize = contents @ prices.cover
    for p, f in enumerate(floor.processes):
        if not allowed[p]:
            continue
        area, crit = floor.content_area(p, contents)
        fits = area <= f.max_area + 1e-9
        die = floor.die_cost(p, area, crit)
        nre = floor.nre(p, area)
        escape = floor.escape(p, crit)
        for k in range(1, max(1, prices.max_copies) + 1):
            ok = fits & np.all(contents * k <= counts[None, :], axis=1)
            value = k * (prices.factor * die + prices.area_price * area) + nre
            if prices.n_dies:
                held = k * die + (prices.n_dies - k) * prices.cheapest + prices.others
                with np.errstate(invalid="ignore"):
                    extra = prices.factor * held * k * escape
                value = value + np.where(escape > 0, extra, 0.0)
            value = value - k * (prize + prices.count + prices.process[p])
            best = np.where(ok, np.minimum(best, value), best)
    return best


def random_duals(floor: CostFloor, problem, rng, escape: bool, mix: bool) -> DualPrices:
    """Cover duals around each block's share of a typical die cost and a random area
    price; with ``mix`` process duals and a process left out; a zero count dual."""
    counts = np.asarray([b.count for b in problem.block])
    n_proc = len(floor.processes)
    volume = problem.market.volume
    factor = volume * float(rng.uniform(1.0, 1.1))
    typical = np.zeros(counts.size)
    whole = counts.astype(float)
    for b in range(counts.size):
        costs = []
        for p in range(n_proc):
            area, crit = floor.content_area(p, whole[None, :])
            die = float(floor.die_cost(p, area, crit)[0])
            nre = float(floor.nre(p, area)[0])
            if math.isfinite(die):
                share = floor.processes[p].unit_area[b] / max(float(area[0]), 1e-9)
                costs.append(share * (factor * die + nre))
        typical[b] = min(costs) if costs else factor * 10.0
    cover = typical * rng.uniform(0.2, 2.0, counts.size)
    cover[rng.random(counts.size) < 0.15] *= -0.3  # equality rows: duals of either sign
    scale = float(typical.mean())
    processes = None
    process = np.zeros(n_proc)
    if mix:
        process = scale * rng.uniform(-0.5, 0.5, n_proc)
        if n_proc > 1:
            processes = rng.random(n_proc) < 0.7
            processes[int(rng.integers(n_proc))] = True
    n_dies = int(rng.integers(2, 5)) if escape else 0
    return DualPrices(
        factor=factor,
        cover=cover,
        count=0.0,  # set by the caller
        process=process,
        max_copies=int(rng.integers(1, 4)),
        processes=processes,
        area_price=float(rng.choice([0.0, volume * rng.uniform(0, 0.05)])),
        n_dies=n_dies,
        cheapest=floor.program_floors()[0] if escape else 0.0,
        others=float(rng.uniform(0, 50)) if escape else 0.0,
    )


@pytest.mark.parametrize("escape", [False, True], ids=["plain", "escape"])
@pytest.mark.parametrize("case", SEARCH_DRAWS, ids=name)
def test_content_search_finds_every_content_below_the_limit(case, escape):
    data, problem = draw(case)
    where = describe(case, data)
    evaluator = Evaluator(problem)
    floor = CostFloor(evaluator)
    counts = evaluator.blocks.count.astype(np.int64)
    index = {name: i for i, name in enumerate(evaluator.blocks.names)}
    keep_apart = [[index[n] for n in group] for group in problem.constraints.keep_apart]
    contents = all_contents(counts, keep_apart)
    rng = np.random.default_rng(1000 + case[0])
    negative_hits = 0
    for trial in range(4):
        prices = random_duals(floor, problem, rng, escape=escape, mix=trial % 2 == 1)
        truth = brute_force_floor(floor, prices, contents, counts)
        finite = truth[np.isfinite(truth)]
        assert finite.size, f"{where}: no content fits a die"
        # a count dual that puts about a third of the single-copy columns below zero
        count = float(np.quantile(finite, 0.3)) * float(rng.uniform(0.9, 1.1))
        prices = dataclasses.replace(prices, count=count)
        truth = brute_force_floor(floor, prices, contents, counts)
        finite = truth[np.isfinite(truth)]
        limits = [*np.quantile(finite, [0.02, 0.25, 0.6]), 0.0, -abs(float(finite.min())) * 0.5]
        for limit in limits:
            found, least, complete = contents_below(
                floor, prices, float(limit), counts, keep_apart=keep_apart
            )
            case = f"{where} trial {trial} limit {limit!r}"
            assert complete, case
            keys = {row.astype(np.int16).tobytes() for row in found}
            assert len(keys) == len(found), f"{case}: a content returned twice"
            # the superset: every content whose floor is below the limit
            below = contents[truth < limit]
            missing = [q.tolist() for q in below if q.astype(np.int16).tobytes() not in keys]
            assert not missing, (
                f"{case}: {len(missing)} of {len(below)} contents below the limit missed, "
                f"e.g. {missing[0]} with floor {truth[truth < limit][0]!r}"
            )
            if limit < 0 and len(below):
                negative_hits += 1
            # what it returns is a real content, and its bound is below the limit and
            # no more than the brute-force floor
            assert np.all(found.any(axis=1)) and np.all(found <= counts[None, :]), case
            assert np.all(least < limit), case
            position = {q.astype(np.int16).tobytes(): i for i, q in enumerate(contents)}
            for q, bound in zip(found, least, strict=True):
                i = position.get(q.astype(np.int16).tobytes())
                assert i is not None, f"{case}: {q.tolist()} breaks a keep-apart rule"
                assert bound <= truth[i] + 1e-9 * max(abs(truth[i]), 1.0), (
                    f"{case}: bound {bound!r} above the floor {truth[i]!r} of {q.tolist()}"
                )
            # known contents are left out, the others still all returned
            if len(below) >= 2:
                known = below[rng.random(len(below)) < 0.5]
                exclude = {q.astype(np.int16).tobytes() for q in known}
                again, _, complete = contents_below(
                    floor, prices, float(limit), counts, exclude=exclude, keep_apart=keep_apart
                )
                assert complete, case
                got = {q.astype(np.int16).tobytes() for q in again}
                assert not (got & exclude), f"{case}: an excluded content was returned"
                rest = {q.astype(np.int16).tobytes() for q in below} - exclude
                assert rest <= got, f"{case}: with exclude, a content below the limit missed"
    assert negative_hits > 0, f"{where}: no negative limit had a content below it"


# ------------------------------------------------------------------ 5. restart


@pytest.mark.parametrize("top", [1, 3])
@pytest.mark.parametrize("case", RESTART_DRAWS, ids=name)
def test_restart_from_earlier_candidates_and_designs(case, top):
    data, problem = draw(case)
    where = describe(case, data)
    first = generated_search(Evaluator(problem), top=top)
    again = generated_search(
        Evaluator(problem), top=top, candidates=first.candidates, seed=first.priced
    )
    assert first.ranked, where
    assert again.proven == first.proven, where
    assert_same_profits(profits(again), profits(first), where)
    brute = exhaustive_search(Evaluator(problem), top=top)
    assert_same_profits(profits(again), profits(brute), where)
    assert len(set(r.selection for r in again.ranked)) == len(again.ranked), where


@pytest.mark.parametrize("case", [(s, 4) for s in (2, 26, 31, 50)] + [(s, None) for s in (3, 7)])
def test_search_split_by_required_dies_equals_the_whole_search(case):
    """Designs of one part of the candidate dies, then (``require``) those holding at
    least one die of the rest: together the same optimum and top 3 as one search over
    all of them (the second search of `generated_search` relies on this)."""
    from optimizer.solver.search import milp_search

    seed, blocks = case
    evaluator = Evaluator(parse_problem(random_problem(seed, blocks=blocks)))
    whole = milp_search(evaluator, top=3)
    # split by position: first part = the first half of each packaging's candidates
    halves = {g: len(c) // 2 for g, c in whole.candidates.items()}
    first = milp_search(
        evaluator,
        top=3,
        candidates={g: c.take(np.arange(halves[g])) for g, c in whole.candidates.items()},
    )
    second = milp_search(
        evaluator,
        top=3,
        candidates=whole.candidates,
        seed=first.priced,
        require={g: np.arange(len(c)) >= halves[g] for g, c in whole.candidates.items()},
    )
    assert first.proven and second.proven
    merged = sorted(
        {
            *[(r.total_cost, r.selection) for r in first.ranked],
            *[(r.total_cost, r.selection) for r in second.ranked],
        }
    )[:3]
    expected = [r.total_cost for r in whole.ranked]
    got = [cost for cost, _ in merged]
    assert len(got) == len(expected)
    for a, b in zip(got, expected, strict=True):
        assert a == pytest.approx(b, rel=RTOL), (case, got, expected)


def test_a_die_priced_below_its_floor_stops_the_search():
    """The floor check is live: a die whose exact cost were below its floor (a defect
    that would make the generation miss columns) raises rather than passes."""
    from optimizer.invariants import InvariantViolation

    evaluator = Evaluator(parse_problem(random_problem(2, blocks=4)))
    floor = CostFloor(evaluator)
    cset = build_candidates(evaluator, 0, enumerate_contents(evaluator), prune=False)
    floor.check(cset.process, cset.instances, cset.prices)  # the true prices pass
    cheap = dataclasses.replace(
        cset.prices, cost_per_passed_die=cset.prices.cost_per_passed_die * 0.5
    )
    with pytest.raises(InvariantViolation, match="below its cost floor"):
        floor.check(cset.process, cset.instances, cheap)
