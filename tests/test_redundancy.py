"""Checks of spare units, array repair and salvage bins at a given defect density, of
their survival given a number of defects, and of their mixture over a clustered (gamma)
density.

Each check names its outside truth: brute-force enumeration, a direct sum written in
the test, a limiting case derived by hand, scipy as reference library, or a seeded
Monte Carlo simulation of the defect process.
"""

import itertools
import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats

from optimizer.formulas.defect_mixture import mixed_yield
from optimizer.formulas.redundancy import (
    array_repair_factor,
    block_survival_by_count,
    log_array_repair_factor,
    log_block_factor,
    log_salvage_bin_probabilities,
    log_spare_unit_factor,
    salvage_bin_probabilities,
    spare_unit_factor,
)


def enumerate_patterns(unit_good, needed, spare):
    """P(at least `needed` good) by summing over every good/bad pattern of the units."""
    total = 0.0
    for pattern in itertools.product((True, False), repeat=needed + spare):
        if sum(pattern) >= needed:
            p = 1.0
            for good in pattern:
                p *= unit_good if good else 1 - unit_good
            total += p
    return total


# --------------------------------------------------------------------------- spare units


@pytest.mark.parametrize("needed, spare", [(n, s) for n in range(0, 5) for s in range(0, 7 - n)])
@pytest.mark.parametrize("unit_defects", [0.0, 0.02, 0.4, 1.5, 6.0])
def test_spare_units_match_brute_force_enumeration(needed, spare, unit_defects):
    # Brute force: all 2^(n+s) patterns of good and bad units (n + s <= 6).
    expected = enumerate_patterns(math.exp(-unit_defects), needed, spare)
    got = spare_unit_factor(unit_defects / 0.5, 0.5, needed, spare)
    assert_allclose(got, expected, rtol=1e-12, atol=1e-300)


def test_spare_unit_limits():
    # Limiting cases: nothing needed -> certain; no spare -> all n units good.
    d = np.array([0.0, 0.1, 3.0, 1e4])
    assert np.all(log_spare_unit_factor(0.2, d, 0, 3) == 0.0)
    assert_allclose(log_spare_unit_factor(0.2, d, 7, 0), -7 * 0.2 * d, rtol=1e-13)


def test_spare_unit_small_failure_keeps_precision():
    # Limiting case by hand: with unit failure q -> 0 the die fails only if s + 1 units
    # fail, so -log P ~ C(n+s, s+1) q^(s+1). Naive 1 - P would round to zero here.
    q = 1e-7
    a_d = -math.log1p(-q)
    got = -log_spare_unit_factor(a_d, 1.0, 10, 2)
    assert_allclose(got, math.comb(12, 3) * q**3, rtol=1e-5)


def test_spare_unit_log_space_far_out():
    # Limiting case by hand: with almost every unit bad, P ~ C(n+s, n) y^n (1-y)^s.
    # At a D = 300 the linear value underflows, the log must not.
    a_d = 300.0
    got = log_spare_unit_factor(a_d, 1.0, 6, 2)
    expected = math.log(math.comb(8, 6)) - 6 * a_d + 2 * math.log1p(-math.exp(-a_d))
    assert np.isfinite(got)
    assert_allclose(got, expected, rtol=1e-12)


@settings(max_examples=80, deadline=None)
@given(
    unit_defects=st.floats(0.0, 50.0),
    needed=st.integers(0, 40),
    spare=st.integers(0, 10),
)
def test_more_spares_never_lower_the_yield(unit_defects, needed, spare):
    # Property: adding a spare unit can only help the conditional yield.
    fewer = log_spare_unit_factor(unit_defects, 1.0, needed, spare)
    more = log_spare_unit_factor(unit_defects, 1.0, needed, spare + 1)
    assert more >= fewer - 1e-12 * abs(fewer)
    assert fewer <= 0.0


def test_spare_unit_vector_equals_scalar_loop():
    # Broadcasting check over every argument at once.
    a = np.array([0.05, 0.3])[:, None, None]
    d = np.array([0.1, 2.0])[None, :, None]
    needed = np.array([1, 4, 9])
    spare = np.array([2, 0, 3])
    vec = log_spare_unit_factor(a, d, needed, spare)
    for i, j, k in itertools.product(range(2), range(2), range(3)):
        one = log_spare_unit_factor(a[i, 0, 0], d[0, j, 0], needed[k], spare[k])
        assert vec[i, j, k] == one


