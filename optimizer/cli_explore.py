"""Exploration commands of the `dieplan` command line: compare, sweep, sensitivity, uncertainty.

Registered on the main app when ``optimizer.cli`` imports this module. Each command
checks its options and output folder before any work, runs the library
(``optimizer/explore/``), prints a short summary and writes one run folder atomically:
the problem file(s), the options as JSON, CSV tables and PNG + SVG figures. Bad input is
one line on stderr and exit code 2 (see :class:`optimizer.cli.OneLineGroup`); names from
problem files are printed as Text, never read as console markup. A file with a [life]
plan is explored with its net present value as the objective: the same tables and
figures, the objective's columns named ``npv`` (see :func:`_named`).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from rich.console import Console
from rich.text import Text

# light imports only (see optimizer/cli.py); commands import the library when they run
from optimizer.cli import ProblemPath, app, finite, preflight
from optimizer.errors import ProblemError
from optimizer.outputs import (
    Writer,
    clean,
    copy_writer,
    figure_writer,
    json_text,
    json_writer,
    short,
    text_writer,
    write_run_folder,
)
from optimizer.report import CAUTION, cells, literal_table, money

if TYPE_CHECKING:
    import pandas as pd

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


def _runner(workers: int | None, scheduler: str | None):
    """The executor, its options checked (raises the one-line ProblemError)."""
    from optimizer.explore.parallel import Runner, max_workers

    if workers is None:
        workers = min(os.cpu_count() or 1, max_workers())
    return Runner(workers=workers, scheduler=scheduler)


def _records(frame: pd.DataFrame) -> list[dict]:
    return clean(frame.to_dict(orient="records"))


def _named(frame: pd.DataFrame, objective: str) -> pd.DataFrame:
    """The frame with its objective columns named for the objective: the library keeps
    ``profit`` in every frame; a life's are ``npv`` (``profit_low`` -> ``npv_low``)."""
    if objective == "profit":
        return frame
    return frame.rename(columns=lambda c: c.replace("profit", objective))


def _heading(objective, first: bool = False) -> str:
    """The objective in a table heading: "profit" or "NPV" ("Profit" ``first`` in it)."""
    text = "NPV" if objective.name == "npv" else objective.words
    return text[:1].upper() + text[1:] if first else text


def _is_life_file(path: Path) -> bool:
    """Whether a problem file (not a family) has a [life] plan; a file that cannot be
    read is left to the single-product path, which reports it as before."""
    from optimizer.family import is_family
    from optimizer.life import has_life
    from optimizer.problem import read_problem_data

    try:
        data, _ = read_problem_data(path)
    except (ProblemError, OSError):
        return False
    return has_life(data) and not is_family(data)


def _grammar(problem_path: Path) -> Callable:
    """The path resolver of the file: with a [life] plan, life paths too."""
    if _is_life_file(problem_path):
        from optimizer.explore.life_paths import resolve_life

        return resolve_life
    from optimizer.explore.paths import resolve

    return resolve


def _csv_writer(frame: pd.DataFrame) -> Writer:
    return text_writer(frame.to_csv(index=False))


def _figure_writers(stem: str, figure, title: str = "") -> dict[str, Writer]:
    from optimizer.explore.plots import mark_invented

    if "invented" in title.lower():
        mark_invented(figure)
    return {
        f"{stem}.png": figure_writer(figure, dpi=130),
        f"{stem}.svg": figure_writer(figure),
    }


def _say(console: Console, text: str, style: str | None = None) -> None:
    console.print(Text(text, style=style or ""))


def _finish(
    console: Console,
    as_json: bool,
    payload: dict,
    folder: Path | None,
    show: Callable[[], None],
) -> None:
    if as_json:
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    show()
    if folder is not None:
        _say(console, f"wrote {folder}")
    _say(console, CAUTION, "dim")


def _design_rows(designs: dict) -> dict:
    """Held designs as JSON; a design held over a life names its target levels (0: the
    process's base density) instead of densities, which move with the periods."""
    return {
        key: {
            "kind": d.kind,
            "summary": d.summary,
            "packaging": d.packaging,
            "dies": [_die_row(s, getattr(d, "levels", None), j) for j, s in enumerate(d.specs)],
        }
        for key, d in designs.items()
    }


