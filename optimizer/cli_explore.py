"""Exploration commands of the `dieplan` command line: compare, sweep, sensitivity, uncertainty.

Registered on the main app when ``optimizer.cli`` imports this module. Each command
checks its options and output folder before any work, runs the study through
:mod:`optimizer.api` (which builds the tables, the ``--json`` object and the run
folder's files), prints a short summary and writes one run folder atomically: the
problem file(s), the options as JSON, CSV tables and PNG + SVG figures. Bad input is one
line on stderr and exit code 2 (see :class:`optimizer.cli.OneLineGroup`); names from
problem files are printed as Text, never read as console markup. A file with a [life]
plan is explored with its net present value as the objective: the same tables and
figures, the objective's columns named ``npv`` (see :func:`optimizer.api.named`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.text import Text

# light imports only (see optimizer/cli.py); commands import the library when they run
from optimizer import api
from optimizer.cli import ProblemPath, app, finite, preflight
from optimizer.errors import ProblemError
from optimizer.outputs import json_text, write_run_folder
from optimizer.report import CAUTION, cells, literal_table, money

# kept under this name for callers of the command line's helpers
_figure_writers = api.figure_writers

ResultsDir = Annotated[Path, typer.Option("--results", help="Folder for the run folder.")]
AsJson = Annotated[bool, typer.Option("--json", help="Print one JSON object.")]
Write = Annotated[bool, typer.Option("--write/--no-write", help="Write a run folder.")]
TimeLimit = Annotated[
    float | None,
    typer.Option(
        "--time-limit",
        min=0.0,
        callback=finite,
        help="Seconds per solve; best found and its gap.",
    ),
]
Workers = Annotated[
    int | None,
    typer.Option("--workers", help="Local worker processes (default: one per CPU core)."),
]
Scheduler = Annotated[
    str | None,
    typer.Option("--scheduler", help="Address of an existing Dask scheduler, tcp://HOST:PORT."),
]


# ---------------------------------------------------------------- shared helpers
def _console() -> Console:
    console = Console(highlight=False, emoji=False)
    if not console.is_terminal:
        console = Console(highlight=False, emoji=False, width=120)
    return console


@contextmanager
def _progress(console: Console, enabled: bool) -> Iterator[tuple[Callable, Callable]]:
    """(stage, advance) callbacks driving a rich progress bar on a terminal only."""
    if not (enabled and console.is_terminal):
        yield (lambda name, total: None), (lambda done, total: None)
        return
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
    )

    columns = (
        TextColumn("{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
    )
    with Progress(*columns, console=console, transient=False) as bar:
        current: dict = {}

        def stage(name: str, total: int) -> None:
            current["task"] = bar.add_task(name, total=total)

        def advance(done: int, total: int) -> None:
            if "task" not in current:
                stage("working", total)
            bar.update(current["task"], completed=done, total=total)

        yield stage, advance


def _heading(objective, first: bool = False) -> str:
    """The objective in a table heading: "profit" or "NPV" ("Profit" ``first`` in it)."""
    text = "NPV" if objective.name == "npv" else objective.words
    return text[:1].upper() + text[1:] if first else text


def _file_kind(path: Path) -> str:
    """ "family", "life" or "problem", read before any work to check the options against;
    a file that cannot be read counts as a problem file, whose loading reports it."""
    from optimizer.family import is_family
    from optimizer.life import has_life
    from optimizer.problem import read_problem_data

    try:
        data, _ = read_problem_data(path)
    except (ProblemError, OSError):
        return "problem"
    if is_family(data):
        return "family"
    return "life" if has_life(data) else "problem"


def _say(console: Console, text: str, style: str | None = None) -> None:
    console.print(Text(text, style=style or ""))


def _finish(
    console: Console,
    as_json: bool,
    outcome,
    folder: Path | None,
    show: Callable[[], None],
) -> None:
    if as_json:
        payload = outcome.to_dict()
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    show()
    if folder is not None:
        _say(console, f"wrote {folder}")
    _say(console, CAUTION, "dim")


def _write(outcome, write: bool, results_dir: Path, label: str) -> Path | None:
    if not write:
        return None
    return write_run_folder(results_dir, outcome.command, label, outcome.files())


# ---------------------------------------------------------------- compare
@app.command()
def compare(
    problem_paths: Annotated[
        list[Path], typer.Argument(help="Problem file(s) (TOML).", show_default=False)
    ],
    processes: Annotated[
        list[str] | None,
        typer.Option(
            "--processes",
            "-p",
            help="A process option set, names joined by commas (repeat for more sets). "
            "Default: each process alone, then all together.",
        ),
    ] = None,
    time_limit: TimeLimit = None,
    as_json: AsJson = False,
    results_dir: ResultsDir = Path("results"),
    write: Write = True,
) -> None:
    """Best design per process option set (one file) or per problem file, side by side."""
    console = _console()
    kinds = [_file_kind(p) for p in problem_paths]
    api.check_compare_kinds(kinds, [str(p) for p in problem_paths], bool(processes))
    preflight(results_dir if write else None)
    loaded = [api.load(p, exploring=True) for p in problem_paths]
    with _progress(console, not as_json) as (stage, advance):
        outcome = api.compare(loaded, processes, time_limit, progress=advance, stage=stage)
    folder = _write(outcome, write, results_dir, problem_paths[0].stem)
    show = _show_family_comparison if outcome.family else _show_comparison
    _finish(console, as_json, outcome, folder, lambda: show(console, outcome))


def _show_comparison(console: Console, outcome) -> None:
    table, objective, currency = outcome.table, outcome.objective, outcome.currency
    head = _heading(objective)
    value = objective.name
    over = "life optima" if value == "npv" else "Winners"
    view = literal_table(f"{over.capitalize()} side by side ({currency})")
    for col in (
        "option",
        "design kind",
        "cost/good unit",
        head,
        "vs best",
        "die yields",
        "package yield",
        "NRE",
    ):
        view.add_column(
            col, justify="left" if col in ("option", "design kind", "die yields") else "right"
        )
    for row in table.to_dict(orient="records"):
        if not math.isfinite(row[value]):
            view.add_row(*cells(row["option"], row["design_kind"], *["-"] * 6))
            continue
        view.add_row(
            *cells(
                row["option"],
                row["design_kind"],
                f"{row['cost_per_good_unit']:,.2f}",
                money(row[value]),
                money(row[f"{value}_vs_best"]),
                row["die_yields"],
                f"{100 * row['package_yield']:.2f}%",
                money(row["nre"]),
            )
        )
    console.print(view)
    if value == "npv":
        _say(console, "costs per good unit over the life's units; die yields of the first period")
    for row in table.itertuples():
        if isinstance(row.differences_explained, str):
            console.print(
                Text.assemble((str(row.option), "bold"), f": {row.differences_explained}")
            )
        if row.notes:
            _say(console, f"  note: {row.notes}", "dim")


def _show_family_comparison(console: Console, outcome) -> None:
    table = outcome.table
    view = literal_table(f"Family optima side by side ({outcome.currency})")
    for col in (
        "option",
        "family profit",
        "vs best",
        "reuse premium",
        "die designs",
        "shared",
        "NRE saved",
        "proven",
    ):
        view.add_column(col, justify="left" if col == "option" else "right")
    for row in table.itertuples():
        if not math.isfinite(row.profit):
            view.add_row(*cells(row.option, *["-"] * 7))
            continue
        view.add_row(
            *cells(
                row.option,
                money(row.profit),
                money(row.profit_vs_best),
                _signed(row.reuse_premium),
                str(int(row.library_dies)),
                str(int(row.shared_dies)),
                money(row.shared_nre),
                "yes" if row.proven_optimal else f"no (gap {100 * row.gap:.2f}%)",
            )
        )
    console.print(view)
    for row in table.itertuples():
        if isinstance(row.shared, str):
            console.print(Text.assemble((str(row.option), "bold"), f": shared dies: {row.shared}"))
        if isinstance(row.notes, str) and row.notes:
            _say(console, f"  note: {row.notes}", "dim")


# ---------------------------------------------------------------- sweep
@app.command()
def sweep(
    problem_path: ProblemPath,
    vary: Annotated[
        tuple[str, str, str],
        typer.Option(
            "--vary",
            metavar="PATH LOW HIGH",
            help="Input to sweep and its range, e.g. market.volume 1e5 1e7 (numbers in the "
            "field's base unit, or quantities like '0.05 /cm^2').",
            show_default=False,
        ),
    ],
    steps: Annotated[int, typer.Option("--steps", help="Grid points on --vary (2 or more).")] = 21,
    log: Annotated[bool, typer.Option("--log", help="Geometric steps on --vary.")] = False,
    vary2: Annotated[
        tuple[str, str, str] | None,
        typer.Option("--vary2", metavar="PATH LOW HIGH", help="A second input (2-D sweep)."),
    ] = None,
    steps2: Annotated[int, typer.Option("--steps2", help="Grid points on --vary2.")] = 11,
    log2: Annotated[bool, typer.Option("--log2", help="Geometric steps on --vary2.")] = False,
    refine: Annotated[
        bool, typer.Option("--refine/--no-refine", help="Locate crossovers by root finding.")
    ] = True,
    every_point: Annotated[
        bool,
        typer.Option(
            "--every-point",
            help="Solve at every grid point even for a 1-D market sweep, which is otherwise "
            "exact from a few solves.",
        ),
    ] = False,
    workers: Workers = None,
    scheduler: Scheduler = None,
    time_limit: TimeLimit = None,
    as_json: AsJson = False,
    results_dir: ResultsDir = Path("results"),
    write: Write = True,
) -> None:
    """Solve over a grid of one or two inputs; report where the winning design changes."""
    console = _console()
    kind = _file_kind(problem_path)
    api.sweep_axes(kind, vary, steps, log, vary2, steps2, log2)
    runner = api.make_runner(workers, scheduler)
    preflight(results_dir if write else None)
    loaded = api.load(problem_path, exploring=True)
    second = dict(path2=vary2[0], low2=vary2[1], high2=vary2[2]) if vary2 is not None else {}
    with _progress(console, not as_json) as (stage, advance):
        outcome = api.sweep(
            loaded,
            *vary,
            steps=steps,
            log=log,
            **second,
            steps2=steps2,
            log2=log2,
            refine=refine,
            every_point=every_point,
            runner=runner,
            scheduler=scheduler,
            time_limit=time_limit,
            progress=advance,
            stage=stage,
        )
    folder = _write(outcome, write, results_dir, problem_path.stem)
    _finish(console, as_json, outcome, folder, lambda: _show_sweep(console, outcome))


def _show_sweep(console: Console, outcome) -> None:
    result, objective = outcome.result, outcome.objective
    axis_names = " x ".join(a.path.label for a in result.axes)
    if outcome.family:
        how = f"{result.solves} family solves; objective: family profit"
    elif not objective.single_period:
        how = f"{result.solves} life solves; objective: {objective.words}"
    elif result.strategy == "envelope":
        how = f"exact from {result.solves} solves on the upper envelope of profit lines"
    else:
        how = f"{result.solves} solves" + (
            ", candidate dies shared" if result.shared_candidates else ""
        )
    _say(
        console,
        f"{len(result.points)} scenarios over {axis_names} on {outcome.runner.description} ({how})",
    )
    family = outcome.family
    kinds = literal_table("Winning family designs" if family else "Winning designs")
    last = "shared dies" if family else "design"
    for col in ("id", "family design kind" if family else "design kind", "wins", last):
        kinds.add_column(col, justify="right" if col == "wins" else "left")
    wins = result.points["design_id"].value_counts()
    for key, design in result.designs.items():
        detail = design.shared if family else design.summary
        kinds.add_row(*cells(key, design.kind, str(int(wins.get(key, 0))), detail))
    console.print(kinds)
    if result.crossovers.empty:
        what = "family design kind" if family else "design kind"
        _say(console, f"no crossover: one {what} wins over the whole range")
        return
    if family:
        view = _crossover_table(
            "Crossovers (winning family design kind changes)",
            "family profit there",
            result.crossovers,
            "design_before",
            "design_after",
            outcome.problem_file.currency,
        )
    else:
        view = _crossover_table(
            "Crossovers (winning kind changes)",
            f"{_heading(objective)} there",
            result.crossovers,
            "kind_before",
            "kind_after",
            outcome.problem_file.currency,
        )
    console.print(view)


# ---------------------------------------------------------------- sensitivity
@app.command()
def sensitivity(
    problem_path: ProblemPath,
    ranges: Annotated[
        list[str] | None,
        typer.Option(
            "--range",
            metavar="PATH=LOW:HIGH",
            help="An extra input range, e.g. market.unit_price=1500:2300 or "
            "'process.leading.defect_density=0.1 /cm^2:0.3 /cm^2' (repeatable).",
        ),
    ] = None,
    time_limit: TimeLimit = None,
    as_json: AsJson = False,
    results_dir: ResultsDir = Path("results"),
    write: Write = True,
) -> None:
    """Profit change of the winning design with each uncertain input at its low and high end."""
    console = _console()
    api.input_ranges(_file_kind(problem_path), ranges)
    preflight(results_dir if write else None)
    loaded = api.load(problem_path, exploring=True)
    with _progress(console, not as_json) as (stage, advance):
        outcome = api.sensitivity(
            loaded, ranges, time_limit=time_limit, progress=advance, stage=stage
        )
    folder = _write(outcome, write, results_dir, problem_path.stem)
    _finish(console, as_json, outcome, folder, lambda: _show_sensitivity(console, outcome))


def _show_sensitivity(console: Console, outcome) -> None:
    result, currency = outcome.result, outcome.problem_file.currency
    if outcome.family:
        _say(console, f"family optimum (held fixed): {result.design.kind}")
        _say(console, f"family profit at the file's values: {money(result.base_profit, currency)}")
        title = "Family profit change, largest swing first"
    else:
        objective, held = outcome.objective, result.held
        who = "life optimum" if objective.name == "npv" else "winner"
        _say(console, f"{who} (held fixed): {result.design.kind}: {result.design.summary}")
        proof = "" if held.proven else f" (not proven; gap {100 * held.gap:.2f}%)"
        _say(
            console,
            f"{objective.words} at the file's values: {money(result.base_profit, currency)}"
            + proof,
        )
        title = f"{_heading(objective, True)} change, largest swing first"
    view = literal_table(title)
    for col in ("input", "range", "at low", "at high", "swing", "note"):
        view.add_column(col, justify="left" if col in ("input", "note") else "right")
    for row in result.table.itertuples():
        unit = f" {row.unit}" if row.unit else ""
        view.add_row(
            *cells(
                row.input,
                f"{row.low:.4g} .. {row.high:.4g}{unit}",
                _signed(row.change_low),
                _signed(row.change_high),
                money(row.swing) if math.isfinite(row.swing) else "-",
                row.note,
            )
        )
    console.print(view)


def _signed(value: float) -> str:
    if not math.isfinite(value):
        return "-"
    return ("+" if value >= 0 else "") + money(value)


# ---------------------------------------------------------------- uncertainty
@app.command()
def uncertainty(
    problem_path: ProblemPath,
    samples: Annotated[
        int, typer.Option("--samples", "-n", min=2, help="Monte Carlo samples (2 or more).")
    ] = 1000,
    seed: Annotated[
        int,
        typer.Option("--seed", min=0, help="Random seed, 0 or more (same seed, same result)."),
    ] = 0,
    top: Annotated[
        int | None,
        typer.Option(
            "--top", "-k", min=1, help="Designs to compare (default 3).", show_default=False
        ),
    ] = None,
    workers: Workers = None,
    scheduler: Scheduler = None,
    time_limit: TimeLimit = None,
    as_json: AsJson = False,
    results_dir: ResultsDir = Path("results"),
    write: Write = True,
) -> None:
    """Monte Carlo over the file's uncertain inputs: profit P10, P50, P90 of the top designs."""
    console = _console()
    kind = _file_kind(problem_path)
    api.check_uncertainty_top(kind, str(problem_path), top)
    runner = api.make_runner(workers, scheduler)
    preflight(results_dir if write else None)
    loaded = api.load(problem_path, exploring=True)
    with _progress(console, not as_json) as (stage, advance):
        outcome = api.uncertainty(
            loaded,
            samples=samples,
            seed=seed,
            top=top,
            runner=runner,
            scheduler=scheduler,
            time_limit=time_limit,
            progress=advance,
            stage=stage,
        )
    folder = _write(outcome, write, results_dir, problem_path.stem)
    show = _show_family_uncertainty if outcome.family else _show_uncertainty
    _finish(console, as_json, outcome, folder, lambda: show(console, outcome))


