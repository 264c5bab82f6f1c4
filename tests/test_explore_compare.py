"""Compare process option sets and problem files; one-at-a-time sensitivity."""

from __future__ import annotations

import copy
import tomllib

import numpy as np
import pytest

from optimizer.designs import DieSpec, evaluate_specs
from optimizer.evaluator import COST_COMPONENTS, Evaluator
from optimizer.explore.compare import compare, file_options, process_options, restrict_processes
from optimizer.explore.paths import study_from_data
from optimizer.explore.plots import comparison_figure, tornado_figure
from optimizer.explore.sensitivity import make_range, ranges_from_study, run_sensitivity
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve
from tests.conftest import TINY_PROBLEM

INTERPOSER = {
    "name": "bridge",
    "kind": "silicon_interposer",
    "max_dies": 4,
    "bond_cost_per_die": 3.0,
    "carrier_cost": 20.0,
    "package_cost": 10.0,
    "final_test_cost": 6.0,
    "interface_density": "300 GB/s/mm^2",
    "design_cost": 2.0e6,
    "interposer_process": "cheap",
}


def _tiny() -> dict:
    return tomllib.loads(TINY_PROBLEM)


def test_each_process_option_equals_a_hand_restricted_solve():
    # source: independent single solves of problems restricted by hand
    study = study_from_data(_tiny(), "tiny")
    result = compare(process_options(study))
    assert set(result.table["option"]) == {"fast", "cheap", "all processes"}
    for keep in ("fast", "cheap"):
        edited = _tiny()
        edited["process"] = [p for p in edited["process"] if p["name"] == keep]
        del edited["design"]
        best = solve(parse_problem(edited), top=1).best
        row = result.table.set_index("option").loc[keep]
        assert row["profit"] == pytest.approx(best.profit, rel=1e-12)
        assert row["cost_per_good_unit"] == pytest.approx(best.cost_per_good_unit, rel=1e-12)
        assert row["package_yield"] == pytest.approx(best.package_yield, rel=1e-12)
    # the full set is at least as good as any subset (it contains every subset's designs)
    table = result.table.set_index("option")
    assert table.loc["all processes", "profit"] >= table["profit"].max() - 1e-6


def test_component_differences_add_up_to_the_cost_gap():
    # source: identity — the cost components per good unit add up to cost_per_good_unit
    # (optimizer/evaluator.py), so their differences add up to the difference in cost
    result = compare(process_options(study_from_data(_tiny(), "tiny")))
    table = result.table
    best = table.iloc[0]
    assert best["profit"] == table["profit"].max()
    for _, row in table.iterrows():
        costs = sum(row[f"cost_{c}"] for c in COST_COMPONENTS)
        assert costs == pytest.approx(row["cost_per_good_unit"], rel=1e-12)
        diffs = sum(row[f"diff_{c}"] for c in COST_COMPONENTS)
        assert diffs == pytest.approx(
            row["cost_per_good_unit"] - best["cost_per_good_unit"], abs=1e-9
        )
    worst = table.iloc[-1]
    largest = max(COST_COMPONENTS, key=lambda c: abs(worst[f"diff_{c}"]))
    assert largest in worst["differences_explained"]
    assert best["differences_explained"] == "most profitable option"
    assert comparison_figure(result, "USD").axes


def test_packaging_on_a_dropped_interposer_process_is_dropped_and_noted():
    data = _tiny()
    data["packaging"].append(INTERPOSER)
    study = study_from_data(data, "tiny")
    fast_only = restrict_processes(study, ["fast"])
    assert [p.name for p in fast_only.study.problem.packaging] == ["single", "multi"]
    assert any("'bridge' dropped" in note and "'cheap'" in note for note in fast_only.notes)
    kept = restrict_processes(study, ["cheap", "fast"])
    assert [p.name for p in kept.study.problem.packaging] == ["single", "multi", "bridge"]
    with pytest.raises(ProblemError, match="unknown process"):
        restrict_processes(study, ["fast", "slow"])


