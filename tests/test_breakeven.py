"""Break-even of main inputs between two fixed designs.

Every break-even is checked by re-pricing both designs at the reported value through the
path machinery and the evaluator (``problem_with`` and ``FixedDesign.evaluate``), not
through the module under test. The small problem below has invented numbers, for tests
only; the demos in problems/ are invented too.
"""

from __future__ import annotations

import copy
import functools
import math
import tomllib
from pathlib import Path

import pytest

from optimizer.designs import evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.explore.breakeven import (
    FLIP,
    NO_FLIP,
    NOT_PRICEABLE,
    break_even,
    break_even_text,
    input_label,
    main_inputs,
    skipped_inputs,
)
from optimizer.explore.fixed import FixedDesign
from optimizer.explore.paths import load_study, parse_path, problem_with
from optimizer.problem import ProblemError, parse_problem
from optimizer.solver import solve

PROBLEMS = Path(__file__).resolve().parents[1] / "problems"

# One process, no salvage bins, no defect reduction, no margins: each fixed design's
# profit is (price - manufacturing cost per good unit) x volume - one-time costs.
# "mono" (one 240 mm^2 die) costs more per unit and less one-time than "quad" (four
# 60 mm^2 dies on a multi-die carrier). Field names as in problems/server_processor.toml.
SMALL = """
title = "two fixed designs, linear in volume (invented numbers, for tests only)"

[market]
currency = "USD"
unit_price = 400.0
volume = 300000

[[process]]
name = "main"
wafer_diameter = "300 mm"
edge_exclusion = "3 mm"
scribe_width = "100 um"
wafer_cost = 9000.0
defect_density = "0.2 /cm^2"
yield_model = "poisson"
mask_set_cost = 4.0e6
sort_cost_per_die = 1.0

[[process]]
name = "unused_line"
wafer_diameter = "300 mm"
wafer_cost = 3000.0
defect_density = "0.1 /cm^2"
yield_model = "poisson"
mask_set_cost = 1.0e6

[[packaging]]
name = "single"
kind = "single_die"
package_cost = 12.0
final_test_cost = 4.0

[[packaging]]
name = "multi"
kind = "organic_substrate"
max_dies = 4
bond_cost_per_die = 2.0
bond_yield = 0.99
carrier_cost = 0.0
package_cost = 14.0
final_test_cost = 5.0
interface_density = "100 GB/s/mm^2"
design_cost = 3.0e6

[design_cost]
per_die_design = 2.0e6

[[block]]
name = "core"
kind = "logic"
area = "60 mm^2"
count = 4

[[design]]
name = "mono"
packaging = "single"
[[design.die]]
process = "main"
blocks = { core = 4 }

[[design]]
name = "quad"
packaging = "multi"
[[design.die]]
process = "main"
copies = 4
blocks = { core = 1 }
"""


def _small(volume: float | None = None) -> tuple[dict, dict]:
    """The small problem's data and its two explicit designs, priced at the file values."""
    data = tomllib.loads(SMALL)
    if volume is not None:
        data["market"]["volume"] = volume
    problem = parse_problem(data, "small")
    evaluator = Evaluator(problem)
    priced = {d.name: evaluate_design(evaluator, d) for d in problem.design}
    return data, priced


def _fixed(data: dict, priced: dict) -> tuple[FixedDesign, FixedDesign]:
    problem = parse_problem(data, "small")
    return (
        FixedDesign.from_result(priced["mono"], problem),
        FixedDesign.from_result(priced["quad"], problem),
    )


def _profits(data, source, optimum, challenger, path_text, value) -> tuple[float, float]:
    """Both designs' profits with one input changed (independent of the module)."""
    problem = problem_with(data, [(parse_path(path_text), value)], source)
    return optimum.evaluate(problem).profit, challenger.evaluate(problem).profit


# ---------------------------------------------------------------- demos
def _without(data: dict, packaging: str) -> dict:
    edited = copy.deepcopy(data)
    edited["packaging"] = [g for g in edited["packaging"] if g["name"] != packaging]
    edited.pop("design", None)  # explicit designs may name the dropped packaging
    return edited


