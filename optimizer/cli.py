"""The `dieplan` command line: a thin shell over the library.

Commands parse options, call the library and hand results to report.py. Whatever the
command, a bad input (file, option or environment) is one line
``dieplan: WHERE: what is wrong; what to do`` on stderr and exit code 2; an answer that
breaks its own checks is one ``internal error`` line and exit code 3; Ctrl-C or SIGTERM
is one line and exit code 130 or 143. Nothing is written half-way: output paths are
checked before any work and run folders appear whole or not at all.

The error handling lives in :class:`OneLineGroup`, the click group of ``app``, so the
installed ``dieplan`` script (``optimizer.cli:app``) and tests through
``typer.testing.CliRunner`` take the same path.

Heavy libraries (numpy, numba, scipy, pint, pandas, matplotlib, the solver) load inside
the commands that use them, so ``--help`` and ``--version`` answer at once;
tests/test_startup.py guards this.
"""

from __future__ import annotations

import dataclasses
import gc
import math
import os
import signal
import sys
import threading
import time
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Any, NoReturn

import typer
from rich.console import Console
from rich.text import Text
from typer import _click
from typer.core import TyperGroup

# Only light modules here: --help and --version must not load numpy, numba, scipy, pint,
# pandas or matplotlib. Each command imports the library parts it uses when it runs.
from optimizer import __version__, report
from optimizer.errors import ProblemError
from optimizer.invariants import InvariantViolation
from optimizer.outputs import (
    check_results_dir,
    copy_writer,
    figure_writer,
    json_text,
    short,
    text_writer,
    write_run_folder,
)

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
BUG = "this is a bug, please report it with the problem file"


