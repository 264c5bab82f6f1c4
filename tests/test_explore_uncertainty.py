"""Monte Carlo: closed-form distributions through a monotone profit, seeds, fast path."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from optimizer.explore.fixed import ScenarioPricer
from optimizer.explore.paths import parse_path, study_from_data
from optimizer.explore.uncertainty import run_uncertainty, summarise
from optimizer.problem import ProblemError
from tests.explore_cases import (
    ONE_DIE,
    ONE_DIE_NRE,
    data,
    one_die_density_for_profit,
    one_die_profit,
    one_die_unit_cost,
)

MEDIAN, SIGMA = 0.2, 0.35


def _study(*entries: dict, text: str = ONE_DIE):
    return study_from_data({**data(text), "uncertain": list(entries)}, "one-die")


DENSITY = {
    "path": "process.only.defect_density",
    "distribution": "lognormal",
    "median": MEDIAN,
    "sigma_log": SIGMA,
}


def test_lognormal_defect_density_percentiles_through_poisson_yield():
    # source: closed form. Y = exp(-A D) (Poisson) and profit(D) from tests/explore_cases
    # is strictly decreasing in D, so profit's q-quantile is profit(D_(1-q)), where D
    # quantiles are scipy.stats.lognorm(s=sigma_log, scale=median). Mapping the Monte
    # Carlo percentile back to D, its lognormal CDF must be 1 - q within sampling error:
    # the empirical q-quantile sits at CDF level q +- sqrt(q (1 - q) / n) (one s.e.).
    n = 1500
    result = run_uncertainty(_study(DENSITY), samples=n, seed=7, top=1)
    reference = stats.lognorm(s=SIGMA, scale=MEDIAN)
    row = result.summary.iloc[0]
    for q, column in ((0.10, "p10"), (0.50, "p50"), (0.90, "p90")):
        density = one_die_density_for_profit(row[column])
        level = reference.cdf(density)
        assert level == pytest.approx(1 - q, abs=4 * math.sqrt(q * (1 - q) / n))
    # every sample is priced exactly as the closed form says at its drawn density
    expected = np.array([one_die_profit(d) for d in result.samples[:, 0]])
    np.testing.assert_allclose(result.profit[:, 0], expected, rtol=1e-10)
    assert result.summary.iloc[0]["prob_best"] == 1.0


def test_market_only_inputs_map_exactly_and_match_the_full_path():
    # source: profit = V (p - c) - NRE is increasing and affine in V, and numpy's linear
    # percentile commutes with increasing affine maps: P_q(profit) = (p - c) P_q(V) - NRE.
    volume = {"path": "market.volume", "distribution": "lognormal", "median": 2e6, "sigma_log": 0.4}
    study = _study(volume)
    result = run_uncertainty(study, samples=800, seed=3, top=1)
    margin = 120.0 - one_die_unit_cost(0.2)  # p - c per unit, from the closed form
    for q in (10, 50, 90):
        expected = margin * np.percentile(result.samples[:, 0], q) - ONE_DIE_NRE
        assert result.summary.iloc[0][f"p{q}"] == pytest.approx(expected, rel=1e-10)
    # and within sampling error of the scipy lognormal quantile of V
    median_volume = (result.summary.iloc[0]["p50"] + ONE_DIE_NRE) / margin
    level = stats.lognorm(s=0.4, scale=2e6).cdf(median_volume)
    assert level == pytest.approx(0.5, abs=4 * math.sqrt(0.25 / 800))
    # the market-only shortcut prices exactly like the full evaluator path
    pricer = ScenarioPricer(study.data, study.source, result.designs, [parse_path("market.volume")])
    assert pricer.market_only
    values = result.samples[:25]
    quick = pricer.price(values).profit
    slow = np.array([pricer._full(row)[0] for row in values])
    np.testing.assert_allclose(quick, slow, rtol=1e-12)


def test_same_seed_same_result_other_seed_differs():
    study = _study(DENSITY)
    a = run_uncertainty(study, samples=60, seed=11, top=1)
    b = run_uncertainty(study, samples=60, seed=11, top=1)
    c = run_uncertainty(study, samples=60, seed=12, top=1)
    np.testing.assert_array_equal(a.samples, b.samples)
    np.testing.assert_array_equal(a.profit, b.profit)
    assert not np.array_equal(a.samples, c.samples)


def test_summary_statistics_by_hand():
    # source: hand count on a 4-sample, 2-design table (NaN = design unbuildable)
    profit = np.array([[1.0, 2.0], [3.0, 1.0], [5.0, np.nan], [2.0, 4.0]])
    table = summarise(profit)
    assert list(table["prob_best"]) == [0.5, 0.5]
    assert list(table["unbuildable_samples"]) == [0, 1]
    assert table.loc[0, "p50"] == 2.5  # median of 1, 2, 3, 5
    assert table.loc[1, "p50"] == 2.0  # median of 1, 2, 4
    assert table.loc[0, "mean"] == 2.75


def test_file_without_uncertain_inputs_is_a_clear_error():
    with pytest.raises(ProblemError, match=r"no \[\[uncertain\]\] inputs"):
        run_uncertainty(study_from_data(data(ONE_DIE), "one-die"), samples=10)


@pytest.mark.parametrize(
    ("entry", "words"),
    [
        # a normal density this wide draws negative densities
        (
            {
                "path": "process.only.defect_density",
                "distribution": "normal",
                "mean": 0.05,
                "std": 0.05,
            },
            "cannot be negative",
        ),
        # fault coverage is a fraction: draws above 1 break the schema
        (
            {
                "path": "process.only.fault_coverage",
                "distribution": "normal",
                "mean": 0.97,
                "std": 0.03,
            },
            "less than or equal to 1",
        ),
    ],
)
def test_draws_outside_the_field_stop_before_pricing(entry, words):
    with pytest.raises(ProblemError) as info:
        run_uncertainty(_study(entry), samples=200, seed=1, top=1)
    assert info.value.field == f"uncertain[0] ({entry['path']})"
    assert words in info.value.message and "lognormal" in info.value.message