@functools.cache
def _demo(name: str, explicit: str | None = None):
    """(study, optimum, challenger, rows) for a demo.

    The challenger is the first of the top 20 whose packaging or die count differs from
    the winner's; where there is none (the server demo's top 20 are all one-die
    flip-chip variants), the best design with the winner's packaging removed. With
    ``explicit``, the challenger is that explicit design of the file instead.
    """
    study = load_study(PROBLEMS / name)
    ranked = solve(study.problem, top=20).designs
    best = ranked[0]
    if explicit is not None:
        design = next(d for d in study.problem.design if d.name == explicit)
        other = evaluate_design(Evaluator(study.problem), design)
    else:
        other = next(
            (d for d in ranked if (d.packaging, d.n_dies) != (best.packaging, best.n_dies)), None
        )
        if other is None:
            # the demos have several packagings, so dropping the winner's leaves a design
            assert len(study.problem.packaging) >= 2, name
            edited = parse_problem(_without(study.data, best.packaging), study.source)
            other = solve(edited, top=1).best
    optimum = FixedDesign.from_result(best, study.problem)
    challenger = FixedDesign.from_result(other, study.problem)
    paths = main_inputs(study.problem, [optimum, challenger])
    rows = break_even(study.data, study.source, optimum, challenger, paths)
    return study, optimum, challenger, rows


CASES = [
    ("server_processor.toml", None),
    ("server_processor.toml", "four_on_interposer"),
    ("edge_accelerator.toml", None),
]


@pytest.mark.parametrize(("name", "explicit"), CASES)
def test_every_flip_is_an_equal_profit_point_with_the_right_sides(name, explicit):
    # source: definition of break-even (common practice) — the value of one input at
    # which two fixed alternatives earn the same profit; the challenger earns more on the
    # reported side and less on the other.
    study, optimum, challenger, rows = _demo(name, explicit)
    flips = [r for r in rows if r.status == FLIP]
    assert flips, "no flip on this demo: the checks below would be vacuous"
    for row in flips:
        p_opt, p_ch = _profits(study.data, study.source, optimum, challenger, row.path, row.value)
        assert p_ch == pytest.approx(p_opt, rel=1e-6), row.path
        assert row.profit == pytest.approx(p_opt, rel=1e-6), row.path
        assert row.ratio == pytest.approx(row.value / row.file_value, rel=1e-12)
        assert row.challenger_wins in ("above", "below")
        for factor, side in ((0.99, "below"), (1.01, "above")):
            x = row.value * factor
            if not row.low <= x <= row.high:
                continue  # beyond a schema limit
            p_opt, p_ch = _profits(study.data, study.source, optimum, challenger, row.path, x)
            assert (p_ch > p_opt) == (row.challenger_wins == side), (row.path, side)


@pytest.mark.parametrize(("name", "explicit"), CASES)
def test_no_flip_rows_keep_one_sign_at_both_ends_of_their_range(name, explicit):
    # source: intermediate value theorem — a continuous difference that changes sign
    # between the range's ends has a root in it, so "no flip" needs the same sign at both
    # ends as at the file value (the optimum earns more at the file value by definition)
    study, optimum, challenger, rows = _demo(name, explicit)
    for row in rows:
        if row.status != NO_FLIP:
            continue
        for x in (row.low, row.file_value, row.high):
            p_opt, p_ch = _profits(study.data, study.source, optimum, challenger, row.path, x)
            assert p_ch < p_opt, (row.path, x)


def test_break_even_volume_matches_the_crossing_of_two_profit_lines():
    # source: line intersection. Without salvage bins a fixed design's profit is
    # (p - m) V - F (evaluator's profit identity, m the manufacturing cost per good unit,
    # F the one-time costs), so the two lines cross at V* = (F_c - F_o) / (m_o - m_c).
    data, priced = _small()
    mono, quad = priced["mono"], priced["quad"]
    assert mono.profit > quad.profit  # mono is the optimum at the file volume
    f_o, f_c = mono.nre + mono.improvement_spend, quad.nre + quad.improvement_spend
    m_o, m_c = mono.manufacturing_cost_per_good_unit, quad.manufacturing_cost_per_good_unit
    expected = (f_c - f_o) / (m_o - m_c)
    assert 0.1 * 3e5 < expected < 10 * 3e5  # inside the scanned range
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["market.volume"])
    assert row.status == FLIP
    assert row.value == pytest.approx(expected, rel=1e-6)
    assert row.profit == pytest.approx((400.0 - m_o) * expected - f_o, rel=1e-6)
    # quad has the lower unit cost, so it wins at higher volume
    assert row.challenger_wins == "above"
    assert row.label == "volume [units]"
    text = break_even_text(row, "USD")
    assert text.startswith("the challenger wins above ") and "units" in text


def test_a_tie_at_the_file_value_is_the_break_even():
    # source: definition of break-even — at the crossing volume of the two profit lines
    # (as above) the file value itself is where the profits are equal
    _, priced = _small()
    mono, quad = priced["mono"], priced["quad"]
    crossing = (quad.nre - mono.nre) / (
        mono.manufacturing_cost_per_good_unit - quad.manufacturing_cost_per_good_unit
    )
    data, priced = _small(volume=crossing)
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["market.volume"])
    assert (row.status, row.value, row.ratio) == (FLIP, crossing, 1.0)
    assert row.challenger_wins == "above"  # the lower unit cost wins above the crossing


