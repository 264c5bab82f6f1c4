"""``sensitivity``: the winner held fixed and re-priced at both ends of each input."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.explore_shared import _no_stage
from optimizer.api.files import ProblemFile, _as_file
from optimizer.api.frames import _RunFolder, csv_writer, figure_writers, named, records
from optimizer.errors import ProblemError
from optimizer.outputs import Writer, clean, json_writer, short

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class SensitivityOutcome(_RunFolder):
    """How the winner's objective moves with each input (``dieplan sensitivity``):
    ``table`` (sensitivity.csv, largest swing first), ``result`` (the library's),
    ``objective`` (None for families) and ``options``."""

    problem_file: ProblemFile
    result: Any
    objective: Any
    options: dict
    command = "sensitivity"

    @property
    def family(self) -> bool:
        return self.objective is None

    @property
    def table(self) -> pd.DataFrame:
        return self.result.table if self.family else named(self.result.table, self.objective.name)

    def to_dict(self) -> dict:
        """The ``dieplan sensitivity --json`` object, without ``run_folder``."""
        result = self.result
        if self.family:
            winner = {
                "kind": result.design.kind,
                "design": result.design.summary,
                "profit": result.base_profit,
                "objective": "family profit",
            }
        else:
            winner = {
                "kind": result.design.kind,
                "design": result.design.summary,
                self.objective.name: result.base_profit,
                "proven_optimal": result.held.proven,
                "gap": result.held.gap,
            }
        return {
            "command": "sensitivity",
            "options": self.options,
            "winner": winner,
            "sensitivity": records(self.table),
        }

    def files(self) -> dict[str, Writer]:
        from optimizer.explore.plots import tornado_figure

        pf, result = self.problem_file, self.result
        if self.family:
            from optimizer.family_report import family_dict

            held = clean(family_dict(result.solution, pf.title))
            figure = tornado_figure(result, pf.currency)
        else:
            held = result.held.record
            figure = tornado_figure(result, pf.currency, self.objective.words)
        return {
            "sensitivity.csv": csv_writer(self.table),
            "winner.json": json_writer(held),
            "options.json": json_writer(self.options),
            **figure_writers("tornado", figure, pf.title),
            "problem.toml": pf.problem_writer(),
        }


def _parse_range(text: str, make_range):
    path, sep, span = text.partition("=")
    low, sep2, high = span.partition(":")
    if not (sep and sep2 and path.strip() and low.strip() and high.strip()):
        raise ProblemError(
            "--range", short(text), "write PATH=LOW:HIGH, e.g. market.unit_price=1500:2300"
        )
    return make_range(path.strip(), low.strip(), high.strip())


def input_ranges(kind: str, ranges: Sequence[str] | None) -> list:
    """Extra sensitivity ranges, each ``PATH=LOW:HIGH``, checked (raises ProblemError)."""
    if kind == "family":
        from optimizer.explore.family import make_family_range

        return [_parse_range(text, make_family_range) for text in ranges or []]
    from optimizer.explore.sensitivity import make_range

    if kind == "life":
        from optimizer.explore.life_paths import resolve_life as resolver
    else:
        from optimizer.explore.paths import resolve as resolver
    return [
        _parse_range(text, lambda p, lo, hi: make_range(p, lo, hi, resolver=resolver))
        for text in ranges or []
    ]


def sensitivity(
    problem_file,
    ranges: Sequence[str] | None = None,
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> SensitivityOutcome:
    """The winner held fixed, re-priced at both ends of each uncertain input and of each
    extra ``PATH=LOW:HIGH`` range (``dieplan sensitivity``). Raises ProblemError."""
    pf = _as_file(problem_file, exploring=True)
    extra = input_ranges(pf.kind, ranges)
    study = pf.study
    stage = stage or _no_stage
    if pf.kind == "family":
        from optimizer.explore.family import family_ranges, run_family_sensitivity

        all_ranges = family_ranges(study) + extra
        stage("re-pricing the family optimum", max(1, len(all_ranges)))
        result = run_family_sensitivity(study, all_ranges, time_limit=time_limit, progress=progress)
        options = {
            "problem": pf.source,
            "family": True,
            "ranges": list(ranges or []),
            "time_limit": time_limit,
        }
        return SensitivityOutcome(pf, result, None, options)
    from optimizer.explore.objective import objective_of
    from optimizer.explore.sensitivity import ranges_from_study, run_sensitivity

    objective = objective_of(study)
    all_ranges = ranges_from_study(study) + extra
    stage("re-pricing the winner", max(1, len(all_ranges)))
    result = run_sensitivity(study, all_ranges, time_limit=time_limit, progress=progress)
    options = {
        "problem": pf.source,
        "ranges": list(ranges or []),
        "time_limit": time_limit,
        "objective": objective.words,
    }
    return SensitivityOutcome(pf, result, objective, options)
