"""The evaluator against closed forms, hand calculations and properties."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.special import lambertw

from optimizer.designs import DieSpec, evaluate_design, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.problem import load_problem, parse_problem


def chiplet_problem(
    area_mm2: float, n: int, defect_density: float, wafer_cost: float, assembly_cost: float
) -> dict:
    """N identical chiplets splitting one area; only silicon and per-chiplet assembly cost."""
    return {
        "market": {"unit_price": 1e4, "volume": 1e5},
        "process": [
            {
                "name": "p",
                "wafer_diameter": "300 mm",
                "edge_exclusion": "0 mm",
                "scribe_width": "0 mm",
                "wafer_cost": wafer_cost,
                "defect_density": f"{defect_density} /cm^2",
                "yield_model": "poisson",
                "die_count": "area_ratio",
                "reticle_width": "1000 mm",
                "reticle_height": "1000 mm",
            }
        ],
        "packaging": [
            {
                "name": "mcm",
                "kind": "organic_substrate",
                "max_dies": 64,
                "bond_cost_per_die": assembly_cost,
                "interface_density": "100 GB/s/mm^2",
            }
        ],
        "block": [{"name": "slice", "area": f"{area_mm2 / n} mm^2", "count": n}],
    }


def chiplet_cost(area_mm2, n, defect_density, wafer_cost, assembly_cost) -> float:
    problem = parse_problem(chiplet_problem(area_mm2, n, defect_density, wafer_cost, assembly_cost))
    spec = DieSpec(process="p", blocks={"slice": 1}, spares={}, repair={}, copies=n)
    return evaluate_specs(Evaluator(problem), [spec], "mcm").manufacturing_cost_per_good_unit


@pytest.mark.parametrize(
    "area_mm2, defect_density, assembly_cost",
    [(800.0, 1.0, 6.0), (600.0, 0.5, 2.0), (1200.0, 1.0, 60.0), (1000.0, 1.2, 150.0)],
)
def test_chiplet_split_matches_lambert_w_closed_form(area_mm2, defect_density, assembly_cost):
    # Closed form (edge loss ignored, cost proportional to area, Poisson yield, per-chiplet
    # assembly cost c_a): cost(N) = c_w A exp(A D / N) + N c_a, whose continuous optimum
    # has u = A D / N with u^2 e^u = c_a D / c_w, u* = 2 W(sqrt(c_a D / c_w) / 2).
    # Reference library: scipy.special.lambertw.
    wafer_cost = 10_000.0
    c_w = wafer_cost / (math.pi * 150.0**2) * 100.0  # per cm^2
    area_cm2 = area_mm2 / 100.0
    costs = np.array(
        [chiplet_cost(area_mm2, n, defect_density, wafer_cost, assembly_cost) for n in range(1, 21)]
    )
    n = np.arange(1, 21)
    expected = c_w * area_cm2 * np.exp(area_cm2 * defect_density / n) + n * assembly_cost
    assert_allclose(costs, expected, rtol=1e-9)
    u_star = 2 * lambertw(math.sqrt(assembly_cost * defect_density / c_w) / 2).real
    n_continuous = area_cm2 * defect_density / u_star
    n_best = int(n[np.argmin(costs)])
    assert abs(n_best - n_continuous) < 1.0 + 1e-9, (n_best, n_continuous)


def test_tiny_split_design_by_hand(tiny_text, write_problem):
    # Independent hand calculation of the 'split' design of the fixture, step by step:
    # negative binomial yield (Stapper 1983), Williams-Brown test (1981), known-good-die
    # assembly; gross dies from the wafer module (tested separately).
    from optimizer.formulas.wafer import gross_dies_exact

    problem = load_problem(write_problem(tiny_text))
    result = evaluate_design(Evaluator(problem), problem.design_named("split"))
    # interface: the one link (200 GB/s) is cut; each cpu die holds half the compute
    # traffic: 0.5 * 200 = 100 GB/s -> 1 mm^2 + 0.5 mm^2 port; the hub cuts 200 GB/s.
    cpu_area = 150.0 + 100.0 / 100.0 + 0.5
    hub_area = 40.0 * 1.05 + 200.0 / 100.0 + 0.5
    assert_allclose(result.dies[0].area_mm2, cpu_area, rtol=1e-12)
    assert_allclose(result.dies[1].area_mm2, hub_area, rtol=1e-12)
    r = 147.0
    g_cpu = gross_dies_exact(r, math.sqrt(cpu_area) + 0.1, math.sqrt(cpu_area) + 0.1)
    g_hub = gross_dies_exact(r, math.sqrt(hub_area) + 0.1, math.sqrt(hub_area) + 0.1)
    y_cpu = (1 + cpu_area / 100 * 0.1 / 2.0) ** -2.0
    y_hub = math.exp(-hub_area / 100 * 0.08)
    pass_cpu, pass_hub = y_cpu**0.99, y_hub**1.0
    dl_cpu = 1 - y_cpu**0.01
    kp_cpu = (10_000.0 / g_cpu + 1.0) / pass_cpu
    kp_hub = (4_000.0 / g_hub + 0.5) / pass_hub
    p_good = (1 - dl_cpu) ** 2 * 0.995**3
    cost = (2 * kp_cpu + kp_hub + 15.0 + 3 * 2.0 + 10.0 + 6.0) / p_good
    nre = (5e6 + 2e6 + 1e4 * cpu_area) + (1e6 + 2e6 + 1e4 * hub_area) + 1e6
    assert_allclose(result.dies[0].die_yield, y_cpu, rtol=1e-9)
    assert_allclose(result.dies[0].defect_level, dl_cpu, rtol=1e-9)
    assert_allclose(result.dies[0].cost_per_passed_die, kp_cpu, rtol=1e-9)
    assert_allclose(result.package_yield, p_good, rtol=1e-9)
    assert_allclose(result.manufacturing_cost_per_good_unit, cost, rtol=1e-9)
    assert_allclose(result.nre, nre, rtol=1e-9)
    assert_allclose(result.profit, 500.0 * 1e5 - 1e5 * cost - nre, rtol=1e-9)
    # the breakdown adds up to the total
    assert_allclose(sum(result.breakdown.values()), result.cost_per_good_unit, rtol=1e-12)


def test_identical_dies_pay_nre_once(tiny_text, write_problem):
    # Reuse of a die design: two copies of one die pay one mask set and one design cost.
    problem = load_problem(write_problem(tiny_text))
    ev = Evaluator(problem)
    two = [
        DieSpec("fast", {"compute": 1}, {}, {}, copies=2, name="a"),
        DieSpec("cheap", {"io": 1}, {}, {}, name="io"),
    ]
    one_each = [
        DieSpec("fast", {"compute": 1}, {}, {}, name="a"),
        DieSpec("fast", {"compute": 1}, {"compute": 1}, {}, name="b"),
        DieSpec("cheap", {"io": 1}, {}, {}, name="io"),
    ]
    a = evaluate_specs(ev, two, "multi")
    b = evaluate_specs(ev, one_each, "multi")
    second_design = 5e6 + 2e6 + 1e4 * b.dies[1].area_mm2
    assert_allclose(b.nre - a.nre, second_design, rtol=1e-9)


def test_interposer_priced_as_a_die():
    # The interposer is a die on its process: cost per good one = wafer cost / (gross x Y).
    data = chiplet_problem(400.0, 2, 0.1, 5000.0, 1.0)
    data["process"][0]["die_count"] = "exact"
    data["process"].append(
        {
            "name": "old",
            "wafer_diameter": "300 mm",
            "wafer_cost": 2000.0,
            "defect_density": "0.05 /cm^2",
            "yield_model": "poisson",
            "scribe_width": "0 mm",
            "edge_exclusion": "0 mm",
            "reticle_width": "1000 mm",
            "reticle_height": "1000 mm",
        }
    )
    data["packaging"][0].update(
        {
            "kind": "silicon_interposer",
            "interposer_process": "old",
            "interposer_area_factor": 1.25,
            "interposer_extra_area": "50 mm^2",
            "interposer_defect_sensitivity": 0.2,
            "carrier_cost": 7.0,
        }
    )
    ev = Evaluator(parse_problem(data))
    cost = ev.carrier_cost(ev.problem.packaging[0], np.array([400.0])).cost[0]
    from optimizer.formulas.wafer import gross_dies_exact

    area = 1.25 * 400 + 50
    gross = gross_dies_exact(150.0, math.sqrt(area), math.sqrt(area))
    expected = 2000.0 / gross / math.exp(-area / 100 * 0.2 * 0.05) + 7.0
    assert_allclose(cost, expected, rtol=1e-12)


@settings(max_examples=40, deadline=None)
@given(
    area=st.floats(10.0, 600.0),
    density=st.floats(0.01, 1.0),
    step=st.floats(1.05, 2.0),
)
def test_yield_falls_with_area_and_density(area, density, step):
    # Property: more critical area or more defects never raise the die yield.
    def die_yield(a, d):
        data = chiplet_problem(a, 1, d, 5000.0, 1.0)
        data["process"][0]["yield_model"] = "negative_binomial"
        data["process"][0]["clustering_alpha"] = 2.0
        problem = parse_problem(data)
        spec = DieSpec("p", {"slice": 1}, {}, {})
        return evaluate_specs(Evaluator(problem), [spec], "mcm").dies[0].die_yield

    base = die_yield(area, density)
    assert die_yield(area * step, density) <= base + 1e-15
    assert die_yield(area, density * step) <= base + 1e-15


@settings(max_examples=30, deadline=None)
@given(
    area=st.floats(20.0, 700.0),
    density=st.floats(0.0, 0.5),
    coverage=st.floats(0.5, 1.0),
    copies=st.integers(1, 6),
)
def test_cost_per_good_unit_never_below_raw_silicon(area, density, coverage, copies):
    # Property: scrap, test and assembly only add cost on top of the wafer cost of the dies.
    data = chiplet_problem(area * copies, copies, density, 8000.0, 2.0)
    data["process"][0].update({"die_count": "exact", "fault_coverage": coverage})
    problem = parse_problem(data)
    spec = DieSpec("p", {"slice": 1}, {}, {}, copies=copies)
    result = evaluate_specs(Evaluator(problem), [spec], "mcm")
    raw = copies * result.dies[0].raw_cost
    assert result.manufacturing_cost_per_good_unit >= raw * (1 - 1e-12)


def test_huge_die_yield_does_not_underflow():
    # Log space: a yield far below the smallest double stays a finite log and a zero yield,
    # and the cost per good unit is infinite rather than NaN.
    data = chiplet_problem(900.0, 1, 200.0, 5000.0, 1.0)
    problem = parse_problem(data)
    ev = Evaluator(problem)
    spec = DieSpec("p", {"slice": 1}, {}, {})
    from optimizer.designs import die_batch

    prices = ev.price_dies(die_batch(ev, [spec], 0))
    assert_allclose(prices.log_hard_yield[0], -9.0 * 200.0, rtol=1e-12)
    assert prices.die_yield[0] == 0.0
    result = evaluate_specs(ev, [spec], "mcm")
    assert math.isinf(result.manufacturing_cost_per_good_unit)


def test_demo_problems_evaluate():
    # Every explicit design of the demo problems prices to finite, consistent figures.
    for name in ("server_processor", "edge_accelerator"):
        problem = load_problem(f"problems/{name}.toml")
        ev = Evaluator(problem)
        for design in problem.design:
            r = evaluate_design(ev, design)
            assert math.isfinite(r.profit)
            assert 0 < r.package_yield <= 1
            assert_allclose(sum(r.breakdown.values()), r.cost_per_good_unit, rtol=1e-12)


def test_batch_pricing_equals_one_at_a_time():
    # Vector equals scalar loop: a die's price never depends on the other dies priced with it.
    from optimizer.designs import die_batch
    from optimizer.solver.candidates import build_candidates
    from optimizer.solver.selection import Selection, selection_specs

    problem = load_problem("problems/edge_accelerator.toml")
    ev = Evaluator(problem)
    cset = build_candidates(ev, 1, prune=False)
    rng = np.random.default_rng(7)
    for i in rng.choice(len(cset), size=25, replace=False):
        specs = selection_specs(ev, cset, Selection.of(1, [(i, 1)]))
        alone = ev.price_dies(die_batch(ev, specs, 1))
        for name in ("die_yield", "defect_level", "cost_per_passed_die", "area_mm2", "nre"):
            assert_allclose(getattr(alone, name)[0], getattr(cset.prices, name)[i], rtol=1e-12)


# ---------------------------------------------------------------- rules a design breaks
INTERPOSER = """
[[packaging]]
name = "si"
kind = "silicon_interposer"
max_dies = 4
interface_density = "400 GB/s/mm^2"
interposer_process = "cheap"
interposer_area_factor = 1.0
interposer_extra_area = "10 mm^2"
"""


def _tight(problem, **changes):
    """The problem with some limits changed (the design was priced without them)."""
    return problem.model_copy(update=changes)


def test_design_violations_names_every_broken_rule(tiny_text, write_problem):
    # Hand-checked limits around the fixture's 'split' design on an interposer: at
    # 400 GB/s/mm^2 (no port area) the cpu die is 150 + 100/400 = 150.25 mm^2 (2 copies),
    # the hub 40 x 1.05 + 200/400 = 42.5 mm^2 -> 3 dies; interposer = 1.0 x die area
    # (343 mm^2) + 10 mm^2 = 353 mm^2.
    from optimizer.designs import design_violations, specs_from_design
    from optimizer.problem import Requirements

    problem = load_problem(write_problem(tiny_text + INTERPOSER))
    specs = specs_from_design(problem.design_named("split"))
    result = evaluate_specs(Evaluator(problem), specs, "si", "split")
    assert result.violations == []
    assert result.carrier_area_mm2 == pytest.approx(353.0)
    fast, cheap = problem.process
    si = problem.packaging[2]
    checks = [
        (
            _tight(problem, process=[fast.model_copy(update={"reticle_width_mm": 10.0}), cheap]),
            "process[fast].reticle: die 'cpu' of",
        ),
        (
            _tight(
                problem, packaging=[*problem.packaging[:2], si.model_copy(update={"max_dies": 2})]
            ),
            "packaging[si].max_dies: 3 dies, more than 2",
        ),
        (
            _tight(
                problem,
                packaging=[
                    *problem.packaging[:2],
                    si.model_copy(update={"interposer_max_area_mm2": 300.0}),
                ],
            ),
            "packaging[si].interposer_max_area: interposer of 353 mm^2, above 300 mm^2",
        ),
    ]
    for tight, rule in checks:
        found = design_violations(tight, result)
        assert len(found) == 1 and found[0].startswith(rule), found
    # mandates: none set in the file; given explicitly they replace the file's
    need = Requirements(min_sigma_margin=3.0, min_die_yield=0.9)
    found = design_violations(problem, result, need)
    assert sum(v.startswith("requirements.min_sigma_margin") for v in found) == 2
    cpu_yield = (1 + 1.5025 * 0.1 / 2) ** -2  # negative binomial, alpha 2
    assert (
        found.count(
            f"requirements.min_die_yield: die 'cpu' yields {100 * cpu_yield:.2f}%, below 90.00%"
        )
        == 1
    )
    assert design_violations(problem, result, Requirements()) == []


def test_die_over_the_reticle_stays_an_error(tiny_text, write_problem):
    # A die that cannot be exposed in one field cannot be made: no price, an error
    # (rules the problem sets are priced and marked instead; see test_cli.py).
    from optimizer.problem import ProblemError

    problem = load_problem(write_problem(tiny_text, ('area = "150 mm^2"', 'area = "500 mm^2"')))
    with pytest.raises(ProblemError, match="reticle field"):
        evaluate_design(Evaluator(problem), problem.design_named("mono"))
