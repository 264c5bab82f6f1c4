"""The multiset dynamic program and its best-first listing of a program's designs.

References: the recursion over subsets for set partitioning (F. V. Fomin and D. Kratsch,
"Exact Exponential Algorithms", Springer 2010, ch. 3) checked against plain recursive
enumeration; the listing checked against the multiset-partition walk
(``partitions.enumerate_program``) and the exhaustive reference of the solver.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest

from optimizer.errors import ProblemError
from optimizer.evaluator import Evaluator
from optimizer.problem import parse_problem
from optimizer.solver import search, solve
from optimizer.solver.candidates import build_candidates, enumerate_contents
from optimizer.solver.milp import build_columns
from optimizer.solver.multiset_dp import ProgramDP, _tables
from optimizer.solver.partitions import enumerate_program
from optimizer.solver.selection import Selection, price_selections
from tests.random_problems import features_of, random_problem

RTOL = 1e-9


def _digits(index: int, radix: np.ndarray) -> tuple[int, ...]:
    out = []
    for r in radix:
        out.append(index % int(r))
        index //= int(r)
    return tuple(out)


@pytest.mark.parametrize("seed", range(6))
def test_tables_equal_plain_recursive_enumeration(seed):
    # random weights on every (multiset, copies) pair; the reference tries every item
    # in any order (no canonical first block), so it sees every partition many times
    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 4, size=3)
    radix = counts + 1
    states = int(np.prod(radix))
    n = 4
    weight = np.full((states, n + 1), np.inf)
    for s in range(1, states):
        for k in range(1, n + 1):
            digits = np.array(_digits(s, radix))
            if np.all(digits % k == 0) and rng.random() < 0.6:
                weight[s, k] = rng.uniform(1.0, 10.0)
    best = _tables(weight, radix.astype(np.int64), n)
    items = [(s, k) for s in range(1, states) for k in range(1, n + 1) if weight[s, k] < np.inf]

    @functools.cache
    def reference(r: int, m: int) -> float:
        if r == 0:
            return 0.0 if m == 0 else math.inf
        have = np.array(_digits(r, radix))
        out = math.inf
        for s, k in items:
            if k <= m and np.all(np.array(_digits(s, radix)) <= have):
                out = min(out, weight[s, k] + reference(r - s, m - k))
        return out

    for r in range(states):
        for m in range(n + 1):
            assert best[r, m] == pytest.approx(reference(r, m), rel=1e-12), (r, m)


def _program(seed: int, **knobs):
    problem = parse_problem(random_problem(seed, **knobs), f"seed{seed}")
    evaluator = Evaluator(problem)
    contents = enumerate_contents(evaluator)
    for g, packaging in enumerate(problem.packaging):
        if packaging.kind == "single_die":
            continue
        cset = build_candidates(evaluator, g, contents, prune=False)
        if len(cset) == 0:
            continue
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        for n in range(2, n_max + 1):
            columns = build_columns(evaluator, cset, n)
            if columns is not None:
                yield problem, evaluator, cset, columns


LISTING_SEEDS = [s for s in range(40) if len(features_of(random_problem(s))) >= 6][:10]


@pytest.mark.parametrize("seed", LISTING_SEEDS)
def test_listing_holds_every_design_once_in_order_below_its_cost(seed):
    for problem, evaluator, cset, columns in _program(seed):
        dp = ProgramDP(columns, evaluator.blocks.count)
        dp.build()
        stream = dp.designs(math.inf)
        listed: list[tuple[float, tuple[int, ...]]] = []
        while (item := stream.next_design(10**7)) is not None:
            listed.append(item)
        bounds = [f for f, _ in listed]
        assert bounds == sorted(bounds)
        # each multiset of columns once
        keys = [tuple(sorted(path)) for _, path in listed]
        assert len(keys) == len(set(keys))
        # every design of the walk over multiset partitions is listed (the listing may
        # also hold a die twice as two columns: the same design as one column of both)
        merged = {
            Selection.of(cset.packaging_index, [(columns.col_c[c], columns.col_k[c]) for c in p])
            for _, p in listed
        }
        walk = enumerate_program(
            evaluator, cset, np.arange(len(cset)), columns.n_dies, 10**6, 10**6
        )
        assert walk is not None
        designs, _ = walk
        walked = {sel for _, sel in designs}
        assert walked <= merged, (seed, columns.packaging_index, columns.n_dies)
        # and a bound never exceeds the exact cost of the design listed (a listing with a
        # die in two columns is bounded as two designs' NRE: its merged design has its own)
        distinct = [(f, p) for f, p in listed if len({columns.col_c[c] for c in p}) == len(p)]
        listed = distinct
        if listed:
            sels = [
                Selection.of(
                    cset.packaging_index, [(columns.col_c[c], columns.col_k[c]) for c in p]
                )
                for _, p in listed
            ]
            revenue = problem.market.unit_price * problem.market.volume
            exact = revenue - price_selections(evaluator, cset, sels).profit
            for (f, _), cost in zip(listed, exact, strict=True):
                assert f <= cost * (1 + RTOL) + 1e-6, (seed, f, cost)


@pytest.mark.parametrize("seed", range(300, 330))
def test_search_with_and_without_the_listing_equals_brute_force(seed, monkeypatch):
    # feature-rich draws (salvage with spares, repair, targets, margins, low coverage,
    # near ties) with the decision table: optimum, top 3 and every row
    problem = parse_problem(random_problem(seed), f"seed{seed}")
    try:
        brute = solve(problem, top=3, method="exhaustive", refine=False, architectures=True)
    except ProblemError:
        brute = None  # no admissible design: the search must say so too
    answers = []
    for on in (True, False):
        monkeypatch.setattr(search, "MULTISET_DP", on)
        kwargs = dict(top=3, method="milp", refine=False, architectures=True, table_time=None)
        if brute is None:
            with pytest.raises(ProblemError):
                solve(problem, **kwargs)
            continue
        answers.append(solve(problem, **kwargs))
    for found in answers:
        assert found.proven_optimal == brute.proven_optimal
        mine = [d.profit for d in found.designs]
        theirs = [d.profit for d in brute.designs]
        assert len(mine) == len(theirs)
        for a, b in zip(mine, theirs, strict=True):
            assert a == pytest.approx(b, rel=RTOL, abs=1e-6)
        rows = {(r.packaging, r.n_dies, r.mix): r for r in found.architectures}
        for row in brute.architectures:
            if row.design is None:
                continue
            mine_row = rows[(row.packaging, row.n_dies, row.mix)]
            assert mine_row.proven
            assert mine_row.profit == pytest.approx(row.profit, rel=RTOL, abs=1e-6)


def test_listing_closes_the_demo_rows_without_integer_programs():
    # the server demo's 7- and 8-die rows once took 10-20 s of integer programming each
    # (a 5% relaxation gap); the listing proves them with none
    from optimizer.problem import load_problem

    problem = load_problem("problems/server_processor.toml")
    evaluator = Evaluator(problem)
    base = search.milp_search(evaluator, top=1)
    for arch in [(2, 7), (1, 8)]:
        row = search.milp_search(
            evaluator, top=1, architecture=arch, candidates=base.candidates, seed=base.priced
        )
        assert row.proven
        assert row.stats["rounds"] == 0 and row.stats["dp_closed"] == 1


def test_work_estimate_counts_nested_pairs():
    # pairs (t <= r) of multisets with counts c: prod (c + 1)(c + 2) / 2; for count-1
    # blocks 3^B (each block in t, in r only, or in neither)
    class Shape:
        carrier_slopes = None
        group_level = None
        n_dies = 2

    assert ProgramDP.work(Shape, np.ones(5)) == pytest.approx(3**5 * 2)
    assert ProgramDP.work(Shape, np.array([2, 1])) == pytest.approx(6 * 3 * 2)
