"""The `dieplan` command line: a thin shell over the library.

Commands parse options, call the library and hand results to report.py. A ProblemError
becomes one line on stderr and exit code 2; nothing is written half-way.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console

from optimizer import __version__, report
from optimizer.designs import evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.outputs import copy_writer, text_writer, write_run_folder
from optimizer.problem import ProblemError, load_problem

app = typer.Typer(
    help="Plan dies, processes, packaging and yield targets for the most profit. " + report.CAUTION,
    no_args_is_help=True,
    add_completion=False,
    context_settings={"help_option_names": ["-h", "--help"]},
)

ProblemPath = Annotated[Path, typer.Argument(help="Problem file (TOML).", show_default=False)]


def _version(value: bool) -> None:
    if value:
        typer.echo(f"dieplan {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Show the version.")
    ] = False,
) -> None:
    """dieplan command line."""


def fail(error: ProblemError) -> None:
    print(f"dieplan: {error.line()}", file=sys.stderr)
    raise typer.Exit(code=2)


def _console() -> Console:
    # A terminal gets its own width; piped output gets a fixed, wide, plain layout.
    console = Console(highlight=False)
    if not console.is_terminal:
        console = Console(highlight=False, width=120)
    return console


@app.command()
def check(problem_path: ProblemPath) -> None:
    """Validate a problem file and show what was understood, in base units."""
    from optimizer.explore.paths import check_uncertain

    try:
        problem = load_problem(problem_path)
        check_uncertain(problem, str(problem_path))
        evaluator = Evaluator(problem)
        for design in problem.design:
            evaluate_design(evaluator, design, str(problem_path))
    except ProblemError as error:
        fail(error)
    console = _console()
    console.print(report.problem_summary(problem, str(problem_path)))
    console.print(f"ok: {problem_path} is valid.")


@app.command()
def evaluate(
    problem_path: ProblemPath,
    design: Annotated[
        str | None, typer.Option("--design", "-d", help="Name of one explicit design.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Price the explicit designs of a problem file: cost per good unit, yields, profit."""
    try:
        problem = load_problem(problem_path)
        if not problem.design:
            raise ProblemError(
                str(problem_path), "design", "the file has no [[design]] to evaluate; add one"
            )
        if design is not None:
            names = [d.name for d in problem.design]
            if design not in names:
                raise ProblemError(
                    str(problem_path), "design", f"no design named '{design}'; use one of {names}"
                )
            chosen = [problem.design_named(design)]
        else:
            chosen = list(problem.design)
        evaluator = Evaluator(problem)
        results = [evaluate_design(evaluator, d, str(problem_path)) for d in chosen]
    except ProblemError as error:
        fail(error)
    if as_json:
        payload = (
            results[0].to_dict()
            if len(results) == 1
            else {
                "problem": problem.title,
                "designs": [r.to_dict() for r in results],
            }
        )
        typer.echo(json.dumps(payload, indent=2, allow_nan=True))
        return
    console = _console()
    for result in results:
        console.print(report.design_breakdown(result))
        console.print()
    if len(results) > 1:
        console.print(report.designs_overview(results))
    console.print(report.CAUTION, style="dim")


@app.command()
def solve(
    problem_path: ProblemPath,
    top: Annotated[int, typer.Option("--top", "-k", min=1, help="How many ranked designs.")] = 3,
    method: Annotated[
        str, typer.Option("--method", help="milp (proven, default) or exhaustive (small problems).")
    ] = "milp",
    time_limit: Annotated[
        float | None,
        typer.Option("--time-limit", min=0.0, help="Seconds; returns the best found and its gap."),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the solution as JSON.")] = False,
    results_dir: Annotated[
        Path, typer.Option("--results", help="Folder for the run folder.")
    ] = Path("results"),
    write: Annotated[bool, typer.Option("--write/--no-write", help="Write a run folder.")] = True,
    require_die_yield: Annotated[
        float | None, typer.Option("--require-die-yield", help="Mandate a minimum die yield (0-1).")
    ] = None,
    require_sigma: Annotated[
        float | None,
        typer.Option("--require-sigma", help="Mandate a minimum design margin [sigma]."),
    ] = None,
    require_defect_level: Annotated[
        float | None,
        typer.Option("--require-defect-level", help="Mandate a maximum defect level (e.g. 1e-4)."),
    ] = None,
) -> None:
    """Find the most profitable design: partition, process per die, packaging, redundancy.

    With mandated targets (--require-... or [requirements] in the file) it solves with and
    without them and reports the profit the mandate costs.
    """
    from optimizer.solver import METHODS
    from optimizer.solver import solve as run_solver
    from optimizer.targets import price_requirements

    if method not in METHODS:
        fail(
            ProblemError(
                str(problem_path),
                "--method",
                f"unknown method '{method}'; use one of {list(METHODS)}",
            )
        )
    mandate = None
    try:
        problem = load_problem(problem_path)
        mandate = _requirements(problem, require_die_yield, require_sigma, require_defect_level)
        if mandate is not None and mandate.any():
            priced = price_requirements(
                problem, mandate, top=top, source=str(problem_path), time_limit=time_limit
            )
            solution, free = priced.mandated, priced.free
        else:
            solution = run_solver(
                problem, top=top, method=method, time_limit=time_limit, source=str(problem_path)
            )
            priced = free = None
    except ProblemError as error:
        fail(error)
    payload = solution.to_dict()
    if priced is not None:
        payload["mandate"] = priced.to_dict()
        payload["unconstrained_best"] = free.best.to_dict()
    folder = None
    if write:
        folder = write_run_folder(
            results_dir,
            "solve",
            problem_path.stem,
            {
                "solution.json": text_writer(json.dumps(payload, indent=2)),
                "ranked.csv": text_writer(_ranked_csv(solution)),
                "solver.log": text_writer("\n".join(solution.log) + "\n"),
                "problem.toml": copy_writer(problem_path),
            },
        )
    if as_json:
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json.dumps(payload, indent=2))
        return
    console = _console()
    console.print(report.solution_view(solution))
    if priced is not None:
        console.print(report.mandate_view(priced))
    if folder is not None:
        console.print(f"wrote {folder}")
    console.print(report.CAUTION, style="dim")


