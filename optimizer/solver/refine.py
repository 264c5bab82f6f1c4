"""Continuous refinement of defect-density targets for the winning design.

The integer program chooses each process's target among a few levels of its curve. For
a ``log_ratio`` curve any target in [floor, base] is allowed, so the winner's targets are
then refined continuously, one process at a time (bounded Brent search in log D), with
every trial priced exactly by the evaluator.
"""

from __future__ import annotations

import math
from dataclasses import replace

from scipy.optimize import minimize_scalar

from optimizer.designs import DesignResult, DieSpec, evaluate_specs
from optimizer.evaluator import Evaluator


def refine_targets(
    evaluator: Evaluator, specs: list[DieSpec], packaging: str, name: str, sweeps: int = 2
) -> tuple[list[DieSpec], DesignResult]:
    """Best continuous defect-density targets for a fixed design (specs, packaging)."""
    problem = evaluator.problem

    def with_target(current: list[DieSpec], process: str, density: float) -> list[DieSpec]:
        return [
            replace(s, defect_density_per_cm2=density) if s.process == process else s
            for s in current
        ]

    best_specs = specs
    best = evaluate_specs(evaluator, specs, packaging, name)
    used = sorted({s.process for s in specs})
    for _ in range(sweeps):
        improved = False
        for pname in used:
            process = problem.process[problem.process_index(pname)]
            curve = process.defect_reduction
            if curve is None or curve.form != "log_ratio":
                continue
            lo, hi = math.log(curve.floor_per_cm2), math.log(process.defect_density_per_cm2)

            def loss(log_d: float, pname=pname, start=best_specs) -> float:
                trial = with_target(start, pname, math.exp(log_d))
                return -evaluate_specs(evaluator, trial, packaging, name).profit

            found = minimize_scalar(
                loss, bounds=(lo, hi), method="bounded", options={"xatol": 1e-12, "maxiter": 500}
            )
            candidates = [found.x, lo, hi]
            values = [loss(x) for x in candidates]
            x = candidates[min(range(3), key=values.__getitem__)]
            trial = with_target(best_specs, pname, math.exp(x))
            result = evaluate_specs(evaluator, trial, packaging, name)
            if result.profit > best.profit:
                improved = improved or result.profit > best.profit * (1 + 1e-12)
                best_specs, best = trial, result
        if not improved:
            break
    return best_specs, best
