"""The design with the most net present value over a life plan, proven.

References: today's single-period solve (a one-period life, and an unchanging life
whose NPV is the one-period profit at the volume scaled by the annuity factor
(1 - (1 + r)^-n) / r, common practice); and brute force: every design of the exhaustive
reference priced in every period by the evaluator. Invented data only.
"""

from __future__ import annotations

import copy
import json
import math
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.evaluator import Evaluator
from optimizer.life import life_plan
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve
from optimizer.solver.exhaustive import exhaustive_search
from optimizer.solver.life import LifePricer, _specs, solve_life
from tests.random_problems import random_problem

RTOL = 1e-9
EDGE = Path(__file__).resolve().parent.parent / "problems" / "edge_accelerator.toml"
runner = CliRunner()


def _brute_force_by_architecture(plan) -> dict[tuple[str, int], float]:
    """Every design of the exhaustive reference priced period by period: the most NPV of
    each (packaging, die count)."""
    first = plan.problems[0]
    out = exhaustive_search(Evaluator(first), top=10**7)
    pricer = LifePricer(plan, "test")
    best: dict[tuple[str, int], float] = {}
    for sel, cost in out.priced.items():
        if not math.isfinite(cost):
            continue
        specs = _specs(first, out.candidates[sel.packaging_index], sel)
        packaging = first.packaging[sel.packaging_index].name
        value = pricer.value(specs, packaging, "x")
        if value is not None:
            key = (packaging, sel.n_dies)
            best[key] = max(best.get(key, -math.inf), value.npv)
    return best


def _brute_force(plan) -> float:
    return max(_brute_force_by_architecture(plan).values(), default=-math.inf)


def _with_life(data: dict, **life) -> dict:
    data = copy.deepcopy(data)
    data["life"] = life
    return data


def test_one_period_life_is_todays_solve():
    data = tomllib.loads(EDGE.read_text())
    volume = data["market"]["volume"]
    plan = life_plan(_with_life(data, period="year", volumes=[volume], discount_rate=0.0))
    found = solve_life(plan)
    today = solve(parse_problem(data), top=1, refine=False)
    assert found.proven and today.proven_optimal
    assert found.best.npv == pytest.approx(today.best.profit, rel=RTOL)


def test_unchanging_life_is_todays_solve_at_the_annuity_volume():
    # n equal years at rate r, one-time costs at the start: NPV(d) = A op(d) - one-time,
    # the profit of the same problem at A times the yearly volume (and salvage demand)
    data = tomllib.loads(EDGE.read_text())
    n, r, volume = 5, 0.08, 600_000.0
    life = _with_life(data, period="year", volumes=[volume] * n, discount_rate=r)
    for b in life["market"].get("salvage_bin", []):
        b["demand"] *= n  # the life's demand, a fifth a year
    found = solve_life(life_plan(life))
    annuity = (1 - (1 + r) ** -n) / r
    scaled = copy.deepcopy(data)
    scaled["market"]["volume"] = volume * annuity
    for b in scaled["market"].get("salvage_bin", []):
        b["demand"] *= annuity
    today = solve(parse_problem(scaled), top=1, refine=False)
    assert found.proven
    assert found.best.npv == pytest.approx(today.best.profit, rel=RTOL)


def _random_life(seed: int, period: str = "year") -> dict:
    data = random_problem(seed, budget=3000)
    process = data["process"][0]
    value, unit = process["defect_density"].split()
    volume = data["market"]["volume"]
    n = 3 if period == "year" else 6
    return _with_life(
        data,
        period=period,
        volumes=[
            volume * w for w in ([0.25, 0.5, 0.25] if n == 3 else [0.1, 0.2, 0.2, 0.2, 0.2, 0.1])
        ],
        discount_rate=0.1,
        market={"unit_price": {"form": "erosion", "per_year": 0.1}},
        process={
            process["name"]: {
                "defect_density": {
                    "form": "learn_by_time",
                    "mature": f"{float(value) * 0.5} {unit}",
                    "time_constant": "1 year",
                },
                "wafer_cost": {"form": "erosion", "per_year": 0.05},
            }
        },
    )


