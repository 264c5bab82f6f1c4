"""The command line as a user meets it: evaluate, check, JSON output, version."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer import __version__
from optimizer.cli import app

runner = CliRunner()


def test_evaluate_json_has_the_documented_fields(write_problem, tiny_text):
    path = write_problem(tiny_text)
    result = runner.invoke(app, ["evaluate", str(path), "--design", "split", "--json"])
    assert result.exit_code == 0, result.output
    whole = json.loads(result.stdout)
    # one shape whatever the number of designs: {"problem", "designs": [...]}
    assert set(whole) == {"problem", "designs"} and len(whole["designs"]) == 1
    payload = whole["designs"][0]
    for key in ("design", "cost_per_good_unit", "profit", "package_yield", "dies", "violations"):
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


# ---------------------------------------------------------------- rule-breaking designs
# Outside truth by hand for the fixture: 'mono' is one die of 2 x 150 + 40 = 340 mm^2 on
# 'fast' (negative binomial, D = 0.1 /cm^2, alpha = 2): yield (1 + 3.4 x 0.1 / 2)^-2 =
# 0.7305, defect level 1 - 0.7305^(1 - 0.99) = 3136 ppm. 'split' has 3 dies: 2 x 'cpu'
# (one compute block, 151.5 mm^2 with its interface) and 'hub' (io, 44.5 mm^2). Unmarked,
# 'mono' is the more profitable of the two.
RULE_CASES = [
    (
        "keep_apart",
        [
            (
                'max_die_area = "800 mm^2"\n',
                'max_die_area = "800 mm^2"\nkeep_apart = [["compute", "io"]]\n',
            )
        ],
        "mono",
        "constraints.keep_apart",
    ),
    (
        "keep_together",
        [
            (
                'max_die_area = "800 mm^2"\n',
                'max_die_area = "800 mm^2"\nkeep_together = [["compute", "io"]]\n',
            )
        ],
        "split",
        "constraints.keep_together",
    ),
    ("max_die_area", [('"800 mm^2"', '"300 mm^2"')], "mono", "constraints.max_die_area"),
    (
        "min_die_area",
        [('max_die_area = "800 mm^2"\n', 'max_die_area = "800 mm^2"\nmin_die_area = "100 mm^2"\n')],
        "split",
        "constraints.min_die_area",
    ),
    ("max_dies", [("max_dies = 4", "max_dies = 2")], "split", "constraints.max_dies: 3 dies"),
    (
        "min_die_yield",
        [],
        "mono",
        "requirements.min_die_yield: die 'die1' yields 73.05%, below 80.00%",
    ),
    (
        "max_defect_level",
        [],
        "mono",
        "requirements.max_defect_level: die 'die1' has defect level 3.14e+03 ppm",
    ),
]
REQUIREMENTS = {
    "min_die_yield": "\n[requirements]\nmin_die_yield = 0.8\n",
    "max_defect_level": "\n[requirements]\nmax_defect_level = 0.002\n",
}


@pytest.mark.parametrize(
    ("case_id", "edits", "breaker", "rule"), RULE_CASES, ids=[c[0] for c in RULE_CASES]
)
def test_evaluate_marks_rule_breakers_and_lists_them_last(
    write_problem, tiny_text, case_id, edits, breaker, rule
):
    text = tiny_text + REQUIREMENTS.get(case_id, "")
    path = write_problem(text, *edits)
    out = runner.invoke(app, ["evaluate", str(path), "--json"])
    assert out.exit_code == 0, out.output
    designs = json.loads(out.stdout)["designs"]
    keeper = "split" if breaker == "mono" else "mono"
    assert [d["design"] for d in designs] == [keeper, breaker]
    assert designs[0]["violations"] == []
    assert any(v.startswith(rule) for v in designs[1]["violations"]), designs[1]["violations"]
    text_out = runner.invoke(app, ["evaluate", str(path)])
    assert text_out.exit_code == 0
    shown = text_out.stdout
    assert "BREAKS RULES" in shown and f"breaks rule: {rule}" in shown.replace("\n", " ")
    overview = shown[shown.index("Designs by profit") :]
    assert overview.index(keeper) < overview.index(breaker)
    # the rule-breaker's own breakdown also comes after the keeper's
    assert shown.index(f"{keeper}  on") < shown.index(f"{breaker}  on")
    check = runner.invoke(app, ["check", str(path)])
    assert check.exit_code == 0 and f"design '{breaker}' breaks rule: {rule}" in check.stdout


def test_evaluate_without_broken_rules_ranks_by_profit(write_problem, tiny_text):
    out = runner.invoke(app, ["evaluate", str(write_problem(tiny_text)), "--json"])
    designs = json.loads(out.stdout)["designs"]
    assert [d["design"] for d in designs] == ["mono", "split"]
    assert designs[0]["profit"] > designs[1]["profit"]
    assert all(d["violations"] == [] for d in designs)
    mono = designs[0]["dies"][0]
    assert mono["area_mm2"] == pytest.approx(340.0)
    assert mono["die_yield"] == pytest.approx((1 + 3.4 * 0.1 / 2) ** -2, rel=1e-9)


# ---------------------------------------------------------------- console markup in names
def test_names_print_literally_not_as_markup(write_problem, tiny_text):
    text = tiny_text.replace('name = "split"', 'name = "[bold red]split[/] :smile:"')
    text = text.replace('name = "cpu"', 'name = "[link=x]cpu"').replace(
        'currency = "USD"', 'currency = "[u]USD"'
    )
    out = runner.invoke(app, ["evaluate", str(write_problem(text))])
    assert out.exit_code == 0, out.output
    for literal in ("[bold red]split[/] :smile:", "[link=x]cpu", "[u]USD"):
        assert literal in out.stdout
    check = runner.invoke(app, ["check", str(write_problem(text))])
    assert check.exit_code == 0 and "[bold red]split[/] :smile:" in check.stdout


# ---------------------------------------------------------------- internal errors, interrupts
def test_broken_invariant_is_one_internal_error_line_exit_3(write_problem, tmp_path, monkeypatch):
    import optimizer.solver
    from optimizer.invariants import InvariantViolation

    def broken(*args, **kwargs):
        raise InvariantViolation("reported design breaks constraints.max_dies\nsecond line")

    monkeypatch.setattr(optimizer.solver, "solve", broken)
    results = tmp_path / "results"
    out = runner.invoke(app, ["solve", str(write_problem()), "--results", str(results)])
    assert out.exit_code == 3
    assert out.stderr == (
        "dieplan: internal error: reported design breaks constraints.max_dies second line; "
        "this is a bug, please report it with the problem file\n"
    )
    assert "Traceback" not in out.output and not results.exists()


def test_interrupt_while_writing_is_one_line_exit_130_nothing_left(
    write_problem, tmp_path, monkeypatch
):
    import optimizer.cli

    def interrupted(source):
        def write(path):
            path.write_text("half")
            raise KeyboardInterrupt

        return write

    monkeypatch.setattr(optimizer.cli, "copy_writer", interrupted)
    results = tmp_path / "results"
    out = runner.invoke(app, ["solve", str(write_problem()), "--results", str(results)])
    assert out.exit_code == 130
    assert out.stderr.startswith("dieplan: interrupted") and out.stderr.count("\n") == 1
    assert list(results.iterdir()) == []  # no run folder, no temporary folder


def test_check_echoes_every_priced_choice_and_rule():
    # Outside truth: the demo file itself; each section it states is echoed back.
    demo = Path(__file__).resolve().parents[1] / "problems" / "server_processor.toml"
    result = CliRunner().invoke(app, ["check", str(demo)])
    assert result.exit_code == 0, result.output
    text = " ".join(result.stdout.split())
    for words in (
        "defect targets on leading: any D in [0.08, 0.22] /cm^2",
        "defect targets on mature: table, D = 0.07, 0.05 /cm^2",
        "design margins on leading (two-sided): 3 sigma",
        "critical-area options: 0: sensitivity x1",
        "salvage bin fourteen_cluster: one-die units with at least 14 good compute_cluster",
        "keep together (same die, same share of each): memory_controller, analog_clocking",
        "uncertain: process.leading.defect_density (lognormal)",
    ):
        assert words in text, words


def test_numbers_read_one_way():
    # One style for money and shares: thousands separated, M and bn, never "-0.00".
    from optimizer.report import money, percent

    assert money(-0.001, "USD") == "0.00 USD"
    assert money(-1234.5) == "-1,234.50"
    assert money(2.5e6, "USD") == "2.50 M USD"
    assert money(-3.25e9) == "-3.250 bn"
    assert percent(-1e-6) == "0.00%" and percent(-0.125) == "-12.50%"
