"""The decision table: the best design of each (packaging, die count), against brute force.

Outside truth: the exhaustive reference prices every partition x process x option x
packaging with the same evaluator and prunes nothing, so the best design it priced within
one packaging and die count is that architecture's optimum. The problems are the
feature-rich random draws of ``tests/random_problems.py`` (invented numbers).
"""

from __future__ import annotations

import math

import pytest

from optimizer.evaluator import COST_COMPONENTS
from optimizer.problem import parse_problem
from optimizer.solver import solve
from optimizer.solver.architectures import gap_components
from tests.random_problems import features_of, random_problem
from tests.test_solver_random import SEEDS, solve_or_none, tolerance

# every feature of the random generator is in these draws (see test_solver_random)
TABLE_SEEDS = SEEDS[::2] + [8, 12, 13, 23, 64, 73]


def _table(problem, method: str):
    solution = solve_or_none_table(problem, method)
    if solution is None:
        return None
    return {(row.packaging, row.n_dies): row for row in solution.architectures}


def solve_or_none_table(problem, method: str):
    if solve_or_none(problem, method) is None:
        return None
    return solve(problem, top=1, method=method, refine=False, architectures=True, table_time=None)


@pytest.mark.parametrize("seed", TABLE_SEEDS)
def test_each_row_equals_the_brute_force_best_of_its_architecture(seed):
    data = random_problem(seed)
    problem = parse_problem(data)
    where = f"seed {seed}: {' '.join(features_of(data))}"
    brute = _table(problem, "exhaustive")
    ours = _table(problem, "milp")
    if brute is None:
        assert ours is None, where
        return
    assert set(ours) == set(brute), where
    for key, theirs in brute.items():
        mine = ours[key]
        if theirs.design is None:
            assert mine.design is None, f"{where} {key}: milp found {mine.design.profit!r}"
            assert mine.reason, f"{where} {key}: an empty row says why"
            continue
        assert mine.design is not None, f"{where} {key}: milp found none ({mine.reason})"
        assert mine.proven, f"{where} {key}"
        assert abs(mine.profit - theirs.profit) <= tolerance(theirs.profit), (
            f"{where} {key}: milp {mine.profit!r} vs exhaustive {theirs.profit!r}"
        )
        assert mine.profit <= mine.profit_bound + tolerance(mine.profit_bound), where


def test_rows_are_sorted_and_the_optimum_row_is_the_winner():
    problem = parse_problem(random_problem(12))
    solution = solve(problem, top=1, refine=False, architectures=True, table_time=None)
    rows = solution.architectures
    filled = [row for row in rows if row.design is not None]
    assert [row.profit for row in filled] == sorted((row.profit for row in filled), reverse=True)
    assert rows[0].optimum and rows[0].design is solution.best
    assert sum(row.optimum for row in rows) == 1
    # the K best distinct architectures: one design each, best first
    best = solution.distinct_architectures(3)
    keys = [(d.packaging, d.n_dies) for d in best]
    assert len(set(keys)) == len(keys) == min(3, len(filled))


def test_gap_components_add_up_to_the_profit_gap():
    # profit = revenue + salvage revenue - volume x cost per good unit (the evaluator's
    # definition), so the per-unit components times volume and the salvage difference
    # must add up to the profit gap between any two designs
    for seed in (8, 12, 40):
        problem = parse_problem(random_problem(seed))
        solution = solve(problem, top=1, refine=False, architectures=True, table_time=None)
        best = solution.best
        for row in solution.architectures:
            if row.design is None or row.optimum:
                continue
            parts = gap_components(best, row.design)
            assert set(parts) == {*COST_COMPONENTS, "salvage"}
            assert math.isclose(
                sum(parts.values()), best.profit - row.profit, rel_tol=1e-9, abs_tol=1e-6
            )
            assert parts == row.gap_components


def _two_block_problem(**constraints) -> dict:
    # invented numbers for a test fixture
    return {
        "title": "two blocks (invented test fixture)",
        "market": {"unit_price": 500.0, "volume": 100000},
        "constraints": {"max_dies": 4, **constraints},
        "process": [
            {
                "name": "p1",
                "wafer_diameter": "300 mm",
                "wafer_cost": 5000.0,
                "defect_density": "0.1 /cm^2",
                "yield_model": "poisson",
                "mask_set_cost": 1.0e6,
            }
        ],
        "packaging": [
            {"name": "mono", "kind": "single_die"},
            {
                "name": "multi",
                "kind": "organic_substrate",
                "max_dies": 4,
                "interface_density": "100 GB/s/mm^2",
            },
        ],
        "block": [
            {"name": "a", "area": "300 mm^2", "kind": "logic"},
            {"name": "b", "area": "300 mm^2", "kind": "logic"},
        ],
    }


