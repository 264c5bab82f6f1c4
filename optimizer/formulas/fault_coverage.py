"""Wafer-sort test with imperfect fault coverage (Williams and Brown, 1981).

A test with fault coverage T passes a fraction Y^T of dies of yield Y; of the passed dies
a fraction DL = 1 - Y^(1-T) is bad (the defect level). Functions taking ``log_die_yield``
work in log space so that tiny yields do not underflow.

References
----------
T. W. Williams and N. C. Brown, "Defect Level as a Function of Fault Coverage",
IEEE Transactions on Computers C-30(12), 1981.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike


def log_pass_fraction(log_die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """log of the fraction of dies that pass sort, T log Y [-]."""
    return np.asarray(fault_coverage, dtype=float) * np.asarray(log_die_yield, dtype=float)


def log1m_defect_level_from_log(log_die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """log(1 - DL) = (1 - T) log Y [-]: log of the good fraction among passed dies."""
    return (1.0 - np.asarray(fault_coverage, dtype=float)) * np.asarray(log_die_yield, dtype=float)


def pass_fraction(die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Fraction of dies that pass sort, Y^T [-].

    Parameters
    ----------
    die_yield : array_like
        Die yield Y [-], in [0, 1].
    fault_coverage : array_like
        Fault coverage T [-], in [0, 1].
    """
    return np.power(np.asarray(die_yield, dtype=float), np.asarray(fault_coverage, dtype=float))


def defect_level(die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Defect level of passed dies, DL = 1 - Y^(1-T) [-] (Williams and Brown 1981)."""
    with np.errstate(divide="ignore"):
        log_y = np.log(np.asarray(die_yield, dtype=float))
    return -np.expm1(log1m_defect_level_from_log(log_y, fault_coverage))


def cost_per_passed_die(
    raw_die_cost: ArrayLike, sort_cost_per_die: ArrayLike, die_yield: ArrayLike,
    fault_coverage: ArrayLike,
) -> np.ndarray:
    """(raw die cost + sort cost) / Y^T [currency]: every tested die is paid by the passed ones."""
    total = np.asarray(raw_die_cost, dtype=float) + np.asarray(sort_cost_per_die, dtype=float)
    return total / pass_fraction(die_yield, fault_coverage)
