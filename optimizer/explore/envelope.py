"""Exact 1-D sweeps of a market number from a few solves (the upper envelope of lines).

When only ``market.volume`` or ``market.unit_price`` changes, every design's profit is an
affine function of it, P_d(x) = s_d x + b_d (profit = price x volume - volume x
manufacturing cost - one-time costs, the costs not depending on the market), provided
the problem has no salvage bins (their revenue saturates at the bin's demand) and no
continuous defect-reduction curve (the solver then tunes the winner's target to the
volume, a different design at every volume). The optimum f(x) = max_d P_d(x) is then
convex and piecewise linear, and the classic parametric scheme finds it exactly:

1. Solve at both ends of an interval [a, b]: winners A and B.
2. If A = B, A wins on all of [a, b]: for any design d, P_d <= P_A at a and at b, and
   both are affine, so P_d <= P_A between them.
3. Otherwise solve at x*, where the lines of A and B cross. If nothing beats them there,
   f equals max(P_A, P_B) on [a, b]: f is convex, so it lies below the chord of each
   half, and f >= max(P_A, P_B) everywhere. Else the new winner C splits the interval
   into [a, x*] and [x*, b]; repeat.

Each envelope segment costs about two solves, so a sweep of 1,000 volumes needs a
handful of solves; every grid point's winner is proven optimal when those solves are.
The scheme checks its assumptions as it goes (lines affine to 1e-9, crossings inside
their interval, solves proven) and gives up, returning None, when one fails; the sweep
then solves at every grid point.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from optimizer.explore.fixed import FixedDesign, ScenarioPricer
from optimizer.explore.parallel import Runner
from optimizer.explore.paths import Study

MAX_SOLVES = 200  # a sweep needing more solves than this is cheaper point by point


@dataclass(frozen=True)
class Line:
    """Profit of one fixed design as s x + b along the swept input."""

    slope: float
    intercept: float

    def at(self, x: float) -> float:
        return self.slope * x + self.intercept


def applies(study: Study, axes: tuple) -> bool:
    """Whether a sweep can use the envelope (1-D, a market number, affine profits)."""
    if len(axes) != 1 or not axes[0].path.market_scalar or axes[0].path.integer:
        return False
    problem = study.problem
    if problem.market.salvage_bin:
        return False
    return not any(
        p.defect_reduction is not None and p.defect_reduction.form == "log_ratio"
        for p in problem.process
    )


def envelope_winners(
    study: Study,
    axis,
    grid: np.ndarray,
    solve_many: Callable[[list[float]], list],
    runner: Runner,
) -> tuple[list, int] | None:
    """Winner outcome for every grid value from few solves, or None if not exact here.

    ``solve_many(values)`` solves at each value and returns ScenarioOutcome objects.
    Returns the outcomes per grid point (solved ones as solved; the others share their
    segment's winner, priced at the point) and the number of solves.
    """
    lo, hi = float(grid[0]), float(grid[-1])
    solved = dict(zip((lo, hi), solve_many([lo, hi]), strict=True))
    lines: dict[tuple, Line] = {}

    def line(outcome) -> Line | None:
        key = outcome.design.key()
        if key not in lines:
            pricer = ScenarioPricer(study.data, study.source, [outcome.design], [axis.path])
            mid = math.sqrt(lo * hi) if lo > 0 else 0.5 * (lo + hi)
            p_lo, p_mid, p_hi = pricer.price(np.array([[lo], [mid], [hi]])).profit[:, 0]
            if not all(math.isfinite(v) for v in (p_lo, p_mid, p_hi)):
                return None
            slope = (p_hi - p_lo) / (hi - lo)
            fitted = Line(slope, p_lo - slope * lo)
            if abs(fitted.at(mid) - p_mid) > 1e-9 * max(abs(p_mid), abs(p_lo), abs(p_hi), 1.0):
                return None  # not affine: the assumptions of the scheme do not hold
            lines[key] = fitted
        return lines[key]

    segments: list[tuple[float, float, object]] = []
    pending = [(lo, hi)]
    while pending:
        if len(solved) > MAX_SOLVES:
            return None
        probes: dict[float, tuple[float, float]] = {}
        for a, b in pending:
            left, right = solved[a], solved[b]
            if left.design.key() == right.design.key():
                segments.append((a, b, left))
                continue
            la, lb = line(left), line(right)
            if la is None or lb is None or la.slope == lb.slope:
                return None
            x = (lb.intercept - la.intercept) / (la.slope - lb.slope)
            if not a < x < b:
                return None
            probes[x] = (a, b)
        pending = []
        if not probes:
            break
        xs = sorted(probes)
        for x, outcome in zip(xs, solve_many(xs), strict=True):
            solved[x] = outcome
            a, b = probes[x]
            tie = line(solved[a]).at(x)
            if outcome.profit <= tie + 1e-9 * max(abs(tie), 1.0):
                segments.append((a, x, solved[a]))
                segments.append((x, b, solved[b]))
            else:
                pending += [(a, x), (x, b)]
    if not all(o.proven_optimal for o in solved.values()):
        return None
    return _at_grid(study, axis, grid, solved, segments, runner), len(solved)


def _at_grid(study, axis, grid, solved, segments, runner) -> list:
    """Outcome per grid value: solved there, or the winner of its segment priced there."""
    from optimizer.explore.fixed import PriceTask, price_scenarios
    from optimizer.explore.parallel import chunks
    from optimizer.explore.sweep import ScenarioOutcome

    segments.sort(key=lambda s: (s[0], s[1]))
    owner = []
    for x in grid:
        x = float(x)
        if x in solved:
            owner.append(solved[x])
            continue
        for a, b, outcome in segments:
            if a <= x <= b:
                owner.append(outcome)
                break
    designs: dict[tuple, FixedDesign] = {}
    for outcome in owner:
        designs.setdefault(outcome.design.key(), outcome.design)
    keys = list(designs)
    parts = chunks(len(grid), max(1, runner.workers) * 2)
    tasks = [
        PriceTask(
            study.data,
            study.source,
            tuple(designs[k] for k in keys),
            (axis.path.text,),
            tuple((float(grid[i]),) for i in part),
        )
        for part in parts
    ]
    priced = runner.map(price_scenarios, tasks)
    profit = np.vstack([p for p, _ in priced])
    cost = np.vstack([c for _, c in priced])
    out = []
    for i, (x, outcome) in enumerate(zip(grid, owner, strict=True)):
        if float(x) in solved:
            out.append(outcome)
            continue
        j = keys.index(outcome.design.key())
        out.append(
            ScenarioOutcome(
                values=(float(x),),
                design=outcome.design,
                profit=float(profit[i, j]),
                cost_per_good_unit=float(cost[i, j]),
                # manufacturing cost, NRE and yields do not depend on the market
                manufacturing_cost_per_good_unit=outcome.manufacturing_cost_per_good_unit,
                nre=outcome.nre,
                package_yield=outcome.package_yield,
                n_dies=outcome.n_dies,
                proven_optimal=True,
                gap=0.0,
            )
        )
    return out
