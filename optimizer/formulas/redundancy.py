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

The exact mixture over D (:func:`optimizer.formulas.defect_mixture.log_redundant_yield`)
uses the same redundancy the other way round: given that exactly k defects fell on a
block, placed uniformly over its units, the chance that the block still works does not
depend on D at all (:func:`block_survival_by_count`). :func:`log_block_factor` is the
fixed-density counterpart, also for a band of good-unit counts (salvage bins).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numba import njit
from numpy.typing import ArrayLike
from scipy.special import bdtr, bdtrc, gammaln, pdtr, pdtrc

__all__ = [
    "log_spare_unit_factor",
    "spare_unit_factor",
    "log_array_repair_factor",
    "array_repair_factor",
    "log_salvage_bin_probabilities",
    "salvage_bin_probabilities",
    "log_block_factor",
    "block_survival_by_count",
    "survival_table",
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


def log_block_factor(
    unit_critical_area_cm2: ArrayLike,
    defect_density_per_cm2: ArrayLike,
    total_units: ArrayLike,
    min_good: ArrayLike,
    max_good: ArrayLike,
    max_repairs: ArrayLike,
    repairable_fraction: ArrayLike,
) -> np.ndarray:
    """Log probability that a redundant block has between ``min_good`` and ``max_good`` good units.

    Parameters
    ----------
    unit_critical_area_cm2 : array_like
        Critical area of one unit [cm^2], >= 0.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2], >= 0 (a given value).
    total_units : array_like of int
        Units built (needed + spare) [-], >= 0.
    min_good, max_good : array_like of int
        Inclusive range of good units accepted [-]; ``max_good >= total_units`` means
        "at least ``min_good``".
    max_repairs : array_like of int
        Array repairs per unit [-], >= 0; 0 means every defect kills its unit.
    repairable_fraction : array_like
        Fraction of a unit's defects a repair can fix [-], in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``log P`` [-], <= 0.

    Notes
    -----
    A unit is good with probability ``y`` given by :func:`log_array_repair_factor`
    (``exp(-a D)`` without repair), independently of the others, so

    .. math:: P = \\sum_{k = m_{lo}}^{m_{hi}} \\binom{N}{k} y^k (1 - y)^{N - k}

    "At least" ranges go through :func:`log_spare_unit_factor`; bands sum the terms in
    log space.

    References
    ----------
    .. [1] Koren and Koren, Proc. IEEE 86(9), 1998.
    """
    area = np.asarray(unit_critical_area_cm2, dtype=float)
    density = np.asarray(defect_density_per_cm2, dtype=float)
    total = np.asarray(total_units).astype(np.int64)
    low = np.asarray(min_good).astype(np.int64)
    high = np.asarray(max_good).astype(np.int64)
    repairs = np.asarray(max_repairs).astype(np.int64)
    fraction = np.asarray(repairable_fraction, dtype=float)
    area, density, total, low, high, repairs, fraction = np.broadcast_arrays(
        area, density, total, low, high, repairs, fraction
    )
    with_repair = (repairs > 0) & (fraction > 0)
    log_unit = np.where(
        with_repair,
        log_array_repair_factor(area, density, fraction, np.where(with_repair, repairs, 0)),
        -area * density,
    )
    # a unit of yield y behaves as one with exp(-x) = y
    unit_defects = -np.asarray(log_unit, dtype=float)
    low_c = np.clip(low, 0, None)
    at_least = np.asarray(
        log_spare_unit_factor(
            unit_defects, 1.0, np.minimum(low_c, total), total - np.minimum(low_c, total)
        ),
        dtype=float,
    )
    out = np.where(low_c > total, -np.inf, at_least)
    band = (high < total) & (low_c <= total)
    if band.any():
        log_pmf = np.asarray(
            log_salvage_bin_probabilities(unit_defects[band], 1.0, total[band]), dtype=float
        )
        k = np.arange(log_pmf.shape[-1])
        inside = (k >= low_c[band][:, None]) & (k <= high[band][:, None])
        out = np.array(out, dtype=float)
        out[band] = _logsumexp(np.where(inside, log_pmf, -np.inf), axis=-1)
    return _result(out)


# Below this a survival table is treated as zero from there on (complete).
_TABLE_ZERO = 1e-300


@njit(cache=True, nogil=True)
def _binomial_product(x, len_x, units_x, y, len_y, units_y, out):
    """Survival sequence of two unit groups joined: a binomially weighted convolution.

    ``x`` and ``y`` are normalised sequences of groups of ``units_x`` and ``units_y``
    units (entry k: probability of a good outcome given k defects placed uniformly over
    the group), nonzero only below ``len_x`` and ``len_y``. Each of k defects on the
    joint group falls in the first part with probability t = units_x / total, so
    ``out[k] = sum_i C(k, i) t^i (1 - t)^(k - i) x[i] y[k - i]``. All terms are
    non-negative. Cost O(len(out) * len_x).
    """
    length = out.shape[0]
    total = units_x + units_y
    t = units_x / total if total > 0 else 0.0
    u = units_y / total if total > 0 else 1.0
    m = min(len_x, length)
    row = np.zeros(max(m, 1))
    row[0] = 1.0
    for k in range(length):
        if k > 0:
            for i in range(min(k, m - 1), 0, -1):
                row[i] = t * row[i - 1] + u * row[i]
            row[0] = u * row[0]
        lo = max(0, k - len_y + 1)
        hi = min(k, m - 1)
        acc = 0.0
        for i in range(lo, hi + 1):
            acc += row[i] * x[i] * y[k - i]
        out[k] = acc


@njit(cache=True, nogil=True)
def _occupancy_table(units, worst_bad, least_bad, pi, env):
    """Survival given k defects when any defect kills its unit (no repair).

    The number h of distinct units hit is a Markov chain in k: a new defect hits a new
    unit with probability (N - h) / N. ``pi[k] = P(least_bad <= h <= worst_bad)`` and
    ``env[k] = P(h <= worst_bad)``; states beyond ``worst_bad`` never come back.
    """
    dist = np.zeros(worst_bad + 1)
    dist[0] = 1.0
    for k in range(pi.shape[0]):
        if k > 0:
            for h in range(worst_bad, 0, -1):
                dist[h] = dist[h] * (h / units) + dist[h - 1] * ((units - h + 1) / units)
            dist[0] = 0.0
        inside = 0.0
        alive = 0.0
        for h in range(worst_bad + 1):
            alive += dist[h]
            if h >= least_bad:
                inside += dist[h]
        pi[k] = inside
        env[k] = alive


@njit(cache=True, nogil=True)
def _repair_table(units, worst_bad, least_bad, repairs, fraction, pi, env):
    """Survival given k defects for units with array repair, via exponential generating
    functions: a unit is good when all its i defects are repairable and i <= R.

    With p_i = f^i [i <= R] (good) and q_i = 1 - p_i (bad) for one unit, the block with
    j bad units contributes C(N, j) Q^j P^(N - j), products taken with
    :func:`_binomial_product`; every term is non-negative, so nothing cancels.
    """
    length = pi.shape[0]
    log_f = math.log(fraction)
    p = np.zeros(repairs + 1)
    q = np.ones(length)
    for i in range(repairs + 1):
        p[i] = math.exp(i * log_f) if i > 0 else 1.0
        if i < length:
            q[i] = -math.expm1(i * log_f) if i > 0 else 0.0
    q_pow = np.zeros((worst_bad + 1, length))
    q_pow[0, 0] = 1.0
    for j in range(1, worst_bad + 1):
        _binomial_product(q_pow[j - 1], length, j - 1, q, length, 1, q_pow[j])
    # P^n for n = N - worst_bad .. N, stored by bad count j = N - n
    p_pow = np.zeros((worst_bad + 1, length))
    p_len = np.zeros(worst_bad + 1, np.int64)
    current = np.zeros(length)
    current[0] = 1.0
    current_len = 1
    scratch = np.zeros(length)
    for n in range(1, units - worst_bad + 1):
        _binomial_product(p, repairs + 1, 1, current, current_len, n - 1, scratch)
        current[:] = scratch
        current_len = min(length, current_len + repairs)
    p_pow[worst_bad] = current
    p_len[worst_bad] = current_len
    for j in range(worst_bad - 1, -1, -1):
        n = units - j
        _binomial_product(p, repairs + 1, 1, p_pow[j + 1], p_len[j + 1], n - 1, p_pow[j])
        p_len[j] = min(length, p_len[j + 1] + repairs)
    term = np.zeros(length)
    pi[:] = 0.0
    env[:] = 0.0
    choose = 1.0
    for j in range(worst_bad + 1):
        if j > 0:
            choose = choose * (units - j + 1) / j
        _binomial_product(p_pow[j], p_len[j], units - j, q_pow[j], length, j, term)
        for k in range(length):
            env[k] += choose * term[k]
            if j >= least_bad:
                pi[k] += choose * term[k]


@functools.lru_cache(maxsize=512)
def survival_table(
    units: int, min_good: int, max_good: int, repairs: int, fraction: float, length: int
) -> tuple[np.ndarray, np.ndarray, bool]:
    """Survival given k defects with an envelope for truncation bounds (cached, read-only).

    Parameters
    ----------
    units : int
        Units built [-], >= 1.
    min_good, max_good : int
        Inclusive range of good units accepted [-].
    repairs : int
        Array repairs per unit [-]; 0 means every defect kills its unit.
    fraction : float
        Repairable fraction of a unit's defects [-]; 0 means no repair.
    length : int
        Entries, k = 0 .. length - 1.

    Returns
    -------
    pi : numpy.ndarray
        As :func:`block_survival_by_count` [-].
    envelope : numpy.ndarray
        Upper bound of every ``pi[j]`` with ``j >= k`` [-]: ``pi`` itself for "at
        least" ranges (it never rises with k: one more defect cannot help), the "at
        least min_good" sequence for bands.
    complete : bool
        The envelope fell below 1e-300 inside the table: later entries count as zero.

    Notes
    -----
    See :func:`block_survival_by_count` for the method.
    """
    pi = np.zeros(length)
    env = np.zeros(length)
    high = min(max_good, units)
    if min_good <= high:
        worst_bad = units - max(min_good, 0)
        least_bad = units - high
        if repairs > 0 and fraction > 0:
            _repair_table(units, worst_bad, least_bad, repairs, fraction, pi, env)
        else:
            _occupancy_table(units, worst_bad, least_bad, pi, env)
        # rounding can leave a monotone sequence a hair above its earlier values
        env = np.minimum.accumulate(np.maximum(env, pi))
    for a in (pi, env):
        a.setflags(write=False)
    return pi, env, bool(env[-1] < _TABLE_ZERO)


def block_survival_by_count(
    total_units: int,
    min_good: int,
    max_repairs: int,
    repairable_fraction: float,
    max_defects: int,
    max_good: int | None = None,
) -> np.ndarray:
    """Probability that a block works given exactly k defects on it, k = 0 .. max_defects.

    Parameters
    ----------
    total_units : int
        Units built (needed + spare) [-], >= 1.
    min_good : int
        Good units needed [-].
    max_repairs : int
        Array repairs per unit [-], >= 0; 0 means every defect kills its unit.
    repairable_fraction : float
        Fraction of a unit's defects a repair can fix [-], in [0, 1].
    max_defects : int
        Largest defect count tabulated [-], >= 0.
    max_good : int, optional
        Largest count of good units accepted [-] (a salvage band); default all units.

    Returns
    -------
    numpy.ndarray
        ``pi[k]`` [-], in [0, 1], length ``max_defects + 1``.

    Notes
    -----
    The k defects fall independently and uniformly over the N units (equal critical
    areas); within a unit a defect is repairable with probability f. A unit is good
    when it has no unrepairable defect and at most R repairable ones. Then

    .. math::

        \\pi_k = \\frac{k!}{N^k} [x^k] \\sum_{j} \\binom{N}{j} Q(x)^j P(x)^{N-j},
        \\quad P(x) = \\sum_{i \\le R} \\frac{(f x)^i}{i!}, \\quad Q(x) = e^x - P(x)

    summed over the allowed numbers j of bad units. Without repair (R = 0) the number
    of distinct units hit is a Markov chain in k (the occupancy problem). Because the
    placement does not depend on the density, ``pi`` is independent of D; the die yield
    is ``sum_k P(k defects on the block, none elsewhere) pi_k``.

    References
    ----------
    .. [1] W. Feller, *An Introduction to Probability Theory and Its Applications*,
       Vol. 1, 3rd ed., Wiley, 1968, ch. II (occupancy problems).
    .. [2] Koren and Koren, Proc. IEEE 86(9), 1998 (yield of redundant circuits as a sum
       over the number of defects).
    """
    high = total_units if max_good is None else max_good
    pi, _, _ = survival_table(
        int(total_units),
        int(min_good),
        int(high),
        int(max_repairs),
        float(repairable_fraction),
        int(max_defects) + 1,
    )
    return pi.copy()
