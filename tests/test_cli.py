"""The command line as a user meets it: evaluate, check, JSON output, version."""

from __future__ import annotations

import json

from typer.testing import CliRunner

from optimizer import __version__
from optimizer.cli import app

runner = CliRunner()


def test_evaluate_json_has_the_documented_fields(write_problem, tiny_text):
    path = write_problem(tiny_text)
    result = runner.invoke(app, ["evaluate", str(path), "--design", "split", "--json"])
    assert result.exit_code == 0, result.output
    payload = json.loads(result.stdout)
    for key in ("design", "cost_per_good_unit", "profit", "package_yield", "dies"):
        assert key in payload
    assert payload["design"] == "split"
    for die in payload["dies"]:
        for key in (
            "area_mm2",
            "gross_dies_per_wafer",
            "die_yield",
            "cost_per_passed_die",
            "copies",
        ):
            assert key in die
    assert [d["copies"] for d in payload["dies"]] == [2, 1]
    # profit = price x volume - volume x cost per good unit (which includes the NRE share)
    assert abs(payload["profit"] - 1e5 * (500.0 - payload["cost_per_good_unit"])) < 1e-6 * 5e7


def test_evaluate_prints_breakdown_and_caution(write_problem, tiny_text):
    result = runner.invoke(app, ["evaluate", str(write_problem(tiny_text))])
    assert result.exit_code == 0, result.output
    for words in ("Cost per good unit", "yield loss", "profit", "Designs by profit", "foundry"):
        assert words in result.stdout


def test_check_reports_base_units(write_problem, tiny_text):
    edited = tiny_text.replace('scribe_width = "100 um"', 'scribe_width = "0.1 mm"', 1)
    result = runner.invoke(app, ["check", str(write_problem(edited))])
    assert result.exit_code == 0, result.output
    assert "is valid" in result.stdout
    assert "0.1" in result.stdout  # 100 um shown as 0.1 mm


def test_unknown_design_name_exit_2(write_problem, tiny_text):
    result = runner.invoke(app, ["evaluate", str(write_problem(tiny_text)), "--design", "nope"])
    assert result.exit_code == 2
    assert "no design named 'nope'" in result.stderr


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0 and __version__ in result.stdout
