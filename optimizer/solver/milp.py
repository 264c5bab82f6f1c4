"""The integer program: which candidate dies, how many copies, proven best.

For one packaging option g and die count n, with x_c copies of candidate c, the exact
cost per good unit is

    N(x) exp(-L(x)) / (y_carrier y_package y_bond^n),
    N(x) = sum_c k_c x_c + n bond + package + final test + S(A_tot(x)),
    L(x) = sum_c x_c ln(1 - DL_c) <= 0,

(k_c cost per passed die, DL_c its defect level, S the carrier cost per good one as a
function of total die area). Because exp(-L) >= 1 - L and N >= N_lo,
N exp(-L) >= N - N_lo L, and S is replaced by a convex piecewise-linear under-estimator,
the program below is a valid lower bound of the total cost V x cost + NRE for every
selection. The evaluator prices each answer exactly; no-good cuts then enumerate every
other selection whose bound is below the K-th best exact cost. When no (g, n) program has
such a selection left, the K best are proven.

The copies of a candidate are one-hot: x_c = sum_k k w_ck with binary w_ck, so a no-good
cut on a selection is a single inequality and z_c = sum_k w_ck carries the die's NRE.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import pyomo.environ as pyo
from pyomo.contrib.solver.common.results import TerminationCondition
from pyomo.contrib.solver.solvers.highs import Highs
from pyomo.core.expr.numeric_expr import LinearExpression

from optimizer.evaluator import Evaluator
from optimizer.problem import Packaging
from optimizer.solver.candidates import CandidateSet
from optimizer.solver.selection import Selection


def carrier_underestimator(
    evaluator: Evaluator, packaging: Packaging, area_lo: float, area_hi: float, points: int = 96
) -> tuple[np.ndarray, np.ndarray]:
    """Slopes and intercepts of a convex piecewise-linear lower bound of S(total area).

    S is non-decreasing in area (a larger square interposer never fits more sites per
    wafer nor yields better), so on [a_i, a_i+1] S >= S(a_i). The lower convex hull of
    the corner points (a_i, S(a_i)), (a_i+1, S(a_i)) lies below that step function.
    """
    grid = np.linspace(area_lo, max(area_hi, area_lo + 1e-6), points)
    values = evaluator.carrier_cost(packaging, grid).cost
    values = np.minimum.accumulate(values[::-1])[::-1]  # guard: never above a later value
    xs = np.concatenate([grid[:-1], grid[1:]])
    ys = np.concatenate([values[:-1], values[:-1]])
    order = np.lexsort((ys, xs))
    xs, ys = xs[order], ys[order]
    hull: list[tuple[float, float]] = []
    for x, y in zip(xs, ys, strict=True):
        if hull and abs(hull[-1][0] - x) < 1e-12:
            continue  # keep the lower of equal-x points (sorted by y)
        while len(hull) >= 2:
            (x1, y1), (x2, y2) = hull[-2], hull[-1]
            if (x2 - x1) * (y - y1) - (y2 - y1) * (x - x1) <= 0:
                hull.pop()
            else:
                break
        hull.append((x, y))
    if len(hull) == 1:
        return np.array([0.0]), np.array([hull[0][1]])
    h = np.array(hull)
    slopes = np.diff(h[:, 1]) / np.diff(h[:, 0])
    intercepts = h[:-1, 1] - slopes * h[:-1, 0]
    return slopes, intercepts


@dataclass
class SubProblem:
    """The integer program of one (packaging, die count) pair, kept between rounds."""

    packaging_index: int
    n_dies: int
    model: pyo.ConcreteModel
    solver: Highs
    col_c: np.ndarray
    col_k: np.ndarray
    bound: float = -math.inf  # lower bound on total cost of selections not yet cut off
    exhausted: bool = False
    current: Selection | None = None
    rounds: int = 0
    seconds: float = 0.0
    cuts: int = 0
    log: list[str] = field(default_factory=list)


def build_subproblem(
    evaluator: Evaluator, candidates: CandidateSet, n_dies: int, keep: np.ndarray | None = None
) -> SubProblem | None:
    """Build the lower-bounding program for one packaging option and die count."""
    problem = evaluator.problem
    g = candidates.packaging_index
    packaging = problem.packaging[g]
    prices = candidates.prices
    count = evaluator.blocks.count
    usable = candidates.max_copies >= 1
    if keep is not None:
        usable &= keep
    if n_dies == 1:
        usable &= np.all(candidates.instances == count[None, :], axis=1)
    cand = np.flatnonzero(usable)
    if cand.size == 0:
        return None
    reps = np.minimum(candidates.max_copies[cand], n_dies)
    col_c = np.repeat(cand, reps)
    col_k = np.concatenate([np.arange(1, r + 1) for r in reps])
    market = problem.market
    factor = market.volume / (
        packaging.carrier_yield * packaging.package_yield * packaging.bond_yield**n_dies
    )
    fixed = n_dies * packaging.bond_cost_per_die + packaging.package_cost + packaging.final_test_cost
    blocks = evaluator.blocks
    unit_min = (blocks.area_mm2 * blocks.scale).min(axis=0)
    area_lo = float(count @ unit_min)
    interposer = packaging.kind == "silicon_interposer"
    if interposer:
        area_cap = (
            packaging.interposer_max_area_mm2 - packaging.interposer_extra_area_mm2
        ) / packaging.interposer_area_factor
        area_hi = min(area_cap, float(n_dies * prices.area_mm2[cand].max()))
        if area_hi < area_lo:
            return None
        slopes, intercepts = carrier_underestimator(evaluator, packaging, area_lo, area_hi)
        carrier_floor = float(intercepts[0] + slopes[0] * area_lo) if len(slopes) else 0.0
        carrier_floor = max(carrier_floor, float((slopes * area_lo + intercepts).max()))
    else:
        carrier_floor = packaging.carrier_cost
    k_c = prices.cost_per_passed_die[col_c]
    ell = prices.log1m_defect_level[col_c]
    n_lo = n_dies * float(prices.cost_per_passed_die[cand].min()) + fixed + carrier_floor
    obj_coef = factor * col_k * (k_c - n_lo * ell) + prices.nre[col_c]
    constant = factor * fixed + packaging.design_cost

    m = pyo.ConcreteModel()
    m.w = pyo.Var(range(len(col_c)), domain=pyo.Binary)
    w = [m.w[i] for i in range(len(col_c))]
    m.cover = pyo.ConstraintList()
    inst = candidates.instances[col_c]
    for b in range(blocks.n_blocks):
        rows = np.flatnonzero(inst[:, b])
        coefs = (col_k[rows] * inst[rows, b]).astype(float).tolist()
        m.cover.add(
            LinearExpression(linear_coefs=coefs, linear_vars=[w[i] for i in rows]) == int(count[b])
        )
    m.count = pyo.Constraint(
        expr=LinearExpression(linear_coefs=col_k.astype(float).tolist(), linear_vars=w) == n_dies
    )
    m.once = pyo.ConstraintList()
    multi = np.flatnonzero(reps > 1)
    starts = np.concatenate([[0], np.cumsum(reps)[:-1]])
    for j in multi:
        cols = range(starts[j], starts[j] + reps[j])
        m.once.add(LinearExpression(linear_coefs=[1.0] * reps[j], linear_vars=[w[i] for i in cols]) <= 1)
    objective_terms = LinearExpression(
        constant=constant, linear_coefs=obj_coef.tolist(), linear_vars=w
    )
    if interposer:
        m.carrier = pyo.Var(domain=pyo.NonNegativeReals)
        area_coef = (col_k * prices.area_mm2[col_c]).tolist()
        m.area_cap = pyo.Constraint(
            expr=LinearExpression(linear_coefs=area_coef, linear_vars=w) <= area_cap
        )
        m.carrier_lb = pyo.ConstraintList()
        for slope, intercept in zip(slopes, intercepts, strict=True):
            m.carrier_lb.add(
                m.carrier
                >= LinearExpression(
                    constant=float(intercept),
                    linear_coefs=(slope * np.asarray(area_coef)).tolist(),
                    linear_vars=w,
                )
            )
        m.objective = pyo.Objective(expr=objective_terms + factor * m.carrier)
    else:
        m.objective = pyo.Objective(expr=objective_terms + factor * packaging.carrier_cost)
    m.nogood = pyo.ConstraintList()
    solver = Highs()
    solver.config.load_solutions = False
    solver.config.raise_exception_on_nonoptimal_result = False
    solver.config.rel_gap = 1e-9
    solver.config.abs_gap = 1e-6
    return SubProblem(g, n_dies, m, solver, col_c, col_k)


def solve_round(sub: SubProblem, time_limit: float | None = None) -> None:
    """Solve the current program; set its bound and the selection it found."""
    start = time.perf_counter()
    if time_limit is not None:
        sub.solver.config.time_limit = max(time_limit, 0.01)
    result = sub.solver.solve(sub.model)
    sub.rounds += 1
    sub.seconds += time.perf_counter() - start
    tc = result.termination_condition
    if tc in (TerminationCondition.provenInfeasible, TerminationCondition.infeasibleOrUnbounded):
        sub.exhausted = True
        sub.bound = math.inf
        sub.current = None
        sub.log.append(f"round {sub.rounds}: no selection left")
        return
    bound = result.objective_bound
    sub.bound = float(bound) if bound is not None and math.isfinite(bound) else -math.inf
    if result.incumbent_objective is None:
        sub.current = None  # time ran out before a selection was found
        sub.log.append(f"round {sub.rounds}: no selection found yet ({tc.name})")
        return
    result.solution_loader.load_vars()
    values = np.array([sub.model.w[i].value or 0.0 for i in range(len(sub.col_c))])
    active = np.flatnonzero(values > 0.5)
    sub.current = Selection.of(
        sub.packaging_index, zip(sub.col_c[active], sub.col_k[active], strict=True)
    )
    sub.log.append(
        f"round {sub.rounds}: bound {sub.bound:.6g}, selection objective "
        f"{result.incumbent_objective:.6g} ({tc.name})"
    )
    sub._active = active  # type: ignore[attr-defined]


def cut_current(sub: SubProblem) -> None:
    """Exclude the current selection from the program (a single no-good inequality)."""
    active = sub._active  # type: ignore[attr-defined]
    sub.model.nogood.add(
        LinearExpression(
            linear_coefs=[1.0] * len(active), linear_vars=[sub.model.w[int(i)] for i in active]
        )
        <= len(active) - 1
    )
    sub.cuts += 1
    sub.current = None
