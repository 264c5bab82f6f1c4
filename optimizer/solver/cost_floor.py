"""A floor under the cost of every die that could hold a given block content.

The solver generates candidate dies on demand (:mod:`optimizer.solver.generation`):
instead of pricing every content a die could hold, it looks for the contents whose
columns could still improve a linear program. That search needs, for a content, a lower
bound of the exact cost of every die variant holding it (any process option, spare
units, array repair, design margin, critical-area option, defect-density target), cheap
enough to evaluate for millions of partial contents, and non-decreasing as blocks are
added. It rests on facts of the exact evaluator:

* a die's area is at least the area of its blocks (spares, repair rows, margins and the
  die-to-die interface only add area), and its gross dies per wafer do not grow with
  area (a smaller site fits wherever a larger one does; see the wafer module), so the
  exact count at the largest tabulated area at or below the die's is an upper bound;
* its yield is at most the mixed yield of the critical area of its blocks that have no
  spare or repair option, at the lowest defect density offered, with the smallest
  critical-area sensitivity offered (redundancy and the interface only lower yield;
  design margins only add parametric loss, bounded by the best margin offered);
* the wafer cost is at least the base cost plus the least per-wafer adder, the sort
  cost at least the process's, and the cost per passed die is (wafer share + sort) over
  the pass fraction Y^T (Williams and Brown), so it is at least that at the yield bound;
* NRE is the mask set plus the design cost, non-decreasing in area.

Every exactly priced die is checked against the floor (`check`): a die priced below its
floor would make the generation miss columns, so it stops the search as a defect.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from optimizer.evaluator import MM2_PER_CM2, Evaluator, die_shape_mm, gross_dies
from optimizer.formulas import defect_mixture, parametric
from optimizer.invariants import InvariantViolation

# areas are tabulated on this many steps between the smallest block and the largest die
TABLE_STEPS = 4096


@dataclass(frozen=True)
class ProcessFloor:
    """Per-process constants of the floor (arrays over the problem's blocks)."""

    unit_area: np.ndarray  # (B,) block area per instance, least growth applied [mm^2]
    unit_crit: np.ndarray  # (B,) critical area per instance that always kills [cm^2]
    max_area: float  # no die on this process is larger [mm^2]
    area_lo: float  # first tabulated area [mm^2]
    area_step: float
    gross: np.ndarray  # exact gross dies at area_lo + i area_step (non-increasing)
    wafer_cost: float  # least wafer cost with any target
    sort_cost: float
    coverage: float
    log_yield_cap: float  # systematic yield x best parametric yield, in logs
    density: float  # least defect density offered
    model: str
    alpha: float | None
    layers: float | None
    nre_fixed: float
    nre_per_mm2: float
    crit_step: float = 1.0  # yield penalty exp(-T ln Y) tabulated on this critical-area step
    penalty: np.ndarray | None = None  # at i crit_step [cm^2] (non-decreasing)
    escape: np.ndarray | None = None  # -ln(1 - defect level) = -(1 - T) ln Y, same grid


class CostFloor:
    """Lower bounds of the cost per passed die and the NRE of any die holding a content."""

    def __init__(self, evaluator: Evaluator):
        self.evaluator = evaluator
        problem = evaluator.problem
        blocks = evaluator.blocks
        redundant = np.zeros(blocks.n_blocks, dtype=bool)
        for b, block in enumerate(problem.block):
            spares = any(s > 0 for s in block.spare_choices)
            repair = block.repair is not None and any(r > 0 for r in block.repair.repair_choices)
            redundant[b] = spares or repair
        critical = (
            problem.critical_area_reduction.options()
            if problem.critical_area_reduction is not None
            else [(1.0, 0.0)]
        )
        least_sens = min(s for s, _ in critical)
        field = [p.reticle_width_mm * p.reticle_height_mm for p in problem.process]
        design = problem.design_cost
        self.processes: list[ProcessFloor] = []
        for p, process in enumerate(problem.process):
            margins = process.margin_options()
            growth = min(
                (1 + m_over) * (1 + c_over) for _, m_over in margins for _, c_over in critical
            )
            # least growth and least sensitivity taken apart: a product of minima is at
            # most the minimum of the products
            unit_area = blocks.area_mm2 * blocks.scale[p] * growth
            sensitive = blocks.area_mm2 * blocks.scale[p] * blocks.defect_sensitivity
            unit_crit = np.where(redundant, 0.0, sensitive * growth * least_sens) / MM2_PER_CM2
            max_area = min(problem.constraints.max_die_area_mm2, field[p])
            area_lo = float(unit_area.min())
            step = max(max_area - area_lo, 1e-6) / TABLE_STEPS
            grid = area_lo + step * np.arange(TABLE_STEPS + 1)
            width, height = die_shape_mm(grid, process)
            gross = gross_dies(process, width, height)
            two_sided = process.margin.two_sided if process.margin is not None else True
            soft = max(
                float(parametric.log_parametric_yield(np.array([s]), two_sided=two_sided)[0])
                for s, _ in margins
            )
            targets = process.defect_targets()
            # the most critical area any die on this process can have
            crit_top = float(np.max(unit_crit / unit_area)) * max_area
            crit_step = max(crit_top, 1e-9) / TABLE_STEPS
            density = min(d for d, _, _ in targets)
            log_y = defect_mixture.log_mixed_yield(
                process.yield_model,
                np.full(TABLE_STEPS + 2, density),
                crit_step * np.arange(TABLE_STEPS + 2),
                None,
                clustering_alpha=process.clustering_alpha,
                critical_layers=process.critical_layers,
            )
            cap = math.log(process.systematic_yield) + min(soft, 0.0)
            log_y = np.minimum(log_y + cap, 0.0)
            penalty = np.exp(-process.fault_coverage * log_y)
            # test escapes of the passed dies (Williams and Brown): ln(1 - DL) = (1 - T) ln Y
            escape = -(1.0 - process.fault_coverage) * log_y
            self.processes.append(
                ProcessFloor(
                    unit_area=unit_area,
                    unit_crit=unit_crit,
                    max_area=float(max_area),
                    area_lo=area_lo,
                    area_step=float(step),
                    # guard: never below a later entry (the count does not grow with area)
                    gross=np.maximum.accumulate(gross[::-1])[::-1],
                    wafer_cost=process.wafer_cost + min(a for _, _, a in targets),
                    sort_cost=process.sort_cost_per_die,
                    coverage=process.fault_coverage,
                    log_yield_cap=cap,
                    density=density,
                    model=process.yield_model,
                    alpha=process.clustering_alpha,
                    layers=process.critical_layers,
                    nre_fixed=process.mask_set_cost + design.per_die_design,
                    nre_per_mm2=design.per_mm2,
                    crit_step=crit_step,
                    penalty=np.maximum.accumulate(penalty),
                    escape=np.maximum.accumulate(escape),
                )
            )

    def program_floors(self) -> tuple[float, float, float]:
        """For programs over dies not all known (see `milp.build_columns`): the least
        cost per passed die of any die, the least test escape (none), the largest die."""
        cheapest = min(
            float(self.die_cost(p, np.array([f.unit_area.min()]), np.zeros(1))[0])
            for p, f in enumerate(self.processes)
        )
        return cheapest, 0.0, max(f.max_area for f in self.processes)

    def gross_cap(self, p: int, area: np.ndarray) -> np.ndarray:
        """Most gross dies per wafer of any die of at least ``area`` on process p."""
        f = self.processes[p]
        index = np.floor((np.asarray(area, dtype=float) - f.area_lo) / f.area_step)
        index = np.clip(index, 0, f.gross.size - 1).astype(np.int64)
        return f.gross[index]

    def die_cost(self, p: int, area: np.ndarray, crit_cm2: np.ndarray) -> np.ndarray:
        """Floor of the cost per passed die of any die of block area ``area`` [mm^2]
        whose always-killing critical area is ``crit_cm2``; infinite above the largest
        die the process allows.

        Both factors are read from tables at the grid point at or below the argument:
        the wafer share (gross dies do not grow with area) and the yield penalty
        exp(-T ln Y) (yield does not grow with critical area), so each is a floor.
        """
        f = self.processes[p]
        area = np.asarray(area, dtype=float)
        crit = np.asarray(crit_cm2, dtype=float)
        at = np.clip(np.floor(crit / f.crit_step), 0, f.penalty.size - 1).astype(np.int64)
        gross = self.gross_cap(p, area)
        with np.errstate(divide="ignore", over="ignore"):
            share = np.where(gross > 0, f.wafer_cost / np.maximum(gross, 1), np.inf)
            cost = (share + f.sort_cost) * f.penalty[at]
        return np.where(area <= f.max_area + 1e-9, cost, np.inf)

    def escape(self, p: int, crit_cm2: np.ndarray) -> np.ndarray:
        """Floor of -ln(1 - defect level) of any die of this always-killing critical
        area (table at the grid point at or below; escapes do not fall with area)."""
        f = self.processes[p]
        crit = np.asarray(crit_cm2, dtype=float)
        at = np.clip(np.floor(crit / f.crit_step), 0, f.escape.size - 1).astype(np.int64)
        return f.escape[at]

    def nre(self, p: int, area: np.ndarray) -> np.ndarray:
        f = self.processes[p]
        return f.nre_fixed + f.nre_per_mm2 * np.asarray(area, dtype=float)

    def content_area(self, p: int, instances: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Block area [mm^2] and always-killing critical area [cm^2] of contents."""
        f = self.processes[p]
        q = np.asarray(instances, dtype=float)
        return q @ f.unit_area, q @ f.unit_crit

    def check(self, process: np.ndarray, instances: np.ndarray, prices) -> None:
        """Raise if an exactly priced die costs less than its floor (a defect)."""
        for p in range(len(self.processes)):
            rows = np.flatnonzero(process == p)
            if rows.size == 0:
                continue
            area, crit = self.content_area(p, instances[rows])
            floor = self.die_cost(p, area, crit)
            cost = prices.cost_per_passed_die[rows]
            finite = np.isfinite(cost)
            low = finite & (cost < floor * (1 - 1e-9) - 1e-12)
            low |= prices.nre[rows] < self.nre(p, area) * (1 - 1e-9) - 1e-9
            if low.any():
                i = int(rows[np.flatnonzero(low)[0]])
                raise InvariantViolation(
                    f"die priced below its cost floor (process {p}, content "
                    f"{instances[i].tolist()}): {prices.cost_per_passed_die[i]!r} < "
                    f"{float(floor[np.flatnonzero(low)[0]])!r}"
                )
