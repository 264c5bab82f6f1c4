"""Product life: curves, per-period problems and present value.

Outside references: the ordinary-annuity closed form (1 - (1 + r)^-n) / r for
end-of-period cash flows (common practice) and its direct sum; present values worked
out by hand below; the learning and erosion formulas evaluated by hand; and, for the
per-period problems, the base problem itself (nothing varies -> only the volume moves).
All numbers are invented.
"""

from __future__ import annotations

import math
import tomllib

import pytest

import optimizer.life as life_module
from optimizer.designs import evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.life import (
    annuity_factor,
    discounts,
    erosion,
    learn_by_time,
    learn_by_wafers,
    life_plan,
    load_life,
    npv,
    one_time_discount,
    payback_period,
    periods,
    plan_npv,
    plan_payback,
    without_life,
)
from optimizer.problem import Problem, parse_problem, read_problem_data
from tests.conftest import TINY_PROBLEM

REL = 1e-12


def plan_of(life: str, base: str = TINY_PROBLEM, source: str = "life.toml"):
    data = tomllib.loads(base + "\n" + life)
    return life_plan(data, source)


def with_volume(problem: Problem, volume: float) -> Problem:
    market = problem.market.model_copy(update={"volume": float(volume)})
    return problem.model_copy(update={"market": market})


# ---------------------------------------------------------------- present value
def test_annuity_factor_matches_closed_form_and_table_value():
    # ordinary annuity, 8 % a year, 5 years: (1 - 1.08^-5) / 0.08 = 3.99271 (annuity tables)
    assert annuity_factor(0.08, 5) == pytest.approx((1 - 1.08**-5) / 0.08, rel=REL)
    assert annuity_factor(0.08, 5) == pytest.approx(3.99271004, abs=1e-8)
    # a zero rate pays back n
    assert annuity_factor(0.0, 7) == 7.0
    assert annuity_factor(0.08, 0) == 0.0


@pytest.mark.parametrize("rate, n, period_years", [(0.1, 12, 0.25), (0.07, 30, 1.0), (0.3, 3, 0.5)])
def test_annuity_factor_matches_direct_sum(rate, n, period_years):
    # end-of-period payments: the k-th is discounted over k periods of period_years
    direct = sum((1 + rate) ** -(k * period_years) for k in range(1, n + 1))
    assert annuity_factor(rate, n, period_years) == pytest.approx(direct, rel=REL)


def test_npv_by_hand():
    # 100, 200, 300 at the ends of years 1, 2, 3 at 10 %:
    # 100/1.1 + 200/1.21 + 300/1.331 = 90.909091 + 165.289256 + 225.394440 = 481.592787
    flows = [100.0, 200.0, 300.0]
    factors = [1 / 1.1, 1 / 1.21, 1 / 1.331]
    assert npv(flows, factors) == pytest.approx(481.5927874, abs=1e-6)
    with pytest.raises(ValueError, match="pair them up"):
        npv(flows, factors[:2])


def test_payback_by_hand():
    flows, factors = [100.0, 200.0, 300.0], [1 / 1.1, 1 / 1.21, 1 / 1.331]
    # 250 paid at t = 0: -250 + 90.91 = -159.09 (Y1), + 165.29 = 6.20 (Y2): back in Y2
    assert payback_period(flows, factors, one_time=250.0) == 1
    # 481.59 is all the flows are worth: 500 is never paid back, 481 is in Y3
    assert payback_period(flows, factors, one_time=500.0) is None
    assert payback_period(flows, factors, one_time=481.0) == 2
    assert payback_period(flows, factors) == 0
    # paid at the start of Y3 (factor 1/1.21 = 0.826446): 300 x 0.826446 = 247.93 after
    # 256.20 of earlier cash, so the cumulative sum is non-negative from Y3 on
    assert payback_period(flows, factors, 300.0, 1 / 1.21, one_time_index=2) == 2


LIFE_3Y = """
[life]
period = "year"
volumes = [30000, 50000, 20000]
discount_rate = 0.1
"""