def test_compare_problem_files_side_by_side():
    # source: independent solves of each file
    pricier = _tiny()
    pricier["market"]["unit_price"] = 650.0
    studies = [study_from_data(_tiny(), "a/tiny.toml"), study_from_data(pricier, "b/tiny.toml")]
    result = compare(file_options(studies))
    assert list(result.table["option"]) == ["tiny.toml (2)", "tiny.toml"]
    for study, label in zip(studies, ["tiny.toml", "tiny.toml (2)"], strict=True):
        best = solve(study.problem, top=1).best
        profit = result.table.set_index("option").loc[label, "profit"]
        assert profit == pytest.approx(best.profit, rel=1e-12)


# ---------------------------------------------------------------- sensitivity
def test_sensitivity_price_is_volume_times_the_price_change():
    # source: hand-derived — profit = price x V - V x cost - NRE, so moving the price by
    # dp moves the fixed design's profit by V dp (tiny has no salvage bins)
    study = study_from_data(_tiny(), "tiny")
    result = run_sensitivity(study, [make_range("market.unit_price", 450, 560)])
    row = result.table.iloc[0]
    assert row["change_low"] == pytest.approx(-50.0 * 1e5, rel=1e-9)
    assert row["change_high"] == pytest.approx(60.0 * 1e5, rel=1e-9)
    assert row["base_value"] == 500.0


def test_sensitivity_reprices_the_same_design_and_ranks_by_swing():
    # source: the winner re-priced by hand with the evaluator on a hand-edited problem
    data = _tiny()
    data["uncertain"] = [
        {
            "path": "process.cheap.defect_density",
            "distribution": "lognormal",
            "median": 0.08,
            "sigma_log": 0.3,
        },
        {
            "path": "process.cheap.wafer_cost",
            "distribution": "uniform",
            "low": 3500.0,
            "high": 4200.0,
        },
    ]
    study = study_from_data(data, "tiny")
    ranges = ranges_from_study(study) + [make_range("block.io.area", "35 mm^2", "45 mm^2")]
    result = run_sensitivity(study, ranges)
    assert list(result.table["swing"]) == sorted(result.table["swing"], reverse=True)
    row = result.table.set_index("input").loc["process.cheap.defect_density"]
    assert row["low"] == pytest.approx(0.08 * np.exp(-0.6))
    edited = copy.deepcopy(_tiny())
    edited["process"][1]["defect_density"] = f"{float(row['low'])!r} /cm^2"
    problem = parse_problem(edited)
    specs = [
        DieSpec(
            process=d.process,
            blocks=d.blocks,
            spares=d.spares,
            repair=d.repair,
            copies=d.copies,
            name=d.name,
        )
        for d in result.winner.dies
    ]
    by_hand = evaluate_specs(Evaluator(problem), specs, result.winner.packaging)
    assert row["profit_low"] == pytest.approx(by_hand.profit, rel=1e-12)
    assert tornado_figure(result, "USD").axes


def test_sensitivity_errors():
    study = study_from_data(_tiny(), "tiny")
    with pytest.raises(ProblemError, match="no input ranges"):
        run_sensitivity(study, [])
    twice = [make_range("market.volume", 1e4, 1e5), make_range("market.volume", 1e3, 1e6)]
    with pytest.raises(ProblemError, match="already given"):
        run_sensitivity(study, twice)
    with pytest.raises(ProblemError, match="must be below high"):
        make_range("market.volume", 1e5, 1e4)
    with pytest.raises(ProblemError) as info:
        run_sensitivity(study, [make_range("process.fast.fault_coverage", 0.9, 1.1)])
    assert info.value.source == "--range"
    assert "1.1 makes the problem invalid" in info.value.message


def test_an_option_without_a_feasible_design_is_a_row_not_a_failure():
    # the cheap process doubles logic area: a 300 mm^2 compute instance cannot fit a
    # 200 mm^2 die limit, so "cheap" alone has no design while "fast" has
    data = _tiny()
    data["constraints"]["max_die_area"] = "200 mm^2"
    result = compare(process_options(study_from_data(data, "tiny")))
    table = result.table.set_index("option")
    assert table.loc["cheap", "design_kind"] == "no feasible design"
    assert "constraints" in table.loc["cheap", "notes"]
    assert np.isnan(table.loc["cheap", "profit"])
    assert np.isfinite(table.loc["fast", "profit"])
    assert result.table.iloc[-1]["option"] == "cheap"
    assert comparison_figure(result).axes