# ---------------------------------------------------------------- one-line errors
class Stopped(KeyboardInterrupt):
    """SIGTERM, raised where the program is so that cleanup runs as for Ctrl-C."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def say(line: str) -> None:
    """One line on stderr, whatever the message holds."""
    text = " ".join(str(line).split())
    print(f"dieplan: {text}", file=sys.stderr, flush=True)


def _raw_value(param: Any, argv: list[str]) -> str | None:
    """What the user typed for ``param`` (click does not keep it on the error)."""
    opts = [*getattr(param, "opts", []), *getattr(param, "secondary_opts", [])]
    if getattr(param, "param_type_name", "") != "option":
        return None
    for i, token in enumerate(argv):
        for opt in opts:
            if token == opt:
                values = argv[i + 1 : i + 1 + max(1, param.nargs)]
                return " ".join(values) if values else None
            if opt.startswith("--") and token.startswith(opt + "="):
                return token[len(opt) + 1 :]
            if not opt.startswith("--") and token.startswith(opt) and len(token) > len(opt):
                return token[len(opt) :]
    return None


def _number_problem(param: Any, raw: str) -> tuple[str, str] | None:
    """(what is wrong, what to do) for a number option, or None if not a number option."""
    kind = getattr(getattr(param, "type_descriptor", None), "annotation", None)
    if kind not in (int, float):
        return None
    low, high = getattr(param, "min", None), getattr(param, "max", None)
    noun = "a whole number" if kind is int else "a number"
    bounds = []
    if low is not None:
        bounds.append(f"at least {low:g}")
    if high is not None:
        bounds.append(f"at most {high:g}")
    fix = f"give {noun}" + (f" {' and '.join(bounds)}" if bounds else "")
    try:
        value = kind(raw.strip())
    except ValueError:
        return f"'{short(raw)}' is not {noun}", fix
    if isinstance(value, float) and not math.isfinite(value):
        return f"'{short(raw)}' is not a finite number", fix
    if low is not None and value < low:
        return f"{short(raw)} is below {low:g}", fix
    if high is not None and value > high:
        return f"{short(raw)} is above {high:g}", fix
    return None


def _name(param: Any) -> str:
    opts = [o for o in getattr(param, "opts", []) if o.startswith("--")]
    if opts:
        return opts[0]
    return (getattr(param, "name", None) or "argument").upper()


def _lower(message: str) -> str:
    message = message.rstrip(".")
    return message[:1].lower() + message[1:]


def _command_of(group: Any, argv: list[str]) -> tuple[Any, str]:
    """The command the user ran (click attaches some errors to the group or to nothing)."""
    for token in argv:
        if token in group.commands:
            return group.commands[token], f"dieplan {token}"
        if not token.startswith("-"):
            break
    return group, "dieplan"


def usage_line(error: Any, argv: list[str], group: Any) -> str:
    """The one line for an option, argument or command click rejected."""
    exc = _click.exceptions
    command, path = _command_of(group, argv)
    see = f"see '{path} --help'"
    message = error.message or ""
    names = ", ".join(group.commands)
    if isinstance(error, exc.NoArgsIsHelpError):
        return f"COMMAND: none given; use one of {names}; {see}"
    if message.startswith("No such command"):
        token = next((t for t in argv if not t.startswith("-")), "")
        guess = message.partition("Did you mean ")[2].rstrip("?")
        hint = f"did you mean {guess}? " if guess else ""
        return f"{short(token)}: no such command; {hint}use one of {names}"
    if isinstance(error, exc.NoSuchOption):
        guess = sorted(error.possibilities or [])
        hint = f"did you mean {' or '.join(guess)}? " if guess else ""
        return f"{short(error.option_name)}: no such option of '{path}'; {hint}{see}"
    if isinstance(error, exc.MissingParameter) and error.param is not None:
        param = error.param
        wanted = _lower(getattr(param, "help", None) or "a value")
        what = f"{param.metavar}: " if param.nargs > 1 and param.metavar else "the "
        return f"{_name(param)}: missing; give {what}{wanted}; {see}"
    if isinstance(error, exc.BadParameter) and error.param is not None:
        param = error.param
        raw = _raw_value(param, argv)
        found = _number_problem(param, raw) if raw is not None else None
        if found is None:
            value = f"'{short(raw)}': " if raw is not None else ""
            return f"{_name(param)}: {value}{_lower(message)}; {see}"
        wrong, fix = found
        return f"{_name(param)}: {wrong}; {fix}"
    if isinstance(error, exc.BadOptionUsage):
        option = error.option_name
        text = message.replace(f"Option '{option}' ", "").replace(f"Option {option!r} ", "")
        return f"{short(option)}: {_lower(text)}; {see}"
    if message.startswith("Got unexpected extra argument"):
        extra = message.split(" (", 1)[-1].rstrip(".").removesuffix(")")
        return f"{short(extra)}: unexpected extra argument(s) of '{path}'; {see}"
    where = path.removeprefix("dieplan ") if path != "dieplan" else "dieplan"
    return f"{where}: {_lower(message)}; {see}"


@contextmanager
def _sigterm_as_interrupt() -> Iterator[None]:
    # SIGTERM would end the process on the spot, leaving worker processes and a
    # temporary folder behind; as an exception it takes the same cleanup path as Ctrl-C
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum: int, _frame: object) -> None:
        raise Stopped(signum)

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class OneLineGroup(TyperGroup):
    """The app's click group: every error of every command ends in one line."""

    def main(
        self,
        args: Any = None,
        prog_name: str | None = None,
        complete_var: str | None = None,
        standalone_mode: bool = True,
        **extra: Any,
    ) -> Any:
        argv = list(sys.argv[1:] if args is None else args)
        # the installed script (not CliRunner): this process ends when the command does
        whole_process = args is None and standalone_mode
        if whole_process:
            # numba, scipy and pint allocate a great many long-lived objects on import;
            # the default thresholds rescan them all several times (~0.15 s per command)
            gc.set_threshold(20_000, 10, 10)
        try:
            code = super().main(
                args=argv,
                prog_name="dieplan",
                complete_var=complete_var,
                standalone_mode=False,
                **extra,
            )
            code = code if isinstance(code, int) else 0
        except _click.exceptions.UsageError as error:
            say(usage_line(error, argv, self))
            code = EXIT_BAD_INPUT
        except _click.exceptions.ClickException as error:
            say(error.format_message())
            code = getattr(error, "exit_code", 1)
        except typer.Abort:
            say("aborted")
            code = 1
        if not standalone_mode:
            return code
        if whole_process:
            # skip the final collection at exit, which walks every object numba, scipy and
            # pint made (~0.4 s); atexit handlers still run and the OS frees the memory
            gc.freeze()
        sys.exit(code)

    def invoke(self, ctx: Any) -> Any:
        with _sigterm_as_interrupt(), warnings.catch_warnings(record=True) as caught:
            try:
                result = super().invoke(ctx)
            except ProblemError as error:
                say(error.line())
                raise typer.Exit(EXIT_BAD_INPUT) from None
            except InvariantViolation as error:
                say(f"internal error: {short(error, 300)}; {BUG}")
                raise typer.Exit(EXIT_INTERNAL) from None
            except Stopped as stop:
                say(
                    f"stopped by {signal.Signals(stop.signum).name} before finishing; nothing "
                    "was left half-written; run the command again"
                )
                raise typer.Exit(128 + stop.signum) from None
            except KeyboardInterrupt:
                say(
                    "interrupted (Ctrl-C) before finishing; nothing was left half-written; "
                    "run the command again"
                )
                raise typer.Exit(130) from None
            except MemoryError:
                say("out of memory: the run is too large; use fewer --samples, --steps or --points")
                raise typer.Exit(EXIT_BAD_INPUT) from None
        # after success only: an error line must stand alone
        for note in {str(w.message) for w in caught}:
            say(f"note: {note}")
        return result


def fail(error: ProblemError) -> NoReturn:
    """Stop the command with ``error`` (printed by :class:`OneLineGroup` as one line)."""
    raise error


def check_environment() -> None:
    """Environment variables the library reads, checked before any work."""
    raw = os.environ.get("DIEPLAN_COUNT_WORKERS")
    if raw is None:
        return
    try:
        ok = int(raw.strip()) >= 1
    except ValueError:
        ok = False
    if not ok:
        raise ProblemError(
            "DIEPLAN_COUNT_WORKERS",
            "",
            f"'{short(raw)}' is not a whole number of 1 or more; set it to a thread count "
            "such as 2, or unset it",
        )


def preflight(results_dir: Path | None = None) -> None:
    """Checks that need no problem file: environment and output folder."""
    check_environment()
    if results_dir is not None:
        check_results_dir(results_dir)


