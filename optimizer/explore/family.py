"""Exploration of product families: sweep, sensitivity, uncertainty and compare.

The objective is the family profit (see :mod:`optimizer.solver.family`): the products'
profits, each paying its own NRE, plus the NRE of every die design the products share
(and of every shared one-time defect-density target) paid only once. Every solve is a
whole family solve (:func:`optimizer.solver.family.solve_family`); a family design held
fixed keeps one :class:`~optimizer.explore.fixed.FixedDesign` per product and is priced,
under changed inputs, product by product by the evaluator and added up by
:func:`optimizer.solver.family.family_profit`.

Sweeps solve the family at every grid point. The upper-envelope shortcut of
single-product market sweeps is not used: it would hold for a fixed family design (its
family profit is affine in one product's price or volume too), but its checks are
written for single-product solves, and a solve per point is right by construction.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from optimizer.designs import DesignResult
from optimizer.evaluator import Evaluator
from optimizer.explore.family_paths import (
    FamilyPath,
    FamilyStudy,
    PathError,
    apply_family_values,
    family_study_from_data,
    family_value,
    family_with,
    parse_family_path,
    read_family_value,
    resolve_family,
)
from optimizer.explore.fixed import FixedDesign, design_kind, design_summary
from optimizer.explore.parallel import Progress, Runner, chunks
from optimizer.explore.sensitivity import InputRange, make_range
from optimizer.explore.sweep import (
    Axis,
    Crossing,
    SweepResult,
    _crossing_jobs,
    _curves,
    find_crossing,
    make_axis,
    scenario_source,
)
from optimizer.explore.uncertainty import sample_inputs, summarise
from optimizer.family import Family
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem, ProblemError


# ---------------------------------------------------------------- a family design held fixed
def library_text(names: Sequence[str], results: Sequence[DesignResult]) -> tuple[int, int, str]:
    """(die designs in the library, how many are shared, the shared ones in words)."""
    from optimizer.family_report import library_of

    library = library_of(list(names), list(results))
    shared = [d for d in library if len(d.users) > 1]
    words = "; ".join(
        f"{d.process} ["
        + ", ".join(f"{b} x{c}" if c > 1 else b for b, c in d.blocks.items())
        + "] used by "
        + ", ".join(f"{p} ({c}/unit)" for p, c in d.users.items())
        for d in shared
    )
    return len(library), len(shared), words or "none"


@dataclass(frozen=True)
class FixedFamily:
    """One design per product, held fixed; ``kind`` labels its library and each product's
    design kind, ``summary`` states every product's design."""

    names: tuple[str, ...]
    designs: tuple[FixedDesign, ...]
    kind: str
    summary: str
    library_dies: int
    shared_dies: int
    shared: str

    @classmethod
    def from_results(
        cls, names: Sequence[str], results: Sequence[DesignResult], family: Family
    ) -> FixedFamily:
        designs = tuple(
            FixedDesign.from_result(r, m.problem)
            for r, m in zip(results, family.members, strict=True)
        )
        n, k, shared = library_text(names, results)
        kind = f"{n} die design{'s' if n != 1 else ''}, {k} shared | " + " | ".join(
            f"{name}: {design_kind(r)}" for name, r in zip(names, results, strict=True)
        )
        summary = " || ".join(
            f"{name}: {design_summary(r)}" for name, r in zip(names, results, strict=True)
        )
        return cls(tuple(names), designs, kind, summary, n, k, shared)

    def key(self) -> tuple:
        return tuple(d.key() for d in self.designs)

    def results(
        self, family: Family, source: str, evaluators: Sequence[Evaluator] | None = None
    ) -> list[DesignResult] | None:
        """Each product's design priced on ``family`` (None if one cannot be built)."""
        out = []
        for j, (member, design) in enumerate(zip(family.members, self.designs, strict=True)):
            if member.name != self.names[j]:
                raise ProblemError(
                    source, "product", f"products changed (expected '{self.names[j]}')"
                )
            evaluator = evaluators[j] if evaluators is not None else None
            held: dict[str, int] = {}
            for spec in design.specs:
                for block, n in spec.blocks.items():
                    held[block] = held.get(block, 0) + n * spec.copies
            if held != {b.name: b.count for b in member.problem.block}:
                return None  # the product's block counts changed: not a design of it now
            try:
                out.append(design.evaluate(member.problem, source, member.name, evaluator))
            except ProblemError:
                return None  # this product's design cannot be built under these inputs
        return out


