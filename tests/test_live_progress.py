"""Live progress of a solve: the events the solver reports, and the terminal view of them.

Problems are invented: the synthetic benchmark family (``benchmarks/synthetic.py``) and
the tiny test problem of ``conftest.py``. Every check compares the events with the
solution the same solve returns, or a run with the view against a run without it.
"""

from __future__ import annotations

import json
import re
import sys
from contextlib import contextmanager
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console
from typer.testing import CliRunner

import optimizer.live
import optimizer.solver
from optimizer.cli import app
from optimizer.live import live_progress
from optimizer.problem import parse_problem
from optimizer.solver import progress as progress_module
from optimizer.solver import solve
from optimizer.solver.progress import Progress, ProgressEvent, reporting
from optimizer.solver.search import PROFIT_RTOL

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
from synthetic import synthetic_problem  # noqa: E402
from tie_family import tie_problem  # noqa: E402

# stages of the search of candidate dies priced up front, in the order they come
SEARCH_STAGES = (
    "starting",
    "listing the block contents",
    "pricing candidate dies",
    "first designs from the subset DP",
    "bounding every",
    "bounding and searching",
    "proving",
    "checking the answer",
    "decision table",
)
# no terminal unless a test asks for one, whatever the machine's environment says
PLAIN_ENV = {"TTY_COMPATIBLE": None, "FORCE_COLOR": None}


def stage_rank(stage: str) -> int:
    ranks = [i for i, prefix in enumerate(SEARCH_STAGES) if stage.startswith(prefix)]
    assert ranks, f"unexpected stage {stage!r}"
    return ranks[0]


def recorded_solve(problem, **options) -> tuple[list[ProgressEvent], optimizer.solver.Solution]:
    """Solve with a listener that hears every report (no throttle)."""
    events: list[ProgressEvent] = []
    with reporting(Progress(events.append, interval=0.0)):
        solution = solve(problem, **options)
    return events, solution


def without_times(data):
    """JSON data without wall-clock times (keys ending in 'seconds')."""
    if isinstance(data, dict):
        return {k: without_times(v) for k, v in data.items() if not k.endswith("seconds")}
    if isinstance(data, list):
        return [without_times(v) for v in data]
    return data


def check_consistent(events: list[ProgressEvent], solution) -> None:
    """What every solve's events must show, whatever the search path."""
    priced = [e.candidates_priced for e in events]
    assert priced == sorted(priced), "candidate dies priced went down"
    # every variant is priced before dominated ones are dropped: at least those kept
    assert priced[-1] >= solution.stats["candidate_dies"] > 0
    slack = PROFIT_RTOL * abs(solution.best.profit) + solution.tie_tolerance
    for e in events:
        if e.best_profit is not None and e.profit_bound is not None:
            assert e.best_profit <= e.profit_bound + slack, e
            assert e.gap == pytest.approx(
                max(0.0, (e.profit_bound - e.best_profit) / abs(e.best_profit)), abs=1e-12
            )
        # designs found on the way are real designs, the bound holds for all of them:
        # neither passes the proven optimum
        if solution.proven_optimal and e.best_profit is not None:
            assert e.best_profit <= solution.best.profit + slack, e
        if solution.proven_optimal and e.profit_bound is not None:
            assert e.profit_bound >= solution.best.profit - slack, e
    final = events[-1]
    assert final.final and not any(e.final for e in events[:-1])
    assert final.best_profit == solution.best.profit
    assert final.profit_bound == solution.profit_bound
    assert final.gap == solution.gap


def test_events_of_a_solve_in_order_and_matching_its_solution():
    problem = synthetic_problem(8, chiplet_favoured=True)
    events, solution = recorded_solve(
        problem, top=2, method="milp", architectures=True, table_time=None, split_mixes=1
    )
    check_consistent(events, solution)
    ranks = [stage_rank(e.stage) for e in events]
    assert ranks == sorted(ranks), [e.stage for e in events]
    stages = {SEARCH_STAGES[r] for r in ranks}
    for needed in ("pricing candidate dies", "bounding every", "checking the answer"):
        assert needed in stages
    # one decision-table row per (packaging, die count) of the problem, counted in order
    rows = [e.stage for e in events if re.match(r"decision table: .* \(row \d+ of \d+\)", e.stage)]
    numbers = [int(m) for m in re.findall(r"row (\d+) of", " ".join(dict.fromkeys(rows)))]
    total = sum(min(p.max_dies, problem.constraints.max_dies) for p in problem.packaging)
    assert numbers == list(range(1, total + 1))
    assert any(e.stage.startswith("decision table, process mixes") for e in events)
    # the table's searches come after the answer is settled: best and bound stay put
    settled = [e for e in events if e.stage.startswith("decision table")]
    assert {(e.best_profit, e.profit_bound) for e in settled} == {
        (solution.best.profit, solution.profit_bound)
    }


def test_generated_search_reports_its_rounds(monkeypatch):
    # candidate dies generated on demand (as from 20 blocks), forced on a small problem
    monkeypatch.setattr(optimizer.solver, "GENERATE_ABOVE_CONTENTS", 0)
    problem = synthetic_problem(8, chiplet_favoured=True)
    events, solution = recorded_solve(problem, top=1, method="milp")
    assert "contents_generated" in solution.stats
    check_consistent(events, solution)
    stages = [e.stage for e in events]
    assert stages[1].startswith("generating candidate dies")
    assert any(re.search(r"\[\w+, \d dies\], round \d+", s) for s in stages)
    answer = stages.index("checking the answer")
    assert all(s == "checking the answer" for s in stages[answer:])


