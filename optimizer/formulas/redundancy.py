"""Redundancy at a given defect density: spare units, array repair, salvage bins.

Each function gives the probability, *conditional on the defect density D*, that the
redundant part of a die still works. Clustering is added afterwards by averaging over
the distribution of D (:func:`optimizer.formulas.defect_mixture.log_mixed_yield`), for
example::

    factor = lambda d: log_spare_unit_factor(a[..., None], d, n[..., None], s[..., None])
    log_yield = log_mixed_yield("negative_binomial", d0, plain_area, factor,
                                clustering_alpha=2.0)

Within one die defects are independent (Poisson at density D), so units fail
independently with probability ``1 - exp(-a D)``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import bdtr, bdtrc, gammaln, pdtr, pdtrc

__all__ = [
    "log_spare_unit_factor",
    "spare_unit_factor",
    "log_array_repair_factor",
    "array_repair_factor",
    "log_salvage_bin_probabilities",
    "salvage_bin_probabilities",
]

# Below this the Poisson CDF from scipy may have underflowed; sum terms in logs instead.
_POISSON_CDF_UNDERFLOW = 1e-250
# Likewise for the binomial CDFs.
_BINOMIAL_UNDERFLOW = 1e-250
# Terms kept in that log-space sum: they fall at least as fast as (k / mean)^i.
_POISSON_TAIL_TERMS = 1024


def _result(x: ArrayLike) -> np.ndarray:
    return np.asarray(x)[()]


def _logsumexp(a: np.ndarray, axis: int = -1, keepdims: bool = False) -> np.ndarray:
    """log(sum(exp(a))) along one axis; scipy's version is several times slower here."""
    top = np.max(a, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)  # rows of -inf (or inf) stay as they are
    with np.errstate(divide="ignore"):
        out = np.log(np.sum(np.exp(a - top), axis=axis, keepdims=True)) + top
    return out if keepdims else np.squeeze(out, axis=axis)


