"""Sweeps: grid winners against independent solves, crossovers against hand-derived break-even."""

from __future__ import annotations

import copy
import tomllib

import numpy as np
import pytest

from optimizer.explore.fixed import design_kind
from optimizer.explore.paths import study_from_data
from optimizer.explore.plots import sweep_figure
from optimizer.explore.sweep import make_axis, run_sweep
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve
from tests.conftest import TINY_PROBLEM
from tests.explore_cases import BREAK_EVEN, data


def test_volume_crossover_matches_break_even_volume():
    # source: hand-derived break-even. Profit = V (p - c) - NRE for each design, so two
    # designs tie where V* = (NRE_b - NRE_a) / (c_a - c_b), c the manufacturing cost per
    # good unit. c and NRE come from two independent single solves at the sweep's ends.
    low_end = parse_problem({**data(BREAK_EVEN), "market": {"unit_price": 300.0, "volume": 1e4}})
    high_end = parse_problem({**data(BREAK_EVEN), "market": {"unit_price": 300.0, "volume": 1e8}})
    a = solve(low_end, top=1).best
    b = solve(high_end, top=1).best
    assert design_kind(a) != design_kind(b)
    expected = (b.nre - a.nre) / (
        a.manufacturing_cost_per_good_unit - b.manufacturing_cost_per_good_unit
    )

    study = study_from_data(data(BREAK_EVEN), "break-even")
    result = run_sweep(study, [make_axis("market.volume", 1e4, 1e8, 9, log=True)])
    assert result.shared_candidates  # only the market varies
    assert (result.strategy, result.solves) == ("envelope", 3)  # both ends, one crossing
    assert len(result.crossovers) == 1
    row = result.crossovers.iloc[0]
    assert (row.kind_before, row.kind_after) == (design_kind(a), design_kind(b))
    assert row.grid_low < expected < row.grid_high
    assert row.method == "brent"
    assert row.crossing == pytest.approx(expected, rel=1e-9)


def test_sweep_points_equal_independent_single_solves():
    # source: independent single solves of hand-edited problem dicts (no path machinery)
    study = study_from_data(tomllib.loads(TINY_PROBLEM), "tiny")
    axis = make_axis("process.cheap.wafer_cost", 2000, 12000, 5)
    result = run_sweep(study, [axis], curves=False)
    for value, row in zip(axis.values(), result.points.itertuples(), strict=True):
        edited = copy.deepcopy(tomllib.loads(TINY_PROBLEM))
        edited["process"][1]["wafer_cost"] = float(value)
        best = solve(parse_problem(edited), top=1).best
        assert row.profit == pytest.approx(best.profit, rel=1e-12)
        assert row.cost_per_good_unit == pytest.approx(best.cost_per_good_unit, rel=1e-12)
        assert row.design_kind == design_kind(best)


def test_defect_density_sweep_crossover_and_curves():
    study = study_from_data(tomllib.loads(TINY_PROBLEM), "tiny")
    axis = make_axis("process.cheap.defect_density", "0.02 /cm^2", "0.5 /cm^2", 7, log=True)
    result = run_sweep(study, [axis])
    assert not result.shared_candidates
    assert len(result.crossovers) >= 1
    row = result.crossovers.iloc[0]
    assert row.grid_low < row.crossing < row.grid_high
    # source: definition of a crossover — both designs have the same profit there
    edited = copy.deepcopy(tomllib.loads(TINY_PROBLEM))
    edited["process"][1]["defect_density"] = f"{float(row.crossing)!r} /cm^2"
    problem = parse_problem(edited)
    before = result.designs[row.design_before].evaluate(problem)
    after = result.designs[row.design_after].evaluate(problem)
    assert before.profit == pytest.approx(after.profit, rel=1e-9)
    # source: identity — each grid optimum is the best of the winners' curves there
    curves = result.curves.drop(columns=[axis.path.text]).to_numpy()
    np.testing.assert_allclose(np.nanmax(curves, axis=1), result.points["profit"], rtol=1e-12)
    assert sweep_figure(result).axes