def test_gamma_mixed_spare_yield_matches_monte_carlo():
    # Seeded Monte Carlo of the defect process itself: draw a density per die from a
    # gamma distribution, then independent Poisson defect counts in the plain area and
    # in each unit; the die is good with no plain defect and >= n defect-free units.
    rng = np.random.default_rng(20240611)
    dies = 200_000
    alpha, d0 = 1.5, 0.4
    plain, unit, needed, spare = 1.2, 0.35, 6, 2
    density = rng.gamma(alpha, d0 / alpha, size=dies)
    plain_ok = rng.poisson(plain * density) == 0
    units_ok = rng.poisson(unit * density[:, None], size=(dies, needed + spare)) == 0
    good = plain_ok & (units_ok.sum(axis=1) >= needed)
    estimate = good.mean()
    sigma = math.sqrt(estimate * (1 - estimate) / dies)

    def factor(d):
        return log_spare_unit_factor(unit, d, needed, spare)

    got = mixed_yield("negative_binomial", d0, plain, factor, clustering_alpha=alpha)
    assert abs(got - estimate) < 4 * sigma
    # The spares must matter at this size, or the check would not test them.
    no_spare = mixed_yield(
        "negative_binomial", d0, plain + needed * unit, None, clustering_alpha=alpha
    )
    assert got - no_spare > 10 * sigma


# --------------------------------------------------------------------------- array repair


def repair_by_direct_sum(area, density, fraction, repairs):
    """exp(-(1-f) A D) * sum_{j <= R} Poisson(j; f A D), written out with the math module."""
    m = fraction * area * density
    cdf = sum(m**j * math.exp(-m) / math.factorial(j) for j in range(repairs + 1))
    return math.exp(-(1 - fraction) * area * density) * cdf


@pytest.mark.parametrize("fraction", [0.0, 0.5, 0.9, 1.0])
@pytest.mark.parametrize("repairs", [0, 1, 3, 12])
@pytest.mark.parametrize("density", [0.0, 0.05, 0.8, 6.0])
def test_array_repair_matches_direct_poisson_sum(fraction, repairs, density):
    # Direct sum over the Poisson pmf, independent of scipy.
    expected = repair_by_direct_sum(2.0, density, fraction, repairs)
    got = array_repair_factor(2.0, density, fraction, repairs)
    assert_allclose(got, expected, rtol=1e-12)


def test_array_repair_without_repairs_is_poisson():
    # Limiting case: R = 0 leaves every defect fatal, whatever fraction is repairable.
    d = np.array([0.0, 0.3, 5.0, 1e3])
    for fraction in (0.0, 0.4, 1.0):
        assert_allclose(log_array_repair_factor(1.5, d, fraction, 0), -1.5 * d, rtol=1e-13)


def test_array_repair_log_space_far_out():
    # Limiting case by hand: with the mean m = f A D far above R, the CDF is dominated
    # by its top terms; sum the last 60 in logs with math.lgamma. scipy's plain CDF
    # underflows to zero here, the log must stay finite.
    area, density, fraction, repairs = 1.0, 2000.0, 0.8, 40
    m = fraction * area * density
    terms = [j * math.log(m) - m - math.lgamma(j + 1) for j in range(repairs + 1)]
    top = max(terms)
    expected = (
        -(1 - fraction) * area * density + top + math.log(sum(math.exp(t - top) for t in terms))
    )
    got = log_array_repair_factor(area, density, fraction, repairs)
    assert np.isfinite(got)
    assert_allclose(got, expected, rtol=1e-12)


def test_more_repairs_never_lower_the_yield():
    # Property: a larger repair budget can only help.
    d = np.linspace(0.0, 10.0, 41)
    values = np.stack([log_array_repair_factor(1.0, d, 0.85, r) for r in range(8)])
    assert np.all(np.diff(values, axis=0) >= -1e-15)


# --------------------------------------------------------------------------- salvage bins


def test_salvage_bins_match_scipy_binomial():
    # Reference library: scipy.stats.binom.pmf with unit yield exp(-a D).
    a, d = 0.3, np.array([0.2, 1.0, 4.0])
    total = 6
    y = np.exp(-a * d)
    expected = stats.binom.pmf(np.arange(total + 1), total, y[:, None])
    got = salvage_bin_probabilities(a, d[:, None], total)[:, 0, :]
    assert_allclose(got, expected, rtol=1e-12, atol=1e-300)


def test_salvage_bins_are_consistent_with_spare_factor():
    # Consistency: P(at least n good) from the bins equals the spare-unit factor, and
    # bins beyond an element's own unit count are empty.
    a, d = 0.2, 0.9
    total = np.array([5, 8])
    probs = salvage_bin_probabilities(a, d, total)
    assert probs.shape == (2, 9)
    assert_allclose(probs.sum(axis=-1), 1.0, rtol=1e-13)
    assert np.all(probs[0, 6:] == 0.0)
    for n in range(9):
        assert_allclose(
            probs[1, n:].sum(), spare_unit_factor(a, d, n, 8 - n), rtol=1e-12, atol=1e-300
        )
    # Limiting case by hand: all 8 units good at a D = 2000 has log P = -8 a D exactly,
    # far below the linear underflow.
    assert_allclose(log_salvage_bin_probabilities(a, 1e4, 8)[-1], -8 * a * 1e4, rtol=1e-14)


# --------------------------------------------------------------------------- given k defects


