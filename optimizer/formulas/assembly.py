"""Known-good-die package assembly: package yield and cost per good package.

A package holding n_i copies of die design i (each passed at sort, defect level DL_i) is
good with probability prod_i (1 - DL_i)^n_i x y_bond^(sum n_i) x y_carrier x y_package.
A failed package scraps every die in it, so the cost per good package divides the whole
build cost by that probability. "Carrier" is the organic substrate or silicon interposer
(zero cost and yield 1 for a single die in a package).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike


def log_package_yield(
    log1m_defect_levels: ArrayLike,
    copies: ArrayLike,
    bond_yield: ArrayLike,
    carrier_yield: ArrayLike,
    package_yield: ArrayLike,
) -> np.ndarray:
    """log P(good package) [-]; die designs on the last axis.

    Parameters
    ----------
    log1m_defect_levels : array_like
        log(1 - DL_i) of each die design [-], <= 0.
    copies : array_like
        Copies n_i of each die design in one package [-].
    bond_yield, carrier_yield, package_yield : array_like
        Per-bond, carrier and package yields [-], in (0, 1].
    """
    n = np.asarray(copies, dtype=float)
    dies = (n * np.asarray(log1m_defect_levels, dtype=float)).sum(axis=-1)
    return (
        dies
        + n.sum(axis=-1) * np.log(bond_yield)
        + np.log(carrier_yield)
        + np.log(package_yield)
    )


def cost_per_good_package(
    cost_per_passed_die: ArrayLike,
    copies: ArrayLike,
    log1m_defect_levels: ArrayLike,
    bond_cost_per_die: ArrayLike,
    bond_yield: ArrayLike,
    carrier_cost_per_good: ArrayLike,
    carrier_yield: ArrayLike,
    package_cost: ArrayLike,
    package_yield: ArrayLike,
    final_test_cost: ArrayLike,
) -> np.ndarray:
    """(sum n_i k_i + carrier + sum n_i bond + package + final test) / P(good) [currency]."""
    n = np.asarray(copies, dtype=float)
    build = (
        (n * np.asarray(cost_per_passed_die, dtype=float)).sum(axis=-1)
        + np.asarray(carrier_cost_per_good, dtype=float)
        + n.sum(axis=-1) * np.asarray(bond_cost_per_die, dtype=float)
        + np.asarray(package_cost, dtype=float)
        + np.asarray(final_test_cost, dtype=float)
    )
    log_p = log_package_yield(log1m_defect_levels, n, bond_yield, carrier_yield, package_yield)
    return build * np.exp(-log_p)
