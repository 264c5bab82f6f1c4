"""Exploration commands on product families: sweep, sensitivity, uncertainty, compare.

Outside truths used here, none read off the code under test:

* a sweep's family profit at a grid point is what ``solve_family`` gives on the family
  file edited by hand at that value;
* a family design held fixed earns, as one product's volume v moves, a family profit
  affine in v with slope (unit price - manufacturing cost per good unit of that
  product's design) (no salvage bins: revenue is price x volume, costs per unit fixed),
  so two designs' crossover and a volume draw's profit follow by arithmetic;
* a unit-price change of p on a product of volume V moves a held design's family profit
  by p x V exactly;
* two family files that differ only in the mask-set cost of their one process, solved to
  the same family design with one die design, differ in family profit by that
  difference once (the die's mask set is paid once by the family);
* Monte Carlo draws are numpy's default_rng(seed) streams.

The family below is invented (numbers made up for tests): 'small' (2 cores, 1 hub) and
'large' (4 cores, 2 hubs) on one process. At low 'large' volume the family shares one
2-core die (once in 'small', twice in 'large'); at high volume 'large' gets its own
one-die design, because the multi-die package costs more per unit.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.designs import DieSpec, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.explore.family import (
    family_ranges,
    make_family_axis,
    make_family_range,
    run_family_sensitivity,
    run_family_sweep,
    run_family_uncertainty,
)
from optimizer.explore.family_paths import (
    apply_family_values,
    family_study_from_data,
    parse_family_path,
    read_family_value,
)
from optimizer.explore.parallel import Runner
from optimizer.family import parse_family
from optimizer.solver.family import family_profit, solve_family

RTOL = 1e-9
runner = CliRunner()

FAMILY = """
title = "two-product explore test line (invented numbers)"

[constraints]
min_die_area = "5 mm^2"
max_die_area = "600 mm^2"
max_dies = 4

[[process]]
name = "node_a"
wafer_diameter = "300 mm"
wafer_cost = 9000.0
defect_density = "0.03 /cm^2"
yield_model = "negative_binomial"
clustering_alpha = 2.0
mask_set_cost = 10.0e6

[[packaging]]
name = "mono"
kind = "single_die"
package_cost = 10.0
final_test_cost = 5.0

[[packaging]]
name = "tiles"
kind = "organic_substrate"
max_dies = 4
bond_cost_per_die = 1.0
bond_yield = 0.999
carrier_cost = 20.0
interface_density = "200 GB/s/mm^2"
package_cost = 10.0
final_test_cost = 5.0

[design_cost]
per_die_design = 5.0e6

[[block]]
name = "core"
kind = "logic"
area = "60 mm^2"
count = 4

[[block]]
name = "hub"
kind = "io"
area = "30 mm^2"
count = 2

[[product]]
name = "small"
blocks = { core = 2, hub = 1 }
[product.market]
unit_price = 400.0
volume = 150000

