"""Yield targets priced: defect-density curves, design margin, salvage bins, mandates.

Outside truths: the Lambert W closed form (scipy.special.lambertw as reference library),
a binomial salvage calculation done by hand with math.comb, the exhaustive reference
over every target level, and scipy.stats.norm for margins.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.special import lambertw
from scipy.stats import norm
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.designs import DieSpec, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve
from optimizer.targets import cost_rises_without_bound, profit_curve
from tests.test_solver import random_problem

runner = CliRunner()


def one_die_problem(area_mm2=300.0, d_base=0.3, volume=2e5, k=4e6, **process_extra) -> dict:
    process = {
        "name": "p",
        "wafer_diameter": "300 mm",
        "edge_exclusion": "0 mm",
        "scribe_width": "0 mm",
        "wafer_cost": 10000.0,
        "defect_density": f"{d_base} /cm^2",
        "yield_model": "poisson",
        "die_count": "area_ratio",
        "reticle_width": "1000 mm",
        "reticle_height": "1000 mm",
        "defect_reduction": {
            "form": "log_ratio",
            "floor": "0.001 /cm^2",
            "one_time_per_log": k,
            "levels": 6,
        },
    }
    process.update(process_extra)
    return {
        "market": {"unit_price": 1000.0, "volume": volume},
        "process": [process],
        "packaging": [{"name": "s", "kind": "single_die"}],
        "block": [{"name": "b", "area": f"{area_mm2} mm^2"}],
    }


@pytest.mark.parametrize(
    "area_mm2, volume, k", [(300.0, 2e5, 4e6), (120.0, 1e6, 1e6), (600.0, 5e4, 2e7)]
)
def test_optimal_defect_target_matches_lambert_w(area_mm2, volume, k):
    # Closed form: Poisson yield, one die of area A, cost per die c, volume V, one-time cost
    # k ln(D_base / D). Profit'(D) = 0 gives A D* = W(k / (V c)); reference library:
    # scipy.special.lambertw. Edge loss ignored (die_count = area_ratio) so c = wafer
    # cost x die area / wafer area.
    solution = solve(parse_problem(one_die_problem(area_mm2, volume=volume, k=k)), top=1)
    c = 10000.0 * area_mm2 / (math.pi * 150.0**2)
    expected = lambertw(k / (volume * c)).real
    got = area_mm2 / 100 * solution.best.dies[0].defect_density_per_cm2
    assert_allclose(got, expected, rtol=1e-6)
    assert solution.targets_refined
    # and the optimal yield is exp(-A D*), well below 100%
    assert_allclose(solution.best.dies[0].die_yield, math.exp(-expected), rtol=1e-6)


def test_profit_curve_peaks_inside_and_cost_rises_without_bound():
    # Shape: profit peaks at the optimum target; cost per good unit grows without bound
    # as the defect-limited yield approaches 100% (one-time cost k ln(D_base/D) -> inf).
    problem = parse_problem(one_die_problem())
    best = solve(problem, top=1).best
    frame = profit_curve(problem, best, points=41)
    inside = frame[~frame["extrapolated"]]
    peak = inside.loc[inside["profit"].idxmax()]
    assert_allclose(peak["profit"], best.profit, rtol=2e-3)
    assert cost_rises_without_bound(frame)
    assert frame["hard_yield"].max() > 0.99999
    assert frame["cost_per_good_unit"].iloc[-1] > 3 * inside["cost_per_good_unit"].min()


def test_salvage_revenue_by_hand():
    # One die: 4 needed cores + 1 spare (core area a), plain area A0, Poisson at D.
    # P(full) = e^{-A0 D} P(K >= 4), K ~ Binomial(5, e^{-a D}); the bin "three" takes dies
    # with exactly 3 good cores: e^{-A0 D} P(K = 3). Units = min(demand, V x ratio);
    # net revenue = units x (bin price - (package + final test) / package yield).
    d, a_core, a0 = 0.5, 0.6, 1.5  # /cm^2, cm^2, cm^2
    data = {
        "market": {
            "unit_price": 600.0,
            "volume": 1e5,
            "salvage_bin": [
                {
                    "name": "three",
                    "block": "core",
                    "min_good": 3,
                    "unit_price": 250.0,
                    "demand": 1e9,
                }
            ],
        },
        "process": [
            {
                "name": "p",
                "wafer_diameter": "300 mm",
                "wafer_cost": 8000.0,
                "defect_density": f"{d} /cm^2",
                "yield_model": "poisson",
            }
        ],
        "packaging": [
            {
                "name": "s",
                "kind": "single_die",
                "package_cost": 12.0,
                "final_test_cost": 3.0,
                "package_yield": 0.98,
            }
        ],
        "block": [
            {"name": "core", "area": f"{a_core * 100} mm^2", "count": 4, "spare_choices": [0, 1]},
            {"name": "rest", "area": f"{a0 * 100} mm^2"},
        ],
    }
    problem = parse_problem(data)
    spec = DieSpec("p", {"core": 4, "rest": 1}, {"core": 1}, {})
    result = evaluate_specs(Evaluator(problem), [spec], "s")
    y = math.exp(-a_core * d)
    full = sum(math.comb(5, j) * y**j * (1 - y) ** (5 - j) for j in (4, 5))
    three = math.comb(5, 3) * y**3 * (1 - y) ** 2
    assert_allclose(result.dies[0].hard_yield, math.exp(-a0 * d) * full, rtol=1e-12)
    units = 1e5 * three / full
    net = units * (250.0 - (12.0 + 3.0) / 0.98)
    assert_allclose(result.salvage_units["three"], units, rtol=1e-10)
    assert_allclose(result.salvage_revenue, net, rtol=1e-10)
    # demand caps the bin
    capped = parse_problem(
        {
            **data,
            "market": {
                **data["market"],
                "salvage_bin": [{**data["market"]["salvage_bin"][0], "demand": 1000.0}],
            },
        }
    )
    result = evaluate_specs(Evaluator(capped), [spec], "s")
    assert_allclose(result.salvage_units["three"], 1000.0)


def test_salvage_revenue_changes_the_choice_of_spares():
    # Without a worthwhile lower bin a spare core pays at this defect density; with a bin
    # that buys partly good dies at nearly full price, the spare's area is no longer worth
    # it. The solver weighs salvage revenue in the choice (brute force agrees).
    def problem_with(bin_price):
        return parse_problem(
            {
                "market": {
                    "unit_price": 400.0,
                    "volume": 2e5,
                    "salvage_bin": [
                        {
                            "name": "lite",
                            "block": "core",
                            "min_good": 6,
                            "unit_price": bin_price,
                            "demand": 1e7,
                        }
                    ],
                },
                "process": [
                    {
                        "name": "p",
                        "wafer_diameter": "300 mm",
                        "wafer_cost": 9000.0,
                        "defect_density": "0.3 /cm^2",
                        "yield_model": "poisson",
                    }
                ],
                "packaging": [{"name": "s", "kind": "single_die", "package_cost": 4.0}],
                "block": [
                    {"name": "core", "area": "40 mm^2", "count": 8, "spare_choices": [0, 1]},
                    {"name": "rest", "area": "30 mm^2"},
                ],
            }
        )

    for price, spares in ((1.0, True), (390.0, False)):
        problem = problem_with(price)
        ours, brute = solve(problem, top=1), solve(problem, top=1, method="exhaustive")
        assert_allclose(ours.best.profit, brute.best.profit, rtol=1e-9)
        assert bool(ours.best.dies[0].spares) is spares


def target_problem(seed: int) -> dict:
    """A random small problem with target tables, margins and critical-area options."""
    rng = np.random.default_rng(1000 + seed)
    data = random_problem(seed)
    # small enough for brute force over every option of every die
    data["block"] = [{**b, "count": 1, "spare_choices": [0]} for b in data["block"][:3]]
    names = {b["name"] for b in data["block"]}
    data["link"] = [link for link in data["link"] if set(link["blocks"]) <= names]
    for proc in data["process"]:
        base = float(proc["defect_density"].split()[0])
        proc["defect_reduction"] = {
            "form": "table",
            "points": [
                [f"{base * 0.6} /cm^2", float(rng.uniform(1e5, 3e6)), float(rng.uniform(0, 200))]
            ],
        }
        proc["margin"] = {
            "two_sided": bool(rng.random() < 0.5),
            "sigma": [2.5, 4.0],
            "area_overhead": [0.0, float(rng.uniform(0, 0.05))],
        }
    data["critical_area_reduction"] = {"sensitivity_factor": [0.8], "area_overhead": [0.04]}
    return data


@pytest.mark.parametrize("seed", range(6))
def test_joint_optimum_equals_exhaustive_over_target_grid(seed):
    # Outside truth: brute force over every partition x process x defect target x margin
    # x critical-area option x spares x packaging, priced by the same evaluator.
    problem = parse_problem(target_problem(seed))
    try:
        brute = solve(problem, top=2, method="exhaustive")
    except ProblemError:
        with pytest.raises(ProblemError):
            solve(problem, top=2)
        return
    ours = solve(problem, top=2)
    assert ours.proven_optimal
    assert_allclose(
        [d.profit for d in ours.designs],
        [d.profit for d in brute.designs[: len(ours.designs)]],
        rtol=1e-9,
    )


def test_margin_choice_follows_the_normal_tail():
    # Soft yield of the chosen margin equals 2 Phi(k) - 1 (two-sided) from scipy.stats.norm.
    data = one_die_problem(200.0)
    data["process"][0]["margin"] = {
        "two_sided": True,
        "sigma": [2.0, 3.0, 4.0],
        "area_overhead": [0.0, 0.01, 0.03],
    }
    best = solve(parse_problem(data), top=1).best
    k = best.dies[0].sigma_margin
    assert k in (2.0, 3.0, 4.0)
    assert_allclose(best.dies[0].soft_yield, 2 * norm.cdf(k) - 1, rtol=1e-12)


def test_mandated_six_sigma_is_priced_on_server_demo_and_impossible_one_explained(tmp_path):
    # A mandated +-6 sigma margin (two-sided, common practice) forces the most expensive
    # margin option on every die; the report prices it against the free optimum.
    import json

    out = tmp_path / "r"
    ok = runner.invoke(
        app,
        [
            "solve",
            "problems/server_processor.toml",
            "--require-sigma",
            "6",
            "--results",
            str(out),
            "--top",
            "1",
            "--json",
        ],
    )
    assert ok.exit_code == 0, ok.output
    payload = json.loads(ok.stdout)
    assert payload["mandate"]["profit_lost"] > 0
    assert all(d["sigma_margin"] >= 6.0 for d in payload["best"]["dies"])
    assert payload["unconstrained_best"]["profit"] > payload["best"]["profit"]
    saved = json.loads((Path(payload["run_folder"]) / "solution.json").read_text())
    assert saved["mandate"]["profit_lost"] == payload["mandate"]["profit_lost"]
    # the edge demo's margin curves stop at 4.5 sigma: 6 sigma cannot be met, and it says why
    bad = runner.invoke(
        app,
        ["solve", "problems/edge_accelerator.toml", "--require-sigma", "6", "--results", str(out)],
    )
    assert bad.exit_code == 2
    assert "required design margin (sigma) at least 6 cannot be met" in bad.stderr


def test_profit_curve_command_writes_csv_png_svg(tmp_path):
    path = tmp_path / "one.toml"
    path.write_text(
        """
[market]
unit_price = 1000.0
volume = 200000
[[process]]
name = "p"
wafer_diameter = "300 mm"
wafer_cost = 10000.0
defect_density = "0.3 /cm^2"
yield_model = "poisson"
defect_reduction = { form = "log_ratio", floor = "0.01 /cm^2", one_time_per_log = 4.0e6 }
[[packaging]]
name = "s"
kind = "single_die"
[[block]]
name = "b"
area = "300 mm^2"
"""
    )
    out = tmp_path / "r"
    result = runner.invoke(
        app,
        [
            "profit-curve",
            str(path),
            "--points",
            "21",
            "--results",
            str(out),
            "--require-die-yield",
            "0.95",
        ],
    )
    assert result.exit_code == 0, result.output
    folder = next(out.iterdir())
    assert {"profit_curve.csv", "profit_curve.png", "profit_curve.svg"} <= {
        p.name for p in folder.iterdir()
    }
    assert "rises without bound as the target approaches 100%: yes" in result.stdout
