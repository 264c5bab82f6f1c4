"""Continuous refinement of defect-density targets for the winning design.

The integer program chooses each process's target among a few levels of its curve. For
a ``log_ratio`` curve any target in [floor, base] is allowed, so the winner's targets are
then refined continuously, one process at a time (bounded Brent search in log D), with
every trial priced exactly by the evaluator. Mandates are kept: die yield falls and
defect level rises with the defect density, so the targets that meet a mandated minimum
yield or maximum defect level are an interval [floor, D_max], found by bisection, and
the search stays inside it.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

from scipy.optimize import minimize_scalar

from optimizer.designs import DesignResult, DieSpec, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.problem import Requirements


def meets(result: DesignResult) -> bool:
    """Whether a design priced against the mandates meets every one of them."""
    return not any(v.startswith("requirements.") for v in result.violations)


def refine_targets(
    evaluator: Evaluator,
    specs: list[DieSpec],
    packaging: str,
    name: str,
    sweeps: int = 2,
    requirements: Requirements | None = None,
    deadline: float | None = None,
) -> tuple[list[DieSpec], DesignResult]:
    """Best continuous defect-density targets for a fixed design (specs, packaging),
    within the mandated die yield and defect level (the problem's own by default);
    past ``deadline`` it returns the best found so far."""
    problem = evaluator.problem
    need = requirements if requirements is not None else problem.requirements

    def with_target(current: list[DieSpec], process: str, density: float) -> list[DieSpec]:
        return [
            replace(s, defect_density_per_cm2=density) if s.process == process else s
            for s in current
        ]

    best_specs = specs
    best = evaluate_specs(evaluator, specs, packaging, name, requirements=need)
    used = sorted({s.process for s in specs})
    for _ in range(sweeps):
        improved = False
        for pname in used:
            if deadline is not None and time.perf_counter() > deadline:
                return best_specs, best
            process = problem.process[problem.process_index(pname)]
            curve = process.defect_reduction
            if curve is None or curve.form != "log_ratio":
                continue
            lo, hi = math.log(curve.floor_per_cm2), math.log(process.defect_density_per_cm2)
            if need.min_die_yield is not None or need.max_defect_level is not None:
                hi = _highest_allowed(
                    lambda log_d, pname=pname, start=best_specs: meets(
                        evaluate_specs(
                            evaluator,
                            with_target(start, pname, math.exp(log_d)),
                            packaging,
                            name,
                            requirements=need,
                        )
                    ),
                    lo,
                    hi,
                )
                if hi is None:
                    continue

            def loss(log_d: float, pname=pname, start=best_specs) -> float:
                trial = with_target(start, pname, math.exp(log_d))
                return -evaluate_specs(evaluator, trial, packaging, name, requirements=need).profit

            found = minimize_scalar(
                loss, bounds=(lo, hi), method="bounded", options={"xatol": 1e-12, "maxiter": 500}
            )
            candidates = [found.x, lo, hi]
            values = [loss(x) for x in candidates]
            x = candidates[min(range(3), key=values.__getitem__)]
            trial = with_target(best_specs, pname, math.exp(x))
            result = evaluate_specs(evaluator, trial, packaging, name, requirements=need)
            if result.profit > best.profit and meets(result):
                improved = improved or result.profit > best.profit * (1 + 1e-12)
                best_specs, best = trial, result
        if not improved:
            break
    return best_specs, best


def _highest_allowed(allowed, lo: float, hi: float, steps: int = 60) -> float | None:
    """Largest x in [lo, hi] with allowed(x), for a predicate true below some point."""
    if allowed(hi):
        return hi
    if not allowed(lo):
        return None
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        if allowed(mid):
            lo = mid
        else:
            hi = mid
    return lo