def _requirements(problem, die_yield, sigma, defect_level):
    """The file's [requirements] with any --require-... options on top (None if none)."""
    from optimizer.problem import Requirements

    base = problem.requirements.model_dump()
    for key, value in (
        ("min_die_yield", die_yield),
        ("min_sigma_margin", sigma),
        ("max_defect_level", defect_level),
    ):
        if value is not None:
            base[key] = value
    try:
        merged = Requirements(**base)
    except Exception as exc:  # pydantic names the bad value
        raise ProblemError(
            "--require", "", f"invalid requirement ({exc.errors()[0]['msg']})"
        ) from None
    return merged if merged.any() else None


def _ranked_csv(solution) -> str:
    import pandas as pd

    rows = []
    for rank, d in enumerate(solution.designs, start=1):
        rows.append(
            {
                "rank": rank,
                "design": report.short_design(d),
                "packaging": d.packaging,
                "n_dies": d.n_dies,
                "cost_per_good_unit": d.cost_per_good_unit,
                "manufacturing_cost_per_good_unit": d.manufacturing_cost_per_good_unit,
                "package_yield": d.package_yield,
                "nre": d.nre,
                "profit": d.profit,
                "margin": d.margin,
                **{f"cost_{k}": v for k, v in d.breakdown.items()},
            }
        )
    return pd.DataFrame(rows).to_csv(index=False)


@app.command("profit-curve")
def profit_curve_command(
    problem_path: ProblemPath,
    points: Annotated[int, typer.Option("--points", min=3, help="Targets on the curve.")] = 61,
    require_die_yield: Annotated[
        float | None, typer.Option("--require-die-yield", help="Mark a mandated die yield.")
    ] = None,
    results_dir: Annotated[
        Path, typer.Option("--results", help="Folder for the run folder.")
    ] = Path("results"),
) -> None:
    """Profit and cost per good unit of the winning design against its yield target."""
    from optimizer.solver import solve as run_solver
    from optimizer.targets import cost_rises_without_bound, profit_curve, profit_curve_figure

    try:
        problem = load_problem(problem_path)
        solution = run_solver(problem, top=1, source=str(problem_path))
        frame = profit_curve(problem, solution.best, points=points)
    except ProblemError as error:
        fail(error)
    mandated = (
        require_die_yield if require_die_yield is not None else problem.requirements.min_die_yield
    )
    figure = profit_curve_figure(frame, problem.market.currency, mandated)
    folder = write_run_folder(
        results_dir,
        "profit-curve",
        problem_path.stem,
        {
            "profit_curve.csv": text_writer(frame.to_csv(index=False)),
            "profit_curve.png": lambda path: figure.savefig(path, dpi=130),
            "profit_curve.svg": lambda path: figure.savefig(path),
            "problem.toml": copy_writer(problem_path),
        },
    )
    inside = frame[~frame["extrapolated"]]
    best = inside.loc[inside["profit"].idxmax()]
    console = _console()
    console.print(
        f"winner: {report.short_design(solution.best)}; yield target varied on process "
        f"'{frame.attrs['process']}'"
    )
    console.print(
        f"profit peaks at {100 * best['hard_yield']:.2f}% defect-limited yield "
        f"(D = {best['defect_density_per_cm2']:.4g} /cm^2): profit "
        f"{report.money(best['profit'], problem.market.currency)}, cost per good unit "
        f"{report.money(best['cost_per_good_unit'])}"
    )
    shape = "yes" if cost_rises_without_bound(frame) else "no"
    console.print(f"cost per good unit rises without bound as the target approaches 100%: {shape}")
    console.print(f"wrote {folder}")
    console.print(report.CAUTION, style="dim")


from optimizer import cli_explore  # noqa: F401,E402  (registers exploration commands)
