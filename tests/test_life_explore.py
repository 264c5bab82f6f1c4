"""The exploration commands on a file with a [life] plan: NPV as the objective.

Outside truths: direct calls of the life solver (:func:`optimizer.solver.life.solve_life`)
on plans edited by hand, and the file's explicit [[design]] entries priced over a plan by
:func:`optimizer.life_value.design_life_value` (the evaluator, period by period), which
shares no code with the held designs of the exploration. Invented numbers only.
"""

from __future__ import annotations

import copy
import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.explore.fixed import design_kind
from optimizer.explore.parallel import Runner
from optimizer.explore.paths import load_study
from optimizer.explore.uncertainty import run_uncertainty
from optimizer.life import life_plan
from optimizer.life_value import design_life_value
from optimizer.solver.life import solve_life

RTOL = 1e-9
runner = CliRunner()

# One block on two processes (two candidate designs): "old" is cheap to start and dear
# per unit, "new" dear to start and young, its defect density learning from 0.6 towards
# 0.1 /cm^2. Fast learning favours "new", slow learning "old": the optimum changes with
# the time constant. The [[design]] entries are the two designs, to price them apart.
LIFE = """
title = "young process against an old one, over a life (invented numbers)"

[market]
unit_price = 300.0
volume = 1e6

[[process]]
name = "old"
wafer_diameter = "300 mm"
wafer_cost = 5000.0
defect_density = "0.1 /cm^2"
yield_model = "poisson"
mask_set_cost = 1.0e6
area_scale = { logic = 2.5 }

[[process]]
name = "new"
wafer_diameter = "300 mm"
wafer_cost = 9000.0
defect_density = "0.6 /cm^2"
yield_model = "poisson"
mask_set_cost = 2.0e7

[[packaging]]
name = "plain"
kind = "single_die"
package_cost = 8.0

[design_cost]
per_die_design = 3.0e6

[[block]]
name = "core"
area = "100 mm^2"

[[design]]
name = "on_old"
packaging = "plain"
[[design.die]]
process = "old"
blocks = { core = 1 }

[[design]]
name = "on_new"
packaging = "plain"
[[design.die]]
process = "new"
blocks = { core = 1 }

[life]
period = "year"
volumes = [1000000, 2000000, 2000000]
discount_rate = 0.1

[life.market]
unit_price = { form = "erosion", per_year = 0.05 }

[life.process.new]
defect_density = { form = "learn_by_time", mature = "0.1 /cm^2", time_constant = "1 year" }
"""

UNCERTAIN = """
[[uncertain]]
path = "life.discount_rate"
distribution = "uniform"
low = 0.05
high = 0.15

[[uncertain]]
path = "life.process.new.defect_density.time_constant"
distribution = "triangular"
low = "6 month"
mode = "1 year"
high = "2 year"
"""


