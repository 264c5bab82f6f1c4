"""Checks of defect level and test economics against Williams and Brown (1981).

Williams and Brown, "Defect Level as a Function of Fault Coverage", IEEE Trans.
Computers 30(12), 1981, plus limiting cases derived by hand.
"""

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from optimizer.formulas.fault_coverage import (
    cost_per_passed_die,
    cost_per_passed_die_from_log_yield,
    defect_level,
    defect_level_from_log_yield,
    log1m_defect_level,
    log_pass_fraction,
    pass_fraction,
)


def test_williams_brown_worked_example():
    # Williams and Brown (1981), from memory: Y = 0.7, T = 0.92 gives DL = 0.0281.
    assert_allclose(defect_level(0.7, 0.92), 0.0281, atol=1e-4)
    # Recomputed by hand with the math module.
    assert_allclose(defect_level(0.7, 0.92), 1 - 0.7 ** (1 - 0.92), rtol=1e-14)


def test_full_and_zero_coverage_limits():
    # Limiting cases (Williams and Brown 1981): a perfect test lets no bad die through
    # and passes exactly the good ones; no test passes everything, DL = 1 - Y.
    y = np.array([0.0, 0.2, 0.7, 1.0])
    assert np.all(defect_level(y, 1.0) == 0.0)
    assert_allclose(pass_fraction(y, 1.0), y, rtol=1e-15)
    assert_allclose(defect_level(y, 0.0), 1 - y, rtol=1e-15)
    assert np.all(pass_fraction(y, 0.0) == 1.0)


def test_parts_per_million_keep_precision():
    # Limiting case by hand: DL = -expm1((1 - T) log Y) ~ (1 - T)(-log Y) for T -> 1;
    # 1 - Y**(1-T) in plain arithmetic would lose most digits here.
    y, t = 0.9, 1 - 1e-6
    expected = -math.expm1((1 - t) * math.log(y))
    assert_allclose(defect_level(y, t), expected, rtol=1e-12)
    assert_allclose(log1m_defect_level(math.log(y), t), (1 - t) * math.log(y), rtol=1e-12)


def test_log_yield_variants_survive_underflow():
    # Log space: with log Y = -2000 the yield is 0.0 in floating point, yet a test of
    # coverage 0.999 leaves log(1 - DL) = -2 and lets exp(-1998) pass.
    log_y = -2000.0
    assert_allclose(log1m_defect_level(log_y, 0.999), -2.0, rtol=1e-12)
    assert_allclose(defect_level_from_log_yield(log_y, 0.999), -math.expm1(-2.0), rtol=1e-12)
    assert_allclose(log_pass_fraction(log_y, 0.999), -1998.0, rtol=1e-12)
    assert cost_per_passed_die_from_log_yield(10.0, 1.0, log_y, 0.999) == np.inf


def test_cost_per_passed_die_hand_example():
    # Hand-worked: raw 30 + sort 2 spread over Y^T = 0.8^0.95 passed dies.
    expected = (30.0 + 2.0) / 0.8**0.95
    assert_allclose(cost_per_passed_die(30.0, 2.0, 0.8, 0.95), expected, rtol=1e-14)
    assert_allclose(
        cost_per_passed_die_from_log_yield(30.0, 2.0, math.log(0.8), 0.95), expected, rtol=1e-14
    )


@settings(max_examples=60, deadline=None)
@given(y=st.floats(1e-6, 1.0), t=st.floats(0.0, 1.0))
def test_pass_and_escape_account_for_every_die(y, t):
    # Identity of the model: passed dies that are good, Y^T (1 - DL), are all the good
    # dies Y, because good dies always pass. Checked in logs, where 1 - DL keeps its
    # digits even when DL is close to 1.
    log_y = math.log(y)
    good_passed = log_pass_fraction(log_y, t) + log1m_defect_level(log_y, t)
    assert_allclose(good_passed, log_y, rtol=1e-12, atol=1e-300)
    assert_allclose(1 - defect_level(y, t), math.exp(log1m_defect_level(log_y, t)), atol=1e-15)
    # Y <= Y^T <= 1, up to the rounding of Y^T computed as exp(T log Y)
    assert y * (1 - 1e-12) <= pass_fraction(y, t) <= 1.0