def family_total(problems: Sequence[Problem], results: Sequence[DesignResult]) -> float:
    """Family profit of one design per product; NaN when two products hold one process to
    different targets (not one family design).

    :func:`~optimizer.solver.family.family_profit` knows the one-time cost of the targets
    the solver lists; a target held fixed on a continuous (log-ratio) curve whose levels
    moved with a changed input is priced on the curve itself.
    """
    from optimizer.solver.family import family_profit

    try:
        profit = family_profit(list(problems), list(results))[0]
    except InvariantViolation:
        if not any(
            p.defect_reduction is not None and p.defect_reduction.form == "log_ratio"
            for problem in problems
            for p in problem.process
        ):
            raise
        profit = _total_on_curves(problems, results)
    return profit if math.isfinite(profit) else math.nan


def _total_on_curves(problems: Sequence[Problem], results: Sequence[DesignResult]) -> float:
    """The sum family_profit forms, with one-time target costs read off the curves."""
    from optimizer.solver.family import die_key

    library: dict[tuple, float] = {}
    targets: dict[str, tuple[float, float]] = {}
    total = 0.0
    for problem, design in zip(problems, results, strict=True):
        dies = {die_key(d): d.nre for d in design.dies}
        own: dict[str, tuple[float, float]] = {}
        for die in design.dies:
            process = problem.process[problem.process_index(die.process)]
            density = die.defect_density_per_cm2
            if density >= process.defect_density_per_cm2 * (1 - 1e-12):
                cost = 0.0
            elif process.defect_reduction.form == "log_ratio":
                cost = process.improvement_cost(density)[1]
            else:
                cost = next(
                    c for d, c, _ in process.defect_targets() if abs(d - density) <= 1e-12 * d
                )
            own[die.process] = (density, cost)
        spend = sum(c for _, c in own.values())
        if not math.isclose(spend, design.improvement_spend, rel_tol=1e-9, abs_tol=1e-6):
            raise InvariantViolation(
                f"family exploration: target spend {spend!r} differs from the evaluator's "
                f"{design.improvement_spend!r}"
            )
        total += design.profit + sum(dies.values()) + spend
        library.update(dies)
        for process, (density, cost) in own.items():
            if process in targets and abs(targets[process][0] - density) > 1e-12 * density:
                return -math.inf
            targets[process] = (density, max(cost, targets.get(process, (0.0, 0.0))[1]))
    return total - sum(library.values()) - sum(c for _, c in targets.values())


def price_fixed(
    family: Family, fixed: FixedFamily, source: str
) -> tuple[float, list[DesignResult] | None]:
    """(family profit, the products' priced designs) of a fixed family design; NaN and
    None when a product's design cannot be built."""
    results = fixed.results(family, source)
    if results is None:
        return math.nan, None
    return family_total([m.problem for m in family.members], results), results