def tie_family(blocks: int):
    # the family where the subset DP is exact
    return parse_problem(tie_problem(0, blocks, processes=3))


@pytest.mark.parametrize(
    "method, problem",
    [
        ("milp", synthetic_problem(6, chiplet_favoured=True)),
        ("exhaustive", synthetic_problem(6, chiplet_favoured=True)),
        ("subset_dp", tie_family(6)),
    ],
    ids=["milp", "exhaustive", "subset_dp"],
)
def test_same_solution_with_and_without_a_listener(method, problem):
    options = dict(top=3, method=method, architectures=True, table_time=None, split_mixes=1)
    alone = solve(problem, **options)
    events, heard = recorded_solve(problem, **options)
    assert json.dumps(without_times(heard.to_dict())) == json.dumps(without_times(alone.to_dict()))
    check_consistent(events, heard)


def test_pushes_are_throttled_and_the_last_always_goes():
    now = [0.0]
    pushed: list[ProgressEvent] = []
    tracker = Progress(pushed.append, interval=0.1, clock=lambda: now[0])
    for step in range(1000):  # one report per millisecond for a second
        now[0] = step / 1000
        tracker.priced(1)
        tracker.found(float(step))
    tracker.settle(999.0, 1000.0, 0.001)
    tracker.finish()
    assert 10 <= len(pushed) <= 13
    times = [e.seconds for e in pushed[:-2]]
    assert all(b - a >= 0.1 - 1e-12 for a, b in zip(times, times[1:], strict=False))
    # pulled at any time, the state is up to date even between pushes
    assert tracker.latest().candidates_priced == 1000
    assert pushed[-1].final and pushed[-1].best_profit == 999.0


def test_reports_without_a_listener_do_nothing():
    assert not progress_module.listening()
    progress_module.stage("anything")
    progress_module.found([1.0, 2.0])
    progress_module.priced(5)
    tracker = Progress()
    with reporting(tracker):
        assert progress_module.listening()
        progress_module.priced(5)
    progress_module.priced(7)  # after the block: nobody listens any more
    assert tracker.latest().candidates_priced == 5


def test_terminal_view_shows_the_stage_and_is_erased():
    problem = synthetic_problem(6, chiplet_favoured=True)
    out = StringIO()
    console = Console(force_terminal=True, file=out, width=100)
    with live_progress(console, currency="USD") as reporter:
        assert reporter is not None
        solution = solve(problem, top=1, method="milp")
    shown = out.getvalue()
    # the last look before the view is erased: the solve's final state
    assert "checking the answer" in shown
    assert "candidate dies priced" in shown
    assert f"{solution.best.profit:,.0f} USD" in shown
    # transient: the view ends by erasing its five lines, moving up over each
    assert shown.endswith("\r" + "\x1b[1A\x1b[2K" * 5)


@pytest.mark.parametrize(
    "console, enabled",
    [(Console(file=StringIO()), True), (Console(force_terminal=True, file=StringIO()), False)],
    ids=["not a terminal", "disabled"],
)
def test_no_view_off_a_terminal_or_when_disabled(console, enabled, capsys):
    with live_progress(console, enabled=enabled) as reporter:
        assert reporter is None
        assert not progress_module.listening()
        solve(synthetic_problem(4), top=1)
    assert console.file.getvalue() == ""
    assert capsys.readouterr() == ("", "")


@contextmanager
def no_view(console, enabled=True, currency="", objective="profit"):
    """The command without the feature."""
    yield None


def run(args: list[str], env: dict) -> tuple[str, str]:
    result = CliRunner().invoke(app, args, env=env)
    assert result.exit_code == 0, result.output
    return result.stdout, result.stderr


def times_out(text: str) -> str:
    """Command output without its wall-clock figures."""
    return re.sub(r"\d+(\.\d+)? s\b", "<t> s", text)


@pytest.mark.parametrize("terminal", [False, True], ids=["piped", "terminal"])
def test_json_output_unchanged(write_problem, monkeypatch, terminal):
    args = ["solve", str(write_problem()), "--no-write", "--json"]
    env = {**PLAIN_ENV, "TTY_COMPATIBLE": "1" if terminal else None}
    with_view, errors = run(args, env)
    assert errors == ""
    monkeypatch.setattr(optimizer.live, "live_progress", no_view)
    plain, _ = run(args, env)
    assert without_times(json.loads(with_view)) == without_times(json.loads(plain))


def test_piped_output_unchanged(write_problem, monkeypatch):
    args = ["solve", str(write_problem()), "--no-write"]
    with_view, errors = run(args, PLAIN_ENV)
    assert errors == ""
    for text in ("candidate dies priced", "proven profit bound", "checking the answer"):
        assert text not in with_view
    monkeypatch.setattr(optimizer.live, "live_progress", no_view)
    plain, _ = run(args, PLAIN_ENV)
    assert times_out(with_view) == times_out(plain)


def test_solve_command_on_a_terminal_shows_progress_then_the_result(write_problem):
    stdout, errors = run(
        ["solve", str(write_problem()), "--no-write"], {**PLAIN_ENV, "TTY_COMPATIBLE": "1"}
    )
    assert errors == ""
    assert "candidate dies priced" in stdout
    # the result comes after the view, which is gone by then
    assert stdout.index("candidate dies priced") < stdout.index("Most profitable design")