def test_discounts_are_end_of_period():
    plan = plan_of(LIFE_3Y)
    assert discounts(plan) == pytest.approx([1 / 1.1, 1 / 1.21, 1 / 1.331], rel=REL)
    assert one_time_discount(plan) == 1.0  # paid at t = 0 by default
    listed = periods(plan.base, plan)
    assert [p.label for p in listed] == ["Y1", "Y2", "Y3"]
    assert [(p.start_years, p.end_years) for p in listed] == [(0, 1), (1, 2), (2, 3)]
    assert [p.discount for p in listed] == pytest.approx([1 / 1.1, 1 / 1.21, 1 / 1.331], rel=REL)
    # 100, 200, 300 with 400 paid at t = 0: 481.592787 - 400
    assert plan_npv(plan, [100.0, 200.0, 300.0], 400.0) == pytest.approx(81.5927874, abs=1e-6)
    assert plan_payback(plan, [100.0, 200.0, 300.0], 400.0) == 2


def test_quarters_and_a_later_one_time_payment():
    plan = plan_of(
        LIFE_3Y.replace('"year"', '"quarter"').replace("20000]", "20000, 10000]")
        + "one_time_period = 3\n"
    )
    listed = periods(plan.base, plan)
    assert [p.label for p in listed] == ["Q1", "Q2", "Q3", "Q4"]
    assert listed[1].start_years == 0.25 and listed[1].end_years == 0.5
    # the fourth quarter ends after one year: one year of discounting
    assert listed[3].discount == pytest.approx(1 / 1.1, rel=REL)
    assert listed[0].discount == pytest.approx(1.1**-0.25, rel=REL)
    # paid at the start of Q3, half a year in
    assert one_time_discount(plan) == pytest.approx(1.1**-0.5, rel=REL)
    assert sum(p.discount for p in listed) == pytest.approx(annuity_factor(0.1, 4, 0.25), rel=REL)


# ---------------------------------------------------------------- curves
def test_learning_by_time_limits_and_points_by_hand():
    d0, mature, tau = 0.1, 0.05, 1.0
    assert learn_by_time(d0, mature, tau, 0.0) == d0
    assert learn_by_time(d0, mature, tau, 60.0) == pytest.approx(mature, rel=1e-12)
    # 0.05 + 0.05 e^-1 = 0.05 + 0.05 x 0.367879441 = 0.068393972
    assert learn_by_time(d0, mature, tau, 1.0) == pytest.approx(0.0683939721, abs=1e-10)
    # 0.05 + 0.05 e^-0.5 = 0.05 + 0.05 x 0.606530660 = 0.080326533
    assert learn_by_time(d0, mature, tau, 0.5) == pytest.approx(0.0803265330, abs=1e-10)


def test_learning_by_wafers_limits_and_points_by_hand():
    assert learn_by_wafers(0.2, 0.04, 5000.0, 0.0) == 0.2
    assert learn_by_wafers(0.2, 0.04, 5000.0, 1e9) == pytest.approx(0.04, rel=1e-12)
    # 0.04 + 0.16 e^-2 = 0.04 + 0.16 x 0.135335283 = 0.061653645
    assert learn_by_wafers(0.2, 0.04, 5000.0, 10000.0) == pytest.approx(0.0616536453, abs=1e-10)


@pytest.mark.parametrize("k", [0, 1, 2, 5])
def test_erosion_after_k_years(k):
    assert erosion(500.0, 0.2, k) == pytest.approx(500.0 * 0.8**k, rel=REL)
    assert erosion(500.0, -0.1, k) == pytest.approx(500.0 * 1.1**k, rel=REL)


def test_plan_reads_curves_at_period_middles():
    plan = plan_of(
        """
[life]
period = "quarter"
volumes = [10000, 20000, 30000, 20000]
discount_rate = 0.1
[life.market]
unit_price = { form = "erosion", per_year = 0.2 }
[life.process.fast]
defect_density = { form = "learn_by_time", mature = "0.05 /cm^2", time_constant = "12 month" }
[life.packaging.multi.carrier_cost]
form = "learn_by_wafers"
mature = 5.0
wafer_scale = 1000
wafer_starts = [100, 200, 300, 400]
"""
    )
    listed = periods(plan.base, plan)
    mids = [0.125, 0.375, 0.625, 0.875]
    assert [p.curve_years for p in listed] == mids
    # 500 x 0.8^t, t at each quarter's middle
    assert [p.problem.market.unit_price for p in listed] == pytest.approx(
        [500 * 0.8**t for t in mids], rel=REL
    )
    # 0.05 + (0.1 - 0.05) e^-t, tau = 12 months = 1 year
    fast = [p.problem.process[0].defect_density_per_cm2 for p in listed]
    assert fast == pytest.approx([0.05 + 0.05 * math.exp(-t) for t in mids], rel=REL)
    # wafers by each middle: 50, 100 + 100, 300 + 150, 600 + 200; carrier cost 15 -> 5
    carrier = [p.problem.packaging[1].carrier_cost for p in listed]
    assert carrier == pytest.approx(
        [5 + 10 * math.exp(-w / 1000) for w in (50, 200, 450, 800)], rel=REL
    )
    assert carrier[0] == pytest.approx(14.5122942450, abs=1e-9)  # 5 + 10 e^-0.05


