"""Sweeps: solve the problem over a grid of one or two inputs and find where the winner changes.

At every grid point the proven solver picks the most profitable design. Each winner gets
a stable *design kind* label (packaging, die count, processes used; see
:func:`optimizer.explore.fixed.design_kind`). Where neighbouring grid points have winners
of different kinds, the crossover is located on the interval between them: the two
winners are held fixed and re-priced by the evaluator, and the root of their profit
difference is found by Brent's method (bisection safeguarded; in log space on a log
axis). The two winners are each optimal at their own end of the interval, so the
difference changes sign there. For a 1-D sweep, every design that wins somewhere is also
re-priced at every grid point, which gives the profit of the best design of each kind
along the axis.

Solves that differ only in [market] numbers share one priced candidate table per worker.
The loop is shared by every objective (:mod:`optimizer.explore.objective`): a file with a
[life] plan is swept the same way, each point a life solve and its objective the NPV.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import brentq

from optimizer.explore import envelope
from optimizer.explore.fixed import FixedDesign, PriceTask, ScenarioPricer, price_scenarios
from optimizer.explore.parallel import Progress, Runner, chunks, worker_cache
from optimizer.explore.paths import (
    FieldPath,
    PathError,
    Study,
    parse_path,
    parse_value,
    problem_with,
    resolve,
)
from optimizer.problem import ProblemError


@dataclass(frozen=True)
class Axis:
    """One swept input: its path and grid (linear, or geometric with ``log``)."""

    path: FieldPath
    low: float
    high: float
    steps: int
    log: bool = False

    def values(self) -> np.ndarray:
        """Grid values, endpoints exact; integer fields rounded and de-duplicated."""
        if self.log:
            grid = np.geomspace(self.low, self.high, self.steps)
        else:
            grid = np.linspace(self.low, self.high, self.steps)
        grid[0], grid[-1] = self.low, self.high
        if self.path.integer:
            grid = np.unique(np.round(grid))
        return grid


def make_axis(
    path_text: str,
    low: object,
    high: object,
    steps: int,
    log: bool = False,
    option: str = "--vary",
    steps_option: str = "--steps",
    resolver: Callable = resolve,
    reader: Callable = parse_value,
) -> Axis:
    """Check a sweep request and build its :class:`Axis` (raises ProblemError).

    ``low`` and ``high`` are numbers in the field's base unit or quantity text with a
    unit (``"0.05 /cm^2"``). ``resolver`` and ``reader`` resolve the path and read the
    values (family files pass their own grammar).
    """
    path = resolver(path_text, option)
    try:
        lo = reader(path, low)
        hi = reader(path, high)
    except PathError as exc:
        raise ProblemError(option, path.text, str(exc)) from None
    if steps < 2:
        raise ProblemError(
            steps_option, path.text, f"needs at least 2 grid points (got {steps}); raise it"
        )
    if not lo < hi:
        raise ProblemError(
            option, path.text, f"low ({lo:g}) must be below high ({hi:g}); swap or widen them"
        )
    if log and lo <= 0:
        raise ProblemError(
            option,
            path.text,
            f"log steps need a positive low end (got {lo:g}); raise it or drop --log",
        )
    if path.integer:
        if lo != round(lo) or hi != round(hi):
            raise ProblemError(
                option, path.text, f"takes whole numbers only (got {lo:g} to {hi:g}); use integers"
            )
    axis = Axis(path, lo, hi, int(steps), bool(log))
    if len(axis.values()) < 2:
        raise ProblemError(option, path.text, "the range holds fewer than 2 whole numbers")
    return axis


def check_axis(study: Study, axis: Axis, option: str = "--vary") -> None:
    """Both ends of the axis must give a valid problem (before any solve starts)."""
    from optimizer.explore.objective import objective_of

    validate = objective_of(study).validate
    for value in (axis.low, axis.high):
        try:
            validate(study.data, [(axis.path, value)], study.source)
        except PathError as exc:
            raise ProblemError(option, axis.path.text, str(exc)) from None
        except ProblemError as err:
            raise ProblemError(
                option,
                axis.path.text,
                f"{value:g} makes the problem invalid ({err.field or err.source}: "
                f"{err.message}); keep the range inside the field's allowed values",
            ) from None


# ---------------------------------------------------------------- one scenario
@dataclass(frozen=True)
class ScenarioOutcome:
    """The winner of one scenario."""

    values: tuple[float, ...]
    design: FixedDesign
    profit: float
    cost_per_good_unit: float
    manufacturing_cost_per_good_unit: float
    nre: float
    package_yield: float
    n_dies: int
    proven_optimal: bool
    gap: float
    extra: tuple[tuple[str, object], ...] = ()  # the objective's own columns (name, value)


@dataclass(frozen=True)
class SolveTask:
    """Everything a worker needs to solve one scenario (picklable)."""

    data: dict
    source: str
    paths: tuple[str, ...]
    values: tuple[float, ...]
    method: str = "milp"
    time_limit: float | None = None
    share_candidates: bool = False


def scenario_source(source: str, paths: Sequence[str], values: Sequence[float]) -> str:
    """Name of a scenario in messages: ``"file.toml at market.volume = 1e+06"``."""
    where = ", ".join(f"{p} = {v:g}" for p, v in zip(paths, values, strict=True))
    return f"{source} at {where}" if where else source


def solve_scenario(task: SolveTask) -> ScenarioOutcome:
    """Solve one scenario (module-level, so process pools and Dask can run it)."""
    from optimizer.solver import solve

    paths = [parse_path(p) for p in task.paths]
    source = scenario_source(task.source, task.paths, task.values)
    problem = problem_with(task.data, list(zip(paths, task.values, strict=True)), source)
    solution = solve(
        problem,
        top=1,
        method=task.method,
        time_limit=task.time_limit,
        source=source,
        candidate_cache=worker_cache() if task.share_candidates else None,
    )
    best = solution.best
    return ScenarioOutcome(
        values=tuple(task.values),
        design=FixedDesign.from_result(best, problem),
        profit=best.profit,
        cost_per_good_unit=best.cost_per_good_unit,
        manufacturing_cost_per_good_unit=best.manufacturing_cost_per_good_unit,
        nre=best.nre,
        package_yield=best.package_yield,
        n_dies=best.n_dies,
        proven_optimal=solution.proven_optimal,
        gap=solution.gap,
    )


@dataclass(frozen=True)
class CrossingTask:
    """Locate where design ``after`` overtakes design ``before`` along one axis."""

    data: dict
    source: str
    before: FixedDesign
    after: FixedDesign
    path: str
    low: float
    high: float
    log: bool
    integer: bool
    fixed_paths: tuple[str, ...] = ()
    fixed_values: tuple[float, ...] = ()


@dataclass(frozen=True)
class Crossing:
    """Where two fixed designs earn the same profit along one axis."""

    value: float  # input value where the two profits are equal (NaN if not located)
    profit: float  # profit of either design there
    method: str  # "brent", "interpolated" or "grid"


def locate_crossing(task: CrossingTask) -> Crossing:
    """Root of profit(after) - profit(before) on [low, high] (module-level for workers)."""
    if task.integer:
        return Crossing(float("nan"), float("nan"), "grid")
    paths = [parse_path(task.path), *(parse_path(p) for p in task.fixed_paths)]
    pricer = ScenarioPricer(task.data, task.source, [task.before, task.after], paths)
    return crossing_of(pricer, task)


def crossing_of(pricer, task: CrossingTask) -> Crossing:
    """Root of the objective difference of the task's two designs, priced by ``pricer``
    (its ``price(values).profit``: single-period profit or life NPV)."""

    def at(x: float) -> tuple[float, float]:
        prices = pricer.price(np.array([[x, *task.fixed_values]]))
        p_before, p_after = prices.profit[0]
        return p_after - p_before, p_before

    return find_crossing(at, task.low, task.high, task.log)


def find_crossing(
    at: Callable[[float], tuple[float, float]], low: float, high: float, log: bool
) -> Crossing:
    """Root of the profit difference ``at(x)[0]`` on [low, high] (``at(x)[1]``: the
    profit there); shared by single-product and family sweeps."""
    to_u = math.log if log else (lambda x: x)
    from_u = math.exp if log else (lambda u: u)
    f_lo, _ = at(low)
    f_hi, _ = at(high)
    if math.isfinite(f_lo) and math.isfinite(f_hi) and f_lo * f_hi <= 0:
        if f_lo == 0:
            x = low
        elif f_hi == 0:
            x = high
        else:
            u = brentq(
                lambda u: at(from_u(u))[0],
                to_u(low),
                to_u(high),
                xtol=1e-12 * max(1.0, abs(to_u(high))),
                rtol=1e-12,
            )
            x = from_u(u)
        return Crossing(x, at(x)[1], "brent")
    # Not bracketed (a design unbuildable at one end, or round-off): interpolate the
    # difference where both ends are known, else give up on a value.
    if math.isfinite(f_lo) and math.isfinite(f_hi) and f_lo != f_hi:
        u = to_u(low) + (to_u(high) - to_u(low)) * f_lo / (f_lo - f_hi)
        x = from_u(min(max(u, to_u(low)), to_u(high)))
        return Crossing(x, at(x)[1], "interpolated")
    return Crossing(float("nan"), float("nan"), "grid")


# ---------------------------------------------------------------- the sweep
@dataclass(frozen=True)
class SweepResult:
    """A finished sweep.

    Attributes
    ----------
    axes
        The swept inputs (one or two).
    points
        One row per grid point: input values, winning design id, kind and summary,
        cost per good unit, profit, NRE, package yield, proof status, and the objective's
        own columns (a life's ``payback`` and ``npv_bound``; its ``profit`` is the NPV).
    crossovers
        One row per change of winning kind between neighbouring grid points.
    designs
        Every design that wins somewhere, by id ("D1", ... in grid order).
    curves
        1-D sweeps: profit of the best design of each winning kind at every grid point.
    shared_candidates
        Whether solves shared priced candidate dies (only market inputs varied).
    strategy, solves
        ``"every point"`` (one proven solve per grid point) or ``"envelope"`` (exact from
        a few solves, see :mod:`optimizer.explore.envelope`), and how many solves ran.
    """

    axes: tuple[Axis, ...]
    points: pd.DataFrame
    crossovers: pd.DataFrame
    designs: dict[str, FixedDesign]
    curves: pd.DataFrame | None
    shared_candidates: bool
    strategy: str = "every point"
    solves: int = 0


def run_sweep(
    study: Study,
    axes: Sequence[Axis],
    runner: Runner | None = None,
    method: str = "milp",
    time_limit: float | None = None,
    refine: bool = True,
    curves: bool = True,
    progress: Progress | None = None,
    stage: Callable[[str, int], None] | None = None,
    every_point: bool = False,
) -> SweepResult:
    """Solve at every grid point, then locate crossovers and price the winners' curves.

    Parameters
    ----------
    study
        The loaded problem.
    axes
        One or two axes; the first varies fastest along table rows.
    runner
        Where the solves run (default: this process).
    refine
        Locate crossovers by root finding (else report the grid interval only).
    curves
        For 1-D sweeps, price every winning design at every grid point.
    progress, stage
        Callbacks for progress bars: ``progress(done, total)`` per task and
        ``stage(name, total)`` when a new phase starts.
    every_point
        Solve at every grid point even where the exact envelope scheme applies (1-D
        sweeps of market.volume or market.unit_price; see
        :mod:`optimizer.explore.envelope`).
    """
    runner = runner or Runner()
    with runner.session():
        return _run_sweep(
            study,
            tuple(axes),
            runner,
            method,
            time_limit,
            refine,
            curves,
            progress,
            stage,
            every_point,
        )


def _run_sweep(
    study, axes, runner, method, time_limit, refine, curves, progress, stage, every_point
):
    """The body of :func:`run_sweep`, inside one runner session."""
    from optimizer.explore.objective import objective_of

    objective = objective_of(study)
    if not 1 <= len(axes) <= 2:
        raise ValueError("a sweep takes one or two axes")
    if len(axes) == 2 and axes[0].path.text == axes[1].path.text:
        raise ProblemError("--vary2", axes[1].path.text, "is already swept by --vary; pick another")
    for i, axis in enumerate(axes):
        check_axis(study, axis, "--vary" if i == 0 else "--vary2")
    grids = [axis.values() for axis in axes]
    paths = tuple(axis.path.text for axis in axes)
    share = objective.single_period and all(axis.path.market_scalar for axis in axes)
    if len(axes) == 1:
        combos = [(float(x),) for x in grids[0]]
    else:
        combos = [(float(x), float(y)) for y in grids[1] for x in grids[0]]

    def solve_many(values: list[tuple[float, ...]], label: str) -> list[ScenarioOutcome]:
        tasks = [
            SolveTask(study.data, study.source, paths, combo, method, time_limit, share)
            for combo in values
        ]
        if stage:
            stage(label, len(tasks))
        return runner.map(objective.solve_scenario, tasks, progress)

    outcomes, strategy, solves = None, "every point", len(combos)
    if not every_point and objective.single_period and envelope.applies(study, axes):
        found = envelope.envelope_winners(
            study,
            axes[0],
            grids[0],
            lambda xs: solve_many([(x,) for x in xs], "solving the envelope"),
            runner,
        )
        if found is not None:
            (outcomes, solves), strategy = found, "envelope"
    if outcomes is None:
        outcomes = solve_many(combos, "solving scenarios")

    designs: dict[str, FixedDesign] = {}
    ids: dict[tuple, str] = {}
    for outcome in outcomes:
        key = outcome.design.key()
        if key not in ids:
            ids[key] = f"D{len(ids) + 1}"
            designs[ids[key]] = outcome.design
    rows = []
    for outcome in outcomes:
        row = {path: value for path, value in zip(paths, outcome.values, strict=True)}
        row.update(
            design_id=ids[outcome.design.key()],
            design_kind=outcome.design.kind,
            design=outcome.design.summary,
            packaging=outcome.design.packaging,
            n_dies=outcome.n_dies,
            cost_per_good_unit=outcome.cost_per_good_unit,
            manufacturing_cost_per_good_unit=outcome.manufacturing_cost_per_good_unit,
            nre=outcome.nre,
            package_yield=outcome.package_yield,
            profit=outcome.profit,
            proven_optimal=outcome.proven_optimal,
            gap=outcome.gap,
            **dict(outcome.extra),
        )
        rows.append(row)
    points = pd.DataFrame(rows)

    crossing_rows, crossing_tasks = _crossing_jobs(study, axes, grids, points, designs)
    if crossing_tasks and refine:
        if stage:
            stage("locating crossovers", len(crossing_tasks))
        found = runner.map(objective.locate_crossing, crossing_tasks, progress)
    else:
        found = [Crossing(float("nan"), float("nan"), "grid") for _ in crossing_tasks]
    for row, crossing in zip(crossing_rows, found, strict=True):
        row.update(
            crossing=crossing.value, profit_at_crossing=crossing.profit, method=crossing.method
        )
    crossovers = pd.DataFrame(
        crossing_rows,
        columns=[
            "axis",
            "at",
            "grid_low",
            "grid_high",
            "design_before",
            "design_after",
            "kind_before",
            "kind_after",
            "crossing",
            "profit_at_crossing",
            "method",
        ],
    )

    curve_frame = None
    if curves and len(axes) == 1:
        curve_frame = _curves(
            study, axes[0], grids[0], designs, runner, progress, stage,
            PriceTask, objective.price_scenarios,
        )  # fmt: skip
    return SweepResult(axes, points, crossovers, designs, curve_frame, share, strategy, solves)


def _crossing_jobs(study, axes, grids, points, designs, task_type=None):
    """Rows and crossing tasks (``task_type``, default :class:`CrossingTask`) for every
    change of winning kind between neighbouring grid points."""
    task_type = task_type or CrossingTask
    rows, tasks = [], []
    nx = len(grids[0])
    ny = len(grids[1]) if len(axes) == 2 else 1
    ids = points["design_id"].to_numpy().reshape(ny, nx)
    kinds = points["design_kind"].to_numpy().reshape(ny, nx)

    def job(axis_index, lo, hi, before, after, other_index, other_value):
        axis = axes[axis_index]
        fixed_paths, fixed_values, at = (), (), ""
        if other_index is not None:
            other = axes[other_index]
            fixed_paths, fixed_values = (other.path.text,), (float(other_value),)
            at = f"{other.path.text} = {other_value:g}"
        rows.append(
            {
                "axis": axis.path.text,
                "at": at,
                "grid_low": float(lo),
                "grid_high": float(hi),
                "design_before": before,
                "design_after": after,
                "kind_before": designs[before].kind,
                "kind_after": designs[after].kind,
            }
        )
        tasks.append(
            task_type(
                study.data,
                study.source,
                designs[before],
                designs[after],
                axis.path.text,
                float(lo),
                float(hi),
                axis.log,
                axis.path.integer,
                fixed_paths,
                fixed_values,
            )
        )

    for j in range(ny):
        for i in range(nx - 1):
            if kinds[j, i] != kinds[j, i + 1]:
                job(
                    0,
                    grids[0][i],
                    grids[0][i + 1],
                    ids[j, i],
                    ids[j, i + 1],
                    1 if len(axes) == 2 else None,
                    grids[1][j] if len(axes) == 2 else None,
                )
    if len(axes) == 2:
        for i in range(nx):
            for j in range(ny - 1):
                if kinds[j, i] != kinds[j + 1, i]:
                    job(1, grids[1][j], grids[1][j + 1], ids[j, i], ids[j + 1, i], 0, grids[0][i])
    return rows, tasks


def _curves(
    study, axis, grid, designs, runner, progress, stage, task_type=None, price=None
) -> pd.DataFrame:
    """Profit of the best design of each winning kind at every grid point (tasks of
    ``task_type`` run by ``price``; default: single-product designs)."""
    task_type, price = task_type or PriceTask, price or price_scenarios
    ordered = list(designs.items())
    fixed = tuple(design for _, design in ordered)
    parts = chunks(len(grid), max(1, runner.workers if not runner.scheduler else 8) * 2)
    tasks = [
        task_type(
            study.data,
            study.source,
            fixed,
            (axis.path.text,),
            tuple((float(grid[i]),) for i in part),
        )
        for part in parts
    ]
    if stage:
        stage("pricing winners along the axis", len(tasks))
    priced = runner.map(price, tasks, progress)
    profit = np.vstack([p for p, _ in priced])
    frame = pd.DataFrame({axis.path.text: grid})
    kinds: dict[str, list[int]] = {}
    for k, (_, design) in enumerate(ordered):
        kinds.setdefault(design.kind, []).append(k)
    for kind, members in kinds.items():
        block = profit[:, members]
        best = np.where(np.isfinite(block), block, -np.inf).max(axis=1)
        frame[kind] = np.where(np.isfinite(best), best, np.nan)
    return frame
