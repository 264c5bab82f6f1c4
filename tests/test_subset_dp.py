"""The subset DP (``method="subset_dp"``) against brute force and the proven MILP search.

Outside truths: plain enumeration of set partitions for the DP kernel and its ranked
read-out; the exhaustive reference (every partition x variant x packaging priced by the
evaluator) on small random problems of the DP's class; the MILP search on medium ones.
All problems are invented data (``tests/random_problems.py``, ``benchmarks/tie_family.py``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from optimizer.evaluator import Evaluator
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import search, solve
from optimizer.solver.candidates import build_candidates, enumerate_contents
from optimizer.solver.exhaustive import exhaustive_search
from optimizer.solver.search import milp_search
from optimizer.solver.selection import price_selections
from optimizer.solver.subset_dp import (
    _best_paths,
    _levels,
    applicability,
    dp_seeds,
    seed_reason,
    subset_dp,
)
from tests.random_problems import _trim_to_budget, exhaustive_size, features_of, random_problem

sys.path.insert(0, str(Path(__file__).parent.parent / "benchmarks"))
from tie_family import tie_problem  # noqa: E402

RTOL = 1e-9


def close(a: float, b: float) -> bool:
    return abs(a - b) <= RTOL * max(abs(a), abs(b), 1.0)


# ------------------------------------------------------------------ the kernel


def set_partitions(items: list[int]):
    """Every partition of ``items`` into non-empty blocks (plain recursion)."""
    if not items:
        yield []
        return
    first, rest = items[0], items[1:]
    for part in set_partitions(rest):
        for i in range(len(part)):
            yield part[:i] + [[first, *part[i]]] + part[i + 1 :]
        yield [[first], *part]


@pytest.mark.parametrize("seed", range(8))
def test_kernel_and_ranking_match_enumeration(seed):
    rng = np.random.default_rng(seed)
    n_blocks = int(rng.integers(2, 8))
    top = int(rng.integers(1, 4))
    size = 1 << n_blocks
    # integer weights make exact ties; some contents forbidden
    w = rng.integers(1, 6, size=(size, top)).astype(float)
    w[rng.random(size) < 0.2] = np.inf
    w.sort(axis=1)
    c = np.arange(size * top).reshape(size, top)
    best = _levels(np.ascontiguousarray(w[:, 0]), n_blocks - 1, max(n_blocks - 1, 1))
    for n in range(2, n_blocks + 1):
        totals = []
        for part in set_partitions(list(range(n_blocks))):
            if len(part) != n:
                continue
            masks = [sum(1 << b for b in p) for p in part]
            # every choice of variant per part
            for pick in np.ndindex(*([top] * n)):
                totals.append(sum(w[m, j] for m, j in zip(masks, pick, strict=True)))
        totals = sorted(t for t in totals if np.isfinite(t))
        found = _best_paths(best, w, c, n_blocks, n, top)
        assert [v for v, _ in found] == totals[:top]
        for value, dies in found:
            # the candidate indices decode to a partition of the blocks at that weight
            masks = [int(d) // top for d in dies]
            assert sum(masks) == size - 1 and np.bitwise_or.reduce(masks) == size - 1
            assert sum(w[int(d) // top, int(d) % top] for d in dies) == value
        assert len({dies for _, dies in found}) == len(found)


# ------------------------------------------------------------------ whole problems


def class_problem(seed: int, blocks: int, budget: int = 40_000) -> dict:
    """A feature-rich random draw projected into the DP's class (invented numbers).

    Keeps spares, repair, margins, critical-area options, links, keep rules, die-area
    limits, mandates, several processes and packagings, ties; drops what couples dies:
    block counts above 1, test escapes, defect-reduction curves, interposers.
    """
    data = random_problem(seed, blocks=blocks, salvage=0.0, log_ratio=0.0, table=0.0)
    for block in data["block"]:
        block["count"] = 1
    for proc in data["process"]:
        proc["fault_coverage"] = 1.0
        proc.pop("defect_reduction", None)
    for pack in data["packaging"]:
        if pack["kind"] == "silicon_interposer":
            pack["kind"] = "stacked"
            for key in [k for k in pack if k.startswith("interposer")]:
                del pack[key]
    _trim_to_budget(data, np.random.default_rng(seed), budget)
    return data


def solve_or_none(problem, method: str, top: int):
    try:
        return solve(problem, top=top, method=method, refine=False)
    except ProblemError:
        return None


@pytest.mark.parametrize("seed", range(40))
def test_matches_exhaustive_on_random_class_problems(seed):
    blocks = 2 + seed % 5
    data = class_problem(seed, blocks)
    assert exhaustive_size(data) <= 80_000
    problem = parse_problem(data)
    assert applicability(problem) is None
    top = 1 + seed % 3
    ours = solve_or_none(problem, "subset_dp", top)
    brute = solve_or_none(problem, "exhaustive", top)
    if brute is None:
        assert ours is None
        return
    assert ours is not None and ours.proven_optimal
    assert ours.method == "subset_dp"
    assert len(ours.designs) == len(brute.designs)
    for a, b in zip(ours.designs, brute.designs, strict=True):
        assert close(a.profit, b.profit), (seed, a.profit, b.profit)


def best_by_architecture(priced: dict) -> dict:
    out: dict = {}
    for sel, total in priced.items():
        key = (sel.packaging_index, sel.n_dies)
        if np.isfinite(total):
            out[key] = min(out.get(key, np.inf), total)
    return out


@pytest.mark.parametrize("seed", range(40))
def test_best_of_every_architecture_matches_exhaustive(seed):
    # the winner is often one die: every (packaging, die count) is compared as well
    problem = parse_problem(class_problem(seed, 2 + seed % 5))
    evaluator = Evaluator(problem)
    ours = best_by_architecture(subset_dp(evaluator).priced)
    brute = best_by_architecture(exhaustive_search(evaluator).priced)
    assert ours.keys() == brute.keys()
    for key, total in brute.items():
        assert close(ours[key], total), (seed, key, ours[key], total)


@pytest.mark.parametrize(("seed", "blocks", "processes"), [(0, 7, 1), (1, 7, 3), (2, 8, 1)])
def test_tie_family_matches_exhaustive_top3(seed, blocks, processes):
    problem = parse_problem(tie_problem(seed, blocks, processes, max_dies=6))
    ours = solve(problem, top=3, method="subset_dp", refine=False)
    brute = solve(problem, top=3, method="exhaustive", refine=False)
    assert len(ours.designs) == 3
    for a, b in zip(ours.designs, brute.designs, strict=True):
        assert close(a.profit, b.profit), (a.profit, b.profit)


@pytest.mark.slow
@pytest.mark.parametrize(
    ("seed", "blocks", "processes"), [(3, 10, 1), (4, 10, 3), (5, 11, 3), (6, 12, 1)]
)
def test_matches_milp_on_medium_problems(seed, blocks, processes):
    problem = parse_problem(tie_problem(seed, blocks, processes))
    ours = solve(problem, top=2, method="subset_dp", refine=False)
    milp = solve(problem, top=2, method="milp", refine=False)
    assert ours.proven_optimal and milp.proven_optimal
    for a, b in zip(ours.designs, milp.designs, strict=True):
        assert close(a.profit, b.profit), (a.profit, b.profit)


@pytest.mark.slow
def test_matches_milp_with_options_and_links():
    # the tie family with what the DP handles per die: margins, a critical-area option,
    # links (interface area), a keep-apart rule, a die-area floor and a stacked option
    data = tie_problem(7, 10, processes=3, max_dies=5)
    data["process"][0]["margin"] = {"two_sided": False, "sigma": [3.0, 4.5]}
    data["process"][0]["margin"]["area_overhead"] = [0.0, 0.03]
    data["critical_area_reduction"] = {"sensitivity_factor": [0.8], "area_overhead": [0.02]}
    data["link"] = [
        {"blocks": ["b00", "b01"], "bandwidth": "400 GB/s"},
        {"blocks": ["b02", "b05"], "bandwidth": "150 GB/s"},
    ]
    data["constraints"]["keep_apart"] = [["b03", "b04"]]
    data["constraints"]["min_die_area"] = "12 mm^2"
    stacked = dict(data["packaging"][0], name="stack", kind="stacked", max_dies=3)
    stacked.update(bond_cost_per_die=1.5, bond_yield=0.997, carrier_cost=4.0)
    data["packaging"].append(stacked)
    problem = parse_problem(data)
    ours = solve(problem, top=2, method="subset_dp", refine=False)
    milp = solve(problem, top=2, method="milp", refine=False)
    assert ours.proven_optimal and milp.proven_optimal
    for a, b in zip(ours.designs, milp.designs, strict=True):
        assert close(a.profit, b.profit), (a.profit, b.profit)


# ------------------------------------------------------------------ applicability


def edited(edit) -> object:
    data = tie_problem(0, 5)
    edit(data)
    return parse_problem(data)


def _count(d):
    d["block"][2]["count"] = 2


def _coverage(d):
    d["process"][0]["fault_coverage"] = 0.99


def _curve(d):
    d["process"][0]["defect_reduction"] = {
        "form": "table",
        "points": [["0.05 /cm^2", 1.0e5, 50.0]],
    }


def _interposer(d):
    d["packaging"][0].update(
        kind="silicon_interposer",
        interposer_process=d["process"][0]["name"],
        interposer_max_area="3000 mm^2",
    )


@pytest.mark.parametrize(
    ("edit", "words"),
    [
        (_count, "block 'b02' has count 2"),
        (_coverage, "fault coverage 0.99"),
        (_curve, "defect-reduction curve"),
        (_interposer, "silicon interposer"),
    ],
)
def test_outside_the_class_is_a_one_line_error(edit, words):
    problem = edited(edit)
    with pytest.raises(ProblemError) as err:
        solve(problem, method="subset_dp", source="p.toml")
    line = str(err.value)
    assert "\n" not in line and line.startswith("p.toml: method: subset_dp does not apply")
    assert words in line


def test_one_die_packagings_only_need_no_separability():
    # with a single-die package only, escapes and curves couple nothing: still exact
    data = tie_problem(1, 4)
    data["packaging"] = [
        {"name": "plain", "kind": "single_die", "package_cost": 4.0, "final_test_cost": 2.0}
    ]
    data["process"][0]["fault_coverage"] = 0.95
    problem = parse_problem(data)
    assert applicability(problem) is None
    ours = solve(problem, method="subset_dp", refine=False)
    brute = solve(problem, method="exhaustive", refine=False)
    assert close(ours.best.profit, brute.best.profit)


def test_outcome_lists_the_best_of_every_die_count():
    problem = parse_problem(tie_problem(2, 6, max_dies=6))
    outcome = subset_dp(Evaluator(problem), top=1)
    assert outcome.proven and outcome.method == "subset_dp"
    assert sorted({sel.n_dies for sel in outcome.priced}) == [1, 2, 3, 4, 5, 6]
    assert outcome.bound_total_cost == outcome.ranked[0].total_cost


def test_deadline_in_the_past_returns_unproven():
    problem = parse_problem(tie_problem(3, 6))
    outcome = subset_dp(Evaluator(problem), deadline=0.0)
    assert not outcome.proven and outcome.bound_total_cost == -np.inf


# ------------------------------------------------------------------ seeds for the MILP search


def outside_problem() -> dict:
    """The tie family pushed outside the DP's exact class (invented numbers): test
    escapes, a tabled defect-reduction curve, links and a silicon-interposer option."""
    data = tie_problem(4, 7, processes=3, max_dies=4)
    data["process"][0]["fault_coverage"] = 0.97
    data["process"][1]["fault_coverage"] = 0.99
    data["process"][2]["defect_reduction"] = {
        "form": "table",
        "points": [["0.04 /cm^2", 2.0e4, 40.0]],
    }
    data["link"] = [
        {"blocks": ["b00", "b01"], "bandwidth": "300 GB/s"},
        {"blocks": ["b02", "b05"], "bandwidth": "120 GB/s"},
    ]
    interposer = dict(data["packaging"][0], name="bridge", kind="silicon_interposer")
    interposer.update(
        interposer_process="old", interposer_max_area="900 mm^2", interposer_extra_area="20 mm^2"
    )
    data["packaging"].append(interposer)
    return data


def test_seeds_outside_the_class_are_exact_designs_close_to_the_best():
    problem = parse_problem(outside_problem())
    reason = applicability(problem)
    assert reason is not None and seed_reason(problem) is None
    evaluator = Evaluator(problem)
    contents = enumerate_contents(evaluator)
    cands = {g: build_candidates(evaluator, g, contents) for g in range(len(problem.packaging))}
    seeds = dp_seeds(evaluator, cands, top=2)
    revenue = problem.market.unit_price * problem.market.volume
    seeded: dict = {}
    for sel in seeds:
        cset = cands[sel.packaging_index]
        # a partition of the blocks into distinct dies, each die once
        held = sum(cset.instances[c] * k for c, k in sel.dies)
        assert np.array_equal(held, np.ones(len(problem.block))) and sel.n_dies >= 2
        total = revenue - float(price_selections(evaluator, cset, [sel]).profit[0])
        key = (sel.packaging_index, sel.n_dies)
        seeded[key] = min(seeded.get(key, np.inf), total)
    brute = best_by_architecture(exhaustive_search(evaluator).priced)
    multi = {key for key in brute if key[1] >= 2}
    assert multi and multi <= seeded.keys()
    for key in multi:
        # the DP's weights only approximate escapes, the interposer and the curve:
        # its best design of each architecture is near the best, never below it
        assert brute[key] <= seeded[key] * (1 + RTOL), key
        assert seeded[key] <= brute[key] * 1.01, (key, seeded[key], brute[key])


def test_seeds_enter_the_search_as_priced_designs_and_solve_verifies():
    problem = parse_problem(outside_problem())
    evaluator = Evaluator(problem)
    outcome = milp_search(evaluator, top=2)
    assert any(line.startswith("subset DP seeds: ") for line in outcome.log)
    revenue = problem.market.unit_price * problem.market.volume
    seeds = dp_seeds(evaluator, outcome.candidates, top=2)
    assert seeds
    for sel in seeds:
        cset = outcome.candidates[sel.packaging_index]
        exact = revenue - float(price_selections(evaluator, cset, [sel]).profit[0])
        assert outcome.priced[sel] == exact
    # under a time limit the answer (seeded or not) passes the solver's own checks
    limited = solve(problem, top=2, method="milp", time_limit=20, refine=False)
    brute = solve(problem, top=2, method="exhaustive", refine=False)
    assert limited.proven_optimal
    for a, b in zip(limited.designs, brute.designs, strict=True):
        assert close(a.profit, b.profit), (a.profit, b.profit)


def seedable_problem(seed: int, blocks: int) -> dict:
    """A feature-rich random draw with every block count 1 (invented numbers): test
    escapes, curves and interposers stay, so that most draws are outside the DP's
    exact class but open to its seeds."""
    data = random_problem(seed, blocks=blocks, salvage=0.0, low_coverage=0.5)
    for block in data["block"]:
        block["count"] = 1
    _trim_to_budget(data, np.random.default_rng(seed), 40_000)
    return data


SEEDING_DRAWS = range(30)


@pytest.mark.parametrize("seed", SEEDING_DRAWS)
def test_seeding_never_changes_a_proven_optimum(seed):
    data = seedable_problem(seed, 3 + seed % 4)
    problem = parse_problem(data)
    assert seed_reason(problem) is None
    top = 1 + seed % 2
    ours = solve_or_none(problem, "milp", top)
    brute = solve_or_none(problem, "exhaustive", top)
    where = f"seed {seed}: {' '.join(features_of(data))}"
    if brute is None:
        assert ours is None, where
        return
    assert ours is not None and ours.proven_optimal, where
    assert len(ours.designs) == len(brute.designs), where
    for a, b in zip(ours.designs, brute.designs, strict=True):
        assert close(a.profit, b.profit), (where, a.profit, b.profit)


def test_seeding_draws_reach_outside_the_class_and_seed():
    # the draws above must exercise the seeds outside the exact class, not just beside it
    outside = seeded = 0
    for seed in SEEDING_DRAWS:
        problem = parse_problem(seedable_problem(seed, 3 + seed % 4))
        if applicability(problem) is None:
            continue
        outside += 1
        evaluator = Evaluator(problem)
        outcome = milp_search(evaluator)
        seeded += any(
            line.startswith("subset DP seeds: ") and not line.startswith("subset DP seeds: 0 ")
            for line in outcome.log
        )
    assert outside >= 15 and seeded >= 10, (outside, seeded)


def test_time_limited_milp_is_near_the_optimum_on_the_tie_family():
    # 18 blocks, up to 16 dies (measured on a 2-core machine): without the seeds
    # (search.DP_SEEDING off) a 5 s limit returned a design 11.8% dearer per good unit
    # than the optimum and the proof took 10 to 15 s; with them it takes about 4 s and
    # the optimum is among the first incumbents, 2 s in
    problem = parse_problem(tie_problem(0, 18, max_dies=16))
    assert search.DP_SEEDING
    found = solve(problem, top=1, method="milp", time_limit=20, refine=False)
    exact = solve(problem, top=1, method="subset_dp", refine=False)
    assert exact.proven_optimal
    ratio = found.best.cost_per_good_unit / exact.best.cost_per_good_unit
    assert 1 - RTOL <= ratio <= 1.01, ratio
    # and it is the seeds that found it (whatever the machine's speed)
    lines = [line for line in found.log if line.startswith("subset DP seeds: ")]
    assert len(lines) == 1, found.log[:4]
    seeded = float(lines[0].split("best total cost ")[1].split(",")[0])
    revenue = problem.market.unit_price * problem.market.volume
    assert seeded <= (revenue - exact.best.profit) * 1.01, (lines[0], exact.best.profit)