def finite(value: float | None) -> float | None:
    """Option callback: reject NaN and infinities, which no option means."""
    if value is not None and not math.isfinite(value):
        raise typer.BadParameter("not a finite number")
    return value


app = typer.Typer(
    cls=OneLineGroup,
    help="Plan dies, processes, packaging and yield targets for the most profit. " + report.CAUTION,
    no_args_is_help=True,
    add_completion=False,
    rich_markup_mode=None,  # help texts name TOML tables in [brackets]
    pretty_exceptions_enable=False,
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


def _console() -> Console:
    # A terminal gets its own width; piped output gets a fixed, wide, plain layout.
    console = Console(highlight=False, emoji=False)
    if not console.is_terminal:
        console = Console(highlight=False, emoji=False, width=120)
    return console


@app.command()
def check(problem_path: ProblemPath) -> None:
    """Validate a problem file and show what was understood, in base units."""
    from optimizer.explore.paths import check_uncertain

    preflight()
    problem = _load(problem_path)
    if _is_family(problem):
        _check_family(problem_path, problem)
        return
    plan = None
    if isinstance(problem, _LifeFile):
        plan, problem = problem.plan, problem.problem
    check_uncertain(problem, str(problem_path))
    # the evaluator (numba, scipy) loads only when there is something to price
    priced = problem.design or problem.requirements.any()
    results = _check_designs(problem_path, problem) if priced else []
    console = _console()
    console.print(report.problem_summary(problem, str(problem_path)))
    for result in results:
        for violation in result.violations:
            console.print(Text(f"design '{result.design}' breaks rule: {violation}", style="red"))
    if plan is not None:
        varied = ", ".join(t.path for t in plan.tracks) or "volume only"
        console.print(
            Text(
                f"life plan: {plan.n} {plan.period}s ({plan.labels[0]}-{plan.labels[-1]}), "
                f"{sum(plan.volumes):,.0f} units, discount rate {plan.discount_rate:g} per "
                f"year; varies: {varied}"
            )
        )
    console.print(Text(f"ok: {problem_path} is valid."))


def _check_designs(problem_path: Path, problem) -> list:
    """Mandates checked for reachability, then each explicit design priced."""
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator

    evaluator = Evaluator(problem)
    if problem.requirements.any():
        # the mandate check solve runs before it reports "no design"
        from optimizer.solver.infeasibility import explain_requirements

        reason = explain_requirements(evaluator, problem.requirements)
        if reason is not None:
            raise ProblemError(str(problem_path), "requirements", reason)
    return [evaluate_design(evaluator, d, str(problem_path)) for d in problem.design]


@app.command()
def evaluate(
    problem_path: ProblemPath,
    design: Annotated[
        str | None, typer.Option("--design", "-d", help="Name of one explicit design.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Price the explicit designs of a problem file: cost per good unit, yields, profit.

    Designs that break a rule or mandate of the file are priced, marked with the rules
    they break and listed after every design that keeps them all.
    """
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator

    preflight()
    problem = _load(problem_path)
    if _is_family(problem):
        _evaluate_family(problem_path, problem, design, as_json)
        return
    if isinstance(problem, _LifeFile):
        _evaluate_life(problem_path, problem.plan, design, as_json)
        return
    if not problem.design:
        raise ProblemError(
            str(problem_path), "design", "the file has no [[design]] to evaluate; add one"
        )
    if design is not None:
        names = [d.name for d in problem.design]
        if design not in names:
            raise ProblemError(
                "--design",
                "",
                f"no design named '{short(design)}' in {problem_path}; use one of {names}",
            )
        chosen = [problem.design_named(design)]
    else:
        chosen = list(problem.design)
    evaluator = Evaluator(problem)
    results = report.by_rules_then_profit(
        [evaluate_design(evaluator, d, str(problem_path)) for d in chosen]
    )
    if as_json:
        # one shape whatever the number of designs
        payload = {"problem": problem.title, "designs": [r.to_dict() for r in results]}
        typer.echo(json_text(payload))
        return
    console = _console()
    for result in results:
        console.print(report.design_breakdown(result))
        console.print()
    if len(results) > 1:
        console.print(report.designs_overview(results))
    breakers = [r.design for r in results if r.violations]
    if breakers:
        console.print(
            Text(
                f"{len(breakers)} of {len(results)} design(s) break a rule of the problem and "
                f"are listed last: {', '.join(breakers)}",
                style="red",
            )
        )
    console.print(report.CAUTION, style="dim", markup=False)


@app.command()
def solve(
    ctx: typer.Context,
    problem_path: ProblemPath,
    top: Annotated[int, typer.Option("--top", "-k", min=1, help="How many ranked designs.")] = 3,
    method: Annotated[
        str,
        typer.Option(
            "--method",
            help="auto (default: subset_dp where it is exact, else milp), milp, subset_dp, "
            "or exhaustive (small problems).",
        ),
    ] = "auto",
    time_limit: Annotated[
        float | None,
        typer.Option(
            "--time-limit",
            min=0.0,
            callback=finite,
            help="Seconds; returns the best found and its gap.",
        ),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the solution as JSON.")] = False,
    results_dir: Annotated[
        Path, typer.Option("--results", help="Folder for the run folder.")
    ] = Path("results"),
    write: Annotated[bool, typer.Option("--write/--no-write", help="Write a run folder.")] = True,
    require_die_yield: Annotated[
        float | None,
        typer.Option(
            "--require-die-yield", callback=finite, help="Mandate a minimum die yield (0-1)."
        ),
    ] = None,
    require_sigma: Annotated[
        float | None,
        typer.Option(
            "--require-sigma", callback=finite, help="Mandate a minimum design margin [sigma]."
        ),
    ] = None,
    require_defect_level: Annotated[
        float | None,
        typer.Option(
            "--require-defect-level",
            callback=finite,
            help="Mandate a maximum defect level (e.g. 1e-4).",
        ),
    ] = None,
    table_time: Annotated[
        float,
        typer.Option(
            "--table-time",
            min=0.0,
            callback=finite,
            help="Seconds for the best design of each architecture (0: no table).",
        ),
    ] = 20.0,
    mixes: Annotated[
        int,
        typer.Option(
            "--mixes",
            min=0,
            help="Split the optimum's and the best N multi-die architectures by process mix.",
        ),
    ] = 1,
    by_architecture: Annotated[
        bool,
        typer.Option(
            "--by-architecture",
            help="Rank the best design of each of the --top best architectures instead.",
        ),
    ] = False,
) -> None:
    """Find the most profitable design: partition, process per die, packaging, redundancy.

    Beside the optimum it gives the best design of every architecture (packaging and die
    count) and where the choice would flip against the runner-up architecture. With
    mandated targets (--require-... or [requirements] in the file) it solves with and
    without them and reports the profit the mandate costs.
    """
    # the time limit is wall-clock for the whole command from here, loading included
    deadline = None if time_limit is None else time.perf_counter() + time_limit
    from optimizer.solver import METHODS
    from optimizer.solver import solve as run_solver
    from optimizer.targets import price_requirements

    if method not in METHODS:
        raise ProblemError(
            "--method", short(method), f"unknown method; use one of {', '.join(METHODS)}"
        )
    preflight(results_dir if write else None)
    options = _requirement_options(require_die_yield, require_sigma, require_defect_level)
    problem = _load(problem_path)
    if isinstance(problem, _LifeFile):
        _solve_life(
            problem_path,
            problem.plan,
            deadline,
            as_json,
            results_dir if write else None,
            table_time,
        )
        return
    if _is_family(problem):
        _family_options(ctx, problem_path)
        explicit = _given(ctx, "method")
        _solve_family(
            problem_path,
            problem,
            deadline,
            method if explicit else None,
            as_json,
            results_dir if write else None,
            table_time=table_time,
        )
        return
    mandate = _requirements(problem, options)
    table = dict(architectures=table_time > 0, table_time=table_time, split_mixes=mixes)
    from optimizer.live import live_progress

    console = _console()
    # on a terminal the solve shows its progress in place, erased before the result
    with live_progress(console, enabled=not as_json, currency=problem.market.currency) as reporter:
        if mandate is not None and mandate.any():
            priced = price_requirements(
                problem,
                mandate,
                top=top,
                source=str(problem_path),
                method=method,
                deadline=deadline,
                **table,
            )
            solution, free = priced.mandated, priced.free
        else:
            solution = run_solver(
                problem,
                top=top,
                method=method,
                deadline=deadline,
                source=str(problem_path),
                **table,
            )
            priced = free = None
        if by_architecture:
            if not solution.architectures:
                raise ProblemError(
                    "--by-architecture",
                    "",
                    "needs the architecture table; set --table-time above 0",
                )
            solution = dataclasses.replace(solution, designs=solution.distinct_architectures(top))
        if reporter is not None:
            reporter.stage("where the choice flips: break-even of each main input")
        flips = _flips(problem_path, problem, solution)
    payload = solution.to_dict()
    if flips is not None:
        payload["flips"] = {
            "challengers": [
                {"challenger": challenger.to_dict(), "inputs": [r.to_dict() for r in rows]}
                for challenger, rows in flips
            ],
            "note": "each input moved alone with both designs held fixed; sweep re-solves",
        }
    if priced is not None:
        payload["mandate"] = priced.to_dict()
        payload["unconstrained_best"] = free.best.to_dict()
    folder = None
    if write:
        files = {
            "solution.json": text_writer(json_text(payload) + "\n"),
            "ranked.csv": text_writer(_ranked_csv(solution)),
            "solver.log": text_writer("\n".join(solution.log) + "\n"),
            "problem.toml": copy_writer(problem_path),
            # the ranked designs and each architecture's best as [[design]] tables that
            # `evaluate` re-prices exactly
            "designs.toml": text_writer(_designs_toml(solution, problem)),
        }
        if solution.architectures:
            files["architectures.csv"] = text_writer(_architectures_csv(solution))
            files.update(_decision_figure(solution, problem))
        if flips is not None:
            files["flips.csv"] = text_writer(_flips_csv(flips))
        folder = write_run_folder(results_dir, "solve", problem_path.stem, files)
    if as_json:
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    console.print(report.solution_view(solution))
    if solution.architectures:
        console.print(
            report.decision_view(solution.architectures, solution.best.currency, table_time)
        )
    for challenger, rows in flips or []:
        console.print(report.flips_view(challenger, rows, solution.best.currency))
    if priced is not None:
        console.print(report.mandate_view(priced))
    if folder is not None:
        console.print(Text(f"wrote {folder}"))
    console.print(report.CAUTION, style="dim", markup=False)


REQUIRE_OPTIONS = {
    "--require-die-yield": ("min_die_yield", "a die yield above 0 and at most 1, e.g. 0.9"),
    "--require-sigma": ("min_sigma_margin", "a design margin above 0 sigma, e.g. 3"),
    "--require-defect-level": (
        "max_defect_level",
        "a defect level from 0 to below 1, e.g. 1e-4 (100 ppm)",
    ),
}


def _requirement_options(die_yield, sigma, defect_level) -> dict[str, float]:
    """The --require-... options given, as [requirements] keys; each checked on its own."""
    from pydantic import ValidationError

    from optimizer.problem import Requirements

    chosen = {}
    given = zip(REQUIRE_OPTIONS.items(), (die_yield, sigma, defect_level), strict=True)
    for (option, (key, wanted)), value in given:
        if value is None:
            continue
        try:
            Requirements(**{key: value})
        except ValidationError:
            raise ProblemError(option, f"{value:g}", f"out of range; give {wanted}") from None
        chosen[key] = value
    return chosen


def _requirements(problem, options: dict[str, float]):
    """The file's [requirements] with any --require-... options on top (None if none)."""
    from optimizer.problem import Requirements

    merged = Requirements(**{**problem.requirements.model_dump(), **options})
    return merged if merged.any() else None


def _challengers(solution) -> list:
    """The best design of the next architecture and, when its die count is the optimum's,
    the best design with another die count: the choices an architect weighs."""
    rows = [row for row in solution.architectures if row.design is not None and not row.optimum]
    if not rows:
        return []
    picked = [rows[0].design]
    if rows[0].n_dies == solution.best.n_dies:
        other = next((r for r in rows if r.n_dies != solution.best.n_dies), None)
        if other is not None:
            picked.append(other.design)
    return picked


def _flips(problem_path: Path, problem, solution) -> list | None:
    """Break-even of each main input between the optimum and each challenger."""
    challengers = _challengers(solution)
    if not challengers:
        return None
    from optimizer.explore.breakeven import break_even, main_inputs
    from optimizer.explore.fixed import FixedDesign
    from optimizer.explore.paths import load_study

    study = load_study(problem_path)
    optimum = FixedDesign.from_result(solution.best, problem)
    out = []
    for design in challengers:
        challenger = FixedDesign.from_result(design, problem)
        paths = main_inputs(problem, [optimum, challenger])
        out.append((design, break_even(study.data, str(problem_path), optimum, challenger, paths)))
    return out


def _flips_csv(flips) -> str:
    import pandas as pd

    rows = [
        {"challenger": report.short_design(design), **row.to_dict()}
        for design, found in flips
        for row in found
    ]
    return pd.DataFrame(rows).to_csv(index=False)


def _designs_toml(solution, problem) -> str:
    from optimizer.designs import designs_toml

    results = list(solution.designs)
    names = [f"solved_rank{rank}" for rank in range(1, len(results) + 1)]
    for row in solution.architectures:
        if row.design is not None and not row.optimum:
            results.append(row.design)
            names.append(f"best_{row.packaging}_{row.n_dies}_dies")
    return designs_toml(results, problem=problem, names=names)


def _architectures_csv(solution) -> str:
    import pandas as pd

    rows = []
    listed = []
    for row in solution.architectures:
        listed.append(row)
        listed.extend(row.mixes)
    for row in listed:
        d = row.design
        rows.append(
            {
                "architecture": row.label,
                "held_to_mix": row.mix,
                "packaging": row.packaging,
                "n_dies": row.n_dies,
                "process_mix": row.process_mix,
                "optimum": row.optimum,
                "proven": row.proven,
                "profit": d.profit if d else None,
                "profit_bound": row.profit_bound,
                "gap": row.gap if d else None,
                "behind_optimum": solution.best.profit - d.profit if d else None,
                "cost_per_good_unit": d.cost_per_good_unit if d else None,
                "die_yields": report.die_yields(d) if d else "",
                "package_yield": d.package_yield if d else None,
                "nre": d.nre if d else None,
                "salvage_revenue": d.salvage_revenue if d else None,
                "design": report.short_design(d) if d else "",
                "reason": row.reason,
                **{f"gap_{k}": v for k, v in row.gap_components.items()},
            }
        )
    return pd.DataFrame(rows).to_csv(index=False)


def _decision_figure(solution, problem) -> dict:
    from optimizer.cli_explore import _figure_writers
    from optimizer.explore.plots import decision_figure

    rows = [
        {
            "architecture": f"{row.label}: {row.process_mix}" if row.design else row.label,
            "profit": row.profit if row.design is not None else None,
            "bound": row.profit_bound,
            "proven": row.proven,
            "optimum": row.optimum,
            "reason": row.reason,
        }
        for row in solution.architectures
    ]
    title = f"{problem.title}: best design of each architecture"
    figure = decision_figure(rows, title, solution.best.currency)
    return _figure_writers("architectures", figure, problem.title)


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
                "profit_margin": d.profit_margin,
                **{f"cost_{k}": v for k, v in d.breakdown.items()},
            }
        )
    return pd.DataFrame(rows).to_csv(index=False)


# ---------------------------------------------------------------- product families
def _load(problem_path: Path):
    """The file's :class:`Problem`, or its :class:`Family` when it holds [[product]]
    tables; read once, validated as ``load_problem`` and ``load_family`` do."""
    from optimizer.family import family_from_data, is_family
    from optimizer.problem import check_feasible, parse_problem, read_problem_data

    data, source = read_problem_data(problem_path)
    from optimizer.life import has_life

    if has_life(data) and not is_family(data):
        from optimizer.life import life_plan

        plan = life_plan(data, source)
        check_feasible(plan.base, source)
        return _LifeFile(plan)
    if is_family(data):
        if "uncertain" in data:
            # a family's [[uncertain]] entries sit at the top level (exploration reads them)
            from optimizer.explore.family_paths import family_study_from_data

            return family_study_from_data(data, source).family
        return family_from_data(data, source)
    problem = parse_problem(data, source)
    check_feasible(problem, source)
    return problem


class _LifeFile:
    """A problem file with a [life] plan: its base problem and the plan."""

    def __init__(self, plan):
        self.plan = plan
        self.problem = plan.base


def _life_refused(problem_path: Path, command: str) -> ProblemError:
    return ProblemError(
        str(problem_path),
        "life",
        f"`dieplan {command}` does not yet take a [life] plan; `dieplan solve` finds the "
        "design with the most NPV over the life and `dieplan evaluate` prices the file's "
        "[[design]] entries over it; without [life] the file is priced for one set of "
        "numbers",
    )


def _is_family(loaded) -> bool:
    from optimizer.family import Family

    return isinstance(loaded, Family)


def _in_product(error: ProblemError, name: str) -> ProblemError:
    """A single-product error raised on a family member, named under its product."""
    own = error.field.split(".")[0].split("[")[0] in ("market", "requirements", "design")
    where = f"product '{name}'.{error.field}" if own else f"product '{name}': {error.field}"
    return ProblemError(error.source, where, error.message)


def _check_family(problem_path: Path, family) -> None:
    from optimizer import family_report

    found = []
    for member in family.members:
        problem = member.problem
        try:
            results = (
                _check_designs(problem_path, problem)
                if problem.design or problem.requirements.any()
                else []
            )
        except ProblemError as error:
            raise _in_product(error, member.name) from None
        found.append((member.name, results))
    console = _console()
    console.print(family_report.family_summary(family, str(problem_path)))
    for name, results in found:
        for result in results:
            for violation in result.violations:
                console.print(
                    Text(
                        f"product '{name}': design '{result.design}' breaks rule: {violation}",
                        style="red",
                    )
                )
    console.print(Text(f"ok: {problem_path} is valid: a family of {len(family.members)} products."))


def _family_designs(problem_path: Path, family, only: str | None) -> list[str]:
    """Names of the family designs to price: each must be a [[product.design]] of every
    product."""
    names: list[str] = []
    for member in family.members:
        for design in member.problem.design:
            if design.name not in names:
                names.append(design.name)
    if not names:
        raise ProblemError(
            str(problem_path),
            "product.design",
            "no product has a [[product.design]]; add one under each [[product]], all with "
            "the same name, to price them as one family design",
        )
    if only is not None:
        if only not in names:
            raise ProblemError(
                "--design",
                "",
                f"no family design named '{short(only)}' in {problem_path}; use one of {names}",
            )
        names = [only]
    for name in names:
        for member in family.members:
            if name not in [d.name for d in member.problem.design]:
                holder = next(
                    m.name for m in family.members if name in [d.name for d in m.problem.design]
                )
                raise ProblemError(
                    str(problem_path),
                    f"product '{member.name}'.design",
                    f"has no design named '{short(name)}' (product '{holder}' has one); a "
                    "family design needs one per product, so add a [[product.design]] named "
                    f"'{short(name)}' under product '{member.name}'",
                )
    return names


def _evaluate_family(problem_path: Path, family, only: str | None, as_json: bool) -> None:
    from optimizer import family_report
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator
    from optimizer.solver.family import family_profit

    wanted = _family_designs(problem_path, family, only)
    names = family.names
    problems = [m.problem for m in family.members]
    evaluators = [Evaluator(p) for p in problems]
    priced = []
    for name in wanted:
        results = []
        for member, evaluator in zip(family.members, evaluators, strict=True):
            try:
                results.append(
                    evaluate_design(evaluator, member.problem.design_named(name), str(problem_path))
                )
            except ProblemError as error:
                raise _in_product(error, member.name) from None
        conflict = family_report.target_conflict(names, results)
        total = family_profit(problems, results) if conflict is None else None
        priced.append((name, results, total, conflict))
    # the family designs that keep every rule first, each group by family profit
    priced.sort(
        key=lambda item: (
            any(r.violations for r in item[1]),
            item[2] is None,
            -(item[2][0] if item[2] is not None else 0.0),
        )
    )
    if as_json:
        payload = {
            "family": family.title,
            "products": names,
            "designs": [
                {
                    "design": name,
                    "profit": total[0] if total is not None else None,
                    "shared_nre": total[1] if total is not None else None,
                    "shared_targets": total[2] if total is not None else None,
                    "conflict": conflict,
                    "products": [
                        {"product": n, **r.to_dict()} for n, r in zip(names, results, strict=True)
                    ],
                }
                for name, results, total, conflict in priced
            ],
        }
        typer.echo(json_text(payload))
        return
    console = _console()
    for name, results, total, conflict in priced:
        console.print(
            family_report.family_design_view(name, names, results, total or (0, 0, 0), conflict)
        )
        console.print()
    if len(priced) > 1:
        rows = [
            (name, total[0] if total is not None else None, any(r.violations for r in results))
            for name, results, total, _ in priced
        ]
        console.print(family_report.designs_overview(rows, problems[0].market.currency))
    console.print(report.CAUTION, style="dim", markup=False)


def _evaluate_life(problem_path: Path, plan, only: str | None, as_json: bool) -> None:
    from optimizer import life_report
    from optimizer.life_value import design_life_value

    problem = plan.base
    if not problem.design:
        raise ProblemError(
            str(problem_path), "design", "the file has no [[design]] to evaluate; add one"
        )
    names = [d.name for d in problem.design]
    if only is not None and only not in names:
        raise ProblemError(
            "--design", "", f"no design named '{short(only)}' in {problem_path}; use one of {names}"
        )
    chosen = [only] if only is not None else names
    values = sorted(
        (design_life_value(plan, name, str(problem_path)) for name in chosen),
        key=lambda v: -v.npv,
    )
    if as_json:
        payload = {"problem": problem.title, "life": [life_report.life_dict(v) for v in values]}
        typer.echo(json_text(payload))
        return
    console = _console()
    for value in values:
        console.print(life_report.life_view(value, problem.market.currency))
        console.print()
    console.print(report.CAUTION, style="dim", markup=False)


def _solve_life(
    problem_path: Path, plan, deadline, as_json: bool, results_dir, table_time: float = 0.0
) -> None:
    from optimizer import life_report
    from optimizer.solver.life import solve_life

    limit = None if deadline is None else max(0.0, deadline - time.perf_counter())
    solution = solve_life(
        plan,
        time_limit=limit,
        source=str(problem_path),
        table=table_time > 0,
        table_time=table_time,
    )
    currency = plan.base.market.currency
    values = life_report.curves(solution, plan.labels[0])
    payload = {
        "problem": plan.base.title,
        "npv": solution.best.npv,
        "proven": solution.proven,
        "npv_bound": solution.npv_bound,
        "gap": solution.gap,
        "seconds": solution.seconds,
        "targets": plan.targets,
        "design": solution.best.periods[0].result.to_dict(),
        "life": {name: life_report.life_dict(v) for name, v in values.items()},
        "architectures": [life_report.row_dict(r) for r in solution.rows],
    }
    folder = None
    if results_dir is not None:
        figure = life_report.cumulative_figure(values, currency, plan.base.title)
        files = {
            "life.json": text_writer(json_text(payload) + "\n"),
            "periods.csv": text_writer(life_report.periods_csv(values)),
            "cumulative_value.png": figure_writer(figure, dpi=130),
            "cumulative_value.svg": figure_writer(figure),
            "problem.toml": copy_writer(problem_path),
        }
        folder = write_run_folder(results_dir, "solve", problem_path.stem, files)
    if as_json:
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    console = _console()
    console.print(life_report.solution_view(solution, currency))
    if folder is not None:
        console.print(Text(f"wrote {folder}"))
    console.print(report.CAUTION, style="dim", markup=False)


# solve options a family solve does not take, and what to do instead
FAMILY_REFUSES = {
    "top": ("--top", "a family solve gives one design per product"),
    "mixes": ("--mixes", "process mixes are split for one product's architecture table"),
    "by_architecture": ("--by-architecture", "the ranked list is made for one product"),
    "require_die_yield": ("--require-die-yield", "mandates are stated per product"),
    "require_sigma": ("--require-sigma", "mandates are stated per product"),
    "require_defect_level": ("--require-defect-level", "mandates are stated per product"),
}


def _given(ctx: typer.Context, name: str) -> bool:
    source = ctx.get_parameter_source(name)
    return source is not None and source.name in ("COMMANDLINE", "ENVIRONMENT")


def _family_options(ctx: typer.Context, problem_path: Path) -> None:
    for name, (option, why) in FAMILY_REFUSES.items():
        if not _given(ctx, name):
            continue
        if option.startswith("--require"):
            key = REQUIRE_OPTIONS[option][0]
            fix = (
                f"drop it and state {key} in [product.requirements] of each product that must "
                "meet it"
            )
        else:
            fix = "drop it, or write one product as its own problem file and solve that"
        raise ProblemError(
            option,
            "",
            f"does not apply to the product family in {problem_path} ({why}); {fix}",
        )


def _solve_family(
    problem_path: Path,
    family,
    deadline: float | None,
    method: str | None,
    as_json: bool,
    results_dir: Path | None,
    table_time: float = 0.0,
) -> None:
    from optimizer import family_report
    from optimizer.solver.family import solve_family
    from optimizer.solver.family_table import family_tables

    limit = None if deadline is None else max(0.0, deadline - time.perf_counter())
    options = {} if method is None else {"method": method}
    solution = solve_family(family, time_limit=limit, source=str(problem_path), **options)
    tables = {}
    if table_time > 0:
        left = table_time
        if deadline is not None:
            left = min(left, max(0.0, deadline - time.perf_counter()))
        problems = [m.problem for m in family.members]
        tables = family_tables(solution, problems, str(problem_path), time_limit=left)
    payload = family_report.family_dict(solution, family.title)
    payload["architectures"] = family_report.tables_dict(tables)
    folder = None
    if results_dir is not None:
        files = {
            "family.json": text_writer(json_text(payload) + "\n"),
            "library.csv": text_writer(family_report.library_csv(solution)),
            "products.csv": text_writer(family_report.products_csv(solution)),
            "solver.log": text_writer("\n".join(solution.log) + "\n"),
            "problem.toml": copy_writer(problem_path),
            # each product's design as [[product.design]], for `evaluate` to re-price
            "designs.toml": text_writer(
                family_report.designs_toml(family, solution.designs, "family_optimum")
            ),
        }
        if tables:
            files["architectures.csv"] = text_writer(family_report.tables_csv(tables))
        folder = write_run_folder(results_dir, "solve", problem_path.stem, files)
    if as_json:
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    console = _console()
    console.print(family_report.family_view(solution, family.title))
    if tables:
        console.print(
            family_report.tables_view(tables, solution.library, solution.designs[0].currency)
        )
    if folder is not None:
        console.print(Text(f"wrote {folder}"))
    console.print(report.CAUTION, style="dim", markup=False)


@app.command()
def new(
    path: Annotated[Path, typer.Argument(help="Where to write the file.", show_default=False)],
) -> None:
    """Write a commented starter problem file (invented numbers) for a new product."""
    from optimizer.reference import STARTER

    try:
        with path.open("x", encoding="utf-8") as handle:  # "x": never overwrite
            handle.write(STARTER)
    except FileExistsError:
        raise ProblemError(
            str(path), "", "already exists; choose a new path or remove the file first"
        ) from None
    except OSError as exc:
        raise ProblemError(
            str(path), "", f"cannot write the file ({exc.strerror}); check the folder"
        ) from None
    say(f"wrote {path}; replace its invented numbers, then run dieplan check {path}")


@app.command("profit-curve")
def profit_curve_command(
    problem_path: ProblemPath,
    points: Annotated[int, typer.Option("--points", min=3, help="Targets on the curve.")] = 61,
    require_die_yield: Annotated[
        float | None,
        typer.Option(
            "--require-die-yield", callback=finite, help="Mark a mandated die yield (0-1)."
        ),
    ] = None,
    results_dir: Annotated[
        Path, typer.Option("--results", help="Folder for the run folder.")
    ] = Path("results"),
) -> None:
    """Profit and cost per good unit of the winning design against its yield target."""
    from optimizer.explore.plots import literal_text
    from optimizer.solver import solve as run_solver
    from optimizer.targets import cost_rises_without_bound, profit_curve, profit_curve_figure

    _requirement_options(require_die_yield, None, None)
    preflight(results_dir)
    problem = _load(problem_path)
    if isinstance(problem, _LifeFile):
        raise _life_refused(problem_path, "profit-curve")
    if _is_family(problem):
        raise ProblemError(
            str(problem_path),
            "product",
            "profit-curve follows one product's winner, and this file is a family of "
            f"{len(problem.members)} products; run 'dieplan solve' on it, or write one product "
            "as its own problem file",
        )
    solution = run_solver(problem, top=1, source=str(problem_path))
    frame = profit_curve(problem, solution.best, points=points)
    mandated = (
        require_die_yield if require_die_yield is not None else problem.requirements.min_die_yield
    )
    figure = literal_text(profit_curve_figure)(frame, problem.market.currency, mandated)
    folder = write_run_folder(
        results_dir,
        "profit-curve",
        problem_path.stem,
        {
            "profit_curve.csv": text_writer(frame.to_csv(index=False)),
            "profit_curve.png": figure_writer(figure, dpi=130),
            "profit_curve.svg": figure_writer(figure),
            "problem.toml": copy_writer(problem_path),
        },
    )
    inside = frame[~frame["extrapolated"]]
    best = inside.loc[inside["profit"].idxmax()]
    console = _console()
    console.print(
        Text(
            f"winner: {report.short_design(solution.best)}; yield target varied on process "
            f"'{frame.attrs['process']}'"
        )
    )
    console.print(
        Text(
            f"profit peaks at {100 * best['hard_yield']:.2f}% defect-limited yield "
            f"(D = {best['defect_density_per_cm2']:.4g} /cm^2): profit "
            f"{report.money(best['profit'], problem.market.currency)}, cost per good unit "
            f"{report.money(best['cost_per_good_unit'])}"
        )
    )
    shape = "yes" if cost_rises_without_bound(frame) else "no"
    console.print(f"cost per good unit rises without bound as the target approaches 100%: {shape}")
    console.print(Text(f"wrote {folder}"))
    console.print(report.CAUTION, style="dim", markup=False)


from optimizer import cli_explore  # noqa: F401,E402  (registers exploration commands)