def test_unit_price_never_flips_without_salvage_bins():
    # source: profit identity — price enters both profits as p x V with the same V, so the
    # difference does not depend on p and cannot change sign
    data, priced = _small()
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["market.unit_price"])
    assert row.status == NO_FLIP
    assert math.isnan(row.value) and row.challenger_wins == ""
    assert (row.low, row.high) == pytest.approx((40.0, 4000.0), rel=1e-12)
    assert break_even_text(row, "USD") == "no flip between 0.1x and 10x the file value"
    gaps = [
        b - a
        for a, b in (
            _profits(data, "small", optimum, challenger, "market.unit_price", p)
            for p in (40.0, 4000.0)
        )
    ]
    assert gaps[0] == pytest.approx(gaps[1], rel=1e-9)


def test_a_yield_is_scanned_up_to_one_only():
    # source: the problem schema — yields lie in (0, 1] (optimizer/problem.py Packaging).
    # Even a perfect bond leaves quad behind at the file volume, so any break-even would
    # need a yield above 1.
    data, priced = _small()
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["packaging.multi.bond_yield"])
    assert row.status == NO_FLIP
    assert row.high == 1.0
    assert row.low == pytest.approx(0.099, rel=1e-12)
    p_opt, p_ch = _profits(data, "small", optimum, challenger, "packaging.multi.bond_yield", 1.0)
    assert p_ch < p_opt
    with pytest.raises(ProblemError):
        problem_with(data, [(parse_path("packaging.multi.bond_yield"), 1.0 + 1e-9)], "small")


def test_wafer_cost_flips_where_the_two_profits_cross():
    # source: definition of break-even, checked by re-pricing through the evaluator;
    # mono needs more wafer area per good unit (lower yield of the larger die), so a
    # dearer wafer favours quad
    data, priced = _small()
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["process.main.wafer_cost"])
    assert (row.status, row.challenger_wins) == (FLIP, "above")
    p_opt, p_ch = _profits(data, "small", optimum, challenger, row.path, row.value)
    assert p_ch == pytest.approx(p_opt, rel=1e-9)
    assert row.label == "wafer cost of main [USD/wafer]"


def test_main_inputs_follow_the_designs_and_skip_unset_or_zero_fields():
    # source: the small problem file above — "unused_line" is used by neither design;
    # "single" sets neither bond_yield nor carrier_cost; "multi" sets carrier_cost = 0;
    # design_cost.per_mm2 is not set
    data, priced = _small()
    problem = parse_problem(data, "small")
    designs = list(_fixed(data, priced))
    assert main_inputs(problem, designs) == [
        "market.volume",
        "market.unit_price",
        "process.main.defect_density",
        "process.main.wafer_cost",
        "process.main.mask_set_cost",
        "packaging.single.package_cost",
        "packaging.multi.bond_yield",
        "packaging.multi.package_cost",
        "design_cost.per_die_design",
    ]
    assert set(skipped_inputs(problem, designs)) == {
        "packaging.single.bond_yield",
        "packaging.single.carrier_cost",
        "packaging.multi.carrier_cost",
        "design_cost.per_mm2",
    }
    # the same designs as priced results give the same list
    assert main_inputs(problem, list(priced.values())) == main_inputs(problem, designs)


def test_the_same_design_twice_never_flips_and_bad_paths_are_not_priceable():
    # source: identity — a design against itself earns the same profit everywhere
    data, priced = _small()
    optimum, _ = _fixed(data, priced)
    same, unknown, integer = break_even(
        data,
        "small",
        optimum,
        optimum,
        ["process.main.defect_density", "process.nowhere.wafer_cost", "constraints.max_dies"],
    )
    assert same.status == NO_FLIP and math.isnan(same.value)
    assert unknown.status == NOT_PRICEABLE and "nowhere" in unknown.note
    assert integer.status == NOT_PRICEABLE
    assert input_label("process.main.defect_density", "USD") == "defect density of main [/cm^2]"
    assert break_even_text(unknown, "USD").startswith("not priceable")


def test_design_cost_per_mm2_can_be_moved():
    # source: the schema — design_cost.per_mm2 is money per mm^2, a plain number
    data, priced = _small()
    data["design_cost"]["per_mm2"] = 20000.0
    optimum, challenger = _fixed(data, priced)
    (row,) = break_even(data, "small", optimum, challenger, ["design_cost.per_mm2"])
    assert row.status != NOT_PRICEABLE, row.note