def _die_row(spec, levels: tuple[int, ...] | None, j: int) -> dict:
    row = {
        "name": spec.name,
        "process": spec.process,
        "copies": spec.copies,
        "blocks": spec.blocks,
        "spares": spec.spares,
        "repair": spec.repair,
        "defect_density_per_cm2": spec.defect_density_per_cm2,
        "sigma_margin": spec.sigma_margin,
        "critical_area_option": spec.critical_area_option,
    }
    if levels is not None:
        del row["defect_density_per_cm2"]
        row["target_level"] = levels[j]
    return row


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
    from optimizer.explore import compare as comparing
    from optimizer.explore.objective import objective_of
    from optimizer.explore.paths import load_study
    from optimizer.explore.plots import comparison_figure

    console = _console()
    if len(problem_paths) > 1 and processes:
        raise ProblemError(
            "--processes",
            "",
            "applies to one problem file; give one file with --processes, or several "
            "files without it",
        )
    families = [_is_family_file(p) for p in problem_paths]
    if any(families):
        if not all(families):
            plain = next(p for p, f in zip(problem_paths, families, strict=True) if not f)
            raise ProblemError(
                str(plain),
                "product",
                "is a single-product file among product families; compare family files "
                "with family files and problem files with problem files",
            )
        _compare_family(problem_paths, processes, time_limit, as_json, results_dir, write)
        return
    lives = [_is_life_file(p) for p in problem_paths]
    if any(lives) and not all(lives):
        plain = next(p for p, life in zip(problem_paths, lives, strict=True) if not life)
        raise ProblemError(
            str(plain),
            "life",
            "has no [life] plan, unlike the other files: a life's NPV and one period's "
            "profit do not compare; compare life files with life files",
        )
    preflight(results_dir if write else None)
    studies = [load_study(p) for p in problem_paths]
    objective = objective_of(studies[0])
    if len(studies) > 1:
        options = comparing.file_options(studies)
    else:
        sets = [s.split(",") for s in processes] if processes else None
        options = comparing.process_options(studies[0], sets)
        if not options:
            raise ProblemError(
                str(problem_paths[0]), "process", "no process can be packaged on its own"
            )
    with _progress(console, not as_json) as (stage, advance):
        stage("solving options", len(options))
        result = comparing.compare(options, time_limit=time_limit, progress=advance)
    currency = studies[0].problem.market.currency
    table = _named(result.table, objective.name)
    payload = {
        "command": "compare",
        "options": {
            "problems": [str(p) for p in problem_paths],
            "processes": processes,
            "time_limit": time_limit,
            "objective": objective.words,
        },
        "comparison": _records(table),
        "notes": {k: list(v) for k, v in result.notes.items()},
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "comparison.csv": _csv_writer(table),
            "comparison.json": json_writer(payload),
            "options.json": json_writer(payload["options"]),
            **_figure_writers(
                "cost_by_component",
                comparison_figure(result, currency, objective.words),
                " ".join(s.problem.title for s in studies),
            ),
        }
        files.update(_problem_copies(problem_paths))
        folder = write_run_folder(results_dir, "compare", problem_paths[0].stem, files)

    head = _heading(objective)
    value = objective.name

    def show() -> None:
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
            _say(
                console, "costs per good unit over the life's units; die yields of the first period"
            )
        for row in table.itertuples():
            if isinstance(row.differences_explained, str):
                console.print(
                    Text.assemble((str(row.option), "bold"), f": {row.differences_explained}")
                )
            if row.notes:
                _say(console, f"  note: {row.notes}", "dim")

    _finish(console, as_json, payload, folder, show)