def test_plan_reads_curves_at_period_starts():
    plan = plan_of(
        LIFE_3Y + 'read_curves_at = "start"\n[life.market]\nunit_price = { form = "erosion", '
        "per_year = 0.2 }\n"
    )
    # erosion after 0, 1 and 2 whole years: 500, 400, 320
    prices = [p.problem.market.unit_price for p in periods(plan.base, plan)]
    assert prices == pytest.approx([500.0, 400.0, 320.0], rel=REL)


# ---------------------------------------------------------------- per-period problems
STILL = """
[life]
period = "year"
volumes = [30000, 50000, 20000]
discount_rate = 0.1
[life.market]
unit_price = { form = "erosion", per_year = 0.0 }
[life.process.fast]
defect_density = { form = "learn_by_time", mature = "0.1 /cm^2", time_constant = "1 year" }
wafer_cost = [10000.0, 10000.0, 10000.0]
[life.process.cheap.defect_density]
form = "learn_by_wafers"
mature = "0.08 /cm^2"
wafer_scale = 10
wafer_starts = [5, 5, 5]
[life.packaging.multi]
carrier_cost = { form = "per_period", values = [15.0, 15.0, 15.0] }
"""


def test_unchanging_plan_gives_the_base_problem_with_each_volume():
    plan = plan_of(STILL)
    base = parse_problem(tomllib.loads(TINY_PROBLEM), "life.toml")
    assert plan.base == base
    listed = periods(base, plan)
    assert [p.volume for p in listed] == [30000, 50000, 20000]
    assert [p.share for p in listed] == pytest.approx([0.3, 0.5, 0.2], rel=REL)
    for p in listed:
        assert p.problem == with_volume(base, p.volume)
        assert p.problem != base  # the volume did move


def test_one_period_plan_is_the_base_problem_with_its_volume():
    data, source = read_problem_data("problems/server_processor.toml")
    data["life"] = {"period": "year", "volumes": [123456], "discount_rate": 0.08}
    plan = life_plan(data, source)
    base = parse_problem(without_life(data), source)
    (only,) = periods(base, plan)
    # salvage bins, reduction curves and all: only the volume differs
    assert base.market.salvage_bin
    assert only.problem == with_volume(base, 123456)
    assert only.share == 1.0 and only.discount == pytest.approx(1 / 1.08, rel=REL)


def test_salvage_demand_is_shared_by_volume_and_priced_with_the_unit_price():
    data, source = read_problem_data("problems/edge_accelerator.toml")
    data["life"] = {
        "period": "year",
        "volumes": [1_000_000, 2_000_000, 1_000_000],
        "discount_rate": 0.1,
        "read_curves_at": "end",
        "market": {"unit_price": {"form": "erosion", "per_year": 0.1}},
    }
    plan = life_plan(data, source)
    listed = periods(plan.base, plan)
    # the file's life demand of 400,000 in the volume shares 1/4, 1/2, 1/4
    demand = [p.problem.market.salvage_bin[0].demand for p in listed]
    assert demand == pytest.approx([100_000, 200_000, 100_000], rel=REL)
    # prices at each year's end: 95 x 0.9^k for the product, 70 x 0.9^k for the bin
    for k, p in enumerate(listed, start=1):
        assert p.problem.market.unit_price == pytest.approx(95 * 0.9**k, rel=REL)
        assert p.problem.market.salvage_bin[0].unit_price == pytest.approx(70 * 0.9**k, rel=REL)