def test_empty_rows_say_why():
    problem = parse_problem(_two_block_problem(max_die_area="400 mm^2"))
    solution = solve(problem, top=1, architectures=True, table_time=None)
    rows = {(row.packaging, row.n_dies): row for row in solution.architectures}
    # two block instances cannot fill three or four dies
    assert "only 2 block instances" in rows["multi", 3].reason
    assert "only 2 block instances" in rows["multi", 4].reason
    # 600 mm^2 of blocks do not fit one die of at most 400 mm^2
    assert "max_die_area" in rows["mono", 1].reason
    assert "max_die_area" in rows["multi", 1].reason
    assert rows["multi", 2].design is not None and rows["multi", 2].optimum
    assert all(row.proven for row in rows.values())


def test_a_time_limited_table_keeps_its_bounds_true():
    # with almost no time, rows may stay open; each still carries a bound no less than
    # its own design's profit, and the optimum row is the overall proof's
    problem = parse_problem(random_problem(23))
    solution = solve(problem, top=1, refine=False, architectures=True, table_time=1e-6)
    for row in solution.architectures:
        if row.design is not None:
            assert row.profit <= row.profit_bound + tolerance(row.profit_bound)
            assert row.proven or row.gap > 0 or math.isclose(row.profit, row.profit_bound)
        else:
            assert row.reason


# draws with designs and several processes, for the process-mix rows
MIX_SEEDS = [8, 12, 13, 23, 40, 64, 73, 90, 105]


@pytest.mark.parametrize("seed", MIX_SEEDS)
def test_each_process_mix_row_equals_the_brute_force_best_of_that_mix(seed):
    from optimizer.evaluator import Evaluator
    from optimizer.solver.exhaustive import exhaustive_search
    from optimizer.solver.selection import selection_mix

    data = random_problem(seed)
    problem = parse_problem(data)
    where = f"seed {seed}: {' '.join(features_of(data))}"
    # the seeds are chosen with designs and several processes: mixes to compare
    assert solve_or_none(problem, "milp") is not None and len(problem.process) >= 2, where
    ours = solve(problem, top=1, refine=False, architectures=True, table_time=None, split_mixes=10)
    # brute force keeping every priced design: the best of each (packaging, dies, mix)
    brute = exhaustive_search(Evaluator(problem), top=10**9)
    best: dict[tuple, float] = {}
    for sel, total in brute.priced.items():
        cset = brute.candidates[sel.packaging_index]
        key = (
            problem.packaging[sel.packaging_index].name,
            sel.n_dies,
            selection_mix(sel, cset, len(problem.process)),
        )
        profit = problem.market.unit_price * problem.market.volume - total
        best[key] = max(best.get(key, -math.inf), profit)
    names = [p.name for p in problem.process]
    checked = 0
    for row in ours.architectures:
        for sub in row.mixes:
            counts = tuple(
                sum(
                    int(part.split("x ")[0])
                    for part in sub.mix.split(" + ")
                    if part.endswith(f"x {n}")
                )
                for n in names
            )
            key = (row.packaging, row.n_dies, counts)
            assert sub.proven, f"{where} {key}"
            if key not in best:
                assert sub.design is None, f"{where} {key}: milp found {sub.profit!r}"
                continue
            assert sub.design is not None, f"{where} {key}: milp found none ({sub.reason})"
            assert abs(sub.profit - best[key]) <= tolerance(best[key]), (
                f"{where} {key}: milp {sub.profit!r} vs exhaustive {best[key]!r}"
            )
            checked += 1
    assert checked or not any(row.mixes for row in ours.architectures), where


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_rows_from_the_subset_method_equal_brute_force(seed):
    # the subset DP keeps the best design of every (packaging, die count) it priced, so
    # its table needs no extra search; it must still be brute force's, row by row
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parent.parent / "benchmarks"))
    from tie_family import tie_problem

    problem = parse_problem(tie_problem(seed, 7, processes=3))
    ours = solve(problem, top=1, method="auto", refine=False, architectures=True, table_time=None)
    assert ours.method == "subset_dp"
    brute = _table(problem, "exhaustive")
    mine = {(row.packaging, row.n_dies): row for row in ours.architectures}
    assert set(mine) == set(brute)
    for key, theirs in brute.items():
        assert (mine[key].design is None) == (theirs.design is None), key
        if theirs.design is not None:
            assert mine[key].proven
            assert abs(mine[key].profit - theirs.profit) <= tolerance(theirs.profit), key