def _show_uncertainty(console: Console, outcome) -> None:
    result, objective, labels = outcome.result, outcome.objective, outcome.labels
    names = ", ".join(p.text for p in result.inputs)
    samples, seed = outcome.options["samples"], outcome.options["seed"]
    _say(console, f"{samples:,} samples (seed {seed}) of {names} on {outcome.runner.description}")
    view = literal_table(
        f"{objective.words.capitalize()} ({outcome.problem_file.currency}) of the "
        + ("life optimum and the first period's pick" if labels else "top designs")
    )
    for col in (
        "rank",
        "design kind",
        "at file values",
        "P10",
        "P50",
        "P90",
        "P(best)" if labels else "P(most profitable)",
    ):
        view.add_column(col, justify="left" if col == "design kind" else "right")
    for row in result.summary.itertuples():
        view.add_row(
            *cells(
                str(row.rank),
                f"{labels[row.rank - 1]}: {row.design_kind}" if labels else row.design_kind,
                money(row.profit_at_file_values),
                money(row.p10),
                money(row.p50),
                money(row.p90),
                f"{100 * row.prob_best:.1f}%",
            )
        )
    console.print(view)
    for row in result.summary.itertuples():
        _say(console, f"rank {row.rank}: {row.design}", "dim")
    for row in result.summary.itertuples():
        _unbuildable(console, row)


