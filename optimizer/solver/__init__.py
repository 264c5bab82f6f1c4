"""The optimizer: choose partition, process per die, packaging and redundancy for profit.

:func:`solve` runs the proven integer-programming search (or the exhaustive reference)
and returns a :class:`Solution` whose every figure comes from the evaluator.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from optimizer.designs import DesignResult, evaluate_specs
from optimizer.evaluator import COST_COMPONENTS, Evaluator
from optimizer.problem import Problem, ProblemError, Requirements
from optimizer.solver.exhaustive import exhaustive_search
from optimizer.solver.infeasibility import explain_infeasible, explain_requirements
from optimizer.solver.refine import refine_targets
from optimizer.solver.search import SearchOutcome, milp_search, profit_bound, relative_gap
from optimizer.solver.selection import selection_specs

METHODS = ("milp", "exhaustive")


@dataclass(frozen=True)
class Solution:
    """Ranked designs (best first), the proof, and how the winner beats the runner-up."""

    designs: list[DesignResult]
    method: str
    proven_optimal: bool
    profit_bound: float
    gap: float
    seconds: float
    stats: dict
    log: list[str]
    difference: list[dict] = field(default_factory=list)
    targets_refined: bool = False  # winner's defect targets refined beyond the levels

    @property
    def best(self) -> DesignResult:
        return self.designs[0]

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "proven_optimal": self.proven_optimal,
            "profit_bound": self.profit_bound,
            "gap": self.gap,
            "seconds": self.seconds,
            "stats": self.stats,
            "targets_refined": self.targets_refined,
            "best": self.designs[0].to_dict(),
            "ranked": [d.to_dict() for d in self.designs],
            "difference_to_runner_up": self.difference,
        }


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
) -> Solution:
    """Find the most profitable design(s) over every admissible choice in the problem.

    ``candidate_cache`` (a dict the caller keeps) lets several solves of problems that
    differ only in the market section share their priced candidate dies.
    """
    evaluator = Evaluator(problem)
    if method == "milp":
        outcome: SearchOutcome = milp_search(
            evaluator,
            top=top,
            time_limit=time_limit,
            candidate_cache=candidate_cache,
            requirements=requirements,
        )
    elif method == "exhaustive":
        outcome = exhaustive_search(evaluator, top=top, requirements=requirements)
    else:
        raise ValueError(f"unknown method {method!r}; use one of {METHODS}")
    if not outcome.ranked:
        need = requirements if requirements is not None else problem.requirements
        if outcome.proven and need.any():
            reason = explain_requirements(evaluator, need)
            if reason is not None:
                raise ProblemError(source, "requirements", reason)
        if outcome.proven:
            raise ProblemError(source, "constraints", explain_infeasible(evaluator))
        raise ProblemError(source, "", "no design found within the time limit; raise --time-limit")
    designs = []
    refined = False
    for rank, item in enumerate(outcome.ranked, start=1):
        cset = outcome.candidates[item.selection.packaging_index]
        specs = selection_specs(evaluator, cset, item.selection)
        packaging = problem.packaging[item.selection.packaging_index].name
        result = evaluate_specs(evaluator, specs, packaging, f"rank{rank}", source)
        if refine and rank == 1 and _has_continuous_targets(problem, specs):
            _, better = refine_targets(evaluator, specs, packaging, "rank1")
            if better.profit > result.profit:
                result, refined = better, True
        designs.append(result)
    difference = explain_difference(designs[0], designs[1]) if len(designs) > 1 else []
    if refined:
        outcome.log.append(
            f"winner's defect-density targets refined continuously: profit {designs[0].profit:.10g}"
        )
    gap = relative_gap(outcome, evaluator)
    return Solution(
        designs=designs,
        method=outcome.method,
        proven_optimal=outcome.proven,
        profit_bound=profit_bound(outcome, evaluator),
        gap=0.0 if outcome.proven else gap,
        seconds=outcome.seconds,
        stats=outcome.stats,
        log=outcome.log,
        difference=difference,
        targets_refined=refined,
    )


__all__ = ["METHODS", "Solution", "explain_difference", "solve"]