def _write(tmp_path: Path, text: str, name: str = "life.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _plan(text: str, **life: object):
    """The plan of ``text`` with [life] keys or curve parameters changed by hand."""
    data = tomllib.loads(text)
    data.pop("uncertain", None)
    data = copy.deepcopy(data)
    for key, value in life.items():
        if key == "time_constant":
            data["life"]["process"]["new"]["defect_density"]["time_constant"] = value
        else:
            data["life"][key] = value
    return life_plan(data, "direct")


def _invoke(*args: str):
    out = runner.invoke(app, [str(a) for a in args])
    assert out.exit_code == 0, out.output
    return json.loads(out.stdout)


def test_discount_rate_sweep_equals_direct_life_solves(tmp_path):
    path = _write(tmp_path, LIFE)
    payload = _invoke(
        "sweep", path, "--vary", "life.discount_rate", "0", "0.2", "--steps", "3",
        "--workers", "1", "--json", "--no-write",
    )  # fmt: skip
    assert payload["options"]["objective"] == "net present value"
    assert [p["life.discount_rate"] for p in payload["points"]] == [0.0, 0.1, 0.2]
    for point in payload["points"]:
        assert "profit" not in point  # the objective's column is named for it
        direct = solve_life(_plan(LIFE, discount_rate=point["life.discount_rate"]))
        assert point["npv"] == pytest.approx(direct.best.npv, rel=RTOL)
        assert point["design_kind"] == design_kind(direct.best.periods[0].result)
        assert point["proven_optimal"] is True and point["gap"] == 0.0
        assert point["payback"] == direct.best.payback
    # discounting less raises every cash flow's weight: the NPV falls with the rate
    npvs = [p["npv"] for p in payload["points"]]
    assert npvs[0] > npvs[1] > npvs[2]


def test_time_constant_sweep_reports_where_the_optimum_changes_design(tmp_path):
    path = _write(tmp_path, LIFE)
    payload = _invoke(
        "sweep", path, "--vary", "life.process.new.defect_density.time_constant",
        "6 month", "10 year", "--steps", "5", "--log", "--workers", "1", "--json", "--no-write",
    )  # fmt: skip
    kinds = [p["design_kind"] for p in payload["points"]]
    assert kinds[0] == "plain, 1 die: 1x new" and kinds[-1] == "plain, 1 die: 1x old"
    (crossing,) = payload["crossovers"]
    assert crossing["method"] == "brent"
    assert crossing["kind_before"] == kinds[0] and crossing["kind_after"] == kinds[-1]
    tau = crossing["crossing"]
    assert crossing["grid_low"] < tau < crossing["grid_high"]
    # at the crossing both designs, priced from the file's [[design]] entries, earn the
    # same NPV; just before it the life solver picks the young process, just after the old
    plan = _plan(LIFE, time_constant=f"{tau!r} year")
    on_new = design_life_value(plan, "on_new").npv
    on_old = design_life_value(plan, "on_old").npv
    assert on_new == pytest.approx(on_old, rel=1e-9)
    assert crossing["npv_at_crossing"] == pytest.approx(on_old, rel=1e-9)
    before = solve_life(_plan(LIFE, time_constant=f"{0.99 * tau!r} year")).best
    after = solve_life(_plan(LIFE, time_constant=f"{1.01 * tau!r} year")).best
    assert before.periods[0].result.dies[0].process == "new"
    assert after.periods[0].result.dies[0].process == "old"


def test_compare_two_life_files(tmp_path):
    fast = _write(tmp_path, LIFE.replace('"1 year"', '"6 month"'), "fast.toml")
    slow = _write(tmp_path, LIFE.replace('"1 year"', '"10 year"'), "slow.toml")
    payload = _invoke("compare", fast, slow, "--json", "--no-write")
    rows = {row["option"]: row for row in payload["comparison"]}
    assert list(rows) == ["fast.toml", "slow.toml"]  # most NPV first
    for name, tau in (("fast.toml", "6 month"), ("slow.toml", "10 year")):
        best = solve_life(_plan(LIFE, time_constant=tau)).best
        row = rows[name]
        assert row["npv"] == pytest.approx(best.npv, rel=RTOL)
        assert row["design_kind"] == design_kind(best.periods[0].result)
        # cost per good unit over the life's units: each period's manufacturing cost
        # weighted by its volume, plus the one-time costs over the life's volume
        volume = sum(p.volume for p in best.periods)
        made = sum(p.volume * p.result.manufacturing_cost_per_good_unit for p in best.periods)
        assert row["cost_per_good_unit"] == pytest.approx((made + best.one_time) / volume, rel=RTOL)
        assert row["proven_optimal"] is True
    assert rows["slow.toml"]["npv_vs_best"] == pytest.approx(
        rows["slow.toml"]["npv"] - rows["fast.toml"]["npv"], rel=RTOL
    )
    assert rows["fast.toml"]["design_kind"] != rows["slow.toml"]["design_kind"]


def test_sensitivity_agrees_with_direct_solves(tmp_path):
    path = _write(tmp_path, LIFE + UNCERTAIN)
    payload = _invoke(
        "sensitivity", path, "--range", "life.market.unit_price.per_year=0:0.1",
        "--json", "--no-write",
    )  # fmt: skip
    base = solve_life(_plan(LIFE)).best
    assert payload["winner"]["npv"] == pytest.approx(base.npv, rel=RTOL)
    assert payload["winner"]["proven_optimal"] is True
    rows = {row["input"]: row for row in payload["sensitivity"]}
    assert set(rows) == {
        "life.discount_rate",
        "life.process.new.defect_density.time_constant",
        "life.market.unit_price.per_year",
    }
    tau = rows["life.process.new.defect_density.time_constant"]
    assert (tau["unit"], tau["low"], tau["high"], tau["base_value"]) == ("year", 0.5, 2.0, 1.0)
    # the life optimum stays the same design over these ranges, so holding it fixed
    # gives exactly what a fresh life solve at each end gives
    edits = {
        "life.discount_rate": lambda v: {"discount_rate": v},
        "life.process.new.defect_density.time_constant": lambda v: {"time_constant": f"{v!r} year"},
    }
    for name, edit in edits.items():
        for end in ("low", "high"):
            direct = solve_life(_plan(LIFE, **edit(rows[name][end]))).best
            assert direct.periods[0].result.dies[0].process == "new"
            assert rows[name][f"npv_{end}"] == pytest.approx(direct.npv, rel=RTOL)
            assert rows[name][f"change_{end}"] == pytest.approx(direct.npv - base.npv, rel=1e-6)


def test_uncertainty_agrees_with_direct_pricing(tmp_path):
    path = _write(tmp_path, LIFE + UNCERTAIN)
    result = run_uncertainty(load_study(path), samples=6, seed=3, runner=Runner(workers=1))
    assert result.labels == ("life optimum", "best on Y1's numbers")
    names = ["on_new", "on_old"]  # the [[design]] entries of the two held designs
    assert [d.kind for d in result.designs] == ["plain, 1 die: 1x new", "plain, 1 die: 1x old"]
    for i, (rate, tau) in enumerate(result.samples):
        plan = _plan(LIFE, discount_rate=float(rate), time_constant=f"{float(tau)!r} year")
        for k, name in enumerate(names):
            direct = design_life_value(plan, name).npv
            assert result.profit[i, k] == pytest.approx(direct, rel=RTOL)
    assert result.summary["p50"].tolist() == pytest.approx(
        np.percentile(result.profit, 50, axis=0).tolist(), rel=RTOL
    )
    # the command prints the same summary, its objective named
    payload = _invoke(
        "uncertainty", path, "--samples", "6", "--seed", "3", "--workers", "1", "--json",
        "--no-write",
    )  # fmt: skip
    rows = payload["summary"]
    assert [r["label"] for r in rows] == list(result.labels)
    assert rows[0]["npv_at_file_values"] == pytest.approx(solve_life(_plan(LIFE)).best.npv)
    assert [r["p50"] for r in rows] == pytest.approx(result.summary["p50"].tolist(), rel=RTOL)


def test_sweep_writes_a_run_folder_named_for_npv(tmp_path):
    path = _write(tmp_path, LIFE)
    results = tmp_path / "results"
    out = runner.invoke(
        app,
        [
            "sweep", str(path), "--vary", "life.discount_rate", "0.05", "0.15", "--steps", "2",
            "--workers", "1", "--results", str(results),
        ],
    )  # fmt: skip
    assert out.exit_code == 0, out.output
    (folder,) = [p for p in results.iterdir() if not p.name.startswith(".")]
    names = {p.name for p in folder.iterdir()}
    assert {"points.csv", "crossovers.csv", "designs.json", "npv.png", "npv.svg"} <= names
    header = (folder / "points.csv").read_text().splitlines()[0].split(",")
    assert "npv" in header and "profit" not in header
    assert "net present value" in (folder / "npv.svg").read_text()


@pytest.mark.parametrize(
    ("args", "line"),
    [
        (
            ["sweep", "--vary", "life.volume", "1", "2"],
            "dieplan: --vary: life.volume: 'volume' is not a number of [life]; use one of",
        ),
        (
            ["sweep", "--vary", "life.period", "1", "2"],
            "dieplan: --vary: life.period: 'period' is text ('year' or 'quarter'), not a number",
        ),
        (
            ["sweep", "--vary", "life.process.new.defect_density.per_year", "0", "0.1"],
            "dieplan: --vary: life.process.new.defect_density.per_year: "
            "life.process.new.defect_density is a 'learn_by_time' curve, which takes mature, "
            "time_constant; vary one of those",
        ),
        (
            ["sweep", "--vary", "life.process.old.wafer_cost.values.0", "1", "2"],
            "dieplan: --vary: life.process.old.wafer_cost.values.0: the file has no "
            "[life.process.old] table",
        ),
        (
            ["sweep", "--vary", "market.volume", "1e5", "1e6"],
            "dieplan: --vary: market.volume: a life plan takes each period's volume from "
            "life.volumes",
        ),
        (
            ["sweep", "--vary", "life.discount_rate", "0.1", "1.5"],
            "dieplan: --vary: life.discount_rate: 1.5 makes the problem invalid "
            "(life.discount_rate:",
        ),
        (
            ["sensitivity", "--range", "life.process.new.defect_density=0:1"],
            "dieplan: --range: life.process.new.defect_density: "
            "life.process.new.defect_density is a curve, not one number",
        ),
        (
            ["uncertainty", "--top", "2"],
            "dieplan: --top: 2: does not apply to the life plan in",
        ),
    ],
)
def test_bad_life_paths_are_one_line(tmp_path, args, line):
    path = _write(tmp_path, LIFE)
    command, *rest = args
    results = tmp_path / "r"
    out = runner.invoke(app, [command, str(path), *rest, "--results", str(results)])
    assert out.exit_code == 2, out.output
    assert out.stderr.startswith(line), out.stderr
    assert out.stderr.count("\n") == 1 and "Traceback" not in out.output
    assert not results.exists() or not any(results.iterdir())


def test_uncertain_entry_on_a_bad_life_path_names_the_file_and_entry(tmp_path):
    bad = UNCERTAIN.replace("life.discount_rate", "life.process.new.wafer_cost.per_year")
    path = _write(tmp_path, LIFE + bad)
    out = runner.invoke(app, ["uncertainty", str(path), "--no-write"])
    assert out.exit_code == 2, out.output
    assert out.stderr.startswith(
        f"dieplan: {path}: uncertain[0].path: the file's [life.process.new] has no wafer_cost "
        "curve; add one before varying it"
    ), out.stderr
    assert out.stderr.count("\n") == 1
