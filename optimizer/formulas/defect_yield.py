"""Defect-limited ("hard") yield models.

Every model here maps the mean number of killer defects per die, ``ad`` = critical
area [cm^2] x defect density [1/cm^2], to the fraction of dies without one. They differ
only in how the defect density is assumed to vary from die to die: a single value gives
the Poisson model, and spreading it out (clustering) raises the yield of large dies.
``defect_mixture`` spells out each model as a Poisson yield averaged over a distribution
of the density, which is how redundancy is combined with clustering.

The name "Seeds model" is used in the literature for two different formulas: some
sources give it to ``1 / (1 + AD)`` (an exponential distribution of the density), others
to ``exp(-sqrt(AD))``. Models are therefore named here by their formula
("exponential", "sqrt_exponential"), never "seeds".

Yields of large dies underflow double precision easily (``exp(-800)`` is zero), so each
model has a ``log_`` variant that stays finite; the linear function is its exponential.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "YieldModel",
    "YIELD_MODELS",
    "log_poisson_yield",
    "poisson_yield",
    "log_murphy_yield",
    "murphy_yield",
    "log_exponential_yield",
    "exponential_yield",
    "log_sqrt_exponential_yield",
    "sqrt_exponential_yield",
    "log_negative_binomial_yield",
    "negative_binomial_yield",
    "log_bose_einstein_yield",
    "bose_einstein_yield",
]

# Below this half-argument the series of log(sinh(y)/y) is exact to double precision
# and avoids the cancellation of the direct formula.
_MURPHY_SERIES_LIMIT = 0.05
# Above this sinh(y) overflows; switch to the asymptotic form.
_MURPHY_SINH_LIMIT = 350.0


def _as_float(x: ArrayLike) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _result(x: ArrayLike) -> np.ndarray:
    # One return convention: numpy scalar for scalar input, ndarray otherwise.
    return np.asarray(x)[()]


def log_poisson_yield(ad: ArrayLike) -> np.ndarray:
    """Natural log of the Poisson yield.

    Parameters
    ----------
    ad : array_like
        Critical area times defect density, the mean number of killer defects per
        die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln Y = -A D

    Defects land independently at one fixed density (no clustering).

    References
    ----------
    .. [1] B. T. Murphy, "Cost-size optima of monolithic integrated circuits",
       Proc. IEEE 52(12), 1964 (Poisson model as the reference case).
    """
    return _result(-_as_float(ad))


def poisson_yield(ad: ArrayLike) -> np.ndarray:
    """Poisson yield ``exp(-AD)``; see :func:`log_poisson_yield`.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        Yield [-], in [0, 1].

    Notes
    -----
    .. math:: Y = e^{-A D}

    References
    ----------
    .. [1] B. T. Murphy, Proc. IEEE 52(12), 1964.
    """
    return _result(np.exp(log_poisson_yield(ad)))


def _log_sinhc(y: np.ndarray) -> np.ndarray:
    """``log(sinh(y) / y)`` for y >= 0, accurate near 0 and without overflow."""
    y2 = y * y
    series = y2 * (1 / 6 + y2 * (-1 / 180 + y2 * (1 / 2835 + y2 * (-1 / 37800))))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        safe = np.where(y > 0, y, 1.0)
        moderate = np.log(np.sinh(np.minimum(safe, _MURPHY_SINH_LIMIT)) / safe)
        large = safe - np.log(2 * safe) + np.log1p(-np.exp(-2 * safe))
    return np.where(
        y < _MURPHY_SERIES_LIMIT,
        series,
        np.where(y < _MURPHY_SINH_LIMIT, moderate, large),
    )


def log_murphy_yield(ad: ArrayLike) -> np.ndarray:
    """Natural log of Murphy's yield (triangular distribution of defect density).

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0; exactly 0 at ``ad == 0``.

    Notes
    -----
    .. math:: Y = \\left(\\frac{1 - e^{-A D}}{A D}\\right)^2

    computed as :math:`\\ln Y = -AD + 2 \\ln(\\sinh(AD/2) / (AD/2))`, which has no
    cancellation for small ``AD`` and no overflow for large ``AD``.

    References
    ----------
    .. [1] B. T. Murphy, "Cost-size optima of monolithic integrated circuits",
       Proc. IEEE 52(12), 1964.
    """
    x = _as_float(ad)
    return _result(-x + 2 * _log_sinhc(x / 2))


def murphy_yield(ad: ArrayLike) -> np.ndarray:
    """Murphy's yield ``((1 - exp(-AD)) / AD)^2``; see :func:`log_murphy_yield`.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        Yield [-], in [0, 1]; 1 at ``ad == 0``.

    Notes
    -----
    .. math:: Y = \\left(\\frac{1 - e^{-A D}}{A D}\\right)^2

    References
    ----------
    .. [1] B. T. Murphy, Proc. IEEE 52(12), 1964.
    """
    return _result(np.exp(log_murphy_yield(ad)))


def log_exponential_yield(ad: ArrayLike) -> np.ndarray:
    """Natural log of the exponential-density yield ``1 / (1 + AD)``.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln Y = -\\ln(1 + A D)

    The defect density is exponentially distributed over dies; this is the negative
    binomial model with ``clustering_alpha = 1``. Some sources call it the Seeds model.

    References
    ----------
    .. [1] R. B. Seeds, 1967 (attribution as usually cited; from memory).
    .. [2] C. H. Stapper, "Integrated circuit yield statistics", Proc. IEEE 71(4), 1983.
    """
    return _result(-np.log1p(_as_float(ad)))


def exponential_yield(ad: ArrayLike) -> np.ndarray:
    """Exponential-density yield ``1 / (1 + AD)``; see :func:`log_exponential_yield`.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        Yield [-], in (0, 1].

    Notes
    -----
    .. math:: Y = \\frac{1}{1 + A D}

    References
    ----------
    .. [1] R. B. Seeds, 1967 (attribution as usually cited; from memory).
    """
    return _result(np.exp(log_exponential_yield(ad)))


def log_sqrt_exponential_yield(ad: ArrayLike) -> np.ndarray:
    """Natural log of the yield ``exp(-sqrt(AD))``.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln Y = -\\sqrt{A D}

    Some sources call this the Seeds model. It is the Poisson yield averaged over a
    heavy-tailed (Levy) distribution of the density with scale ``D``.

    References
    ----------
    .. [1] R. B. Seeds, 1967 (attribution as usually cited; from memory).
    """
    return _result(-np.sqrt(_as_float(ad)))


def sqrt_exponential_yield(ad: ArrayLike) -> np.ndarray:
    """Yield ``exp(-sqrt(AD))``; see :func:`log_sqrt_exponential_yield`.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.

    Returns
    -------
    numpy.ndarray
        Yield [-], in [0, 1].

    Notes
    -----
    .. math:: Y = e^{-\\sqrt{A D}}

    References
    ----------
    .. [1] R. B. Seeds, 1967 (attribution as usually cited; from memory).
    """
    return _result(np.exp(log_sqrt_exponential_yield(ad)))


def log_negative_binomial_yield(ad: ArrayLike, clustering_alpha: ArrayLike) -> np.ndarray:
    """Natural log of the negative binomial (clustered) yield.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.
    clustering_alpha : array_like
        Clustering parameter [-], > 0; smaller means stronger clustering, ``np.inf``
        gives the Poisson model exactly.

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln Y = -\\alpha \\ln(1 + A D / \\alpha)

    The Poisson yield averaged over a gamma distribution of the density with shape
    :math:`\\alpha` and mean ``D``.

    References
    ----------
    .. [1] C. H. Stapper, "Integrated circuit yield statistics", Proc. IEEE 71(4), 1983.
    """
    x = _as_float(ad)
    alpha = _as_float(clustering_alpha)
    infinite = np.isinf(alpha)
    safe_alpha = np.where(infinite, 1.0, alpha)
    clustered = -safe_alpha * np.log1p(x / safe_alpha)
    return _result(np.where(infinite, -x, clustered))


def negative_binomial_yield(ad: ArrayLike, clustering_alpha: ArrayLike) -> np.ndarray:
    """Negative binomial yield ``(1 + AD/alpha)^-alpha``.

    See :func:`log_negative_binomial_yield`.

    Parameters
    ----------
    ad : array_like
        Mean number of killer defects per die [-], >= 0.
    clustering_alpha : array_like
        Clustering parameter [-], > 0 (``np.inf`` for Poisson).

    Returns
    -------
    numpy.ndarray
        Yield [-], in (0, 1].

    Notes
    -----
    .. math:: Y = (1 + A D / \\alpha)^{-\\alpha}

    References
    ----------
    .. [1] C. H. Stapper, Proc. IEEE 71(4), 1983.
    """
    return _result(np.exp(log_negative_binomial_yield(ad, clustering_alpha)))


def log_bose_einstein_yield(ad_per_layer: ArrayLike, critical_layers: ArrayLike) -> np.ndarray:
    """Natural log of the Bose-Einstein yield over critical layers.

    Parameters
    ----------
    ad_per_layer : array_like
        Critical area times defect density of one critical layer [-], >= 0.
    critical_layers : array_like
        Number of critical mask layers [-], > 0 (need not be an integer when fitted).

    Returns
    -------
    numpy.ndarray
        ``log(Y)`` [-], <= 0.

    Notes
    -----
    .. math:: \\ln Y = -n \\ln(1 + A D)

    Each layer contributes an exponential-density factor; equivalently a negative
    binomial yield with :math:`\\alpha = n` and total mean :math:`n A D`.

    References
    ----------
    .. [1] C. H. Stapper, Proc. IEEE 71(4), 1983 (survey of the model family).
    """
    return _result(-_as_float(critical_layers) * np.log1p(_as_float(ad_per_layer)))


def bose_einstein_yield(ad_per_layer: ArrayLike, critical_layers: ArrayLike) -> np.ndarray:
    """Bose-Einstein yield ``(1 + AD)^-n``; see :func:`log_bose_einstein_yield`.

    Parameters
    ----------
    ad_per_layer : array_like
        Critical area times defect density of one critical layer [-], >= 0.
    critical_layers : array_like
        Number of critical mask layers [-], > 0.

    Returns
    -------
    numpy.ndarray
        Yield [-], in (0, 1].

    Notes
    -----
    .. math:: Y = (1 + A D)^{-n}

    References
    ----------
    .. [1] C. H. Stapper, Proc. IEEE 71(4), 1983.
    """
    return _result(np.exp(log_bose_einstein_yield(ad_per_layer, critical_layers)))


@dataclass(frozen=True)
class YieldModel:
    """Description of one defect-limited yield model, for schema and reports.

    Attributes
    ----------
    name : str
        Name used in problem files and results.
    formula : str
        The yield formula in plain text; ``AD`` is critical area [cm^2] x defect
        density [1/cm^2].
    parameters : tuple of str
        Extra parameters the model needs, by glossary name.
    density_distribution : str
        Distribution of the defect density over dies that turns the Poisson yield
        into this model.
    source : str
        Citation of the published model.
    """

    name: str
    formula: str
    parameters: tuple[str, ...]
    density_distribution: str
    source: str


YIELD_MODELS: dict[str, YieldModel] = {
    model.name: model
    for model in (
        YieldModel(
            name="poisson",
            formula="Y = exp(-AD)",
            parameters=(),
            density_distribution="single value D",
            source="Murphy, Proc. IEEE 52(12), 1964 (reference case)",
        ),
        YieldModel(
            name="murphy",
            formula="Y = ((1 - exp(-AD)) / AD)^2",
            parameters=(),
            density_distribution="triangular on [0, 2D], peak at D",
            source="Murphy, 'Cost-size optima of monolithic integrated circuits', "
            "Proc. IEEE 52(12), 1964",
        ),
        YieldModel(
            name="exponential",
            formula="Y = 1 / (1 + AD)",
            parameters=(),
            density_distribution="exponential with mean D",
            source="Seeds, 1967 (called the Seeds model in some sources; "
            "others give that name to exp(-sqrt(AD)))",
        ),
        YieldModel(
            name="sqrt_exponential",
            formula="Y = exp(-sqrt(AD))",
            parameters=(),
            density_distribution="Levy with scale D/2 (no finite mean)",
            source="Seeds, 1967 (called the Seeds model in some sources; "
            "others give that name to 1 / (1 + AD))",
        ),
        YieldModel(
            name="negative_binomial",
            formula="Y = (1 + AD / alpha)^-alpha",
            parameters=("clustering_alpha",),
            density_distribution="gamma with shape alpha and mean D",
            source="Stapper, 'Integrated circuit yield statistics', Proc. IEEE 71(4), 1983",
        ),
        YieldModel(
            name="bose_einstein",
            formula="Y = (1 + AD)^-n, D per critical layer",
            parameters=("critical_layers",),
            density_distribution="gamma with shape n and mean n D (total over layers)",
            source="Stapper, Proc. IEEE 71(4), 1983 (survey of the model family)",
        ),
    )
}