def test_bought_reduction_scales_with_the_learning_density():
    data, source = read_problem_data("problems/server_processor.toml")
    data["life"] = {
        "period": "year",
        "volumes": [100000, 100000],
        "discount_rate": 0.0,
        "process": {
            "leading": {
                "defect_density": {
                    "form": "learn_by_time",
                    "mature": "0.06 /cm^2",
                    "time_constant": "2 year",
                }
            },
            "mature": {"defect_density": ["0.06 /cm^2", "0.055 /cm^2"]},
        },
    }
    plan = life_plan(data, source)
    base = plan.base
    for p in periods(base, plan):
        for name in ("leading", "mature"):  # a log_ratio and a table curve
            before = base.process[base.process_index(name)]
            after = p.problem.process[p.problem.process_index(name)]
            ratio = after.defect_density_per_cm2 / before.defect_density_per_cm2
            assert ratio < 1  # learning lowered it
            # every target keeps its one-time cost and per-wafer adder; densities scale
            for (d0, a0, b0), (d1, a1, b1) in zip(
                before.defect_targets(), after.defect_targets(), strict=True
            ):
                assert d1 == pytest.approx(d0 * ratio, rel=1e-12)
                assert (a1, b1) == pytest.approx((a0, b0), rel=1e-9, abs=1e-6)


def test_design_defect_targets_follow_the_period_density():
    text = TINY_PROBLEM.replace(
        'name = "split"\npackaging = "multi"\n',
        'name = "split"\npackaging = "multi"\ndefect_targets = { fast = "0.06 /cm^2" }\n',
    ).replace(
        "fault_coverage = 0.99\n",
        'fault_coverage = 0.99\ndefect_reduction = { form = "log_ratio", floor = "0.05 /cm^2", '
        "one_time_per_log = 1.0e6 }\n",
    )
    plan = plan_of(
        LIFE_3Y
        + '[life.process.fast]\ndefect_density = ["0.1 /cm^2", "0.08 /cm^2", "0.05 /cm^2"]\n',
        base=text,
    )
    targets = [
        p.problem.design_named("split").defect_targets["fast"] for p in periods(plan.base, plan)
    ]
    # 0.06 of a 0.1 base is 60 % of each period's density
    assert targets == pytest.approx([0.06, 0.048, 0.03], rel=1e-12)


def test_constant_life_npv_equals_the_single_problem_profit():
    """With nothing varying and no discounting, the periods' operating cash flows less
    the one-time costs add up to the file's profit at the life's total volume."""
    plan = plan_of(LIFE_3Y.replace("0.1", "0.0"))
    flows, one_time = [], None
    for p in periods(plan.base, plan):
        result = evaluate_design(Evaluator(p.problem), p.problem.design_named("split"))
        flows.append(result.profit + result.nre + result.improvement_spend)
        one_time = result.nre + result.improvement_spend
    whole = with_volume(plan.base, 100000)
    expected = evaluate_design(Evaluator(whole), whole.design_named("split")).profit
    assert plan_npv(plan, flows, one_time) == pytest.approx(expected, rel=1e-9)


# ---------------------------------------------------------------- reading
def test_no_life_table_means_no_plan(write_problem):
    assert life_plan(tomllib.loads(TINY_PROBLEM)) is None
    problem, plan = load_life(write_problem())
    assert plan is None and problem.market.volume == 100000


def test_load_life_reads_a_file(write_problem):
    path = write_problem(TINY_PROBLEM + STILL)
    problem, plan = load_life(path)
    assert plan.source == str(path) and plan.n == 3 and plan.labels == ["Y1", "Y2", "Y3"]
    assert plan.track("process.fast.wafer_cost").values == (10000.0, 10000.0, 10000.0)
    assert len(periods(problem, plan)) == 3


def test_periods_refuse_another_problem():
    plan = plan_of(LIFE_3Y)
    with pytest.raises(ValueError, match="the problem the plan was read with"):
        periods(with_volume(plan.base, 7), plan)


def test_the_documented_example_loads():
    doc = life_module.__doc__
    block = doc.split("::\n\n", 1)[1].split("\nWhat may vary", 1)[0]
    example = "\n".join(line[4:] for line in block.splitlines())
    data, source = read_problem_data("problems/server_processor.toml")
    data["life"] = tomllib.loads(example)["life"]
    plan = life_plan(data, source)
    assert plan.labels == ["Q1", "Q2", "Q3", "Q4", "Q5", "Q6"]
    # legacy: 0.04 + 0.01 exp(-W / 40000), W = 4500 wafers by the middle of Q1
    legacy = plan.track("process.legacy.defect_density").values
    assert legacy[0] == pytest.approx(0.04 + 0.01 * math.exp(-4500 / 40000), rel=REL)