def _problem_copies(paths: list[Path]) -> dict[str, Writer]:
    if len(paths) == 1:
        return {"problem.toml": copy_writer(paths[0])}
    return {f"problem-{i + 1}-{p.stem}.toml": copy_writer(p) for i, p in enumerate(paths)}


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
    from optimizer.explore.objective import objective_of
    from optimizer.explore.paths import load_study
    from optimizer.explore.plots import sweep_figure
    from optimizer.explore.sweep import make_axis, run_sweep

    console = _console()
    if _is_family_file(problem_path):
        _sweep_family(
            problem_path, vary, steps, log, vary2, steps2, log2, refine, every_point,
            workers, scheduler, time_limit, as_json, results_dir, write,
        )  # fmt: skip
        return
    resolver = _grammar(problem_path)
    axes = [
        make_axis(vary[0], vary[1], vary[2], steps, log, "--vary", "--steps", resolver=resolver)
    ]
    if vary2 is not None:
        axes.append(
            make_axis(
                vary2[0], vary2[1], vary2[2], steps2, log2, "--vary2", "--steps2", resolver=resolver
            )
        )
    runner = _runner(workers, scheduler)
    preflight(results_dir if write else None)
    study = load_study(problem_path)
    objective = objective_of(study)
    with runner.session(), _progress(console, not as_json) as (stage, advance):
        runner.start()
        result = run_sweep(
            study,
            axes,
            runner=runner,
            time_limit=time_limit,
            refine=refine,
            progress=advance,
            stage=stage,
            every_point=every_point,
        )
    currency = study.problem.market.currency
    options = {
        "problem": str(problem_path),
        "axes": [
            {
                "path": a.path.text,
                "unit": a.path.unit_text,
                "low": a.low,
                "high": a.high,
                "steps": a.steps,
                "log": a.log,
            }
            for a in result.axes
        ],
        "refine": refine,
        "every_point": every_point,
        "strategy": result.strategy,
        "solves": result.solves,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
        "shared_candidates": result.shared_candidates,
        "objective": objective.words,
    }
    points = _named(result.points, objective.name)
    crossovers = _named(result.crossovers, objective.name)
    payload = {
        "command": "sweep",
        "options": options,
        "points": _records(points),
        "crossovers": _records(crossovers),
        "designs": _design_rows(result.designs),
    }
    folder = None
    if write:
        stem = objective.name if len(result.axes) == 1 else "winner_map"
        files: dict[str, Writer] = {
            "points.csv": _csv_writer(points),
            "crossovers.csv": _csv_writer(crossovers),
            "designs.json": json_writer(payload["designs"]),
            "options.json": json_writer(options),
            **_figure_writers(
                stem, sweep_figure(result, currency, objective.words), study.problem.title
            ),
            "problem.toml": copy_writer(problem_path),
        }
        if result.curves is not None:
            files["curves.csv"] = _csv_writer(result.curves)
        folder = write_run_folder(results_dir, "sweep", problem_path.stem, files)

    def show() -> None:
        axis_names = " x ".join(a.path.label for a in result.axes)
        how = (
            f"exact from {result.solves} solves on the upper envelope of profit lines"
            if result.strategy == "envelope"
            else f"{result.solves} solves"
            + (", candidate dies shared" if result.shared_candidates else "")
        )
        if not objective.single_period:
            how = f"{result.solves} life solves; objective: {objective.words}"
        _say(
            console,
            f"{len(result.points)} scenarios over {axis_names} on {runner.description} ({how})",
        )
        kinds = literal_table("Winning designs")
        for col in ("id", "design kind", "wins", "design"):
            kinds.add_column(col, justify="right" if col == "wins" else "left")
        wins = result.points["design_id"].value_counts()
        for key, design in result.designs.items():
            kinds.add_row(*cells(key, design.kind, str(int(wins.get(key, 0))), design.summary))
        console.print(kinds)
        if result.crossovers.empty:
            _say(console, "no crossover: one design kind wins over the whole range")
            return
        console.print(
            _crossover_table(
                "Crossovers (winning kind changes)",
                f"{_heading(objective)} there",
                result.crossovers,
                "kind_before",
                "kind_after",
                currency,
            )
        )

    _finish(console, as_json, payload, folder, show)


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
    from optimizer.explore.objective import objective_of
    from optimizer.explore.paths import load_study
    from optimizer.explore.plots import tornado_figure
    from optimizer.explore.sensitivity import make_range, ranges_from_study, run_sensitivity

    console = _console()
    if _is_family_file(problem_path):
        _sensitivity_family(problem_path, ranges, time_limit, as_json, results_dir, write)
        return
    resolver = _grammar(problem_path)
    extra = [
        _parse_range(text, lambda p, lo, hi: make_range(p, lo, hi, resolver=resolver))
        for text in ranges or []
    ]
    preflight(results_dir if write else None)
    study = load_study(problem_path)
    objective = objective_of(study)
    all_ranges = ranges_from_study(study) + extra
    with _progress(console, not as_json) as (stage, advance):
        stage("re-pricing the winner", max(1, len(all_ranges)))
        result = run_sensitivity(study, all_ranges, time_limit=time_limit, progress=advance)
    currency = study.problem.market.currency
    options = {
        "problem": str(problem_path),
        "ranges": ranges or [],
        "time_limit": time_limit,
        "objective": objective.words,
    }
    held = result.held
    table = _named(result.table, objective.name)
    payload = {
        "command": "sensitivity",
        "options": options,
        "winner": {
            "kind": result.design.kind,
            "design": result.design.summary,
            objective.name: result.base_profit,
            "proven_optimal": held.proven,
            "gap": held.gap,
        },
        "sensitivity": _records(table),
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "sensitivity.csv": _csv_writer(table),
            "winner.json": json_writer(held.record),
            "options.json": json_writer(options),
            **_figure_writers(
                "tornado", tornado_figure(result, currency, objective.words), study.problem.title
            ),
            "problem.toml": copy_writer(problem_path),
        }
        folder = write_run_folder(results_dir, "sensitivity", problem_path.stem, files)

    def show() -> None:
        who = "life optimum" if objective.name == "npv" else "winner"
        _say(console, f"{who} (held fixed): {result.design.kind}: {result.design.summary}")
        proof = "" if held.proven else f" (not proven; gap {100 * held.gap:.2f}%)"
        _say(
            console,
            f"{objective.words} at the file's values: {money(result.base_profit, currency)}"
            + proof,
        )
        view = literal_table(f"{_heading(objective, True)} change, largest swing first")
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

    _finish(console, as_json, payload, folder, show)