[[product]]
name = "large"
blocks = { core = 4, hub = 2 }
[product.market]
unit_price = 900.0
volume = 150000
"""

VOLUME_UNCERTAIN = """
[[uncertain]]
path = "product.small.market.volume"
distribution = "lognormal"
median = 150000
sigma_log = 0.4
"""

DENSITY_UNCERTAIN = """
[[uncertain]]
path = "process.node_a.defect_density"
distribution = "uniform"
low = "0.02 /cm^2"
high = "0.06 /cm^2"
"""


def _data(text: str = FAMILY) -> dict:
    return tomllib.loads(text)


def _solve(data: dict):
    return solve_family(parse_family(data, "<hand>"))


def _write(tmp_path: Path, text: str, name: str = "family.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _reprice(data: dict, solution) -> float:
    """Family profit of ``solution``'s designs on the family ``data``, priced die spec by
    die spec through the evaluator and added up by family_profit."""
    family = parse_family(data, "<hand>")
    results = []
    for member, design in zip(family.members, solution.designs, strict=True):
        specs = [
            DieSpec(
                process=d.process,
                blocks=dict(d.blocks),
                spares=dict(d.spares),
                repair=dict(d.repair),
                copies=d.copies,
                name=d.name,
            )
            for d in design.dies
        ]
        evaluator = Evaluator(member.problem)
        results.append(evaluate_specs(evaluator, specs, design.packaging, member.name))
    return family_profit([m.problem for m in family.members], results)[0]


# ---------------------------------------------------------------- paths
def test_family_paths_write_and_read_a_products_numbers():
    study = family_study_from_data(_data(), "<test>")
    volume = parse_family_path("product.large.market.volume")
    cores = parse_family_path("product.small.blocks.core")
    limit = parse_family_path("product.large.max_dies")
    density = parse_family_path("process.node_a.defect_density")
    changed = apply_family_values(
        study.data, [(volume, 2.5e5), (cores, 3), (limit, 2), (density, 0.05)]
    )
    assert changed["product"][1]["market"]["volume"] == 2.5e5
    assert changed["product"][0]["market"]["volume"] == 150000  # the other product kept
    assert changed["product"][0]["blocks"] == {"core": 3, "hub": 1}
    assert changed["product"][1]["max_dies"] == 2
    assert changed["process"][0]["defect_density"] == "0.05 /cm^2"
    assert study.data["product"][1]["market"]["volume"] == 150000  # the original untouched
    assert read_family_value(study, cores) == 2
    assert read_family_value(study, parse_family_path("product.large.blocks.hub")) == 2
    assert read_family_value(study, limit) == 4  # the shared limit applies
    assert read_family_value(study, density) == pytest.approx(0.03)


# ---------------------------------------------------------------- sweep
def test_sweep_of_a_product_volume_equals_direct_family_solves():
    study = family_study_from_data(_data(), "<test>")
    axis = make_family_axis("product.large.market.volume", 1e5, 3e6, 4, log=True)
    result = run_family_sweep(study, [axis], runner=Runner(workers=1))
    grid = np.geomspace(1e5, 3e6, 4)
    points = result.points
    assert np.allclose(points["product.large.market.volume"], grid, rtol=1e-12)
    solutions = {}
    for v, profit in zip(grid, points["profit"], strict=True):
        data = _data()
        data["product"][1]["market"]["volume"] = float(v)
        solutions[v] = _solve(data)
        assert profit == pytest.approx(solutions[v].profit, rel=RTOL)
    # sharing wins at the low end, 'large' on its own die at the high end
    assert list(points["shared_dies"])[0] == 1 and list(points["shared_dies"])[-1] == 0
    assert len(result.crossovers) == 1
    # the two fixed designs' profits are lines in the volume (slope: price - unit
    # manufacturing cost of the large product's design); their crossing by arithmetic
    low, high = solutions[grid[0]], solutions[grid[-1]]
    m1 = 900.0 - low.designs[1].manufacturing_cost_per_good_unit
    m2 = 900.0 - high.designs[1].manufacturing_cost_per_good_unit
    a1, a2 = low.profit - m1 * grid[0], high.profit - m2 * grid[-1]
    expected = (a1 - a2) / (m2 - m1)
    row = result.crossovers.iloc[0]
    assert row["grid_low"] < expected < row["grid_high"]
    assert row["crossing"] == pytest.approx(expected, rel=1e-6)
    assert row["profit_at_crossing"] == pytest.approx(a1 + m1 * expected, rel=1e-6)


def test_sweep_command_writes_family_run_folder(tmp_path):
    problem = _write(tmp_path, FAMILY)
    results = tmp_path / "results"
    out = runner.invoke(
        app,
        [
            "sweep",
            str(problem),
            "--vary",
            "design_cost.per_die_design",
            "1e6",
            "9e6",
            "--steps",
            "3",
            "--workers",
            "1",
            "--results",
            str(results),
        ],
    )
    assert out.exit_code == 0, out.output
    (folder,) = [p for p in results.iterdir() if not p.name.startswith(".")]
    assert {"points.csv", "curves.csv", "designs.json", "profit.png", "problem.toml"} <= {
        p.name for p in folder.iterdir()
    }
    designs = json.loads((folder / "designs.json").read_text())
    assert set(designs["F1"]["products"]) == {"small", "large"}
    # one shared die design: each 1e6 of design cost per die design costs the family 1e6
    import pandas as pd

    profit = pd.read_csv(folder / "points.csv")["profit"].to_numpy()
    assert np.diff(profit) == pytest.approx([-4e6, -4e6], rel=RTOL)


# ---------------------------------------------------------------- sensitivity
def test_sensitivity_rows_equal_family_profit_by_hand():
    data = _data(FAMILY + DENSITY_UNCERTAIN)
    study = family_study_from_data(data, "<test>")
    ranges = family_ranges(study) + [
        make_family_range("product.large.market.unit_price", 800, 1000)
    ]
    result = run_family_sensitivity(study, ranges)
    solution = _solve(_data())
    assert result.base_profit == pytest.approx(solution.profit, rel=RTOL)
    rows = result.table.set_index("input")
    density = rows.loc["process.node_a.defect_density"]
    for end, value in (("low", "0.02 /cm^2"), ("high", "0.06 /cm^2")):
        changed = _data()
        changed["process"][0]["defect_density"] = value
        assert density[f"profit_{end}"] == pytest.approx(_reprice(changed, solution), rel=RTOL)
    price = rows.loc["product.large.market.unit_price"]
    # 100 on the unit price of 150,000 units
    assert price["change_high"] == pytest.approx(100.0 * 150000, rel=RTOL)
    assert price["change_low"] == pytest.approx(-100.0 * 150000, rel=RTOL)
    assert list(result.table["input"])[0] == "product.large.market.unit_price"  # widest


# ---------------------------------------------------------------- uncertainty
def test_uncertainty_is_reproducible_and_follows_the_draws():
    study = family_study_from_data(_data(FAMILY + VOLUME_UNCERTAIN), "<test>")
    first = run_family_uncertainty(study, samples=25, seed=7, runner=Runner(workers=1))
    again = run_family_uncertainty(study, samples=25, seed=7, runner=Runner(workers=1))
    assert np.array_equal(first.profit, again.profit)
    assert np.array_equal(first.samples, again.samples)
    draws = np.random.default_rng(7).lognormal(math.log(150000), 0.4, 25)
    assert np.allclose(first.samples[:, 0], draws, rtol=0, atol=0)
    # the family optimum held fixed: family profit is a line in the small product's volume
    solution = _solve(_data())
    slope = 400.0 - solution.designs[0].manufacturing_cost_per_good_unit
    expected = solution.profit + slope * (draws - 150000)
    assert np.allclose(first.profit[:, 0], expected, rtol=RTOL)
    # rank 2 is the products' own optima taken together, priced as a family
    assert first.labels == ("family optimum", "each product's own optimum")
    summary = first.summary
    assert summary.loc[0, "profit_at_file_values"] == pytest.approx(solution.profit, rel=RTOL)
    assert summary.loc[0, "p50"] == pytest.approx(np.percentile(expected, 50), rel=RTOL)


def test_uncertainty_command_same_seed_same_summary(tmp_path):
    problem = _write(tmp_path, FAMILY + VOLUME_UNCERTAIN + DENSITY_UNCERTAIN)
    args = ["uncertainty", str(problem), "-n", "12", "--seed", "3", "--workers", "1"]
    one = runner.invoke(app, [*args, "--json", "--no-write"])
    two = runner.invoke(app, [*args, "--json", "--no-write"])
    assert one.exit_code == 0, one.output
    assert json.loads(one.stdout)["summary"] == json.loads(two.stdout)["summary"]


# ---------------------------------------------------------------- compare
def test_compare_two_family_files(tmp_path):
    dear = _write(tmp_path, FAMILY, "dear.toml")
    cheap = _write(
        tmp_path, FAMILY.replace("mask_set_cost = 10.0e6", "mask_set_cost = 1.0e6"), "cheap.toml"
    )
    out = runner.invoke(app, ["compare", str(dear), str(cheap), "--json", "--no-write"])
    assert out.exit_code == 0, out.output
    rows = {r["option"]: r for r in json.loads(out.stdout)["comparison"]}
    assert list(rows) == ["cheap.toml", "dear.toml"]  # best family profit first
    for name, path in (("dear.toml", dear), ("cheap.toml", cheap)):
        solution = _solve(tomllib.loads(path.read_text()))
        row = rows[name]
        assert row["profit"] == pytest.approx(solution.profit, rel=RTOL)
        assert row["alone_profit"] == pytest.approx(solution.alone_profit, rel=RTOL)
        assert row["reuse_premium"] == pytest.approx(row["profit"] - row["alone_profit"], rel=RTOL)
        assert (row["library_dies"], row["shared_dies"]) == (1, 1)
    # same family design, one die design: the mask-set difference is paid once
    assert rows["dear.toml"]["design_kind"] == rows["cheap.toml"]["design_kind"]
    assert rows["dear.toml"]["profit_vs_best"] == pytest.approx(-9.0e6, rel=RTOL)


# ---------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    ("args", "line"),
    [
        (
            ["sweep", "{f}", "--vary", "product.medium.market.volume", "1e5", "2e5"],
            "dieplan: --vary: product.medium.market.volume: no product named 'medium'; "
            "use one of ['small', 'large']",
        ),
        (
            ["sweep", "{f}", "--vary", "market.volume", "1e5", "2e5"],
            "dieplan: --vary: market.volume: a family states [market] per product",
        ),
        (
            ["sensitivity", "{f}", "--range", "product.small.colour=1:2"],
            "dieplan: --range: product.small.colour: 'colour' is not a number of a product",
        ),
        (
            ["sensitivity", "{f}", "--range", "product.small.blocks.gpu=1:2"],
            "dieplan: --range: product.small.blocks.gpu: no block named 'gpu'",
        ),
        (
            ["sweep", "{f}", "--vary", "product.small.market.volume", "-5", "2e5"],
            "dieplan: --vary: product.small.market.volume: -5 makes the family invalid",
        ),
        (["uncertainty", "{f}", "--top", "2"], "dieplan: --top: 2: does not apply"),
        (["compare", "{f}", "{plain}"], "dieplan: {plain}: product: is a single-product file"),
    ],
)
def test_bad_family_input_is_one_line(tmp_path, write_problem, args, line):
    from tests.conftest import TINY_PROBLEM

    family = _write(tmp_path, FAMILY + VOLUME_UNCERTAIN)
    plain = write_problem(TINY_PROBLEM)
    results = tmp_path / "results"
    args = [a.format(f=family, plain=plain) for a in args]
    out = runner.invoke(app, [*args, "--results", str(results)])
    assert out.exit_code == 2, out.output
    assert out.stderr.startswith(line.format(plain=plain)), out.stderr
    assert out.stderr.count("\n") == 1 and "Traceback" not in out.output
    assert not results.exists() or not any(results.iterdir())  # nothing written


def test_family_uncertain_entry_with_an_unknown_product(tmp_path):
    text = FAMILY + VOLUME_UNCERTAIN.replace("product.small", "product.tiny")
    problem = _write(tmp_path, text)
    for command in (["check"], ["uncertainty", "--no-write"]):
        out = runner.invoke(app, [command[0], str(problem), *command[1:]])
        assert out.exit_code == 2, out.output
        assert out.stderr == (
            f"dieplan: {problem}: uncertain[0].path: no product named 'tiny'; use one of "
            "['small', 'large']\n"
        )


def test_a_held_target_off_the_solver_levels_is_priced_on_its_curve():
    # both products hold node_a at 0.0123 /cm^2, a density the solver never lists: the
    # family pays the shared die's NRE once and the one-time target cost once, so its
    # profit is the two products' own profits plus one NRE and one target cost
    import dataclasses

    from optimizer.explore.family import FixedFamily, family_total
    from optimizer.explore.fixed import FixedDesign

    curve = (
        'defect_reduction = { form = "log_ratio", floor = "0.005 /cm^2", '
        "one_time_per_log = 1.0e6, per_wafer_per_log = 5.0, levels = 4 }\n"
    )
    data = _data(FAMILY.replace("mask_set_cost = 10.0e6\n", "mask_set_cost = 10.0e6\n" + curve))
    family = parse_family(data, "<test>")
    solution = solve_family(family)
    held = FixedFamily.from_results(solution.names, solution.designs, family)
    designs = tuple(
        FixedDesign(
            d.packaging,
            tuple(dataclasses.replace(s, defect_density_per_cm2=0.0123) for s in d.specs),
            d.kind,
            d.summary,
        )
        for d in held.designs
    )
    results = dataclasses.replace(held, designs=designs).results(family, "<test>")
    one_time = 1.0e6 * math.log(0.03 / 0.0123)
    assert results[0].improvement_spend == pytest.approx(one_time, rel=RTOL)
    nre = {d.nre for r in results for d in r.dies}
    assert len(nre) == 1 and held.library_dies == 1
    expected = sum(r.profit for r in results) + nre.pop() + one_time
    problems = [m.problem for m in family.members]
    assert family_total(problems, results) == pytest.approx(expected, rel=RTOL)
