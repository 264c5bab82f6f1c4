"""Parametric ("soft") yield from a design margin of k standard deviations.

With a performance figure normally distributed about its design point, a margin of k
sigma passes Phi(k) of dies one-sided and 2 Phi(k) - 1 two-sided (Phi the standard
normal CDF). Tails are computed directly so that 2e-9 keeps its precision.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import special


def fraction_outside(sigma_margin: ArrayLike, two_sided: bool) -> np.ndarray:
    """Fraction of dies beyond the margin: 2 Q(k) two-sided, Q(k) one-sided [-]."""
    tail = special.ndtr(-np.asarray(sigma_margin, dtype=float))
    return 2.0 * tail if two_sided else tail


def parametric_yield(sigma_margin: ArrayLike, two_sided: bool) -> np.ndarray:
    """Soft yield Phi(k) one-sided or 2 Phi(k) - 1 two-sided [-]."""
    return 1.0 - fraction_outside(sigma_margin, two_sided)


def log_parametric_yield(sigma_margin: ArrayLike, two_sided: bool) -> np.ndarray:
    """log of the soft yield, accurate both for large k and near k = 0 [-]."""
    k = np.asarray(sigma_margin, dtype=float)
    if two_sided:
        with np.errstate(divide="ignore"):
            return np.log1p(-2.0 * special.ndtr(-k))
    return special.log_ndtr(k)


def sigma_margin_for_yield(target_yield: ArrayLike, two_sided: bool) -> np.ndarray:
    """The margin k [sigma] whose soft yield is ``target_yield``."""
    y = np.asarray(target_yield, dtype=float)
    return special.ndtri((1.0 + y) / 2.0) if two_sided else special.ndtri(y)


def shifted_tail_fraction(sigma_level: ArrayLike, shift: float = 1.5) -> np.ndarray:
    """One tail beyond k sigma after a mean shift of ``shift`` sigma, Q(k - shift) [-].

    The common-practice "1.5 sigma shift" makes 6 sigma mean about 3.4 per million.
    """
    return special.ndtr(-(np.asarray(sigma_level, dtype=float) - shift))
