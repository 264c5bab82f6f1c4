"""The `dieplan` command line: a thin shell over the library.

Commands parse options, call :mod:`optimizer.api` (which runs the library and builds the
JSON objects, tables and run-folder files) and hand results to report.py. Whatever the
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
from optimizer import __version__, api, report
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
    loaded = api.load(problem_path)
    if loaded.kind == "family":
        _check_family(problem_path, loaded.parsed)
        return
    plan = loaded.parsed if loaded.kind == "life" else None
    problem = loaded.problem
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
    preflight()
    loaded = api.load(problem_path)
    priced = api.evaluate(loaded, design)
    if as_json:
        # one shape whatever the number of designs
        typer.echo(json_text(priced.to_dict()))
        return
    console = _console()
    if loaded.kind == "family":
        _show_family_designs(console, priced)
    elif loaded.kind == "life":
        from optimizer import life_report

        for value in priced.values:
            console.print(life_report.life_view(value, loaded.currency))
            console.print()
    else:
        _show_designs(console, priced.designs)
    console.print(report.CAUTION, style="dim", markup=False)


def _show_designs(console: Console, results: list) -> None:
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


def _show_family_designs(console: Console, priced) -> None:
    from optimizer import family_report

    names = priced.products
    for p in priced.designs:
        console.print(
            family_report.family_design_view(
                p.name, names, p.results, p.total or (0, 0, 0), p.conflict
            )
        )
        console.print()
    if len(priced.designs) > 1:
        rows = [(p.name, p.profit, p.breaks_rules) for p in priced.designs]
        console.print(family_report.designs_overview(rows, priced.problem_file.currency))


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
    api.check_method(method)
    preflight(results_dir if write else None)
    api.requirement_options(require_die_yield, require_sigma, require_defect_level)
    loaded = api.load(problem_path)
    if loaded.kind == "family":
        _family_options(ctx, problem_path)
        # a family's search keeps its own method unless one is asked for
        if not _given(ctx, "method"):
            method = None
    if loaded.kind == "life":
        for name in api.LIFE_REFUSES:
            if _given(ctx, name):
                raise api.life_refusal(name, str(problem_path))
        method = None
    from optimizer.live import live_progress

    console = _console()
    # on a terminal the solve shows its progress in place, erased before the result
    objective = {"family": "family profit", "life": "net present value"}.get(loaded.kind, "profit")
    with live_progress(console, enabled=not as_json, currency=loaded.currency, objective=objective):
        result = api.solve(
            loaded,
            top=top,
            method=method,
            time_limit=time_limit,
            table_time=table_time,
            mixes=mixes,
            by_architecture=by_architecture,
            require_die_yield=require_die_yield,
            require_sigma=require_sigma,
            require_defect_level=require_defect_level,
            deadline=deadline,
        )
    folder = None
    if write:
        # the copy is of the file named on the command line, read at write time as before
        files = {**result.files(), "problem.toml": copy_writer(problem_path)}
        folder = write_run_folder(results_dir, "solve", problem_path.stem, files)
    if as_json:
        payload = result.to_dict()
        if folder is not None:
            payload["run_folder"] = str(folder)
        typer.echo(json_text(payload))
        return
    if loaded.kind == "family":
        _show_family_solution(console, result)
    elif loaded.kind == "life":
        from optimizer import life_report

        console.print(life_report.solution_view(result.solution, loaded.currency))
    else:
        _show_solution(console, result, table_time)
    if folder is not None:
        console.print(Text(f"wrote {folder}"))
    console.print(report.CAUTION, style="dim", markup=False)


def _show_solution(console: Console, result, table_time: float) -> None:
    solution = result.solution
    console.print(report.solution_view(solution))
    if solution.architectures:
        console.print(
            report.decision_view(solution.architectures, solution.best.currency, table_time)
        )
    for challenger, rows in result.challengers or []:
        console.print(report.flips_view(challenger, rows, solution.best.currency))
    if result.mandate is not None:
        console.print(report.mandate_view(result.mandate))


def _show_family_solution(console: Console, result) -> None:
    from optimizer import family_report

    solution = result.solution
    console.print(family_report.family_view(solution, result.problem_file.title))
    if result.tables:
        console.print(
            family_report.tables_view(result.tables, solution.library, solution.designs[0].currency)
        )


# ---------------------------------------------------------------- product families
def _life_refused(problem_path: Path, command: str) -> ProblemError:
    return ProblemError(
        str(problem_path),
        "life",
        f"`dieplan {command}` does not yet take a [life] plan; `dieplan solve` finds the "
        "design with the most NPV over the life and `dieplan evaluate` prices the file's "
        "[[design]] entries over it; without [life] the file is priced for one set of "
        "numbers",
    )


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
            raise api.in_product(error, member.name) from None
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


def _given(ctx: typer.Context, name: str) -> bool:
    source = ctx.get_parameter_source(name)
    return source is not None and source.name in ("COMMANDLINE", "ENVIRONMENT")


def _family_options(ctx: typer.Context, problem_path: Path) -> None:
    """Single-product options given on the command line for a family file are refused."""
    for name in api.FAMILY_REFUSES:
        if _given(ctx, name):
            raise api.family_refusal(name, str(problem_path))


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

    api.requirement_options(require_die_yield, None, None)
    preflight(results_dir)
    loaded = api.load(problem_path)
    if loaded.kind == "life":
        raise _life_refused(problem_path, "profit-curve")
    if loaded.kind == "family":
        raise ProblemError(
            str(problem_path),
            "product",
            "profit-curve follows one product's winner, and this file is a family of "
            f"{len(loaded.parsed.members)} products; run 'dieplan solve' on it, or write one "
            "product as its own problem file",
        )
    problem = loaded.problem
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
