"""The solver's pruning and bounding steps against their definitions and brute force.

Dominance pruning is checked against the definition written out as a plain double loop;
the joint bound over a range of die counts is checked against the per-count bounds and
against the exhaustive reference (every partition priced exactly).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from optimizer.evaluator import Evaluator
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve
from optimizer.solver.candidates import build_candidates, enumerate_contents, pareto_keep
from optimizer.solver.milp import build_columns, relax
from tests.test_solver import random_problem


def multi_die_packagings(problem, fewest_dies: int = 2):
    """(evaluator, packaging index, most dies, candidates) of every packaging of the
    problem that allows at least ``fewest_dies`` dies and has candidate dies."""
    evaluator = Evaluator(problem)
    contents = enumerate_contents(evaluator)
    for g, packaging in enumerate(problem.packaging):
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        if n_max < fewest_dies:
            continue
        cset = build_candidates(evaluator, g, contents)
        if len(cset):
            yield evaluator, g, n_max, cset


def dominators_by_definition(group, metrics):
    """Rows of the same group no worse everywhere and better somewhere, or an equal
    earlier row (the tie rule), counted for each row."""
    n = len(group)
    out = np.zeros(n, dtype=int)
    for i in range(n):
        for j in range(n):
            if i == j or group[i] != group[j]:
                continue
            no_worse = all(metrics[j] <= metrics[i])
            better = any(metrics[j] < metrics[i])
            tie_first = all(metrics[j] == metrics[i]) and j < i
            out[i] += (no_worse and better) or tie_first
    return out


@pytest.mark.parametrize("depth", [1, 2, 3])
@pytest.mark.parametrize("seed", range(5))
def test_pareto_keep_follows_the_definition(seed, depth):
    rng = np.random.default_rng(seed)
    n = 300
    group = rng.integers(0, 40, size=n)
    # few distinct values so that ties and dominance both occur often
    metrics = rng.integers(0, 4, size=(n, 3)).astype(float)
    expected = dominators_by_definition(group, metrics) < depth
    assert np.array_equal(pareto_keep(group, metrics, depth), expected)


# draws where a packaging of three or more dies has a feasible program (0, 4, 7, 8 and
# 12 have none)
@pytest.mark.parametrize("seed", [1, 2, 3, 5, 6, 9, 10, 11, 13, 14, 15, 17])
def test_joint_bound_over_die_counts_is_below_every_count(seed):
    # The joint program over die counts 2..n_max must bound every count's program from
    # below, and the true cost (exhaustive reference) of every multi-die design.
    problem = parse_problem(random_problem(seed))
    checked = 0
    for evaluator, _, n_max, cset in multi_die_packagings(problem, 3):
        joint = build_columns(evaluator, cset, 2, n_max)
        if joint is None:
            continue
        joint_bound = relax(joint)
        per_count = [build_columns(evaluator, cset, n) for n in range(2, n_max + 1)]
        for columns in per_count:
            if columns is None:
                continue
            assert joint.quick_bound() <= columns.quick_bound() * (1 + 1e-12) + 1e-6
            bound = relax(columns)
            if bound.feasible:
                assert joint_bound.feasible
                assert joint_bound.value <= bound.value * (1 + 1e-12) + 1e-6
        checked += 1
    assert checked > 0
    try:
        brute = solve(problem, top=40, method="exhaustive")
    except ProblemError:
        return
    revenue = problem.market.unit_price * problem.market.volume
    evaluator = Evaluator(problem)
    contents = enumerate_contents(evaluator)
    for design in brute.designs:
        n_dies = sum(die.copies for die in design.dies)
        g = [p.name for p in problem.packaging].index(design.packaging)
        n_max = min(problem.packaging[g].max_dies, problem.constraints.max_dies)
        if n_dies < 2 or n_max < 3:
            continue
        joint = build_columns(evaluator, build_candidates(evaluator, g, contents), 2, n_max)
        total_cost = revenue - design.profit
        assert math.isfinite(total_cost)
        assert relax(joint).value <= total_cost * (1 + 1e-9) + 1e-6


def test_row_groups_match_rowwise_unique():
    # Equal rows must share a group and different rows must not, as numpy.unique with
    # axis=0 groups them (the reference).
    from optimizer.solver.candidates import _row_groups

    rng = np.random.default_rng(7)
    rows = rng.integers(0, 3, size=(500, 6))
    ours = _row_groups(rows)
    reference = np.unique(rows, axis=0, return_inverse=True)[1].ravel()
    same_ours = ours[:, None] == ours[None, :]
    same_ref = reference[:, None] == reference[None, :]
    assert np.array_equal(same_ours, same_ref)


@pytest.mark.parametrize("seed", [0, 1, 2, 4, 5])
def test_programs_sharing_columns_equal_programs_built_alone(seed):
    # Lending the joint program's columns and matrix must not change a die count's
    # program; and its own duals give back its relaxation value (LP strong duality).
    from optimizer.solver.milp import dual_bound

    problem = parse_problem(random_problem(seed))
    for evaluator, _, n_max, cset in multi_die_packagings(problem, 3):
        joint = build_columns(evaluator, cset, 2, n_max)
        if joint is None:
            continue
        relax(joint)
        for n in range(2, n_max + 1):
            shared = build_columns(evaluator, cset, n, span=n_max, like=joint)
            alone = build_columns(evaluator, cset, n, span=n_max)
            a, b = relax(shared), relax(alone)
            assert a.feasible == b.feasible
            if a.feasible:
                assert a.value == pytest.approx(b.value, rel=1e-9)
                assert dual_bound(alone, b.row_dual) == pytest.approx(b.value, rel=1e-9)


# draws with a multi-die packaging whose programs exist (4 has none)
@pytest.mark.parametrize("seed", [0, 1, 2, 3, 5, 6, 7, 8])
def test_column_generation_reaches_the_full_relaxation(seed, monkeypatch):
    # Column generation from a tiny start (forced here, a few columns at a time) must end
    # at the optimum of the relaxation solved over all columns at once, and agree on
    # infeasibility; its value is the Lagrangian bound, never above the full optimum.
    from optimizer.solver import milp

    problem = parse_problem(random_problem(seed))
    compared = 0
    for evaluator, _, n_max, cset in multi_die_packagings(problem):
        for lo, hi in [(2, n_max)] + [(n, n) for n in range(2, n_max + 1)]:
            columns = build_columns(evaluator, cset, lo, hi)
            if columns is None:
                continue
            monkeypatch.setattr(milp, "_GENERATE_ABOVE", 10**9)
            full = relax(columns)
            monkeypatch.setattr(milp, "_GENERATE_ABOVE", 0)
            monkeypatch.setattr(milp, "_FIRST_COLUMNS", 2)
            monkeypatch.setattr(milp, "_ADD_COLUMNS", 3)
            generated = relax(columns)
            assert generated.feasible == full.feasible
            if full.feasible:
                assert generated.value <= full.value * (1 + 1e-9) + 1e-6
                assert generated.value == pytest.approx(full.value, rel=1e-7)
            compared += 1
    assert compared > 0


@pytest.mark.parametrize("seed", [0, 3, 6, 9])
def test_solver_with_column_generation_equals_exhaustive(seed, monkeypatch):
    # Outside truth: brute force. The whole search with column generation forced on
    # every relaxation must find the same best designs.
    from optimizer.solver import milp

    problem = parse_problem(random_problem(seed))
    try:
        brute = solve(problem, top=3, method="exhaustive")
    except ProblemError:
        return
    monkeypatch.setattr(milp, "_GENERATE_ABOVE", 0)
    monkeypatch.setattr(milp, "_FIRST_COLUMNS", 3)
    monkeypatch.setattr(milp, "_ADD_COLUMNS", 5)
    ours = solve(problem, top=3)
    assert ours.proven_optimal
    k = min(len(ours.designs), len(brute.designs))
    assert [d.profit for d in ours.designs[:k]] == pytest.approx(
        [d.profit for d in brute.designs[:k]], rel=1e-9
    )


def test_a_failing_integer_solve_is_retried_then_left_open(monkeypatch):
    # A solver error must neither loop forever nor close the program: the solve is
    # retried once without presolve, then the program is marked failed with its bound
    # kept open (the search then reports a gap, not a proof).
    import highspy

    from optimizer.solver import milp as milp_module
    from optimizer.solver.milp import build_subproblem, solve_round

    problem = parse_problem(random_problem(1))
    evaluator = Evaluator(problem)
    g = next(i for i, p in enumerate(problem.packaging) if p.max_dies >= 2)
    columns = build_columns(evaluator, build_candidates(evaluator, g), 2)
    sub = build_subproblem(columns, np.arange(columns.n_cols))
    sub.bound = 123.0
    calls = []

    def failing_run(h):
        calls.append(h.getOptionValue("presolve")[1])
        return highspy.HighsModelStatus.kSolveError

    monkeypatch.setattr(milp_module, "run_mip", failing_run)
    solve_round(sub)
    assert calls == ["choose", "off"]
    assert sub.failed and sub.exhausted and sub.current is None
    assert sub.bound == 123.0
