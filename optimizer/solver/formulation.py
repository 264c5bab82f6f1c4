"""The integer program of one (packaging, die count), stated in Pyomo.

The search hands the program to HiGHS as arrays (:func:`optimizer.solver.milp.
program_rows`): building it through Pyomo's persistent interface cost about 0.4 s per
program, more than solving it. This statement of the same program, constraint by
constraint, is kept as the readable form and as an independent check: the tests solve
both and compare their optima.
"""

from __future__ import annotations

import numpy as np
import pyomo.environ as pyo
from pyomo.contrib.solver.solvers.highs import Highs
from pyomo.core.expr.numeric_expr import LinearExpression

from optimizer.solver.milp import Columns, kept_columns, target_rows


def pyomo_program(
    columns: Columns,
    keep: np.ndarray,
    mix: tuple[int, ...] | None = None,
    process: np.ndarray | None = None,
) -> tuple[pyo.ConcreteModel, float]:
    """The integer program over the columns ``keep`` (indices into ``columns``) in Pyomo,
    and the scale its objective is divided by.

    With ``mix`` (dies per process, indexed like the problem's processes) and
    ``process`` (the process of each candidate die) it holds only selections with
    exactly that many dies on each process.
    """
    keep = kept_columns(columns, keep)
    m = pyo.ConcreteModel()
    m.w = pyo.Var(range(keep.size), domain=pyo.Binary)
    w = [m.w[i] for i in range(keep.size)]
    cover = columns.cover[:, keep].tocsr()
    m.cover = pyo.ConstraintList()
    for b in range(cover.shape[0]):
        lo, hi = cover.indptr[b], cover.indptr[b + 1]
        m.cover.add(
            LinearExpression(
                linear_coefs=cover.data[lo:hi].tolist(),
                linear_vars=[w[i] for i in cover.indices[lo:hi]],
            )
            == float(columns.cover_rhs[b])
        )
    col_k = columns.col_k[keep].astype(float)
    m.count = pyo.Constraint(
        expr=LinearExpression(linear_coefs=col_k.tolist(), linear_vars=w) == columns.n_dies
    )
    if mix is not None:
        on = process[columns.col_c[keep]]
        m.mix = pyo.ConstraintList()
        for p, dies in enumerate(mix):
            mine = np.flatnonzero(on == p)
            if mine.size == 0:
                if dies:
                    # no kept column on a process the mix needs: no selection at all
                    m.none = pyo.Var(bounds=(0, 0))
                    m.mix.add(m.none == dies)
                continue
            m.mix.add(
                LinearExpression(
                    linear_coefs=col_k[mine].tolist(), linear_vars=[w[i] for i in mine]
                )
                == dies
            )
    m.once = pyo.ConstraintList()
    groups = columns.once_groups[keep]
    order = np.argsort(groups, kind="stable")
    bounds = np.flatnonzero(np.r_[True, groups[order][1:] != groups[order][:-1], True])
    for lo, hi in zip(bounds[:-1], bounds[1:], strict=True):
        if hi - lo > 1:
            m.once.add(
                LinearExpression(
                    linear_coefs=[1.0] * int(hi - lo), linear_vars=[w[i] for i in order[lo:hi]]
                )
                <= 1
            )
    # costs near one keep HiGHS's tolerances meaningful (raw costs reach 1e9)
    scale = max(1.0, float(np.median(np.abs(columns.cost[keep])))) if keep.size else 1.0
    objective = LinearExpression(
        constant=columns.constant / scale,
        linear_coefs=(columns.cost[keep] / scale).tolist(),
        linear_vars=w,
    )
    if columns.n_targets:
        # the same target rows as the relaxation, restricted to the kept columns
        t_rows, _, t_hi, y_cost = target_rows(columns)
        m.y = pyo.Var(range(columns.n_targets), domain=pyo.Binary)
        position = -np.ones(columns.n_cols + columns.n_targets, dtype=np.int64)
        position[keep] = np.arange(keep.size)
        variables = w + [m.y[j] for j in range(columns.n_targets)]
        position[columns.n_cols :] = keep.size + np.arange(columns.n_targets)
        m.targets = pyo.ConstraintList()
        for r in range(t_rows.shape[0]):
            lo, hi = t_rows.indptr[r], t_rows.indptr[r + 1]
            idx = t_rows.indices[lo:hi]
            mask = position[idx] >= 0
            m.targets.add(
                LinearExpression(
                    linear_coefs=t_rows.data[lo:hi][mask].tolist(),
                    linear_vars=[variables[i] for i in position[idx][mask]],
                )
                <= float(t_hi[r])
            )
        objective = objective + LinearExpression(
            linear_coefs=(y_cost / scale).tolist(),
            linear_vars=[m.y[j] for j in range(columns.n_targets)],
        )
    if columns.carrier_slopes is not None:
        m.carrier = pyo.Var(domain=pyo.NonNegativeReals)
        area = columns.area[keep]
        m.area_cap = pyo.Constraint(
            expr=LinearExpression(linear_coefs=area.tolist(), linear_vars=w) <= columns.area_cap
        )
        m.carrier_lb = pyo.ConstraintList()
        for slope, intercept in zip(
            columns.carrier_slopes, columns.carrier_intercepts, strict=True
        ):
            m.carrier_lb.add(
                m.carrier
                >= LinearExpression(
                    constant=float(intercept),
                    linear_coefs=(slope * area).tolist(),
                    linear_vars=w,
                )
            )
        m.objective = pyo.Objective(expr=objective + columns.carrier_factor / scale * m.carrier)
    else:
        m.objective = pyo.Objective(expr=objective)
    return m, scale


def solve_pyomo(model: pyo.ConcreteModel, scale: float) -> float | None:
    """Optimal objective of the program in money, or None if it has no selection."""
    solver = Highs()
    solver.config.load_solutions = False
    solver.config.raise_exception_on_nonoptimal_result = False
    solver.config.rel_gap = 1e-10
    solver.config.abs_gap = 0.0
    result = solver.solve(model)
    if result.incumbent_objective is None:
        return None
    return float(result.incumbent_objective) * scale
