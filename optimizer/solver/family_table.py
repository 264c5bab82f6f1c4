"""The decision table of each product within the family optimum.

For product i, the other products keep their designs of the family optimum: the dies
they use are already paid for (their NRE is zero for i), and each process they use is
already held to its defect-density target (i must use that density, at no one-time
cost; the target's per-wafer adder is folded into that process's wafer cost, which the
evaluator charges the same way). That is an ordinary single-product problem, so each
(packaging, die count) of product i is searched and proven as in the single-product
table. Each row's figure is the family profit with product i switched to that row's
design, priced exactly by :func:`optimizer.solver.family.family_profit`, and checked
against the search's own figure.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np

from optimizer.designs import DesignResult, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem
from optimizer.solver.candidates import build_candidates, enumerate_contents
from optimizer.solver.family import FamilySolution, die_key, family_profit, priced_die_key
from optimizer.solver.search import PROFIT_RTOL, milp_search
from optimizer.solver.selection import selection_specs

# a product's table is skipped above this many possible die contents (the generated
# search does not take changed NRE)
MAX_CONTENTS = 2**19


@dataclass(frozen=True)
class FamilyRow:
    """The best design of one architecture of one product, the others as in the optimum."""

    product: str
    packaging: str
    n_dies: int
    design: DesignResult | None  # priced alone (its own NRE)
    family_profit: float  # with this design in place of the product's optimum one
    proven: bool
    profit_bound: float  # no design of this architecture gives the family more
    optimum: bool  # the architecture of the product's design in the family optimum
    behind: float  # family optimum minus this row's family profit

    @property
    def label(self) -> str:
        dies = "1 die" if self.n_dies == 1 else f"{self.n_dies} dies"
        return f"{self.packaging}, {dies}"


def family_tables(
    solution: FamilySolution,
    problems: list[Problem],
    source: str = "<problem>",
    time_limit: float | None = None,
) -> dict[str, list[FamilyRow]]:
    """Per product, one row per (packaging, die count), best family profit first."""
    deadline = None if time_limit is None else time.perf_counter() + time_limit
    out: dict[str, list[FamilyRow]] = {}
    for i, name in enumerate(solution.names):
        rows = _product_rows(solution, problems, i, source, deadline)
        if rows is not None:
            out[name] = rows
    return out


def conditional_problem(problem: Problem, densities: dict[str, float]) -> Problem | None:
    """``problem`` with each process of ``densities`` held to that density at no one-time
    cost (None when a silicon interposer is made on such a process: its carrier would
    see the folded wafer cost)."""
    processes = []
    for p in problem.process:
        if p.name not in densities:
            processes.append(p)
            continue
        if any(g.interposer_process == p.name for g in problem.packaging):
            return None
        density = densities[p.name]
        adder = next(
            (w for d, _, w in p.defect_targets() if abs(d - density) <= 1e-12 * density), None
        )
        if adder is None:
            raise InvariantViolation(f"family table: no target {density!r} on '{p.name}'")
        processes.append(
            p.model_copy(
                update={
                    "defect_density_per_cm2": density,
                    "wafer_cost": p.wafer_cost + adder,
                    "defect_reduction": None,
                }
            )
        )
    return problem.model_copy(update={"process": processes})


def _product_rows(solution, problems, i, source, deadline) -> list[FamilyRow] | None:
    name = solution.names[i]
    member = problems[i]
    others = [d for j, d in enumerate(solution.designs) if j != i]
    paid = {die_key(die) for design in others for die in design.dies}
    densities = {die.process: die.defect_density_per_cm2 for d in others for die in d.dies}
    problem = conditional_problem(member, densities)
    if problem is None:
        return None
    evaluator = Evaluator(problem)
    member_evaluator = Evaluator(member)

    def adjust(prices, process, instances, spares, repairs, critical):
        nre = prices.nre.copy()
        for c in range(nre.size):
            key = priced_die_key(problem, prices, process, instances, spares, repairs, critical, c)
            if key in paid:
                nre[c] = 0.0
        return dataclasses.replace(prices, nre=nre)

    if int(np.prod(evaluator.blocks.count + 1)) > MAX_CONTENTS:
        return None
    contents = enumerate_contents(evaluator)
    candidates = {
        g: build_candidates(evaluator, g, contents, adjust=adjust, deadline=deadline)
        for g in range(len(problem.packaging))
    }
    revenue = problem.market.unit_price * problem.market.volume
    optimum = solution.designs[i]
    rows = []
    for g, packaging in enumerate(problem.packaging):
        n_max = 1 if packaging.kind == "single_die" else packaging.max_dies
        for n in range(1, min(n_max, problem.constraints.max_dies) + 1):
            found = milp_search(
                evaluator, top=1, architecture=(g, n), candidates=candidates, deadline=deadline
            )
            is_optimum = (packaging.name, n) == (optimum.packaging, optimum.n_dies)
            if not found.ranked:
                rows.append(
                    FamilyRow(
                        name,
                        packaging.name,
                        n,
                        None,
                        -math.inf,
                        found.proven,
                        -math.inf if found.proven else math.inf,
                        is_optimum,
                        math.inf,
                    )
                )
                continue
            best = found.ranked[0]
            specs = selection_specs(evaluator, candidates[g], best.selection)
            design = evaluate_specs(member_evaluator, specs, packaging.name, name, source)
            designs = list(solution.designs)
            designs[i] = design
            profit = family_profit(problems, designs)[0]
            # the search's figure differs from the family's by a constant: the other
            # products' profit and the costs they share with no one
            offset = solution.profit - _conditional(solution, problems, i, optimum, paid)
            mine = best.profit + offset
            if not math.isclose(profit, mine, rel_tol=1e-9, abs_tol=PROFIT_RTOL * abs(profit)):
                raise InvariantViolation(
                    f"family table: {name} on {packaging.name} x{n}: the family prices "
                    f"{profit!r}, the product's search {mine!r}"
                )
            bound = revenue - found.bound_total_cost + offset
            rows.append(
                FamilyRow(
                    name,
                    packaging.name,
                    n,
                    design,
                    profit,
                    found.proven,
                    max(bound, profit),
                    is_optimum,
                    solution.profit - profit,
                )
            )
    rows.sort(key=lambda r: -r.family_profit)
    return rows


def _conditional(solution, problems, i, design, paid) -> float:
    """Product i's profit with the others' dies and targets already paid for."""
    others = [d for j, d in enumerate(solution.designs) if j != i]
    shared_targets = {die.process for d in others for die in d.dies}
    nre = sum(die.nre for die in design.dies if die_key(die) in paid)
    one_time = 0.0
    for process in {die.process for die in design.dies} & shared_targets:
        problem = problems[i]
        p = next(x for x in problem.process if x.name == process)
        density = next(die.defect_density_per_cm2 for die in design.dies if die.process == process)
        one_time += next(
            (c for d, c, _ in p.defect_targets() if abs(d - density) <= 1e-12 * density), 0.0
        )
    return design.profit + nre + one_time


__all__ = ["FamilyRow", "conditional_problem", "family_tables"]