def _show_family_uncertainty(console: Console, outcome) -> None:
    result = outcome.result
    names = ", ".join(p.text for p in result.inputs)
    samples, seed = outcome.options["samples"], outcome.options["seed"]
    _say(console, f"{samples:,} samples (seed {seed}) of {names} on {outcome.runner.description}")
    view = literal_table(f"Family profit ({outcome.problem_file.currency})")
    for col in ("rank", "family design", "at file values", "P10", "P50", "P90", "P(best)"):
        view.add_column(col, justify="left" if col == "family design" else "right")
    for row, label in zip(result.summary.itertuples(), result.labels, strict=True):
        view.add_row(
            *cells(
                str(row.rank),
                label,
                money(row.profit_at_file_values),
                money(row.p10),
                money(row.p50),
                money(row.p90),
                f"{100 * row.prob_best:.1f}%",
            )
        )
    console.print(view)
    for row in result.summary.itertuples():
        _say(console, f"rank {row.rank}: {row.design_kind}", "dim")
        _unbuildable(console, row)


def _unbuildable(console: Console, row) -> None:
    if row.unbuildable_samples:
        _say(
            console,
            f"rank {row.rank} cannot be built in {row.unbuildable_samples} "
            "samples (left out of its percentiles)",
            "dim",
        )


def _crossover_table(title, profit_label, crossovers, before, after, currency):
    """Where a sweep's winner changes: one row per crossover (single product or family,
    whose frames name the two sides by ``before`` and ``after``)."""
    view = literal_table(title)
    for col in ("axis", "at", "from", "to", "crossing", profit_label, "how"):
        view.add_column(col)
    for row in crossovers.itertuples():
        where = (
            f"{row.crossing:.6g}"
            if math.isfinite(row.crossing)
            else f"{row.grid_low:.6g} .. {row.grid_high:.6g}"
        )
        profit = row.profit_at_crossing
        view.add_row(
            *cells(
                row.axis,
                row.at,
                getattr(row, before),
                getattr(row, after),
                where,
                money(profit, currency) if math.isfinite(profit) else "-",
                row.method,
            )
        )
    return view