@pytest.mark.parametrize("seed", [1, 4, 5, 8, 9, 12, 21, 33])
def test_random_lives_equal_brute_force(seed):
    plan = life_plan(_random_life(seed), f"seed{seed}")
    found = solve_life(plan)
    assert found.proven
    assert found.best.npv == pytest.approx(_brute_force(plan), rel=RTOL, abs=1e-6)


@pytest.mark.parametrize("seed", [3, 11])
def test_life_decision_table_equals_brute_force_per_architecture(seed):
    # every architecture's row: the most NPV among that architecture's designs, or empty
    # exactly when it has none that keeps the rules in every period
    plan = life_plan(_random_life(seed), f"seed{seed}")
    found = solve_life(plan, table=True)
    reference = _brute_force_by_architecture(plan)
    assert found.proven and all(row.proven for row in found.rows)
    assert sum(row.optimum for row in found.rows) == 1
    for row in found.rows:
        key = (row.packaging, row.n_dies)
        if row.value is None:
            assert key not in reference
        else:
            assert row.npv == pytest.approx(reference[key], rel=RTOL, abs=1e-6)
    assert found.rows[0].optimum and found.rows[0].npv == pytest.approx(found.best.npv)


@pytest.mark.parametrize("seed", [1, 5, 9])
def test_targets_bought_per_period_equal_brute_force(seed):
    data = _random_life(seed)
    data["life"]["targets"] = "per_period"
    plan = life_plan(data, f"seed{seed}")
    found = solve_life(plan)
    assert found.proven
    assert found.best.npv == pytest.approx(_brute_force(plan), rel=RTOL, abs=1e-6)


def test_targets_per_period_in_a_one_period_life_at_no_discount_are_todays_solve():
    data = tomllib.loads(EDGE.read_text())
    volume = data["market"]["volume"]
    once = _with_life(data, period="year", volumes=[volume], discount_rate=0.0)
    each = _with_life(
        data, period="year", volumes=[volume], discount_rate=0.0, targets="per_period"
    )
    today = solve(parse_problem(data), top=1, refine=False).best.profit
    assert solve_life(life_plan(once)).best.npv == pytest.approx(today, rel=RTOL)
    assert solve_life(life_plan(each)).best.npv == pytest.approx(today, rel=RTOL)


def test_per_period_targets_follow_the_young_process():
    # on the demo's young process a bought target pays while defects are many; bought
    # per period it is taken early and dropped once the line has learned, and the life
    # is worth at least as much as with one level for the life when targets cost
    # nothing once (their per-wafer adder is paid per wafer either way)
    path = Path(__file__).resolve().parent.parent / "problems" / "edge_accelerator_life.toml"
    data = tomllib.loads(path.read_text())
    for process in data["process"]:
        curve = process.get("defect_reduction")
        if curve and "points" in curve:
            curve["points"] = [[d, 0.0, w] for d, _, w in curve["points"]]
        elif curve:
            curve["one_time_per_log"] = 0.0
    once = solve_life(life_plan(data))
    data["life"]["targets"] = "per_period"
    each = solve_life(life_plan(data))
    assert once.proven and each.proven
    assert each.best.npv >= once.best.npv * (1 - RTOL)


@pytest.mark.parametrize("seed", [2, 6])
def test_random_quarterly_lives_equal_brute_force(seed):
    plan = life_plan(_random_life(seed, "quarter"), f"seed{seed}")
    found = solve_life(plan)
    assert found.proven
    assert found.best.npv == pytest.approx(_brute_force(plan), rel=RTOL, abs=1e-6)


