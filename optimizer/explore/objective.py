"""What the exploration loops maximise: one period's profit, or a life plan's NPV.

The loops of ``sweep``, ``sensitivity``, ``uncertainty`` and ``compare`` are written once;
an :class:`Objective` supplies what differs between a plain problem file (the solver's
profit) and a file with a ``[life]`` plan (net present value, see
:mod:`optimizer.explore.life`): how a scenario is validated and solved, how a design
held fixed is priced, and how a path's value is read. Its functions are module-level so
worker processes and Dask can run them.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from optimizer.designs import DesignResult
from optimizer.explore.fixed import FixedDesign, ScenarioPricer, price_scenarios
from optimizer.explore.paths import FieldPath, Study, apply_values, read_value
from optimizer.explore.sweep import locate_crossing, solve_scenario
from optimizer.problem import parse_problem


@dataclass(frozen=True)
class Winner:
    """A design a solve picked at the file's values, to hold fixed.

    ``result`` is what tables show (for a life, averaged over it; see
    :func:`optimizer.explore.life.life_average`), ``design`` what is re-priced,
    ``value`` the objective, ``extra`` objective-specific columns and ``record`` the
    design in full for a run folder's JSON.
    """

    label: str
    result: DesignResult
    design: object  # FixedDesign or LifeDesign: kind, summary, key()
    value: float
    proven: bool
    gap: float
    extra: dict = field(default_factory=dict)
    record: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Objective:
    """The parts of an exploration that depend on what is maximised.

    Attributes
    ----------
    name, words
        The objective's column name (``profit``, ``npv``) and its name in words.
    solve_scenario, locate_crossing, price_scenarios
        Module-level task functions: a :class:`~optimizer.explore.sweep.SolveTask` to a
        :class:`~optimizer.explore.sweep.ScenarioOutcome`, a
        :class:`~optimizer.explore.sweep.CrossingTask` to a
        :class:`~optimizer.explore.sweep.Crossing`, a
        :class:`~optimizer.explore.fixed.PriceTask` to (objective, cost per good unit).
    pricer
        ``pricer(data, source, designs, paths)``: an object whose ``price(values)``
        gives :class:`~optimizer.explore.fixed.ScenarioPrices` of held designs.
    validate
        ``validate(data, assignments, source)``: the changed file read again (raises
        PathError or ProblemError).
    read_value
        ``read_value(study, path)``: the value in base units, None if unset.
    winners
        ``winners(study, top, method, time_limit)``: the designs to hold fixed.
    single_period
        Whether the single-period shortcuts apply (shared candidate dies, the envelope).
    """

    name: str
    words: str
    solve_scenario: Callable
    locate_crossing: Callable
    price_scenarios: Callable
    pricer: Callable
    validate: Callable
    read_value: Callable
    winners: Callable[..., list[Winner]]
    single_period: bool


def _validate_problem(data: dict, assignments: Sequence[tuple[FieldPath, float]], source: str):
    return parse_problem(apply_values(data, assignments), source)


def _read_problem_value(study: Study, path: FieldPath) -> float | None:
    return read_value(study.problem, path)


def _profit_winners(study: Study, top: int, method: str, time_limit: float | None) -> list[Winner]:
    from optimizer.solver import solve

    solution = solve(
        study.problem, top=top, method=method, time_limit=time_limit, source=study.source
    )
    return [
        Winner(
            f"rank {k + 1}",
            result,
            FixedDesign.from_result(result, study.problem),
            result.profit,
            solution.proven_optimal,
            solution.gap,
            record=result.to_dict(),
        )
        for k, result in enumerate(solution.designs)
    ]


PROFIT = Objective(
    name="profit",
    words="profit",
    solve_scenario=solve_scenario,
    locate_crossing=locate_crossing,
    price_scenarios=price_scenarios,
    pricer=ScenarioPricer,
    validate=_validate_problem,
    read_value=_read_problem_value,
    winners=_profit_winners,
    single_period=True,
)


def objective_of(study: object) -> Objective:
    """The objective of a loaded study: NPV for a file with a [life] plan, else profit."""
    from optimizer.explore.life import NPV
    from optimizer.explore.life_paths import LifeStudy

    return NPV if isinstance(study, LifeStudy) else PROFIT


__all__ = ["PROFIT", "Objective", "Winner", "objective_of"]
