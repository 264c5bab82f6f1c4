"""Compare the best design under several process option sets, or of several problem files.

A *process option set* is the problem with only the named processes kept. A packaging
whose silicon interposer is made on a dropped process cannot be built and is dropped
with it; explicit designs and ``[[uncertain]]`` entries that use a dropped process or
packaging are dropped too (they play no part in the solve). Every drop is noted.

Each option is solved to proven optimality; the winners are tabulated side by side with
their cost per good unit split into components, and each component's difference to the
most profitable option: positive means this option pays more for that component per
good unit, which is what separates it from the best.

Files with a [life] plan are compared by the NPV of their life optima (see
:mod:`optimizer.explore.objective`); their cost columns are averages over the life's
units, and a process option set also drops the plan's curves of what it drops.
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import pandas as pd

from optimizer.designs import DesignResult
from optimizer.evaluator import COST_COMPONENTS
from optimizer.explore.fixed import design_kind, design_summary
from optimizer.explore.life_paths import (
    LifePath,
    LifeStudy,
    life_study_from_data,
    parse_life_file_path,
)
from optimizer.explore.objective import Winner, objective_of
from optimizer.explore.paths import Study, parse_path, study_from_data
from optimizer.problem import ProblemError


@dataclass(frozen=True)
class Option:
    """One thing to compare: a label, the study to solve, and notes on what was dropped."""

    label: str
    study: Study
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Comparison:
    """Winners side by side.

    Attributes
    ----------
    table
        One row per option, best profit first: design kind and summary, cost per good
        unit, profit, die yields, package yield, NRE, ``cost_<component>`` per good unit,
        ``diff_<component>`` against the best option, and a short explanation. An option
        without any feasible design has a row with blank figures and the reason in
        ``notes``.
    results
        The winning design of each option, by label.
    notes
        What each option dropped, by label.
    """

    table: pd.DataFrame
    results: dict[str, DesignResult]
    notes: dict[str, tuple[str, ...]]

    @property
    def components(self) -> tuple[str, ...]:
        return tuple(c for c in COST_COMPONENTS if f"cost_{c}" in self.table.columns)


def restrict_processes(study: Study, keep: Sequence[str], option: str = "--processes") -> Option:
    """The study with only the processes in ``keep`` (raises ProblemError)."""
    names = [p.name for p in study.problem.process]
    keep = list(dict.fromkeys(k.strip() for k in keep if k.strip()))
    if not keep:
        raise ProblemError(option, "", "names no process; give names like leading,mature")
    unknown = [k for k in keep if k not in names]
    if unknown:
        raise ProblemError(
            option, ",".join(keep), f"unknown process {unknown}; use names from {names}"
        )
    data = copy.deepcopy(study.data)
    notes: list[str] = []
    data["process"] = [p for p in data["process"] if p.get("name") in keep]
    if isinstance(study, LifeStudy):
        # the life file's [[uncertain]] entries live beside the document
        data["uncertain"] = [e.model_dump(exclude_none=True) for e in study.uncertain]
    kept_packaging = []
    for pack in data.get("packaging", []):
        via = pack.get("interposer_process")
        if via is not None and via not in keep:
            notes.append(
                f"packaging '{pack.get('name')}' dropped: its interposer is made on "
                f"process '{via}', which this option does not keep"
            )
        else:
            kept_packaging.append(pack)
    if not kept_packaging:
        raise ProblemError(
            option,
            ",".join(keep),
            "leaves no packaging option (every one needs a dropped interposer process); "
            "add that process to the set",
        )
    data["packaging"] = kept_packaging
    packagings = {p.get("name") for p in kept_packaging}
    designs, dropped = [], []
    for design in data.get("design", []):
        used = {die.get("process") for die in design.get("die", [])}
        used |= set(design.get("defect_targets", {}))
        if used - set(keep) or design.get("packaging") not in packagings:
            dropped.append(str(design.get("name")))
        else:
            designs.append(design)
    if dropped:
        notes.append(
            f"explicit designs {dropped} dropped (they use a dropped option; "
            "the solve does not use them)"
        )
    if "design" in data:
        data["design"] = designs
    life = isinstance(study, LifeStudy)
    if life:
        notes += _restrict_life(data, keep, packagings)
    uncertain = []
    for entry in data.get("uncertain", []):
        path = parse_life_file_path(entry["path"]) if life else parse_path(entry["path"])
        head = path.steps[1] if isinstance(path, LifePath) else path.steps[0]
        if head.key in ("process", "packaging") and (
            head.item not in (keep if head.key == "process" else packagings)
        ):
            notes.append(f"uncertain input '{path.text}' dropped (its option is dropped)")
        else:
            uncertain.append(entry)
    if "uncertain" in data:
        data["uncertain"] = uncertain
    label = "+".join(keep)
    source = f"{study.source} [{label}]"
    remade = life_study_from_data(data, source) if life else study_from_data(data, source)
    return Option(label, remade, tuple(notes))


def _restrict_life(data: dict, processes: Sequence[str], packagings: set) -> list[str]:
    """Drop the [life] curves of dropped processes and packagings (in place); notes."""
    notes = []
    for section, kept in (("process", processes), ("packaging", packagings)):
        curves = data["life"].get(section)
        if not isinstance(curves, dict):
            continue
        for name in [n for n in curves if n not in kept]:
            del curves[name]
            notes.append(f"life curves of {section} '{name}' dropped with it")
    return notes


def process_options(study: Study, sets: Sequence[Sequence[str]] | None = None) -> list[Option]:
    """Options for the given process sets; by default each process alone, then all."""
    if sets:
        return [restrict_processes(study, keep) for keep in sets]
    names = [p.name for p in study.problem.process]
    options = []
    for name in names:
        try:
            options.append(restrict_processes(study, [name]))
        except ProblemError:
            continue  # this process alone cannot be packaged; the full set still shows it
    if len(names) > 1:
        options.append(Option("all processes", study))
    return options


def file_options(studies: Sequence[Study]) -> list[Option]:
    """One option per problem file, labelled by file name (made unique)."""
    options, seen = [], {}
    for study in studies:
        label = study.source.rsplit("/", 1)[-1]
        seen[label] = seen.get(label, 0) + 1
        if seen[label] > 1:
            label = f"{label} ({seen[label]})"
        options.append(Option(label, study))
    return options


def compare(
    options: Sequence[Option],
    method: str = "milp",
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Comparison:
    """Solve every option and tabulate the winners (best objective first: profit, or
    NPV when the options are life files, whose ``profit`` columns then hold NPV)."""
    if not options:
        raise ValueError("nothing to compare")
    objectives = {objective_of(o.study).name for o in options}
    if len(objectives) > 1:
        raise ValueError("compare life files with life files, and plain files with plain ones")
    results: dict[str, DesignResult] = {}
    winners: dict[str, Winner] = {}
    failed: dict[str, ProblemError] = {}
    for done, option in enumerate(options, start=1):
        objective = objective_of(option.study)
        try:
            winner = objective.winners(option.study, 1, method, time_limit)[0]
        except ProblemError as error:
            # an option with no feasible design is a finding, not a failure of the run
            failed[option.label] = error
        else:
            results[option.label] = winner.result
            winners[option.label] = winner
        if progress is not None:
            progress(done, len(options))
    if not results:
        first = next(iter(failed.values()))
        raise ProblemError(first.source, first.field, f"no option has a design: {first.message}")
    best_label = max(results, key=lambda label: results[label].profit)
    best = results[best_label]
    rows = []
    for option in options:
        if option.label in failed:
            error = failed[option.label]
            rows.append(
                {
                    "option": option.label,
                    "design_kind": "no feasible design",
                    "notes": " | ".join([*option.notes, f"{error.field}: {error.message}"]),
                }
            )
            continue
        r = results[option.label]
        row = {
            "option": option.label,
            "design_kind": design_kind(r),
            "design": design_summary(r),
            "packaging": r.packaging,
            "n_dies": r.n_dies,
            "currency": r.currency,
            "cost_per_good_unit": r.cost_per_good_unit,
            "manufacturing_cost_per_good_unit": r.manufacturing_cost_per_good_unit,
            "profit": r.profit,
            "profit_vs_best": r.profit - best.profit,
            "profit_margin": r.profit_margin,
            "die_yields": "; ".join(
                f"{d.name}@{d.process} {100 * d.die_yield:.2f}%" for d in r.dies
            ),
            "lowest_die_yield": min(d.die_yield for d in r.dies),
            "package_yield": r.package_yield,
            "nre": r.nre,
            "proven_optimal": winners[option.label].proven,
        }
        if not objective_of(option.study).single_period:
            del row["profit_margin"]  # a life has no one margin (its rows hold NPV)
        row.update(winners[option.label].extra)
        for component in COST_COMPONENTS:
            row[f"cost_{component}"] = r.breakdown.get(component, 0.0)
        for component in COST_COMPONENTS:
            row[f"diff_{component}"] = r.breakdown.get(component, 0.0) - best.breakdown.get(
                component, 0.0
            )
        row["differences_explained"] = explain(r, best, option.label == best_label)
        row["notes"] = " | ".join(option.notes)
        rows.append(row)
    table = pd.DataFrame(rows).sort_values(
        "profit", ascending=False, kind="stable", na_position="last"
    )
    table = table.reset_index(drop=True)
    return Comparison(table, results, {o.label: o.notes for o in options})


def explain(result: DesignResult, best: DesignResult, is_best: bool, top: int = 3) -> str:
    """The components that cost this option most against the best one, in words."""
    if is_best:
        return "most profitable option"
    diffs = [
        (c, result.breakdown.get(c, 0.0) - best.breakdown.get(c, 0.0)) for c in COST_COMPONENTS
    ]
    diffs = [d for d in diffs if abs(d[1]) > 1e-9]
    diffs.sort(key=lambda d: -abs(d[1]))
    if not diffs:
        return "same cost per good unit as the best"
    parts = [f"{name} {value:+,.2f}" for name, value in diffs[:top]]
    gap = result.cost_per_good_unit - best.cost_per_good_unit
    return f"{gap:+,.2f} {result.currency}/unit vs best: " + ", ".join(parts)
