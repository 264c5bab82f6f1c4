"""A fixed design priced over a life plan (invented data: the server demo file).

References: the annuity factor (1 - (1 + r)^-n) / r for equal end-of-period cash flows
(common practice), and the evaluator's own price of the design at one period's volume.
"""

from __future__ import annotations

import copy
import json
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.designs import evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.life import life_plan
from optimizer.life_value import design_life_value
from optimizer.problem import parse_problem

DEMO = Path(__file__).resolve().parent.parent / "problems" / "server_processor.toml"
runner = CliRunner()


def _data(life: dict) -> dict:
    data = tomllib.loads(DEMO.read_text())
    data = copy.deepcopy(data)
    data["life"] = life
    return data


def _alone(data: dict, volume: float, design: str):
    """The design priced by the evaluator on the file without [life], at ``volume``."""
    plain = {k: v for k, v in data.items() if k != "life"}
    plain["market"] = dict(plain["market"], volume=volume)
    problem = parse_problem(plain)
    return evaluate_design(Evaluator(problem), problem.design_named(design))


def test_unchanging_life_is_an_annuity_of_one_period():
    # four equal years at 8%: NPV = c (1 - 1.08^-4) / 0.08 - one-time costs, with c the
    # operating profit of one year priced by the evaluator at that year's volume
    data = _data({"period": "year", "volumes": [250000] * 4, "discount_rate": 0.08})
    for b in data["market"].get("salvage_bin", []):
        b["demand"] *= 4  # the life's salvage demand, shared by volume: a quarter a year
    value = design_life_value(life_plan(data), "monolithic")
    year = copy.deepcopy(data)
    for b in year["market"].get("salvage_bin", []):
        b["demand"] /= 4
    one = _alone(year, 250000, "monolithic")
    c = one.profit + one.nre + one.improvement_spend
    annuity = (1 - 1.08**-4) / 0.08
    assert value.npv == pytest.approx(c * annuity - (one.nre + one.improvement_spend), rel=1e-12)
    assert value.periods[-1].cumulative == pytest.approx(value.npv, rel=1e-12)


def test_one_period_life_at_zero_rate_is_the_profit():
    data = _data({"period": "year", "volumes": [1_000_000], "discount_rate": 0.0})
    value = design_life_value(life_plan(data), "two_halves")
    one = _alone(data, 1_000_000, "two_halves")
    assert value.npv == pytest.approx(one.profit, rel=1e-12)
    assert value.payback == ("Y1" if one.profit >= 0 else None)


def test_learning_lifts_yield_and_payback_follows_the_cumulative_value():
    data = _data(
        {
            "period": "quarter",
            "volumes": [20000, 60000, 90000, 90000, 70000, 40000],
            "discount_rate": 0.09,
            "process": {
                "leading": {
                    "defect_density": {
                        "form": "learn_by_time",
                        "mature": "0.10 /cm^2",
                        "time_constant": "6 month",
                    }
                }
            },
        }
    )
    value = design_life_value(life_plan(data), "monolithic")
    yields = [p.result.dies[0].die_yield for p in value.periods]
    assert yields == sorted(yields) and yields[-1] > yields[0]
    # payback: the first period whose cumulative value is not negative
    first = next((p.label for p in value.periods if p.cumulative >= 0), None)
    assert value.payback == first


def test_command_line_evaluates_over_the_life_and_says_what_else_to_use(tmp_path):
    data = _data({"period": "year", "volumes": [300000, 400000, 300000], "discount_rate": 0.1})
    text = DEMO.read_text() + (
        '\n[life]\nperiod = "year"\nvolumes = [300000, 400000, 300000]\ndiscount_rate = 0.1\n'
    )
    path = tmp_path / "life.toml"
    path.write_text(text)
    out = runner.invoke(app, ["evaluate", str(path), "--json", "--design", "monolithic"])
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    direct = design_life_value(life_plan(data), "monolithic")
    assert payload["life"][0]["npv"] == pytest.approx(direct.npv, rel=1e-12)
    assert [p["period"] for p in payload["life"][0]["periods"]] == ["Y1", "Y2", "Y3"]
    out = runner.invoke(app, ["profit-curve", str(path), "--results", str(tmp_path / "r")])
    assert out.exit_code == 2
    assert "Traceback" not in out.output and "dieplan evaluate" in out.stderr
    assert not (tmp_path / "r").exists() or not any((tmp_path / "r").iterdir())
    out = runner.invoke(app, ["check", str(path)])
    assert out.exit_code == 0 and "life plan: 3 years" in out.stdout


def test_exploration_commands_take_a_life_plan_and_refuse_what_does_not_apply(tmp_path):
    # the exploration commands explore a life's NPV (tests/test_life_explore.py); a path
    # to a text field of the plan, or --top, is one line before any solve, nothing written
    path = tmp_path / "life.toml"
    path.write_text(
        DEMO.read_text() + '\n[life]\nperiod = "year"\nvolumes = [1000000]\ndiscount_rate = 0\n'
    )
    for command in (
        ["sensitivity", str(path), "--range", "life.period=1:2"],
        ["uncertainty", str(path), "--top", "2"],
    ):
        out = runner.invoke(app, [*command, "--results", str(tmp_path / "r")])
        assert out.exit_code == 2, out.output
        assert out.stderr.count("\n") == 1 and "life" in out.stderr
        assert "Traceback" not in out.output
        assert not (tmp_path / "r").exists()