class FamilyPricer:
    """Prices fixed family designs under scenarios that set ``paths`` to given values."""

    def __init__(
        self,
        data: dict,
        source: str,
        designs: Sequence[FixedFamily],
        paths: Sequence[FamilyPath],
    ):
        self.data, self.source = data, source
        self.designs, self.paths = list(designs), list(paths)

    def price(self, values: np.ndarray) -> np.ndarray:
        """Family profit, (n scenarios, designs); NaN where a design cannot be built."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        out = np.full((values.shape[0], len(self.designs)), np.nan)
        for i, row in enumerate(values):
            family = family_with(self.data, list(zip(self.paths, row, strict=True)), self.source)
            evaluators = [Evaluator(m.problem) for m in family.members]
            problems = [m.problem for m in family.members]
            for j, design in enumerate(self.designs):
                results = design.results(family, self.source, evaluators)
                if results is not None:
                    out[i, j] = family_total(problems, results)
        return out


@dataclass(frozen=True)
class FamilyPriceTask:
    """Price fixed family designs at a block of scenarios (picklable; the field layout of
    :class:`optimizer.explore.fixed.PriceTask`)."""

    data: dict
    source: str
    designs: tuple[FixedFamily, ...]
    paths: tuple[str, ...]
    values: tuple[tuple[float, ...], ...]


def price_family_scenarios(task: FamilyPriceTask) -> tuple[np.ndarray, np.ndarray]:
    """(family profit, family profit): the second slot is where single-product pricing
    returns cost per good unit, which a family does not have."""
    paths = [parse_family_path(p) for p in task.paths]
    values = np.array(task.values, dtype=float).reshape(len(task.values), len(paths))
    profit = FamilyPricer(task.data, task.source, task.designs, paths).price(values)
    return profit, profit


# ---------------------------------------------------------------- one family solve
@dataclass(frozen=True)
class FamilyOutcome:
    """The family optimum of one scenario."""

    values: tuple[float, ...]
    design: FixedFamily
    profit: float
    alone_profit: float
    reuse_premium: float
    shared_nre: float
    shared_targets: float
    product_profits: tuple[float, ...]
    proven_optimal: bool
    gap: float


@dataclass(frozen=True)
class FamilySolveTask:
    data: dict
    source: str
    paths: tuple[str, ...]
    values: tuple[float, ...]
    method: str = "milp"
    time_limit: float | None = None


def solve_family_scenario(task: FamilySolveTask) -> FamilyOutcome:
    """Solve the family in one scenario (module-level, so worker processes can run it)."""
    from optimizer.solver.family import solve_family

    paths = [parse_family_path(p) for p in task.paths]
    source = scenario_source(task.source, task.paths, task.values)
    family = family_with(task.data, list(zip(paths, task.values, strict=True)), source)
    solution = solve_family(family, time_limit=task.time_limit, source=source, method=task.method)
    return FamilyOutcome(
        values=tuple(task.values),
        design=FixedFamily.from_results(solution.names, solution.designs, family),
        profit=solution.profit,
        alone_profit=solution.alone_profit,
        reuse_premium=solution.reuse_premium,
        shared_nre=solution.shared_nre,
        shared_targets=solution.shared_targets,
        product_profits=tuple(d.profit for d in solution.designs),
        proven_optimal=solution.proven,
        gap=solution.gap,
    )


@dataclass(frozen=True)
class FamilyCrossingTask:
    """The field layout of :class:`optimizer.explore.sweep.CrossingTask`, for families."""

    data: dict
    source: str
    before: FixedFamily
    after: FixedFamily
    path: str
    low: float
    high: float
    log: bool
    integer: bool
    fixed_paths: tuple[str, ...] = ()
    fixed_values: tuple[float, ...] = ()


def locate_family_crossing(task: FamilyCrossingTask) -> Crossing:
    """Where the family profits of two fixed family designs are equal on [low, high]."""
    if task.integer:
        return Crossing(float("nan"), float("nan"), "grid")
    paths = [parse_family_path(task.path), *(parse_family_path(p) for p in task.fixed_paths)]
    pricer = FamilyPricer(task.data, task.source, [task.before, task.after], paths)

    def at(x: float) -> tuple[float, float]:
        p_before, p_after = pricer.price(np.array([[x, *task.fixed_values]]))[0]
        return p_after - p_before, p_before

    return find_crossing(at, task.low, task.high, task.log)


# ---------------------------------------------------------------- sweep
def make_family_axis(
    path_text: str,
    low: object,
    high: object,
    steps: int,
    log: bool = False,
    option: str = "--vary",
    steps_option: str = "--steps",
) -> Axis:
    """:func:`optimizer.explore.sweep.make_axis` with the family path grammar."""
    return make_axis(
        path_text,
        low,
        high,
        steps,
        log,
        option,
        steps_option,
        resolver=resolve_family,
        reader=family_value,
    )


def _check_value(study: FamilyStudy, path: FamilyPath, value: float, option: str, fix: str):
    """A value must give a valid family (before any solve starts)."""
    try:
        data = apply_family_values(study.data, [(path, value)])
    except PathError as exc:
        raise ProblemError(option, path.text, str(exc)) from None
    try:
        family_with(data, [], study.source)
    except ProblemError as err:
        raise ProblemError(
            option,
            path.text,
            f"{value:g} makes the family invalid ({err.field or err.source}: {err.message}); {fix}",
        ) from None


def run_family_sweep(
    study: FamilyStudy,
    axes: Sequence[Axis],
    runner: Runner | None = None,
    method: str = "milp",
    time_limit: float | None = None,
    refine: bool = True,
    curves: bool = True,
    progress: Progress | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> SweepResult:
    """Solve the family at every grid point; crossovers and curves as in a single-product
    sweep, on family profit. ``designs`` holds :class:`FixedFamily` objects."""
    runner = runner or Runner()
    axes = tuple(axes)
    if not 1 <= len(axes) <= 2:
        raise ValueError("a sweep takes one or two axes")
    if len(axes) == 2 and axes[0].path.text == axes[1].path.text:
        raise ProblemError("--vary2", axes[1].path.text, "is already swept by --vary; pick another")
    for i, axis in enumerate(axes):
        for value in (axis.low, axis.high):
            _check_value(
                study,
                axis.path,
                value,
                "--vary" if i == 0 else "--vary2",
                "keep the range inside the field's allowed values",
            )
    grids = [axis.values() for axis in axes]
    paths = tuple(axis.path.text for axis in axes)
    if len(axes) == 1:
        combos = [(float(x),) for x in grids[0]]
    else:
        combos = [(float(x), float(y)) for y in grids[1] for x in grids[0]]
    names = study.family.names
    with runner.session():
        tasks = [
            FamilySolveTask(study.data, study.source, paths, combo, method, time_limit)
            for combo in combos
        ]
        if stage:
            stage("solving the family at each point", len(tasks))
        outcomes = runner.map(solve_family_scenario, tasks, progress)
        designs: dict[str, FixedFamily] = {}
        ids: dict[tuple, str] = {}
        rows = []
        for outcome in outcomes:
            key = outcome.design.key()
            if key not in ids:
                ids[key] = f"F{len(ids) + 1}"
                designs[ids[key]] = outcome.design
            row = {path: value for path, value in zip(paths, outcome.values, strict=True)}
            row.update(
                design_id=ids[key],
                design_kind=outcome.design.kind,
                design=outcome.design.summary,
                library_dies=outcome.design.library_dies,
                shared_dies=outcome.design.shared_dies,
                profit=outcome.profit,
                alone_profit=outcome.alone_profit,
                reuse_premium=outcome.reuse_premium,
                shared_nre=outcome.shared_nre,
                shared_targets=outcome.shared_targets,
                **{
                    f"profit_alone_priced_{n}": v
                    for n, v in zip(names, outcome.product_profits, strict=True)
                },
                proven_optimal=outcome.proven_optimal,
                gap=outcome.gap,
            )
            rows.append(row)
        points = pd.DataFrame(rows)
        crossing_rows, crossing_tasks = _crossing_jobs(
            study, axes, grids, points, designs, FamilyCrossingTask
        )
        if crossing_tasks and refine:
            if stage:
                stage("locating crossovers", len(crossing_tasks))
            found = runner.map(locate_family_crossing, crossing_tasks, progress)
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
                study,
                axes[0],
                grids[0],
                designs,
                runner,
                progress,
                stage,
                FamilyPriceTask,
                price_family_scenarios,
            )
    return SweepResult(
        axes, points, crossovers, designs, curve_frame, False, "every point", len(combos)
    )


# ---------------------------------------------------------------- sensitivity
def make_family_range(path_text: str, low: object, high: object, option: str = "--range"):
    """:func:`optimizer.explore.sensitivity.make_range` with the family path grammar."""
    return make_range(path_text, low, high, option, resolver=resolve_family, reader=family_value)


def family_ranges(study: FamilyStudy) -> list[InputRange]:
    """The sensitivity ranges of the family's ``[[uncertain]]`` entries, in file order."""
    return [
        InputRange(path, *entry.range(), f"uncertain[{i}]")
        for i, (entry, path) in enumerate(zip(study.uncertain, study.uncertain_paths, strict=True))
    ]


