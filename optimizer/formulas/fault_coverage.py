"""Wafer-sort test with imperfect fault coverage (Williams and Brown, 1981).

A test that detects a fraction ``T`` of the possible faults lets some bad dies pass.
With die yield ``Y``, a fraction ``Y^T`` of the dies passes and a fraction
``DL = 1 - Y^(1 - T)`` of the passed dies is bad (the defect level). A package built
from passed dies needs ``log(1 - DL) = (1 - T) log Y``, which stays exact when ``DL`` is
a few parts per million or when ``Y`` underflows; functions taking ``log_die_yield``
work in that space.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "pass_fraction",
    "log_pass_fraction",
    "defect_level",
    "defect_level_from_log_yield",
    "log1m_defect_level",
    "log1m_defect_level_from_log",
    "cost_per_passed_die",
    "cost_per_passed_die_from_log_yield",
]


def _result(x: ArrayLike) -> np.ndarray:
    return np.asarray(x)[()]


def _log(die_yield: ArrayLike) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(np.asarray(die_yield, dtype=float))


def _scaled_log(log_die_yield: ArrayLike, exponent: ArrayLike) -> np.ndarray:
    """``exponent * log Y`` with ``0 * log 0`` taken as 0 (a zero power is 1)."""
    log_y = np.asarray(log_die_yield, dtype=float)
    e = np.asarray(exponent, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(e == 0, 0.0, e * log_y)


def log_pass_fraction(log_die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Natural log of the fraction of dies that pass an imperfect test.

    Parameters
    ----------
    log_die_yield : array_like
        Natural log of the die yield [-], <= 0.
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``log(Y^T)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln P_{pass} = T \\ln Y

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, "Defect level as a function of fault
       coverage", IEEE Trans. Computers 30(12), 1981.
    """
    return _result(_scaled_log(log_die_yield, fault_coverage))


def pass_fraction(die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Fraction of dies that pass a test of the given fault coverage.

    Parameters
    ----------
    die_yield : array_like
        Die yield [-], in [0, 1].
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``Y^T`` [-], in [Y, 1]; ``Y`` at full coverage, 1 at zero coverage.

    Notes
    -----
    .. math:: P_{pass} = Y^T

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    return _result(np.exp(_scaled_log(_log(die_yield), fault_coverage)))


def log1m_defect_level(log_die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Natural log of the good fraction of passed dies, ``log(1 - DL)``.

    Parameters
    ----------
    log_die_yield : array_like
        Natural log of the die yield [-], <= 0.
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``log(1 - DL)`` [-], <= 0; exactly 0 at full coverage.

    Notes
    -----
    .. math:: \\ln(1 - DL) = (1 - T) \\ln Y

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    escape = 1 - np.asarray(fault_coverage, dtype=float)
    return _result(_scaled_log(log_die_yield, escape))


# Earlier name, still imported by optimizer.evaluator; prefer log1m_defect_level.
log1m_defect_level_from_log = log1m_defect_level


def defect_level_from_log_yield(log_die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Defect level of passed dies from the log of the die yield.

    Parameters
    ----------
    log_die_yield : array_like
        Natural log of the die yield [-], <= 0.
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        Fraction of passed dies that are bad [-], in [0, 1].

    Notes
    -----
    .. math:: DL = 1 - Y^{1 - T} = -\\operatorname{expm1}((1 - T) \\ln Y)

    ``expm1`` keeps defect levels of parts per million at full precision.

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    return _result(-np.expm1(log1m_defect_level(log_die_yield, fault_coverage)))


def defect_level(die_yield: ArrayLike, fault_coverage: ArrayLike) -> np.ndarray:
    """Defect level: the fraction of dies passing the test that are bad.

    Parameters
    ----------
    die_yield : array_like
        Die yield [-], in [0, 1].
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``DL`` [-], in [0, 1]; 0 at full coverage, ``1 - Y`` at zero coverage.

    Notes
    -----
    .. math:: DL = 1 - Y^{1 - T}

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    return _result(defect_level_from_log_yield(_log(die_yield), fault_coverage))


def cost_per_passed_die_from_log_yield(
    raw_die_cost: ArrayLike,
    sort_cost_per_die: ArrayLike,
    log_die_yield: ArrayLike,
    fault_coverage: ArrayLike,
) -> np.ndarray:
    """Cost of each die that passes wafer sort, from the log of the die yield.

    Parameters
    ----------
    raw_die_cost : array_like
        Wafer cost share of one die site, before yield [currency].
    sort_cost_per_die : array_like
        Wafer-sort test cost per die tested [currency].
    log_die_yield : array_like
        Natural log of the die yield [-], <= 0.
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        Cost per passed die [currency]; ``inf`` when no die passes.

    Notes
    -----
    .. math:: C_{pass} = (C_{raw} + C_{sort}) / Y^T

    Every die is made and tested; only the passing ones carry the cost.

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    total = np.asarray(raw_die_cost, dtype=float) + np.asarray(sort_cost_per_die, dtype=float)
    with np.errstate(over="ignore"):
        return _result(total * np.exp(-_scaled_log(log_die_yield, fault_coverage)))


def cost_per_passed_die(
    raw_die_cost: ArrayLike,
    sort_cost_per_die: ArrayLike,
    die_yield: ArrayLike,
    fault_coverage: ArrayLike,
) -> np.ndarray:
    """Cost of each die that passes wafer sort.

    Parameters
    ----------
    raw_die_cost : array_like
        Wafer cost share of one die site, before yield [currency].
    sort_cost_per_die : array_like
        Wafer-sort test cost per die tested [currency].
    die_yield : array_like
        Die yield [-], in [0, 1].
    fault_coverage : array_like
        Fraction of faults the test detects [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        Cost per passed die [currency].

    Notes
    -----
    .. math:: C_{pass} = (C_{raw} + C_{sort}) / Y^T

    References
    ----------
    .. [1] T. W. Williams and N. C. Brown, IEEE Trans. Computers 30(12), 1981.
    """
    return _result(
        cost_per_passed_die_from_log_yield(
            raw_die_cost, sort_cost_per_die, _log(die_yield), fault_coverage
        )
    )