def survival_by_enumeration(units, low, high, repairs, fraction, k):
    """P(low <= good units <= high | k defects) in exact rational arithmetic, summing over
    every placement of the k defects on the units and every repairable/fatal pattern."""
    total = Fraction(0)
    for placement in itertools.product(range(units), repeat=k):
        for kinds in itertools.product((True, False), repeat=k):
            weight = Fraction(1, units**k)
            for repairable in kinds:
                weight *= fraction if repairable else 1 - fraction
            fixed = [0] * units
            dead = [False] * units
            for unit, repairable in zip(placement, kinds, strict=True):
                if repairable:
                    fixed[unit] += 1
                else:
                    dead[unit] = True
            good = sum(not dead[u] and fixed[u] <= repairs for u in range(units))
            if low <= good <= high:
                total += weight
    return total


@pytest.mark.parametrize(
    "units, low, high, repairs",
    [(3, 2, 3, 0), (3, 1, 2, 0), (3, 2, 3, 1), (2, 1, 2, 2), (3, 1, 1, 1), (3, 0, 2, 1)],
)
def test_survival_given_k_defects_matches_exact_enumeration(units, low, high, repairs):
    # Brute force with fractions: every placement of k <= 4 defects (units^k x 2^k cases).
    fraction = Fraction(7, 10)
    got = block_survival_by_count(units, low, repairs, float(fraction), 4, max_good=high)
    expected = [
        float(survival_by_enumeration(units, low, high, repairs, fraction, k)) for k in range(5)
    ]
    assert_allclose(got, expected, rtol=1e-14, atol=1e-300)


def test_survival_without_repair_is_the_occupancy_distribution():
    # Feller, Vol. 1, ch. II (occupancy): k balls in N cells hit exactly h distinct cells
    # with probability C(N, h) h! S(k, h) / N^k, S the Stirling numbers of the second
    # kind; computed here exactly with Python integers. 60 of 64 units needed.
    units, needed, length = 64, 60, 200
    stirling = [[0] * (units + 1) for _ in range(length)]
    stirling[0][0] = 1
    for k in range(1, length):
        for h in range(1, units + 1):
            stirling[k][h] = h * stirling[k - 1][h] + stirling[k - 1][h - 1]
    expected = [
        float(
            Fraction(
                sum(
                    math.comb(units, h) * math.factorial(h) * stirling[k][h]
                    for h in range(units - needed + 1)
                ),
                units**k,
            )
        )
        for k in range(length)
    ]
    got = block_survival_by_count(units, needed, 0, 0.0, length - 1)
    assert_allclose(got, expected, rtol=1e-12, atol=1e-300)
    assert 0 < got[-1] < 1e-200  # the check reaches deep into the tail


@pytest.mark.parametrize("repairs, fraction", [(0, 0.0), (4, 0.8), (16, 0.5)])
def test_poisson_average_of_survival_is_the_fixed_density_factor(repairs, fraction):
    # Poissonisation: with Poisson(N a D) defects on the block, sum_k P(k) pi_k is the
    # block factor at density D, here from scipy.stats (binom with the unit yield from
    # poisson.cdf). This identity is what the exact mixture over D rests on.
    units, needed, a = 10, 7, 0.3
    pi = block_survival_by_count(units, needed, repairs, fraction, 400)
    for d in (0.05, 1.0, 4.0):
        weights = stats.poisson.pmf(np.arange(401), units * a * d)
        unit = math.exp(-(1 - fraction) * a * d) * stats.poisson.cdf(repairs, fraction * a * d)
        expected = stats.binom.sf(needed - 1, units, unit)
        assert_allclose(weights @ pi, expected, rtol=1e-12)


def test_survival_never_rises_with_more_defects():
    # Property: one more defect cannot make a block work ("at least" ranges only).
    for repairs, fraction in [(0, 0.0), (3, 0.9), (16, 0.6)]:
        pi = block_survival_by_count(12, 9, repairs, fraction, 600)
        assert np.all(np.diff(pi) <= 1e-15 * pi[:-1])
        assert pi[0] == 1.0


@pytest.mark.parametrize("low, high", [(5, 8), (3, 6), (0, 2), (8, 8)])
@pytest.mark.parametrize("repairs, fraction", [(0, 0.0), (2, 0.75)])
def test_block_factor_matches_scipy_binomial(low, high, repairs, fraction):
    # Reference library: scipy.stats.binom.pmf summed over the band, unit yield
    # exp(-(1 - f) a D) P(Poisson(f a D) <= R) from scipy.stats.poisson.
    a, total = 0.15, 8
    d = np.array([0.01, 0.5, 3.0, 20.0])
    unit = np.exp(-(1 - fraction) * a * d) * stats.poisson.cdf(repairs, fraction * a * d)
    if repairs == 0:
        unit = np.exp(-a * d)
    k = np.arange(low, high + 1)
    expected = stats.binom.pmf(k[None, :], total, unit[:, None]).sum(axis=1)
    got = np.exp(log_block_factor(a, d, total, low, high, repairs, fraction))
    assert_allclose(got, expected, rtol=1e-12, atol=1e-300)