def test_two_dimensional_sweep_grid_and_map():
    study = study_from_data(tomllib.loads(TINY_PROBLEM), "tiny")
    axes = [
        make_axis("process.cheap.wafer_cost", 2000, 12000, 3),
        make_axis("market.volume", 1e4, 1e6, 3, log=True, option="--vary2"),
    ]
    result = run_sweep(study, axes)
    assert len(result.points) == 9
    assert result.curves is None
    # x varies fastest along rows
    assert list(result.points["process.cheap.wafer_cost"][:3]) == [2000, 7000, 12000]
    for row in result.crossovers.itertuples():
        assert row.at  # 2-D crossovers say where on the other axis they are
    assert sweep_figure(result).axes


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (("market.volume", 1e6, 1e5, 5, False), "must be below high"),
        (("market.volume", 0, 1e5, 5, True), "log steps need a positive low end"),
        (("market.volume", 1, 1e5, 1, False), "at least 2 grid points"),
        (("market.volume", "a lot", 1e5, 5, False), "cannot read"),
        (("constraints.max_dies", 1.5, 4, 5, False), "whole numbers"),
    ],
)
def test_bad_ranges_are_problem_errors(args, words):
    with pytest.raises(ProblemError, match=words):
        make_axis(*args)


def test_range_outside_the_field_is_refused_before_solving():
    study = study_from_data(tomllib.loads(TINY_PROBLEM), "tiny")
    axis = make_axis("packaging.multi.bond_yield", 0.9, 1.2, 3)
    with pytest.raises(ProblemError) as info:
        run_sweep(study, [axis])
    assert info.value.source == "--vary"
    assert "1.2 makes the problem invalid" in info.value.message


@pytest.mark.parametrize("text", [BREAK_EVEN, TINY_PROBLEM], ids=["break_even", "tiny"])
def test_envelope_sweep_equals_a_solve_at_every_point(text):
    # source: the same grid solved point by point (the envelope scheme must be exact)
    study = study_from_data(tomllib.loads(text), "t")
    axis = make_axis("market.volume", 1e3, 1e8, 25, log=True)
    fast = run_sweep(study, [axis])
    slow = run_sweep(study, [axis], every_point=True)
    assert fast.strategy == "envelope" and fast.solves < 10
    assert slow.strategy == "every point" and slow.solves == 25
    assert list(fast.points["design"]) == list(slow.points["design"])
    np.testing.assert_allclose(fast.points["profit"], slow.points["profit"], rtol=1e-12)
    np.testing.assert_allclose(
        fast.points["cost_per_good_unit"], slow.points["cost_per_good_unit"], rtol=1e-12
    )
    np.testing.assert_allclose(
        fast.crossovers["crossing"].to_numpy(dtype=float),
        slow.crossovers["crossing"].to_numpy(dtype=float),
        rtol=1e-12,
    )


def test_salvage_bins_make_every_point_solves():
    # salvage revenue saturates at the bin's demand, so profit is not affine in volume
    edited = tomllib.loads(TINY_PROBLEM)
    edited["market"]["salvage_bin"] = [
        {
            "name": "one_core",
            "block": "compute",
            "min_good": 1,
            "unit_price": 300.0,
            "demand": 5000.0,
        }
    ]
    study = study_from_data(edited, "t")
    result = run_sweep(study, [make_axis("market.volume", 1e4, 1e6, 3, log=True)])
    assert result.strategy == "every point" and result.solves == 3


def test_figure_axes_read_in_words_with_units():
    # A swept input is named as a reader would say it, and crossings as numbers are
    # written (212,346 rather than 2.12e+05).
    from optimizer.explore.paths import parse_path
    from optimizer.explore.plots import axis_label, plain_number

    assert axis_label(parse_path("process.leading.defect_density")) == (
        "defect density on leading [/cm^2]"
    )
    assert axis_label(parse_path("market.volume")) == "volume"
    assert plain_number(212345.6) == "212,346" and plain_number(0.1234) == "0.1234"


def test_winner_map_cells_stay_inside_the_swept_range():
    # A linear sweep of a density from 0.01 to 1 in 5 steps: half a cell beyond the first
    # point would reach -0.11 /cm^2, a value nobody swept.
    import numpy as np

    from optimizer.explore.plots import _edges

    grid = np.linspace(0.01, 1.0, 5)
    edges = _edges(grid, log=False)
    assert edges[0] == grid[0] and edges[-1] == grid[-1]
    assert np.all(np.diff(edges) > 0)
    logged = _edges(np.geomspace(0.01, 1.0, 5), log=True)
    assert np.isclose(logged[0], 0.01) and np.isclose(logged[-1], 1.0)
