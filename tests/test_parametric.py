"""Checks of the parametric (sigma margin) yield against the normal distribution.

Outside truths: scipy.stats.norm as reference library, and normal tail values of
common practice (quality engineering tables).
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import norm

from optimizer.formulas.parametric import (
    fraction_outside,
    log_parametric_yield,
    parametric_yield,
    shifted_tail_fraction,
    sigma_margin_for_fraction_outside,
    sigma_margin_for_yield,
)

K = np.array([0.0, 0.3, 1.0, 2.5, 4.0, 6.0, 9.0])


def test_yield_matches_scipy_normal():
    # Reference library: one-sided Phi(k), two-sided Phi(k) - Phi(-k).
    assert_allclose(parametric_yield(K, two_sided=False), norm.cdf(K), rtol=1e-14)
    assert_allclose(
        parametric_yield(K, two_sided=True), norm.cdf(K) - norm.cdf(-K), rtol=1e-13, atol=1e-16
    )


def test_fraction_outside_matches_scipy_tails():
    # Reference library: the survival function, which keeps far-tail precision.
    assert_allclose(fraction_outside(K, two_sided=False), norm.sf(K), rtol=1e-13)
    assert_allclose(fraction_outside(K, two_sided=True), 2 * norm.sf(K), rtol=1e-13)


@pytest.mark.parametrize("k, outside", [(4.0, 6.334e-5), (5.0, 5.733e-7), (6.0, 1.973e-9)])
def test_two_sided_common_practice_values(k, outside):
    # Common practice: two-sided fraction outside +-4, 5, 6 sigma.
    assert_allclose(fraction_outside(k, two_sided=True), outside, rtol=1e-3)


def test_one_sided_shifted_six_sigma_is_3_4_per_million():
    # Common practice: the "1.5 sigma shift" makes 6 sigma one-sided about 3.4 per
    # million, i.e. Q(4.5).
    assert_allclose(shifted_tail_fraction(6.0), 3.4e-6, rtol=2e-2)
    assert_allclose(shifted_tail_fraction(6.0, shift=1.5), norm.sf(4.5), rtol=1e-13)
    assert_allclose(shifted_tail_fraction(4.0, shift=0.0), norm.sf(4.0), rtol=1e-13)


def test_log_yield_matches_scipy_and_stays_accurate():
    # Reference library: norm.logcdf one-sided; log(Phi(k) - Phi(-k)) two-sided from
    # the survival function, which resolves -2e-9 at 6 sigma.
    assert_allclose(log_parametric_yield(K, two_sided=False), norm.logcdf(K), rtol=1e-13)
    k = K[1:]
    assert_allclose(log_parametric_yield(k, two_sided=True), np.log1p(-2 * norm.sf(k)), rtol=1e-12)
    # Limiting cases: far below the spec log Phi(k) ~ -k^2/2 stays finite; a two-sided
    # margin of zero passes nothing.
    assert np.isfinite(log_parametric_yield(-40.0, two_sided=False))
    assert log_parametric_yield(0.0, two_sided=True) == -np.inf
    # Small two-sided margin: erf(x) ~ 2x/sqrt(pi), Abramowitz and Stegun 7.1.5.
    x = 1e-9
    assert_allclose(
        log_parametric_yield(x, two_sided=True), np.log(2 * x / np.sqrt(2 * np.pi)), rtol=1e-12
    )


@pytest.mark.parametrize("two_sided", [False, True])
def test_inverse_round_trip(two_sided):
    # Round trip: margin -> yield -> margin, and margin -> tail -> margin for tails the
    # yield itself cannot carry (1 - 2e-9).
    k = np.array([0.5, 1.0, 3.0, 4.5, 6.0])
    assert_allclose(sigma_margin_for_yield(parametric_yield(k, two_sided), two_sided), k, rtol=1e-7)
    assert_allclose(
        sigma_margin_for_fraction_outside(fraction_outside(k, two_sided), two_sided),
        k,
        rtol=1e-12,
    )


def test_inverse_matches_scipy_ppf():
    # Reference library: norm.ppf for the one-sided inverse.
    y = np.array([0.01, 0.5, 0.9, 0.999])
    assert_allclose(sigma_margin_for_yield(y, two_sided=False), norm.ppf(y), rtol=1e-12)
    assert_allclose(sigma_margin_for_yield(y, two_sided=True), norm.ppf((1 + y) / 2), rtol=1e-9)
