"""Checks of known-good-die package yield and cost per good package.

Outside truths: a two-die example worked step by step in the test, limiting cases, and
properties every correct cost model must have.
"""

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from optimizer.formulas.assembly import (
    cost_per_good_package,
    log_package_yield,
    package_yield_probability,
)


def test_two_die_package_worked_by_hand():
    # Hand-worked example: two copies of die A (passed cost 40, DL 0.001) and one of
    # die B (passed cost 25, DL 0.0005) on a substrate (15 per good one, yield 0.98),
    # three bonds at 2 each with yield 0.99, package 10 with yield 0.995, final test 5.
    p_dies = (1 - 0.001) ** 2 * (1 - 0.0005)
    p_bonds = 0.99**3
    p_good = p_dies * p_bonds * 0.98 * 0.995
    build = 2 * 40 + 25 + 15 + 3 * 2 + 10 + 5  # = 141
    expected_cost = build / p_good

    log1m_dl = np.log1p(-np.array([0.001, 0.0005]))
    copies = np.array([2, 1])
    assert_allclose(
        log_package_yield(log1m_dl, copies, 0.99, 0.98, 0.995), math.log(p_good), rtol=1e-13
    )
    assert_allclose(
        package_yield_probability(log1m_dl, copies, 0.99, 0.98, 0.995), p_good, rtol=1e-13
    )
    got = cost_per_good_package(
        np.array([40.0, 25.0]), copies, log1m_dl, 2.0, 0.99, 15.0, 0.98, 10.0, 0.995, 5.0
    )
    assert_allclose(got, expected_cost, rtol=1e-13)


def test_single_die_equals_single_die_formula():
    # Limiting case: with every design but one absent the package holds one die, so
    # P = (1 - DL) y_bond y_carrier y_package, even if an absent design is all bad.
    log1m_dl = np.array([-np.inf, math.log1p(-0.002), -0.5])
    copies = np.array([0, 1, 0])
    expected = (1 - 0.002) * 0.999 * 1.0 * 0.99
    assert_allclose(
        package_yield_probability(log1m_dl, copies, 0.999, 1.0, 0.99), expected, rtol=1e-13
    )
    cost = cost_per_good_package(
        np.array([np.inf, 50.0, 7.0]), copies, log1m_dl, 1.0, 0.999, 0.0, 1.0, 8.0, 0.99, 3.0
    )
    assert_allclose(cost, (50.0 + 1.0 + 8.0 + 3.0) / expected, rtol=1e-13)


def test_vector_over_leading_axes_equals_loop():
    # Broadcasting check: several packages priced at once, die designs on the last axis.
    log1m_dl = np.log1p(-np.array([[0.01, 0.001], [0.02, 0.0]]))
    copies = np.array([[1, 3], [2, 2]])
    costs = np.array([[30.0, 12.0], [22.0, 9.0]])
    vec = cost_per_good_package(costs, copies, log1m_dl, 1.5, 0.995, 20.0, 0.97, 9.0, 0.99, 4.0)
    for i in range(2):
        one = cost_per_good_package(
            costs[i], copies[i], log1m_dl[i], 1.5, 0.995, 20.0, 0.97, 9.0, 0.99, 4.0
        )
        assert_allclose(vec[i], one, rtol=1e-15)


@settings(max_examples=80, deadline=None)
@given(
    costs=st.lists(st.floats(0.0, 1e4), min_size=3, max_size=3),
    copies=st.lists(st.integers(0, 6), min_size=3, max_size=3),
    dls=st.lists(st.floats(0.0, 0.5), min_size=3, max_size=3),
    bond_cost=st.floats(0.0, 100.0),
    bond_yield=st.floats(0.5, 1.0),
    carrier_cost=st.floats(0.0, 1e3),
    carrier_yield=st.floats(0.5, 1.0),
    package_cost=st.floats(0.0, 1e3),
    package_yield=st.floats(0.5, 1.0),
    final_test=st.floats(0.0, 100.0),
)
def test_cost_per_good_package_never_below_the_inputs(
    costs,
    copies,
    dls,
    bond_cost,
    bond_yield,
    carrier_cost,
    carrier_yield,
    package_cost,
    package_yield,
    final_test,
):
    # Property: scrap can only add cost, so a good package costs at least the sum of
    # what went into building one.
    n = np.array(copies, dtype=float)
    raw_sum = (n * np.array(costs)).sum() + carrier_cost + n.sum() * bond_cost
    raw_sum += package_cost + final_test
    got = cost_per_good_package(
        np.array(costs),
        n,
        np.log1p(-np.array(dls)),
        bond_cost,
        bond_yield,
        carrier_cost,
        carrier_yield,
        package_cost,
        package_yield,
        final_test,
    )
    assert got >= raw_sum * (1 - 1e-12)
    log_p = log_package_yield(np.log1p(-np.array(dls)), n, bond_yield, carrier_yield, package_yield)
    assert log_p <= 0.0