def _log_unit_probabilities(unit_defects: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """log P(unit good) and log P(unit bad) for mean defects per unit."""
    with np.errstate(divide="ignore"):
        return -unit_defects, np.log(-np.expm1(-unit_defects))


def log_spare_unit_factor(
    unit_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    needed_units: ArrayLike,
    spare_units: ArrayLike,
) -> np.ndarray:
    """Log probability that at least ``needed`` of ``needed + spare`` units are good.

    Parameters
    ----------
    unit_critical_area_cm2 : array_like
        Critical area of one unit [cm^2], >= 0.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2], >= 0 (a given value, not a distribution).
    needed_units : array_like of int
        Units the product must have working [-], >= 0.
    spare_units : array_like of int
        Extra units built [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log P`` [-], <= 0; 0 when ``needed_units == 0``, ``-needed a D`` when
        ``spare_units == 0``.

    Notes
    -----
    With :math:`y = e^{-a D}`, :math:`N = n + s` and :math:`K` the number of good
    units, :math:`K \\sim \\mathrm{Binomial}(N, y)` and

    .. math::

        P(K \\ge n) = \\sum_{j=0}^{s} \\binom{N}{j} (1 - y)^j y^{N - j}

    (``j`` bad units). Above 1/2 it is computed as ``log1p(-P(more than s bad))`` so
    that probabilities near 1 keep their relative precision; below, from scipy's
    binomial CDF on whichever side keeps ``1 - p`` exact; and where that underflows, as
    the sum itself in log space.

    References
    ----------
    .. [1] I. Koren and Z. Koren, "Defect tolerance in VLSI circuits: techniques and
       yield analysis", Proc. IEEE 86(9), 1998 (redundancy with clustered defects).
    """
    unit_defects = np.asarray(unit_critical_area_cm2, dtype=float) * np.asarray(
        defect_density_per_cm2, dtype=float
    )
    needed = np.asarray(needed_units).astype(np.int64)
    spare = np.asarray(spare_units).astype(np.int64)
    unit_defects, needed, spare = np.broadcast_arrays(unit_defects, needed, spare)
    total = needed + spare
    # bdtrc(s, N, q): P(more than s of N units bad), accurate when small; the log-space
    # sum is only needed (and only computed) where that probability is not small.
    failure = bdtrc(spare, total, -np.expm1(-unit_defects))
    with np.errstate(divide="ignore", invalid="ignore"):
        # np.array, not the ufunc result: a scalar input must still take item assignment.
        out = np.array(np.log1p(-np.minimum(failure, 0.5)), dtype=float)
    hard = ~(failure < 0.5)
    if hard.any():
        out[hard] = _log_success(unit_defects[hard], needed[hard], total[hard], spare[hard])
    return _result(out)


def _log_success(
    unit_defects: np.ndarray, needed: np.ndarray, total: np.ndarray, spare: np.ndarray
) -> np.ndarray:
    """log P(at least ``needed`` of ``total`` units good) where it is not close to 1.

    scipy's binomial CDFs form ``1 - p`` inside, so each is used on the side where its
    argument is at most 1/2; only values that underflow take the log-space sum.
    """
    good = np.exp(-unit_defects)
    low = good < 0.5
    success = np.empty(good.shape)
    success[low] = bdtrc(needed[low] - 1, total[low], good[low])  # P(more than n-1 good)
    high = ~low
    bad = -np.expm1(-unit_defects[high])
    success[high] = bdtr(spare[high], total[high], bad)  # P(at most s bad)
    with np.errstate(divide="ignore"):
        out = np.log(success)
    deep = ~(success > _BINOMIAL_UNDERFLOW)
    if deep.any():
        out[deep] = _log_at_most_bad(unit_defects[deep], total[deep], spare[deep])
    return out


def _log_at_most_bad(unit_defects: np.ndarray, total: np.ndarray, spare: np.ndarray) -> np.ndarray:
    """log P(at most ``spare`` of ``total`` units bad), summed in log space (1-d inputs)."""
    log_good, log_bad = _log_unit_probabilities(unit_defects)
    j = np.arange(int(spare.max(initial=0)) + 1)[None, :]
    total_ = total[:, None]
    allowed = j <= spare[:, None]
    with np.errstate(invalid="ignore"):
        log_terms = (
            gammaln(total_ + 1)
            - gammaln(j + 1)
            - gammaln(np.where(allowed, total_ - j, 0) + 1)
            + np.where(j > 0, j * log_bad[:, None], 0.0)
            + (total_ - j) * log_good[:, None]
        )
    return _logsumexp(np.where(allowed, log_terms, -np.inf), axis=-1)


def spare_unit_factor(
    unit_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    needed_units: ArrayLike,
    spare_units: ArrayLike,
) -> np.ndarray:
    """Probability that at least ``needed`` of ``needed + spare`` units are good.

    See :func:`log_spare_unit_factor`.

    Parameters
    ----------
    unit_critical_area_cm2 : array_like
        Critical area of one unit [cm^2].
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2].
    needed_units : array_like of int
        Units that must work [-].
    spare_units : array_like of int
        Extra units built [-].

    Returns
    -------
    numpy.ndarray
        Probability [-], in [0, 1].

    Notes
    -----
    .. math:: P = \\sum_{k=n}^{n+s} \\binom{n+s}{k} y^k (1-y)^{n+s-k}, \\quad y = e^{-a D}

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    return _result(
        np.exp(
            log_spare_unit_factor(
                unit_critical_area_cm2, defect_density_per_cm2, needed_units, spare_units
            )
        )
    )


def _log_poisson_cdf(count: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """log P(Poisson(mean) <= count), finite even where the CDF underflows."""
    cdf = pdtr(count, mean)
    upper = pdtrc(count, mean)
    with np.errstate(divide="ignore"):
        out = np.where(upper < 0.5, np.log1p(-upper), np.log(cdf))
    tiny = cdf < _POISSON_CDF_UNDERFLOW
    if np.any(tiny):
        k = count[tiny].astype(float)
        m = mean[tiny]
        # Sum down from the top term: term(k - i) / term(k) = prod_{j<i} (k - j) / m.
        steps = np.arange(min(int(k.max()), _POISSON_TAIL_TERMS - 1))
        with np.errstate(divide="ignore", invalid="ignore"):
            log_ratio = np.where(
                steps < k[:, None], np.log((k[:, None] - steps) / m[:, None]), -np.inf
            )
        log_series = np.concatenate([np.zeros((k.size, 1)), np.cumsum(log_ratio, axis=-1)], axis=-1)
        log_top = k * np.log(m) - m - gammaln(k + 1)
        out = out.copy()
        out[tiny] = log_top + _logsumexp(log_series, axis=-1)
    return out


def log_array_repair_factor(
    array_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    repairable_fraction: ArrayLike,
    max_repairs: ArrayLike,
) -> np.ndarray:
    """Log probability that a memory array works after repair with spare rows/columns.

    Parameters
    ----------
    array_critical_area_cm2 : array_like
        Critical area of the array [cm^2], >= 0.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2], >= 0 (a given value).
    repairable_fraction : array_like
        Fraction of the array's killer defects that a spare can replace [-], in [0, 1].
    max_repairs : array_like of int
        Repairs the spares allow [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log P`` [-], <= 0; ``-A D`` when ``max_repairs == 0``.

    Notes
    -----
    Repairable and unrepairable defects are independent Poisson counts with means
    :math:`f A D` and :math:`(1 - f) A D`; the array works when the second is zero and
    the first at most :math:`R`:

    .. math:: P = e^{-(1-f) A D} \\sum_{j=0}^{R} \\frac{(f A D)^j}{j!} e^{-f A D}

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    defects = np.asarray(array_critical_area_cm2, dtype=float) * np.asarray(
        defect_density_per_cm2, dtype=float
    )
    fraction = np.asarray(repairable_fraction, dtype=float)
    repairs = np.asarray(max_repairs).astype(np.int64)
    defects, fraction, repairs = np.broadcast_arrays(defects, fraction, repairs)
    repairable = fraction * defects
    return _result(-(defects - repairable) + _log_poisson_cdf(repairs, repairable))


def array_repair_factor(
    array_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    repairable_fraction: ArrayLike,
    max_repairs: ArrayLike,
) -> np.ndarray:
    """Probability that a memory array works after repair; see :func:`log_array_repair_factor`.

    Parameters
    ----------
    array_critical_area_cm2 : array_like
        Critical area of the array [cm^2].
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2].
    repairable_fraction : array_like
        Fraction of defects that can be repaired [-].
    max_repairs : array_like of int
        Repairs available [-].

    Returns
    -------
    numpy.ndarray
        Probability [-], in [0, 1].

    Notes
    -----
    .. math:: P = e^{-(1-f) A D} \\, P(\\mathrm{Poisson}(f A D) \\le R)

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    return _result(
        np.exp(
            log_array_repair_factor(
                array_critical_area_cm2, defect_density_per_cm2, repairable_fraction, max_repairs
            )
        )
    )


def log_salvage_bin_probabilities(
    unit_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    total_units: ArrayLike,
) -> np.ndarray:
    """Log probability that exactly k units of a die are good, k = 0 .. total.

    Parameters
    ----------
    unit_critical_area_cm2 : array_like
        Critical area of one unit [cm^2], >= 0.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2], >= 0 (a given value).
    total_units : array_like of int
        Units built on the die (needed + spare) [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log P(K = k)`` [-] on a new last axis of length ``max(total_units) + 1``;
        ``-inf`` for k above an element's own ``total_units``.

    Notes
    -----
    .. math:: P(K = k) = \\binom{N}{k} y^k (1 - y)^{N-k}, \\quad y = e^{-a D}

    Computed from ``log y = -a D`` and ``log(1 - y) = log(-expm1(-a D))`` so that
    neither rounds to zero.

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    unit_defects = np.asarray(unit_critical_area_cm2, dtype=float) * np.asarray(
        defect_density_per_cm2, dtype=float
    )
    total = np.asarray(total_units).astype(np.int64)
    unit_defects, total = np.broadcast_arrays(unit_defects, total)
    log_good, log_bad = _log_unit_probabilities(unit_defects)
    k = np.arange(int(total.max(initial=0)) + 1).reshape((1,) * total.ndim + (-1,))
    total_ = total[..., None]
    allowed = k <= total_
    bad = np.where(allowed, total_ - k, 0)
    with np.errstate(invalid="ignore"):
        log_pmf = (
            gammaln(total_ + 1)
            - gammaln(k + 1)
            - gammaln(bad + 1)
            + k * log_good[..., None]
            + np.where(bad > 0, bad * log_bad[..., None], 0.0)
        )
    return _result(np.where(allowed, log_pmf, -np.inf))


def salvage_bin_probabilities(
    unit_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    total_units: ArrayLike,
) -> np.ndarray:
    """Probability that exactly k units of a die are good, k = 0 .. total.

    See :func:`log_salvage_bin_probabilities`.

    Parameters
    ----------
    unit_critical_area_cm2 : array_like
        Critical area of one unit [cm^2].
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2].
    total_units : array_like of int
        Units built on the die [-].

    Returns
    -------
    numpy.ndarray
        ``P(K = k)`` [-] on a new last axis of length ``max(total_units) + 1``.

    Notes
    -----
    .. math:: P(K = k) = \\binom{N}{k} y^k (1 - y)^{N-k}, \\quad y = e^{-a D}

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    return _result(
        np.exp(
            log_salvage_bin_probabilities(
                unit_critical_area_cm2, defect_density_per_cm2, total_units
            )
        )
    )
