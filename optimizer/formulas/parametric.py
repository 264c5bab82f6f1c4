"""Parametric ("soft") yield from a design margin in standard deviations.

A defect-free die may still miss its performance spec because a parameter (delay,
leakage, threshold) varies normally from die to die. Designing with a margin of ``k``
standard deviations makes the fraction that misses a normal tail: one tail for a one-
sided spec (only too slow fails), both tails for a two-sided one. Tails of 1e-9 are
computed from the tail itself, never as ``1 - yield``, so they keep full precision.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import erf, erfc, log_ndtr, ndtr, ndtri

__all__ = [
    "parametric_yield",
    "log_parametric_yield",
    "fraction_outside",
    "sigma_margin_for_yield",
    "sigma_margin_for_fraction_outside",
    "shifted_tail_fraction",
]

_SQRT2 = np.sqrt(2.0)


def _result(x: ArrayLike) -> np.ndarray:
    return np.asarray(x)[()]


def parametric_yield(sigma_margin: ArrayLike, two_sided: ArrayLike) -> np.ndarray:
    """Fraction of dies inside the spec for a margin of ``k`` standard deviations.

    Parameters
    ----------
    sigma_margin : array_like
        Design margin ``k`` in standard deviations [-] (>= 0 when two-sided).
    two_sided : bool or array_like of bool
        True if dies fail on both sides of the spec [-].

    Returns
    -------
    numpy.ndarray
        Parametric yield [-], in [0, 1].

    Notes
    -----
    .. math::

        Y = \\Phi(k) \\text{ (one-sided)}, \\qquad
        Y = 2\\Phi(k) - 1 = \\operatorname{erf}(k / \\sqrt{2}) \\text{ (two-sided)}

    The two-sided form is evaluated through ``erf``, which is exact near ``k = 0``.

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2 (normal probability function).
    """
    k = np.asarray(sigma_margin, dtype=float)
    return _result(np.where(two_sided, erf(k / _SQRT2), ndtr(k)))


def log_parametric_yield(sigma_margin: ArrayLike, two_sided: ArrayLike) -> np.ndarray:
    """Natural log of :func:`parametric_yield`, stable for large and small margins.

    Parameters
    ----------
    sigma_margin : array_like
        Design margin ``k`` in standard deviations [-] (>= 0 when two-sided).
    two_sided : bool or array_like of bool
        True if dies fail on both sides of the spec [-].

    Returns
    -------
    numpy.ndarray
        ``log Y`` [-], <= 0; ``-inf`` for a two-sided margin of 0.

    Notes
    -----
    .. math::

        \\ln Y = \\ln \\Phi(k) \\text{ (one-sided)}, \\qquad
        \\ln Y = \\ln(1 - \\operatorname{erfc}(k/\\sqrt{2})) \\text{ (two-sided)}

    ``log_ndtr`` keeps the one-sided value accurate in both tails; the two-sided value
    uses ``log1p(-erfc)`` for large ``k`` and ``log(erf)`` for small.

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2.
    """
    k = np.asarray(sigma_margin, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        two = np.where(k < 1.0, np.log(erf(k / _SQRT2)), np.log1p(-erfc(k / _SQRT2)))
    return _result(np.where(two_sided, two, log_ndtr(k)))


def fraction_outside(sigma_margin: ArrayLike, two_sided: ArrayLike) -> np.ndarray:
    """Fraction of dies outside the spec, computed from the tail itself.

    Parameters
    ----------
    sigma_margin : array_like
        Design margin ``k`` in standard deviations [-].
    two_sided : bool or array_like of bool
        True if dies fail on both sides of the spec [-].

    Returns
    -------
    numpy.ndarray
        ``1 - Y`` [-], in [0, 1], with full relative precision in the far tail.

    Notes
    -----
    .. math::

        1 - Y = Q(k) = \\Phi(-k) \\text{ (one-sided)}, \\qquad
        1 - Y = 2 Q(k) \\text{ (two-sided)}

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2.
    """
    k = np.asarray(sigma_margin, dtype=float)
    return _result(np.where(two_sided, erfc(k / _SQRT2), ndtr(-k)))


def sigma_margin_for_yield(target_yield: ArrayLike, two_sided: ArrayLike) -> np.ndarray:
    """Design margin that gives a parametric yield; inverse of :func:`parametric_yield`.

    Parameters
    ----------
    target_yield : array_like
        Parametric yield wanted [-], in (0, 1) (two-sided: [0, 1)).
    two_sided : bool or array_like of bool
        True if dies fail on both sides of the spec [-].

    Returns
    -------
    numpy.ndarray
        Margin ``k`` in standard deviations [-].

    Notes
    -----
    .. math::

        k = \\Phi^{-1}(Y) \\text{ (one-sided)}, \\qquad
        k = -\\Phi^{-1}((1 - Y) / 2) \\text{ (two-sided)}

    Above ``Y = 1/2`` the one-sided margin is taken as ``-ndtri(1 - Y)``: ``1 - Y`` is
    exact in floating point there, while ``ndtri(Y)`` would lose the tail digits.

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2.
    """
    y = np.asarray(target_yield, dtype=float)
    one = np.where(y > 0.5, -ndtri(1 - y), ndtri(y))
    return _result(np.where(two_sided, -ndtri((1 - y) / 2), one))


def sigma_margin_for_fraction_outside(fraction: ArrayLike, two_sided: ArrayLike) -> np.ndarray:
    """Design margin that leaves a given fraction outside the spec.

    Inverse of :func:`fraction_outside`; use it for targets such as 2e-9 that
    ``1 - fraction`` would round away.

    Parameters
    ----------
    fraction : array_like
        Fraction of dies allowed outside the spec [-], in (0, 1).
    two_sided : bool or array_like of bool
        True if dies fail on both sides of the spec [-].

    Returns
    -------
    numpy.ndarray
        Margin ``k`` in standard deviations [-].

    Notes
    -----
    .. math::

        k = -\\Phi^{-1}(F) \\text{ (one-sided)}, \\qquad
        k = -\\Phi^{-1}(F / 2) \\text{ (two-sided)}

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2.
    """
    f = np.asarray(fraction, dtype=float)
    return _result(-ndtri(np.where(two_sided, f / 2, f)))


def shifted_tail_fraction(sigma_level: ArrayLike, shift: ArrayLike = 1.5) -> np.ndarray:
    """One-tail fraction beyond a sigma level after a mean shift (the "1.5 sigma" rule).

    Parameters
    ----------
    sigma_level : array_like
        Nominal distance from the mean to the spec limit, in standard deviations [-].
    shift : array_like
        Long-term drift of the mean toward the limit, in standard deviations [-].

    Returns
    -------
    numpy.ndarray
        Fraction beyond the limit [-], in [0, 1].

    Notes
    -----
    .. math:: F = Q(k - s) = \\Phi(s - k)

    Only the near tail is counted, as the convention does; at ``k = 6``, ``s = 1.5``
    this is about 3.4 per million.

    References
    ----------
    .. [1] M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions,
       section 26.2 (tail values; the shift convention is common practice).
    """
    return _result(ndtr(np.asarray(shift, dtype=float) - np.asarray(sigma_level, dtype=float)))