def test_solve_on_a_life_file_writes_its_life(tmp_path):
    text = EDGE.read_text() + (
        '\n[life]\nperiod = "year"\nvolumes = [1000000, 1500000, 500000]\ndiscount_rate = 0.1\n'
    )
    path = tmp_path / "edge_life.toml"
    path.write_text(text)
    out = runner.invoke(app, ["solve", str(path), "--json", "--results", str(tmp_path / "r")])
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    data = tomllib.loads(text)
    direct = solve_life(life_plan(data))
    assert payload["npv"] == pytest.approx(direct.best.npv, rel=RTOL)
    assert payload["proven"] is True
    folder = Path(payload["run_folder"])
    assert {"life.json", "periods.csv", "cumulative_value.png", "cumulative_value.svg"} <= {
        p.name for p in folder.iterdir()
    }
    rows = (folder / "periods.csv").read_text().splitlines()
    assert rows[0].startswith("design,period") and len(rows) >= 4


def test_a_time_limit_gives_the_best_found_or_one_line():
    # under a limit too short for the proof the search reports what it has, unproven,
    # with a bound no lower than its design's value, or says to allow more time
    data = tomllib.loads(EDGE.read_text())
    plan = life_plan(_with_life(data, period="quarter", volumes=[250000] * 8, discount_rate=0.1))
    for limit in (0.0, 0.05, 0.5):
        try:
            found = solve_life(plan, time_limit=limit)
        except ProblemError as exc:
            assert "allow more time" in exc.message
            continue
        assert found.proven or found.npv_bound >= found.best.npv


def test_a_life_no_design_can_keep_says_so_in_one_line():
    # a die-yield mandate that only a mature line could meet: the young first period
    # has no design that keeps it, so no design keeps it over the life
    data = tomllib.loads(EDGE.read_text())
    data["requirements"] = {"min_die_yield": 0.999}
    plan = life_plan(_with_life(data, period="year", volumes=[1e6, 1e6], discount_rate=0.1))
    with pytest.raises(ProblemError) as caught:
        solve_life(plan)
    assert "no design keeps the file's rules in every period" in caught.value.message


def test_a_listened_life_solve_reports_npv_not_period_profits():
    # the live view is told the life's NPV and bound, never a period problem's profit,
    # and the answer is the same with or without a listener
    from optimizer.solver.progress import Progress, reporting

    plan = life_plan(_random_life(5), "seed5")
    events = []
    with reporting(Progress(events.append, interval=0.0)):
        heard = solve_life(plan, table=True)
    quiet = solve_life(plan, table=True)
    assert heard.best.npv == quiet.best.npv
    assert [r.npv for r in heard.rows] == pytest.approx([r.npv for r in quiet.rows], nan_ok=True)
    assert events[-1].final
    assert events[-1].best_profit == pytest.approx(heard.best.npv, rel=RTOL)
    assert events[-1].profit_bound == pytest.approx(heard.npv_bound, rel=RTOL)
    for e in events:
        if e.best_profit is not None:
            assert e.best_profit <= heard.best.npv * (1 + RTOL) + 1e-6
        if e.profit_bound is not None:
            assert e.profit_bound >= heard.best.npv * (1 - RTOL) - 1e-6
    priced = [e.candidates_priced for e in events]
    assert priced == sorted(priced) and priced[-1] > 0
    assert any("bounding period" in e.stage for e in events)


@pytest.mark.parametrize(
    "option",
    [["--top", "2"], ["--method", "milp"], ["--mixes", "2"], ["--require-sigma", "3"]],
)
def test_solve_options_a_life_does_not_take_are_refused_in_one_line(tmp_path, option):
    path = Path(__file__).resolve().parent.parent / "problems" / "edge_accelerator_life.toml"
    out = runner.invoke(app, ["solve", str(path), *option, "--results", str(tmp_path / "r")])
    assert out.exit_code == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and option[0] in lines[0] and "life plan" in lines[0]
    assert not (tmp_path / "r").exists()


def test_the_live_view_of_a_life_names_net_present_value():
    from rich.console import Console

    from optimizer.live import progress_view
    from optimizer.solver.progress import ProgressEvent

    console = Console(record=True, width=100)
    event = ProgressEvent("the life: bounding period Y2 of 4", 10, 1.5e8, 1.6e8, 0.066, 1.0)
    console.print(progress_view(event, "USD", 1.0, objective="net present value"))
    text = console.export_text()
    assert "best net present value found" in text and "150,000,000 USD" in text
