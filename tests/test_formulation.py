"""The integer program as arrays equals the same program stated in Pyomo.

The search builds its integer programs as arrays for HiGHS; `optimizer.solver.formulation`
states each constraint in Pyomo. Solving both (HiGHS under each, through different
interfaces) must give the same optimum: a check that the array form says what the
readable one says, on programs with targets, interposer carriers and process mixes.
"""

from __future__ import annotations

import math

import numpy as np

from optimizer.evaluator import Evaluator
from optimizer.problem import parse_problem
from optimizer.solver.candidates import build_candidates
from optimizer.solver.formulation import pyomo_program, solve_pyomo
from optimizer.solver.milp import build_columns, build_subproblem, solve_round
from optimizer.solver.selection import selection_mix
from tests.random_problems import random_problem

SEEDS = [1, 8, 12, 13, 23, 40, 64, 73, 90]


def _programs(seed: int):
    problem = parse_problem(random_problem(seed))
    evaluator = Evaluator(problem)
    for g, packaging in enumerate(problem.packaging):
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        if n_max < 2:
            continue
        cset = build_candidates(evaluator, g, by_process=True)
        if not len(cset):
            continue
        for n in range(2, min(n_max, 3) + 1):
            columns = build_columns(evaluator, cset, n)
            if columns is not None:
                yield problem, cset, columns


def test_array_program_equals_the_pyomo_statement():
    seen = 0
    for seed, (problem, cset, columns) in ((s, p) for s in SEEDS for p in _programs(s)):
        keep = np.arange(columns.n_cols)
        mixes = [None]
        if len(problem.process) > 1:
            mixes.append(tuple([columns.n_dies] + [0] * (len(problem.process) - 1)))
        for mix in mixes:
            process = cset.process if mix is not None else None
            sub = build_subproblem(columns, keep, mix, process)
            solve_round(sub)
            model, scale = pyomo_program(columns, keep, mix, process)
            theirs = solve_pyomo(model, scale)
            if theirs is None:
                assert sub.current is None and sub.exhausted, (seed, mix)
                continue
            ours = sub.bound  # optimal: the bound equals the optimum (to SOLVER_RTOL)
            assert sub.current is not None, (seed, mix)
            assert math.isclose(ours, theirs, rel_tol=1e-7), (seed, mix, ours, theirs)
            if mix is not None:
                assert selection_mix(sub.current, cset, len(problem.process)) == mix
            seen += 1
    assert seen >= 10, seen
