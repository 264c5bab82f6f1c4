"""Known-good-die package assembly: package yield and cost per good package.

A package holds ``n_i`` copies of die design ``i``, each one passed at wafer sort but
still bad with probability ``DL_i`` (the defect level). Each die bond, the carrier (the
organic substrate or silicon interposer; zero cost and yield 1 for a single die in a
package) and the package itself can fail too. A failed package scraps every die in it,
so the whole build cost is divided by the probability that the package is good.

Die designs sit on the last axis of the array arguments; leading axes (designs priced
in bulk) broadcast.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["log_package_yield", "package_yield_probability", "cost_per_good_package"]


def _result(x: ArrayLike) -> np.ndarray:
    return np.asarray(x)[()]


def _per_die_sum(copies: np.ndarray, per_die: ArrayLike) -> np.ndarray:
    """``sum_i n_i x_i`` over the last axis, with 0 copies contributing 0 even if x is inf."""
    x = np.asarray(per_die, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(copies == 0, 0.0, copies * x).sum(axis=-1)


def log_package_yield(
    log1m_defect_levels: ArrayLike,
    copies: ArrayLike,
    bond_yield: ArrayLike,
    carrier_yield: ArrayLike,
    package_yield: ArrayLike,
) -> np.ndarray:
    """Natural log of the probability that an assembled package is good.

    Parameters
    ----------
    log1m_defect_levels : array_like
        ``log(1 - DL_i)`` of each die design [-], <= 0; designs on the last axis.
    copies : array_like
        Copies ``n_i`` of each die design in one package [-], >= 0; last axis.
    bond_yield : array_like
        Probability that one die bond succeeds [-], in (0, 1]; a value per design on
        the last axis or one value for all.
    carrier_yield : array_like
        Probability that the substrate or interposer is good as assembled [-], in
        (0, 1]; 1 for a single die without a carrier.
    package_yield : array_like
        Probability that the package itself (lid, balls, encapsulation) is good [-],
        in (0, 1].

    Returns
    -------
    numpy.ndarray
        ``log P(good package)`` [-], <= 0; the die-design axis is summed out.

    Notes
    -----
    .. math::

        \\ln P = \\sum_i n_i \\ln(1 - DL_i) + \\sum_i n_i \\ln y_{bond}
                 + \\ln y_{carrier} + \\ln y_{package}

    Known-good-die flow: dies are tested before assembly, so only their escapes
    (defect level) reach the package.

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, "Defect level as a function of fault
       coverage", IEEE Trans. Computers 30(12), 1981 (defect level of tested dies).
    """
    n = np.asarray(copies, dtype=float)
    with np.errstate(divide="ignore"):
        log_bond = np.log(np.asarray(bond_yield, dtype=float))
        log_carrier = np.log(np.asarray(carrier_yield, dtype=float))
        log_package = np.log(np.asarray(package_yield, dtype=float))
    dies = _per_die_sum(n, log1m_defect_levels)
    bonds = _per_die_sum(n, log_bond)
    return _result(dies + bonds + log_carrier + log_package)


def package_yield_probability(
    log1m_defect_levels: ArrayLike,
    copies: ArrayLike,
    bond_yield: ArrayLike,
    carrier_yield: ArrayLike,
    package_yield: ArrayLike,
) -> np.ndarray:
    """Probability that an assembled package is good; see :func:`log_package_yield`.

    Parameters
    ----------
    log1m_defect_levels : array_like
        ``log(1 - DL_i)`` of each die design [-]; last axis.
    copies : array_like
        Copies of each die design [-]; last axis.
    bond_yield : array_like
        Yield of one die bond [-].
    carrier_yield : array_like
        Yield of the substrate or interposer as assembled [-].
    package_yield : array_like
        Yield of the package itself [-].

    Returns
    -------
    numpy.ndarray
        ``P(good package)`` [-], in [0, 1].

    Notes
    -----
    .. math::

        P = \\prod_i (1 - DL_i)^{n_i} \\; y_{bond}^{\\sum_i n_i} \\; y_{carrier} \\; y_{package}

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    return _result(
        np.exp(
            log_package_yield(log1m_defect_levels, copies, bond_yield, carrier_yield, package_yield)
        )
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
    """Cost of each good package, every failed package scrapping all its dies.

    Parameters
    ----------
    cost_per_passed_die : array_like
        Cost of one die that passed wafer sort [currency]; designs on the last axis.
    copies : array_like
        Copies ``n_i`` of each die design in one package [-], >= 0; last axis.
    log1m_defect_levels : array_like
        ``log(1 - DL_i)`` of each die design [-], <= 0; last axis.
    bond_cost_per_die : array_like
        Cost of bonding one die [currency]; per design on the last axis or one value.
    bond_yield : array_like
        Yield of one die bond [-], in (0, 1].
    carrier_cost_per_good : array_like
        Cost of one good substrate or interposer [currency]; 0 without a carrier.
    carrier_yield : array_like
        Yield of the carrier as assembled [-], in (0, 1].
    package_cost : array_like
        Cost of the package and its assembly [currency].
    package_yield : array_like
        Yield of the package itself [-], in (0, 1].
    final_test_cost : array_like
        Cost of testing one assembled package [currency].

    Returns
    -------
    numpy.ndarray
        Cost per good package [currency]; the die-design axis is summed out.

    Notes
    -----
    .. math::

        C = \\frac{\\sum_i n_i C_{pass,i} + C_{carrier} + \\sum_i n_i C_{bond}
                   + C_{package} + C_{final\\,test}}{P(\\text{good package})}

    with :math:`P` from :func:`log_package_yield`. The whole build cost is divided by
    :math:`P` because a failed package scraps every die, the carrier and the bonds in
    it; final test is paid by every package, good or not.

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    n = np.asarray(copies, dtype=float)
    build = (
        _per_die_sum(n, cost_per_passed_die)
        + _per_die_sum(n, bond_cost_per_die)
        + np.asarray(carrier_cost_per_good, dtype=float)
        + np.asarray(package_cost, dtype=float)
        + np.asarray(final_test_cost, dtype=float)
    )
    log_p = log_package_yield(log1m_defect_levels, n, bond_yield, carrier_yield, package_yield)
    with np.errstate(over="ignore"):
        return _result(build * np.exp(-log_p))
