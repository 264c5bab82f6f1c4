"""The optimizer: choose partition, process per die, packaging and redundancy for profit.

:func:`solve` runs the proven integer-programming search (or the exhaustive reference)
and returns a :class:`Solution` whose every figure comes from the evaluator.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from optimizer.designs import DesignResult, evaluate_specs
from optimizer.evaluator import COST_COMPONENTS, Evaluator
from optimizer.problem import Problem, ProblemError, Requirements
from optimizer.solver import progress
from optimizer.solver.architectures import ArchitectureRow, decision_table
from optimizer.solver.exhaustive import exhaustive_search
from optimizer.solver.infeasibility import explain_infeasible, explain_requirements
from optimizer.solver.refine import refine_targets
from optimizer.solver.search import (
    PROFIT_RTOL,
    SearchOutcome,
    milp_search,
    profit_bound,
    relative_gap,
    tie_tolerance,
)
from optimizer.solver.selection import selection_specs
from optimizer.solver.subset_dp import applicability, subset_dp
from optimizer.solver.verify import verify_solution

METHODS = ("auto", "milp", "exhaustive", "subset_dp")


def choose_method(problem: Problem) -> str:
    """The exact method for ``problem``: the subset dynamic program where it is exact
    (it proves the many-near-ties problems the integer programs find hardest), else the
    integer-programming search."""
    return "subset_dp" if applicability(problem) is None else "milp"


# above this many block contents (before the area limit) candidate dies are generated on
# demand rather than all priced up front: from 20 single blocks (1 million contents),
# where generating was 1.9x faster in 0.35 GB instead of 3.9 GB
# (benchmarks/bench_generation.py)
GENERATE_ABOVE_CONTENTS = 2**19


def too_many_contents(evaluator: Evaluator) -> bool:
    """Whether pricing every content a die could hold would not fit time and memory."""
    contents = float(np.prod(evaluator.blocks.count.astype(float) + 1))
    return contents > GENERATE_ABOVE_CONTENTS


@dataclass(frozen=True)
class Solution:
    """Ranked designs (best first), the proof, and how the winner beats the runner-up."""

    designs: list[DesignResult]
    method: str
    proven_optimal: bool
    profit_bound: float
    gap: float  # relative to profit
    seconds: float
    stats: dict
    log: list[str]
    difference: list[dict] = field(default_factory=list)
    targets_refined: bool = False  # winner's defect targets refined beyond the levels
    proof: str = ""  # what the claim covers, in words
    tie_tolerance: float = 0.0  # money within which designs count as tied
    refined_gain: float = 0.0  # profit the continuous refinement added beyond the proof
    # relative to total cost (volume x cost per good unit + one-time costs - salvage):
    # at a high price a small profit gap can hide a much dearer design
    cost_gap: float = 0.0
    # the best design of every architecture (packaging, die count), best first
    architectures: list[ArchitectureRow] = field(default_factory=list)

    @property
    def best(self) -> DesignResult:
        return self.designs[0]

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "proven_optimal": self.proven_optimal,
            "profit_bound": self.profit_bound,
            "gap": self.gap,
            "cost_gap": self.cost_gap,
            "seconds": self.seconds,
            "stats": self.stats,
            "targets_refined": self.targets_refined,
            "proof": self.proof,
            "tie_tolerance": self.tie_tolerance,
            "refined_gain": self.refined_gain,
            "best": self.designs[0].to_dict(),
            "ranked": [d.to_dict() for d in self.designs],
            "difference_to_runner_up": self.difference,
            "architectures": [row.to_dict() for row in self.architectures],
        }

    def distinct_architectures(self, k: int) -> list[DesignResult]:
        """The best design of each of the ``k`` most profitable architectures."""
        return [row.design for row in self.architectures if row.design is not None][:k]


def _has_continuous_targets(problem: Problem, specs) -> bool:
    for spec in specs:
        curve = problem.process[problem.process_index(spec.process)].defect_reduction
        if curve is not None and curve.form == "log_ratio":
            return True
    return False


def explain_difference(winner: DesignResult, runner_up: DesignResult) -> list[dict]:
    """Cost components per good unit where the two designs differ, largest first.

    Positive ``advantage`` means the winner is cheaper in that component.
    """
    rows = [
        {
            "component": name,
            "winner": winner.breakdown[name],
            "runner_up": runner_up.breakdown[name],
            "advantage": runner_up.breakdown[name] - winner.breakdown[name],
        }
        for name in COST_COMPONENTS
    ]
    rows.sort(key=lambda r: -abs(r["advantage"]))
    return [r for r in rows if abs(r["advantage"]) > 1e-9]


def solve(
    problem: Problem,
    top: int = 3,
    method: str = "milp",
    time_limit: float | None = None,
    source: str = "<problem>",
    candidate_cache: dict | None = None,
    requirements: Requirements | None = None,
    refine: bool = True,
    deadline: float | None = None,
    architectures: bool = False,
    table_time: float | None = 10.0,
    split_mixes: int = 0,
) -> Solution:
    """Find the most profitable design(s) over every admissible choice in the problem.

    ``time_limit`` (seconds from this call) or ``deadline`` (a `time.perf_counter`
    instant, for callers that share one budget over several solves) bound the whole
    solve, pricing included. ``candidate_cache`` (a dict the caller keeps) lets several
    solves of problems that differ only in the market section share their priced
    candidate dies. Every design is checked against the problem's rules and mandates,
    and a proven answer against its bound, before it is returned.

    With ``architectures`` the solution also holds the decision table: the best design
    of every (packaging, die count), each proven within it or, past ``table_time``
    seconds spent on the table (None: no limit) or the deadline, with its own bound;
    the optimum's and the ``split_mixes`` best multi-die architectures are split by
    process mix.
    """
    if time_limit is not None:
        limit = time.perf_counter() + time_limit
        deadline = limit if deadline is None else min(deadline, limit)
    need = requirements if requirements is not None else problem.requirements
    evaluator = Evaluator(problem)
    if method == "auto":
        method = choose_method(problem)
    progress.begin()
    if method == "milp" and too_many_contents(evaluator):
        from optimizer.solver.generation import generated_search

        outcome: SearchOutcome = generated_search(
            evaluator, top=top, deadline=deadline, requirements=requirements
        )
    elif method == "milp":
        outcome = milp_search(
            evaluator,
            top=top,
            deadline=deadline,
            candidate_cache=candidate_cache,
            requirements=requirements,
        )
    elif method == "exhaustive":
        progress.stage("pricing every design (exhaustive reference)")
        outcome = exhaustive_search(
            evaluator, top=top, requirements=requirements, deadline=deadline
        )
    elif method == "subset_dp":
        progress.stage("pricing candidate dies and combining them (subset DP)")
        outcome = subset_dp(
            evaluator, top=top, requirements=requirements, deadline=deadline, source=source
        )
    else:
        raise ValueError(f"unknown method {method!r}; use one of {METHODS}")
    if not outcome.ranked:
        if outcome.proven and need.any():
            reason = explain_requirements(evaluator, need)
            if reason is not None:
                raise ProblemError(source, "requirements", reason)
        if outcome.proven:
            raise ProblemError(source, "constraints", explain_infeasible(evaluator))
        if outcome.stats.get("contents_generated") is not None and not outcome.stats.get(
            "timed_out"
        ):
            raise ProblemError(
                source,
                "constraints",
                "no admissible design among the candidate dies generated for this large "
                "problem (not a proof that none exists); " + explain_infeasible(evaluator),
            )
        raise ProblemError(
            source,
            "--time-limit",
            "no design found within the time limit (it counts from the start of the "
            "command, loading and pricing included); raise --time-limit",
        )
    progress.stage("checking the answer")
    designs = []
    refined_gain = 0.0
    for rank, item in enumerate(outcome.ranked, start=1):
        cset = outcome.candidates[item.selection.packaging_index]
        specs = selection_specs(evaluator, cset, item.selection)
        packaging = problem.packaging[item.selection.packaging_index].name
        result = evaluate_specs(
            evaluator, specs, packaging, f"rank{rank}", source, requirements=need
        )
        if refine and rank == 1 and _has_continuous_targets(problem, specs):
            _, better = refine_targets(
                evaluator, specs, packaging, "rank1", requirements=need, deadline=deadline
            )
            # gains within float noise of the profit are no refinement
            if better.profit > result.profit + PROFIT_RTOL * abs(result.profit):
                refined_gain = better.profit - result.profit
                result = better
        designs.append(result)
    difference = explain_difference(designs[0], designs[1]) if len(designs) > 1 else []
    if refined_gain > 0:
        outcome.log.append(
            f"winner's defect-density targets refined continuously: profit {designs[0].profit:.10g}"
            f" (+{refined_gain:.6g} over the best at the stated levels)"
        )
    bound = profit_bound(outcome, evaluator)
    proven_profit = outcome.ranked[0].profit
    tolerance = tie_tolerance(
        problem.market.unit_price * problem.market.volume, outcome.ranked[0].total_cost
    )
    verify_solution(
        problem,
        designs,
        need,
        proven=outcome.proven,
        bound_profit=bound,
        proven_profit=proven_profit,
        tolerance=tolerance,
    )
    gap = relative_gap(outcome, evaluator)
    progress.settle(designs[0].profit, bound, 0.0 if outcome.proven else gap)
    rows: list[ArchitectureRow] = []
    if architectures:
        table_deadline = deadline
        if table_time is not None:
            own = time.perf_counter() + table_time
            table_deadline = own if deadline is None else min(deadline, own)
        rows = decision_table(
            evaluator,
            outcome,
            designs[0],
            outcome.proven,
            max(bound, designs[0].profit),
            need,
            source,
            deadline=table_deadline,
            split=split_mixes,
        )
    progress.finish()
    return Solution(
        designs=designs,
        method=outcome.method,
        proven_optimal=outcome.proven,
        profit_bound=bound,
        gap=0.0 if outcome.proven else gap,
        cost_gap=0.0 if outcome.proven else cost_gap(outcome, evaluator),
        seconds=outcome.seconds,
        stats=outcome.stats,
        log=outcome.log,
        difference=difference,
        targets_refined=refined_gain > 0,
        proof=proof_statement(problem, outcome, tolerance, refined_gain),
        tie_tolerance=tolerance,
        refined_gain=refined_gain,
        architectures=rows,
    )


def cost_gap(outcome: SearchOutcome, evaluator: Evaluator) -> float:
    """Gap between the best total cost found and the proven cost bound, relative."""
    if not outcome.ranked:
        return math.inf
    best = outcome.ranked[0].total_cost
    return max(0.0, (best - outcome.bound_total_cost) / max(abs(best), 1e-12))


def proof_statement(
    problem: Problem, outcome: SearchOutcome, tolerance: float, refined_gain: float
) -> str:
    """What the answer's claim covers, in words."""
    levels = any(
        p.defect_reduction is not None and p.defect_reduction.form == "log_ratio"
        for p in problem.process
    )
    if outcome.proven:
        text = (
            f"proven optimal ({outcome.method}): no admissible design is more profitable by "
            f"more than {tolerance:.3g} {problem.market.currency} (designs closer count as "
            "ties)"
        )
        if levels:
            text += ", with defect-density targets at the levels each curve lists"
    elif math.isfinite(outcome.bound_total_cost):
        text = (
            "not proven: stopped at the time limit; the profit bound holds for every "
            "design, and the gap is measured to it"
        )
    else:
        text = "not proven: stopped at the time limit before any bound was found"
    if refined_gain > 0:
        text += (
            f"; the winner's targets were then refined continuously, adding "
            f"{refined_gain:.6g} {problem.market.currency} of profit, which the proof does "
            "not cover"
        )
    return text


__all__ = ["METHODS", "Solution", "choose_method", "explain_difference", "solve"]