@dataclass(frozen=True)
class FamilySensitivity:
    """The family optimum and how its family profit moves with each input (held fixed).

    ``table`` has the columns of :class:`optimizer.explore.sensitivity.Sensitivity`.
    """

    solution: object  # FamilySolution
    design: FixedFamily
    base_profit: float
    table: pd.DataFrame


def _range_error(study: FamilyStudy, r: InputRange, message: str) -> ProblemError:
    if r.origin.startswith("uncertain["):
        return ProblemError(study.source, f"{r.origin} ({r.path.text})", message)
    return ProblemError(r.origin, r.path.text, message)


def run_family_sensitivity(
    study: FamilyStudy,
    ranges: Sequence[InputRange],
    method: str = "milp",
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> FamilySensitivity:
    """Solve the family once, then re-price its optimum at both ends of every range."""
    from optimizer.solver.family import solve_family

    if not ranges:
        raise ProblemError(
            study.source,
            "uncertain",
            "no input ranges to test; add [[uncertain]] entries to the family file or give "
            "--range PATH=LOW:HIGH (e.g. --range product.NAME.market.unit_price=1500:2300)",
        )
    seen: dict[str, str] = {}
    for r in ranges:
        if r.path.text in seen:
            raise _range_error(study, r, f"is already given by {seen[r.path.text]}; give it once")
        seen[r.path.text] = r.origin
    for r in ranges:
        try:
            read_family_value(study, r.path)
        except PathError as exc:
            raise _range_error(study, r, str(exc)) from None
        for value in (r.low, r.high):
            try:
                data = apply_family_values(study.data, [(r.path, value)])
                family_with(data, [], study.source)
            except PathError as exc:
                raise _range_error(study, r, str(exc)) from None
            except ProblemError as err:
                raise _range_error(
                    study,
                    r,
                    f"{value:g} makes the family invalid ({err.field or err.source}: "
                    f"{err.message}); narrow the range",
                ) from None
    solution = solve_family(study.family, time_limit=time_limit, source=study.source, method=method)
    fixed = FixedFamily.from_results(solution.names, solution.designs, study.family)
    rows = []
    for done, r in enumerate(ranges, start=1):
        pricer = FamilyPricer(study.data, study.source, [fixed], [r.path])
        p_low, p_high = (float(v) for v in pricer.price(np.array([[r.low], [r.high]]))[:, 0])
        note = []
        if r.path.special == "blocks":
            # a held design holds the file's counts; only a re-solve can follow new ones
            note.append("a design held fixed cannot follow a block count; sweep it instead")
        else:
            if not math.isfinite(p_low):
                note.append("the family design cannot be built at low")
            if not math.isfinite(p_high):
                note.append("the family design cannot be built at high")
        base = read_family_value(study, r.path)
        rows.append(
            {
                "input": r.path.text,
                "unit": r.path.unit_text,
                "origin": r.origin,
                "base_value": float("nan") if base is None else base,
                "low": r.low,
                "high": r.high,
                "profit_low": p_low,
                "profit_high": p_high,
                "change_low": p_low - solution.profit,
                "change_high": p_high - solution.profit,
                "swing": abs(p_high - p_low),
                "note": "; ".join(note),
            }
        )
        if progress is not None:
            progress(done, len(ranges))
    table = pd.DataFrame(rows)
    table = table.sort_values("swing", ascending=False, na_position="last", kind="stable")
    return FamilySensitivity(solution, fixed, solution.profit, table.reset_index(drop=True))


# ---------------------------------------------------------------- uncertainty
@dataclass(frozen=True)
class FamilyUncertainty:
    """A Monte Carlo study of fixed family designs: the family optimum (rank 1) and, when
    it differs, the products' own optima taken together (rank 2), the reference of the
    reuse premium. Attributes as :class:`optimizer.explore.uncertainty.Uncertainty`;
    ``profit`` is family profit."""

    designs: tuple[FixedFamily, ...]
    labels: tuple[str, ...]
    inputs: tuple[FamilyPath, ...]
    samples: np.ndarray
    profit: np.ndarray
    summary: pd.DataFrame
    seed: int

    def samples_frame(self) -> pd.DataFrame:
        frame = pd.DataFrame(self.samples, columns=[p.text for p in self.inputs])
        for k in range(len(self.designs)):
            frame[f"profit_rank{k + 1}"] = self.profit[:, k]
        frame.insert(0, "sample", np.arange(len(frame)))
        return frame


def run_family_uncertainty(
    study: FamilyStudy,
    samples: int = 1000,
    seed: int = 0,
    runner: Runner | None = None,
    method: str = "milp",
    time_limit: float | None = None,
    progress: Progress | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> FamilyUncertainty:
    """Solve the family, draw the inputs and price the fixed family design(s) per sample."""
    from optimizer.solver.family import solve_family

    if not study.uncertain:
        raise ProblemError(
            study.source,
            "uncertain",
            "the family file has no [[uncertain]] inputs; add top-level entries such as "
            '{ path = "product.NAME.market.volume", distribution = "lognormal", '
            "median = 1e6, sigma_log = 0.3 } (see README, Exploration)",
        )
    if samples < 2:
        raise ProblemError("--samples", "", f"needs at least 2 samples (got {samples})")
    runner = runner or Runner()
    if stage:
        stage("solving the family at the file's values", 1)
    solution = solve_family(study.family, time_limit=time_limit, source=study.source, method=method)
    if progress:
        progress(1, 1)
    names = solution.names
    designs = [FixedFamily.from_results(names, solution.designs, study.family)]
    labels = ["family optimum"]
    at_file = [solution.profit]
    alone = FixedFamily.from_results(names, solution.alone, study.family)
    if alone.key() != designs[0].key():
        designs.append(alone)
        labels.append("each product's own optimum")
        at_file.append(family_total([m.problem for m in study.family.members], solution.alone))
    paths = list(study.uncertain_paths)
    drawn = sample_inputs(list(study.uncertain), paths, samples, seed)
    for j, path in enumerate(paths):
        for value in (drawn[:, j].min(), drawn[:, j].max()):
            try:
                family_with(
                    apply_family_values(study.data, [(path, float(value))]), [], study.source
                )
            except (PathError, ProblemError) as err:
                detail = str(err) if isinstance(err, PathError) else f"{err.field}: {err.message}"
                raise ProblemError(
                    study.source,
                    f"uncertain[{j}] ({path.text})",
                    f"a drawn value {value:.6g} does not fit ({detail}); narrow the "
                    "distribution, or use a lognormal for a quantity that must stay positive",
                ) from None
    workers = 8 if runner.scheduler else runner.workers
    tasks = [
        FamilyPriceTask(
            study.data,
            study.source,
            tuple(designs),
            tuple(p.text for p in paths),
            tuple(tuple(float(v) for v in drawn[i]) for i in part),
        )
        for part in chunks(samples, max(10, 4 * workers))
    ]
    if stage:
        stage("pricing the family design in every sample", len(tasks))
    with runner.session():
        priced = runner.map(price_family_scenarios, tasks, progress)
    profit = np.vstack([p for p, _ in priced])
    summary = summarise(profit)
    summary.insert(0, "rank", np.arange(1, len(designs) + 1))
    summary.insert(
        1, "design_kind", [f"{label}: {d.kind}" for label, d in zip(labels, designs, strict=True)]
    )
    summary.insert(2, "design", [d.summary for d in designs])
    summary.insert(3, "profit_at_file_values", at_file)
    return FamilyUncertainty(
        tuple(designs), tuple(labels), tuple(paths), drawn, profit, summary, seed
    )


# ---------------------------------------------------------------- compare
@dataclass(frozen=True)
class FamilyOption:
    label: str
    study: FamilyStudy
    notes: tuple[str, ...] = ()


def restrict_family_processes(
    study: FamilyStudy, keep: Sequence[str], option: str = "--processes"
) -> FamilyOption:
    """The family with only the processes in ``keep`` (raises ProblemError): packagings
    whose interposer needs a dropped process go too, and with them products' packaging
    choices, hand-written designs and [[uncertain]] entries that use what was dropped."""
    names = [p.name for p in study.shared.process]
    keep = list(dict.fromkeys(k.strip() for k in keep if k.strip()))
    if not keep:
        raise ProblemError(option, "", "names no process; give names like fine,mature")
    unknown = [k for k in keep if k not in names]
    if unknown:
        raise ProblemError(
            option, ",".join(keep), f"unknown process {unknown}; use names from {names}"
        )
    label = "+".join(keep)
    data = copy.deepcopy(study.data)
    notes: list[str] = []
    data["process"] = [p for p in data["process"] if p.get("name") in keep]
    kept = []
    for pack in data.get("packaging", []):
        via = pack.get("interposer_process")
        if via is not None and via not in keep:
            notes.append(
                f"packaging '{pack.get('name')}' dropped: its interposer is made on "
                f"process '{via}', which this option does not keep"
            )
        else:
            kept.append(pack)
    packagings = {p.get("name") for p in kept}
    if not kept:
        raise ProblemError(
            option,
            label,
            "leaves no packaging option (every one needs a dropped interposer process); "
            "add that process to the set",
        )
    data["packaging"] = kept
    for product in data["product"]:
        name = product.get("name")
        if isinstance(product.get("packaging"), list):
            allowed = [p for p in product["packaging"] if p in packagings]
            if not allowed:
                raise ProblemError(
                    option,
                    label,
                    f"leaves product '{name}' no packaging it allows; add the process its "
                    "packaging's interposer is made on",
                )
            product["packaging"] = allowed
        dropped, designs = [], []
        for design in product.get("design", []):
            used = {die.get("process") for die in design.get("die", [])}
            used |= set(design.get("defect_targets", {}))
            if used - set(keep) or design.get("packaging") not in packagings:
                dropped.append(str(design.get("name")))
            else:
                designs.append(design)
        if dropped:
            notes.append(f"product '{name}': explicit designs {dropped} dropped")
        if "design" in product:
            product["design"] = designs
    uncertain = []
    for entry, path in zip(study.uncertain, study.uncertain_paths, strict=True):
        head = path.inner.steps[0] if path.product is None and path.inner is not None else None
        if (
            head is not None
            and head.key in ("process", "packaging")
            and (head.item not in (keep if head.key == "process" else packagings))
        ):
            notes.append(f"uncertain input '{path.text}' dropped (its option is dropped)")
        else:
            uncertain.append({k: v for k, v in entry.model_dump().items() if v is not None})
    data["uncertain"] = uncertain
    source = f"{study.source} [{label}]"
    return FamilyOption(label, family_study_from_data(data, source, feasible=False), tuple(notes))


def family_process_options(
    study: FamilyStudy, sets: Sequence[Sequence[str]] | None = None
) -> list[FamilyOption]:
    """Options for the given process sets; by default each process alone, then all."""
    if sets:
        return [restrict_family_processes(study, keep) for keep in sets]
    names = [p.name for p in study.shared.process]
    options = []
    for name in names:
        try:
            options.append(restrict_family_processes(study, [name]))
        except ProblemError:
            continue  # this process alone cannot be packaged; the full set still shows it
    if len(names) > 1:
        options.append(FamilyOption("all processes", study))
    return options


def family_file_options(studies: Sequence[FamilyStudy]) -> list[FamilyOption]:
    """One option per family file, labelled by file name (made unique)."""
    options, seen = [], {}
    for study in studies:
        label = study.source.rsplit("/", 1)[-1]
        seen[label] = seen.get(label, 0) + 1
        if seen[label] > 1:
            label = f"{label} ({seen[label]})"
        options.append(FamilyOption(label, study))
    return options


@dataclass(frozen=True)
class FamilyComparison:
    """Family optima side by side, best family profit first (an option without a family
    design has blank figures and the reason in ``notes``)."""

    table: pd.DataFrame
    solutions: dict
    notes: dict[str, tuple[str, ...]]


def compare_families(
    options: Sequence[FamilyOption],
    method: str = "milp",
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> FamilyComparison:
    """Solve every family option and tabulate the optima."""
    from optimizer.solver.family import solve_family

    if not options:
        raise ValueError("nothing to compare")
    solutions, failed = {}, {}
    for done, option in enumerate(options, start=1):
        try:
            solutions[option.label] = solve_family(
                option.study.family,
                time_limit=time_limit,
                source=option.study.source,
                method=method,
            )
        except ProblemError as error:
            failed[option.label] = error  # no family design here: a finding
        if progress is not None:
            progress(done, len(options))
    if not solutions:
        first = next(iter(failed.values()))
        raise ProblemError(first.source, first.field, f"no option has a design: {first.message}")
    best = max(s.profit for s in solutions.values())
    rows = []
    for option in options:
        if option.label in failed:
            error = failed[option.label]
            rows.append(
                {
                    "option": option.label,
                    "design_kind": "no family design",
                    "notes": " | ".join([*option.notes, f"{error.field}: {error.message}"]),
                }
            )
            continue
        s = solutions[option.label]
        fixed = FixedFamily.from_results(s.names, s.designs, option.study.family)
        row = {
            "option": option.label,
            "design_kind": fixed.kind,
            "currency": option.study.currency,
            "profit": s.profit,
            "profit_vs_best": s.profit - best,
            "alone_profit": s.alone_profit,
            "reuse_premium": s.reuse_premium,
            "library_dies": fixed.library_dies,
            "shared_dies": fixed.shared_dies,
            "shared": fixed.shared,
            "shared_nre": s.shared_nre,
            "shared_targets": s.shared_targets,
            "proven_optimal": s.proven,
            "gap": s.gap,
        }
        for name, design in zip(s.names, s.designs, strict=True):
            row[f"design_{name}"] = design_summary(design)
            row[f"profit_alone_priced_{name}"] = design.profit
        row["notes"] = " | ".join(option.notes)
        rows.append(row)
    table = pd.DataFrame(rows).sort_values(
        "profit", ascending=False, kind="stable", na_position="last"
    )
    return FamilyComparison(
        table.reset_index(drop=True), solutions, {o.label: o.notes for o in options}
    )


__all__ = [
    "FamilyComparison",
    "FamilyOption",
    "FamilyPricer",
    "FamilySensitivity",
    "FamilyUncertainty",
    "FixedFamily",
    "compare_families",
    "family_file_options",
    "family_process_options",
    "family_ranges",
    "family_total",
    "make_family_axis",
    "make_family_range",
    "price_fixed",
    "run_family_sensitivity",
    "run_family_sweep",
    "run_family_uncertainty",
]