def _signed(value: float) -> str:
    if not math.isfinite(value):
        return "-"
    return ("+" if value >= 0 else "") + money(value)


def _parse_range(text: str, make_range):
    path, sep, span = text.partition("=")
    low, sep2, high = span.partition(":")
    if not (sep and sep2 and path.strip() and low.strip() and high.strip()):
        raise ProblemError(
            "--range", short(text), "write PATH=LOW:HIGH, e.g. market.unit_price=1500:2300"
        )
    return make_range(path.strip(), low.strip(), high.strip())


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
    from optimizer.explore.objective import objective_of
    from optimizer.explore.paths import load_study
    from optimizer.explore.plots import uncertainty_figure
    from optimizer.explore.uncertainty import run_uncertainty

    console = _console()
    if _is_family_file(problem_path):
        if top is not None:
            raise ProblemError(
                "--top",
                str(top),
                f"does not apply to the product family in {problem_path} (a family solve "
                "gives one family design; it is compared with the products' own optima); "
                "drop --top",
            )
        _uncertainty_family(
            problem_path, samples, seed, workers, scheduler, time_limit, as_json,
            results_dir, write,
        )  # fmt: skip
        return
    if top is not None and _is_life_file(problem_path):
        raise ProblemError(
            "--top",
            str(top),
            f"does not apply to the life plan in {problem_path} (a life solve gives one "
            "optimum; it is compared with the design picked on the first period's numbers); "
            "drop --top",
        )
    top = 3 if top is None else top
    runner = _runner(workers, scheduler)
    preflight(results_dir if write else None)
    study = load_study(problem_path)
    objective = objective_of(study)
    with runner.session(), _progress(console, not as_json) as (stage, advance):
        runner.start()
        result = run_uncertainty(
            study,
            samples=samples,
            seed=seed,
            top=top,
            runner=runner,
            time_limit=time_limit,
            progress=advance,
            stage=stage,
        )
    currency = study.problem.market.currency
    options = {
        "problem": str(problem_path),
        "samples": samples,
        "seed": seed,
        "top": top,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
        "inputs": [entry.model_dump() for entry in study.uncertain],
        "objective": objective.words,
    }
    summary = _named(result.summary, objective.name)
    if objective.name == "npv":
        summary.insert(1, "label", list(result.labels))
    payload = {
        "command": "uncertainty",
        "options": options,
        "summary": _records(summary),
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "summary.csv": _csv_writer(summary),
            "samples.csv": _csv_writer(_named(result.samples_frame(), objective.name)),
            "designs.json": json_writer(
                _design_rows({f"rank{k + 1}": d for k, d in enumerate(result.designs)})
            ),
            "options.json": json_writer(options),
            **_figure_writers(
                f"{objective.name}_distribution",
                uncertainty_figure(result, currency, objective.words),
                study.problem.title,
            ),
            "problem.toml": copy_writer(problem_path),
        }
        folder = write_run_folder(results_dir, "uncertainty", problem_path.stem, files)

    labels = list(result.labels) if objective.name == "npv" else []

    def show() -> None:
        names = ", ".join(p.text for p in result.inputs)
        _say(console, f"{samples:,} samples (seed {seed}) of {names} on {runner.description}")
        view = literal_table(
            f"{objective.words.capitalize()} ({currency}) of the "
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
            if row.unbuildable_samples:
                _say(
                    console,
                    f"rank {row.rank} cannot be built in {row.unbuildable_samples} "
                    "samples (left out of its percentiles)",
                    "dim",
                )

    _finish(console, as_json, payload, folder, show)


# ---------------------------------------------------------------- product families
def _is_family_file(path: Path) -> bool:
    """Whether the file declares a product family; a file that cannot be read is left
    to the single-product path, which reports it as before."""
    from optimizer.family import is_family
    from optimizer.problem import read_problem_data

    try:
        data, _ = read_problem_data(path)
    except (ProblemError, OSError):
        return False
    return is_family(data)


def _family_rows(fixed) -> dict:
    """A fixed family design as JSON: its library in brief and each product's design."""
    return {
        "kind": fixed.kind,
        "summary": fixed.summary,
        "library_dies": fixed.library_dies,
        "shared_dies": fixed.shared_dies,
        "shared": fixed.shared,
        "products": _design_rows(dict(zip(fixed.names, fixed.designs, strict=True))),
    }


def _compare_family(
    problem_paths: list[Path],
    processes: list[str] | None,
    time_limit: float | None,
    as_json: bool,
    results_dir: Path,
    write: bool,
) -> None:
    from optimizer.explore import family as fam
    from optimizer.explore.family_paths import load_family_study
    from optimizer.explore.plots import family_comparison_figure

    console = _console()
    preflight(results_dir if write else None)
    studies = [load_family_study(p) for p in problem_paths]
    if len(studies) > 1:
        options = fam.family_file_options(studies)
    else:
        sets = [s.split(",") for s in processes] if processes else None
        options = fam.family_process_options(studies[0], sets)
        if not options:
            raise ProblemError(
                str(problem_paths[0]), "process", "no process can be packaged on its own"
            )
    with _progress(console, not as_json) as (stage, advance):
        stage("solving each family option", len(options))
        result = fam.compare_families(options, time_limit=time_limit, progress=advance)
    currency = studies[0].currency
    table = result.table
    payload = {
        "command": "compare",
        "options": {
            "problems": [str(p) for p in problem_paths],
            "family": True,
            "processes": processes,
            "time_limit": time_limit,
        },
        "comparison": _records(table),
        "notes": {k: list(v) for k, v in result.notes.items()},
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "comparison.csv": _csv_writer(table),
            "comparison.json": json_writer(payload),
            "options.json": json_writer(payload["options"]),
            **_figure_writers(
                "family_profit",
                family_comparison_figure(result, currency),
                " ".join(s.title for s in studies),
            ),
        }
        files.update(_problem_copies(problem_paths))
        folder = write_run_folder(results_dir, "compare", problem_paths[0].stem, files)

    def show() -> None:
        view = literal_table(f"Family optima side by side ({currency})")
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
                console.print(
                    Text.assemble((str(row.option), "bold"), f": shared dies: {row.shared}")
                )
            if isinstance(row.notes, str) and row.notes:
                _say(console, f"  note: {row.notes}", "dim")

    _finish(console, as_json, payload, folder, show)


def _sweep_family(
    problem_path, vary, steps, log, vary2, steps2, log2, refine, every_point,
    workers, scheduler, time_limit, as_json, results_dir, write,
) -> None:  # fmt: skip
    from optimizer.explore.family import make_family_axis, run_family_sweep
    from optimizer.explore.family_paths import load_family_study
    from optimizer.explore.plots import sweep_figure

    console = _console()
    axes = [make_family_axis(vary[0], vary[1], vary[2], steps, log, "--vary", "--steps")]
    if vary2 is not None:
        axes.append(
            make_family_axis(vary2[0], vary2[1], vary2[2], steps2, log2, "--vary2", "--steps2")
        )
    runner = _runner(workers, scheduler)
    preflight(results_dir if write else None)
    study = load_family_study(problem_path)
    with runner.session(), _progress(console, not as_json) as (stage, advance):
        runner.start()
        result = run_family_sweep(
            study,
            axes,
            runner=runner,
            time_limit=time_limit,
            refine=refine,
            progress=advance,
            stage=stage,
        )
    currency = study.currency
    options = {
        "problem": str(problem_path),
        "family": True,
        "products": study.family.names,
        "axes": [
            {
                "path": a.path.text,
                "unit": a.path.unit_text,
                "low": a.low,
                "high": a.high,
                "steps": a.steps,
                "log": a.log,
            }
            for a in result.axes
        ],
        "refine": refine,
        "every_point": every_point,
        "strategy": result.strategy,
        "solves": result.solves,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
    }
    payload = {
        "command": "sweep",
        "options": options,
        "points": _records(result.points),
        "crossovers": _records(result.crossovers),
        "designs": {key: _family_rows(d) for key, d in result.designs.items()},
    }
    folder = None
    if write:
        stem = "profit" if len(result.axes) == 1 else "winner_map"
        files: dict[str, Writer] = {
            "points.csv": _csv_writer(result.points),
            "crossovers.csv": _csv_writer(result.crossovers),
            "designs.json": json_writer(payload["designs"]),
            "options.json": json_writer(options),
            **_figure_writers(stem, sweep_figure(result, currency), study.title),
            "problem.toml": copy_writer(problem_path),
        }
        if result.curves is not None:
            files["curves.csv"] = _csv_writer(result.curves)
        folder = write_run_folder(results_dir, "sweep", problem_path.stem, files)

    def show() -> None:
        axis_names = " x ".join(a.path.label for a in result.axes)
        _say(
            console,
            f"{len(result.points)} scenarios over {axis_names} on {runner.description} "
            f"({result.solves} family solves; objective: family profit)",
        )
        kinds = literal_table("Winning family designs")
        for col in ("id", "family design kind", "wins", "shared dies"):
            kinds.add_column(col, justify="right" if col == "wins" else "left")
        wins = result.points["design_id"].value_counts()
        for key, design in result.designs.items():
            kinds.add_row(*cells(key, design.kind, str(int(wins.get(key, 0))), design.shared))
        console.print(kinds)
        if result.crossovers.empty:
            _say(console, "no crossover: one family design kind wins over the whole range")
            return
        console.print(
            _crossover_table(
                "Crossovers (winning family design kind changes)",
                "family profit there",
                result.crossovers,
                "design_before",
                "design_after",
                currency,
            )
        )

    _finish(console, as_json, payload, folder, show)


def _sensitivity_family(problem_path, ranges, time_limit, as_json, results_dir, write) -> None:
    from optimizer.explore.family import family_ranges, make_family_range, run_family_sensitivity
    from optimizer.explore.family_paths import load_family_study
    from optimizer.explore.plots import tornado_figure
    from optimizer.family_report import family_dict

    console = _console()
    extra = [_parse_range(text, make_family_range) for text in ranges or []]
    preflight(results_dir if write else None)
    study = load_family_study(problem_path)
    all_ranges = family_ranges(study) + extra
    with _progress(console, not as_json) as (stage, advance):
        stage("re-pricing the family optimum", max(1, len(all_ranges)))
        result = run_family_sensitivity(study, all_ranges, time_limit=time_limit, progress=advance)
    currency = study.currency
    options = {
        "problem": str(problem_path),
        "family": True,
        "ranges": ranges or [],
        "time_limit": time_limit,
    }
    payload = {
        "command": "sensitivity",
        "options": options,
        "winner": {
            "kind": result.design.kind,
            "design": result.design.summary,
            "profit": result.base_profit,
            "objective": "family profit",
        },
        "sensitivity": _records(result.table),
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "sensitivity.csv": _csv_writer(result.table),
            "winner.json": json_writer(clean(family_dict(result.solution, study.title))),
            "options.json": json_writer(options),
            **_figure_writers("tornado", tornado_figure(result, currency), study.title),
            "problem.toml": copy_writer(problem_path),
        }
        folder = write_run_folder(results_dir, "sensitivity", problem_path.stem, files)

    def show() -> None:
        _say(console, f"family optimum (held fixed): {result.design.kind}")
        _say(console, f"family profit at the file's values: {money(result.base_profit, currency)}")
        view = literal_table("Family profit change, largest swing first")
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

    _finish(console, as_json, payload, folder, show)


def _uncertainty_family(
    problem_path, samples, seed, workers, scheduler, time_limit, as_json, results_dir, write
) -> None:
    from optimizer.explore.family import run_family_uncertainty
    from optimizer.explore.family_paths import load_family_study
    from optimizer.explore.plots import uncertainty_figure

    console = _console()
    runner = _runner(workers, scheduler)
    preflight(results_dir if write else None)
    study = load_family_study(problem_path)
    with runner.session(), _progress(console, not as_json) as (stage, advance):
        runner.start()
        result = run_family_uncertainty(
            study,
            samples=samples,
            seed=seed,
            runner=runner,
            time_limit=time_limit,
            progress=advance,
            stage=stage,
        )
    currency = study.currency
    options = {
        "problem": str(problem_path),
        "family": True,
        "samples": samples,
        "seed": seed,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
        "inputs": [entry.model_dump() for entry in study.uncertain],
    }
    payload = {
        "command": "uncertainty",
        "options": options,
        "summary": _records(result.summary),
    }
    folder = None
    if write:
        files: dict[str, Writer] = {
            "summary.csv": _csv_writer(result.summary),
            "samples.csv": _csv_writer(result.samples_frame()),
            "designs.json": json_writer(
                {
                    f"rank{k + 1}": {"label": label, **_family_rows(d)}
                    for k, (label, d) in enumerate(zip(result.labels, result.designs, strict=True))
                }
            ),
            "options.json": json_writer(options),
            **_figure_writers(
                "profit_distribution", uncertainty_figure(result, currency), study.title
            ),
            "problem.toml": copy_writer(problem_path),
        }
        folder = write_run_folder(results_dir, "uncertainty", problem_path.stem, files)

    def show() -> None:
        names = ", ".join(p.text for p in result.inputs)
        _say(console, f"{samples:,} samples (seed {seed}) of {names} on {runner.description}")
        view = literal_table(f"Family profit ({currency})")
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
            if row.unbuildable_samples:
                _say(
                    console,
                    f"rank {row.rank} cannot be built in {row.unbuildable_samples} "
                    "samples (left out of its percentiles)",
                    "dim",
                )

    _finish(console, as_json, payload, folder, show)


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
