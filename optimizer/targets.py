"""Yield targets priced, not mandated: the profit curve and the cost of a mandate.

* :func:`price_requirements` solves with and without mandated targets (minimum die yield,
  minimum sigma margin, maximum defect level) and reports the profit the mandate loses.
* :func:`profit_curve` re-prices the winning design across the defect-density targets its
  main process's cost curve allows and shows where profit peaks. Past the curve's floor
  the ``log_ratio`` form is extended (marked as extrapolated) to show that cost per good
  unit rises without bound as the yield target approaches 100%.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from optimizer import solver
from optimizer.designs import DesignResult, evaluate_specs, specs_from_result
from optimizer.evaluator import Evaluator
from optimizer.problem import Problem, ProblemError, Requirements
from optimizer.solver import Solution


@dataclass(frozen=True)
class RequirementReport:
    """The unconstrained optimum, the optimum under the mandate, and what it costs."""

    requirements: Requirements
    free: Solution
    mandated: Solution

    @property
    def profit_lost(self) -> float:
        return self.free.best.profit - self.mandated.best.profit

    def to_dict(self) -> dict:
        return {
            "requirements": self.requirements.model_dump(),
            "profit_unconstrained": self.free.best.profit,
            "profit_mandated": self.mandated.best.profit,
            "profit_lost": self.profit_lost,
            "profit_lost_share": self.profit_lost / abs(self.free.best.profit),
        }


def price_requirements(
    problem: Problem,
    requirements: Requirements,
    top: int = 3,
    source: str = "<problem>",
    time_limit: float | None = None,
    method: str = "milp",
    deadline: float | None = None,
    **options,
) -> RequirementReport:
    """Solve with and without the mandated targets (the file's own requirements dropped).

    ``time_limit`` (seconds from this call) or ``deadline`` (a `time.perf_counter`
    instant) bounds both solves together: one wall-clock budget. ``options`` go to the
    mandated solve (the decision table, for example).
    """
    if time_limit is not None:
        limit = time.perf_counter() + time_limit
        deadline = limit if deadline is None else min(deadline, limit)
    common = dict(top=top, method=method, source=source, deadline=deadline)
    # through the module, so that a replaced solver.solve is the one used
    free = solver.solve(problem, requirements=Requirements(), **common)
    mandated = solver.solve(problem, requirements=requirements, **common, **options)
    return RequirementReport(requirements, free, mandated)


def main_curve_process(problem: Problem, design: DesignResult) -> str:
    """The process carrying most of the design's silicon among those with a cost curve."""
    area: dict[str, float] = {}
    for die in design.dies:
        if problem.process[problem.process_index(die.process)].defect_reduction is not None:
            area[die.process] = area.get(die.process, 0.0) + die.copies * die.area_mm2
    if not area:
        raise ProblemError(
            "<problem>",
            "process.defect_reduction",
            "none of the winning design's processes has a yield-improvement curve; add "
            "[process.defect_reduction] to price the yield target",
        )
    return max(area, key=area.get)


def profit_curve(
    problem: Problem, design: DesignResult, points: int = 61, tail_decades: float = 6.0
) -> pd.DataFrame:
    """Profit and cost per good unit of a fixed design against its yield target.

    Rows cover the targets the main process's curve allows (geometric in D for a
    ``log_ratio`` curve, the listed points for a table), then for ``log_ratio`` an
    extrapolated tail ``tail_decades`` decades below the floor (yield tends to 100%).
    """
    evaluator = Evaluator(problem)
    pname = main_curve_process(problem, design)
    process = problem.process[problem.process_index(pname)]
    curve = process.defect_reduction
    base = process.defect_density_per_cm2
    if curve.form == "log_ratio":
        allowed = base * (curve.floor_per_cm2 / base) ** np.linspace(0, 1, points)
    else:
        allowed = np.array([d for d, _, _ in process.defect_targets()])
    rows = [(float(d), False) for d in allowed]
    specs = specs_from_result(design)
    largest = max(
        (s for s in specs if s.process == pname),
        key=lambda s: next(d.area_mm2 for d in design.dies if d.name == s.name),
    )
    if curve.form == "log_ratio":
        # six decades below the floor: every yield model tends to 1 as A D -> 0
        tail = curve.floor_per_cm2 * np.logspace(0, -tail_decades, points)[1:]
        rows += [(float(d), True) for d in tail]
    records = []
    for density, extrapolated in rows:
        trial_specs = [
            replace(s, defect_density_per_cm2=density) if s.process == pname else s for s in specs
        ]
        if extrapolated:
            result = _price_extrapolated(evaluator, trial_specs, design.packaging, pname, density)
        else:
            result = evaluate_specs(evaluator, trial_specs, design.packaging, design.design)
        die = next(d for d in result.dies if d.name == largest.name)
        records.append(
            {
                "defect_density_per_cm2": density,
                "die_yield": die.die_yield,
                "hard_yield": die.hard_yield,
                "package_yield": result.package_yield,
                "cost_per_good_unit": result.cost_per_good_unit,
                "manufacturing_cost_per_good_unit": result.manufacturing_cost_per_good_unit,
                "improvement_spend": result.improvement_spend,
                "profit": result.profit,
                "extrapolated": extrapolated,
            }
        )
    frame = pd.DataFrame(records)
    frame.attrs["process"] = pname
    return frame


def _price_extrapolated(evaluator, specs, packaging, pname, density) -> DesignResult:
    """Price a target below the curve's floor by extending its log_ratio form."""
    problem = evaluator.problem
    process = problem.process[problem.process_index(pname)]
    # a copy of the problem whose floor admits this density; same costs per log ratio
    floor = process.defect_reduction.model_copy(update={"floor_per_cm2": density})
    patched = process.model_copy(update={"defect_reduction": floor})
    procs = [patched if p.name == pname else p for p in problem.process]
    extended = problem.model_copy(update={"process": procs})
    return evaluate_specs(Evaluator(extended), specs, packaging, "extrapolated")


def cost_rises_without_bound(frame: pd.DataFrame) -> bool:
    """Shape check: past the profit peak, cost per good unit keeps rising as yield -> 1."""
    ordered = frame.sort_values("hard_yield")
    peak = int(np.argmax(ordered["profit"].to_numpy()))
    after = ordered["cost_per_good_unit"].to_numpy()[peak:]
    return bool(after.size >= 2 and np.all(np.diff(after) > 0) and after[-1] > 2 * after[0])


def profit_curve_figure(frame: pd.DataFrame, currency: str, mandated_yield: float | None = None):
    """Profit and cost per good unit against the yield target (a matplotlib Figure).

    The x axis is the defect-limited yield of the design's largest die on the process
    whose target varies; the optimum and any mandated target are marked; the
    extrapolated tail past the curve's floor is dashed.
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8, 5), constrained_layout=True)
    ax = fig.add_subplot()
    inside = frame[~frame["extrapolated"]]
    tail = frame[frame["extrapolated"]]
    x_in = 100 * inside["hard_yield"]
    ax.plot(x_in, inside["profit"] / 1e6, color="tab:blue", label="profit")
    if len(tail):
        joined = pd.concat([inside.tail(1), tail])
        ax.plot(
            100 * joined["hard_yield"],
            joined["profit"] / 1e6,
            color="tab:blue",
            linestyle="--",
            label="profit (curve extended past its floor)",
        )
    best = inside.loc[inside["profit"].idxmax()]
    ax.axvline(
        100 * best["hard_yield"],
        color="tab:green",
        linestyle=":",
        label=f"optimum {100 * best['hard_yield']:.2f}%",
    )
    if mandated_yield is not None:
        ax.axvline(
            100 * mandated_yield,
            color="tab:red",
            linestyle="-.",
            label=f"mandated {100 * mandated_yield:.2f}%",
        )
    process = frame.attrs.get("process", "")
    ax.set_xlabel(f"yield target: defect-limited yield of the largest die on {process} [%]")
    ax.set_ylabel(f"profit [M {currency}]")
    right = ax.twinx()
    right.plot(x_in, inside["cost_per_good_unit"], color="tab:orange", label="cost per good unit")
    if len(tail):
        joined = pd.concat([inside.tail(1), tail])
        right.plot(
            100 * joined["hard_yield"],
            joined["cost_per_good_unit"],
            color="tab:orange",
            linestyle="--",
        )
    right.set_ylabel(f"cost per good unit [{currency}]")
    lines = ax.get_legend_handles_labels()
    more = right.get_legend_handles_labels()
    ax.legend(lines[0] + more[0], lines[1] + more[1], loc="lower left", fontsize=8)
    ax.set_title("Profit peaks below 100% yield; cost per good unit grows without bound")
    return fig
