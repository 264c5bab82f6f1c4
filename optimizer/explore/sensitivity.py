"""One-at-a-time sensitivity of the winning design's profit to uncertain inputs.

The problem is solved once; the winner is then held fixed (see
:mod:`optimizer.explore.fixed`) and re-priced by the evaluator with one input at a time
moved to the low and to the high end of its range, every other input as in the file.
Ranges come from the file's ``[[uncertain]]`` entries (their ``low``/``high``, by default
mean -/+ 2 std or median x exp(-/+ 2 sigma_log)) and from ranges given on the command
line. The table is ranked by swing, |profit at high - profit at low|: the tornado. On a
file with a [life] plan the objective is the NPV and the winner the life optimum (see
:mod:`optimizer.explore.objective`); the columns keep their names.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from optimizer.designs import DesignResult
from optimizer.explore.fixed import FixedDesign
from optimizer.explore.objective import Objective, Winner, objective_of
from optimizer.explore.paths import FieldPath, PathError, Study, parse_value, resolve
from optimizer.problem import ProblemError


@dataclass(frozen=True)
class InputRange:
    """An input and the range it may take; ``origin`` says where the range came from."""

    path: FieldPath
    low: float
    high: float
    origin: str


def ranges_from_study(study: Study) -> list[InputRange]:
    """The sensitivity ranges of the file's ``[[uncertain]]`` entries, in file order."""
    out = []
    for i, (entry, path) in enumerate(zip(study.uncertain, study.uncertain_paths, strict=True)):
        low, high = entry.range()
        out.append(InputRange(path, low, high, f"uncertain[{i}]"))
    return out


def make_range(
    path_text: str,
    low: object,
    high: object,
    option: str = "--range",
    resolver: Callable = resolve,
    reader: Callable = parse_value,
) -> InputRange:
    """A range typed by a user: numbers in base units or quantities with units
    (``resolver`` and ``reader``: the path grammar, a family file's for families)."""
    path = resolver(path_text, option)
    try:
        lo, hi = reader(path, low), reader(path, high)
    except PathError as exc:
        raise ProblemError(option, path.text, str(exc)) from None
    if not lo < hi:
        raise ProblemError(
            option, path.text, f"low ({lo:g}) must be below high ({hi:g}); swap them"
        )
    return InputRange(path, lo, hi, option)


@dataclass(frozen=True)
class Sensitivity:
    """The winner and how its profit moves with each input.

    ``table`` columns: input, unit, origin, base_value, low, high, profit_low,
    profit_high, change_low, change_high, swing, note; largest swing first. ``profit``
    is the objective (``objective``: profit, or npv for a life plan); ``held`` is the
    winner as the solve returned it (its design, proof and record).
    """

    winner: DesignResult
    design: FixedDesign
    base_profit: float
    table: pd.DataFrame
    objective: str = "profit"
    held: Winner | None = None


def run_sensitivity(
    study: Study,
    ranges: Sequence[InputRange],
    method: str = "milp",
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Sensitivity:
    """Solve once, then re-price the winner at both ends of every range."""
    objective = objective_of(study)
    if not ranges:
        raise ProblemError(
            study.source,
            "uncertain",
            "no input ranges to test; add [[uncertain]] entries to the file or give "
            "--range PATH=LOW:HIGH (e.g. --range market.unit_price=1500:2300)",
        )
    seen: dict[str, str] = {}
    for r in ranges:
        if r.path.text in seen:
            raise _error(study, r, f"is already given by {seen[r.path.text]}; give it once")
        seen[r.path.text] = r.origin
    for r in ranges:
        _check_ends(study, r, objective)
    held = objective.winners(study, 1, method, time_limit)[0]
    winner, design, base_profit = held.result, held.design, held.value
    rows = []
    for done, r in enumerate(ranges, start=1):
        pricer = objective.pricer(study.data, study.source, [design], [r.path])
        prices = pricer.price(np.array([[r.low], [r.high]]))
        p_low, p_high = (float(v) for v in prices.profit[:, 0])
        note = []
        if not math.isfinite(p_low):
            note.append("the design cannot be built at low")
        if not math.isfinite(p_high):
            note.append("the design cannot be built at high")
        base = objective.read_value(study, r.path)
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
                "change_low": p_low - base_profit,
                "change_high": p_high - base_profit,
                "swing": abs(p_high - p_low),
                "note": "; ".join(note),
            }
        )
        if progress is not None:
            progress(done, len(ranges))
    table = pd.DataFrame(rows)
    table = table.sort_values("swing", ascending=False, na_position="last", kind="stable")
    return Sensitivity(
        winner, design, base_profit, table.reset_index(drop=True), objective.name, held
    )


def _check_ends(study: Study, r: InputRange, objective: Objective) -> None:
    for value in (r.low, r.high):
        try:
            objective.validate(study.data, [(r.path, value)], study.source)
        except PathError as exc:
            raise _error(study, r, str(exc)) from None
        except ProblemError as err:
            raise _error(
                study,
                r,
                f"{value:g} makes the problem invalid ({err.field or err.source}: "
                f"{err.message}); narrow the range",
            ) from None


def _error(study: Study, r: InputRange, message: str) -> ProblemError:
    # ranges from the file point at their entry; ranges from the command line at the option
    if r.origin.startswith("uncertain["):
        return ProblemError(study.source, f"{r.origin} ({r.path.text})", message)
    return ProblemError(r.origin, r.path.text, message)
