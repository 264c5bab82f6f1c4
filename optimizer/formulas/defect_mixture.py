"""Yield models as Poisson yields averaged over the defect density.

Each model of :mod:`defect_yield` is ``E_D[exp(-A D)]`` for some distribution of the
density D over dies. Redundancy (spare units, array repair) changes the yield at a given
D by a factor ``r(D)``; with clustering the die yield is then
``E_D[exp(-A D) r(D)]``, averaged over the same distribution. Two routes:

* :func:`log_redundant_yield` (used by the evaluator) is exact for spare units, array
  repair, several redundant blocks and salvage bands. It sums over the number k of
  defects on the redundant units: the chance of k defects there and none elsewhere has a
  closed-form recurrence in k for every model, and the chance that the die survives k
  defects does not depend on D. All terms are non-negative and the truncation is
  bounded, so heavy-tailed densities lose nothing (see its Notes).
* :func:`log_mixed_yield` averages an arbitrary callable ``log r(D)`` by Gaussian
  quadrature, in log space so that very small yields stay finite. It is exact when ``r``
  is an exponential in D and accurate for smooth factors, but a fixed rule can miss the
  far tail of a heavy-tailed density (the Levy density of ``sqrt_exponential``) where a
  factor with spares still matters; use the exact route for redundancy.

The quadrature is built on the *tilted* distribution, proportional to
``exp(-A_t D) f(D)``, whose normaliser ``E_D[exp(-A_t D)]`` is the model's closed form.
With ``A_t = A`` the plain-area part is integrated exactly and only ``r`` is left to the
nodes. A redundancy factor usually falls with D, so the mass of the integrand sits at
lower D than the plain tilt suggests; a few refinement passes raise the tilt until the
tilted distribution has the integrand's mean (gamma and Levy mixtures) or by the
average slope of ``-log r`` (Murphy's bounded triangle), never past the rate at which
``r`` itself decays far out. When ``r`` is an exponential the result is then exact.
Factors with sharp steps (many spares or repairs falling due near the typical density)
need more nodes.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from typing import NamedTuple

import numpy as np
from numba import njit
from numpy.typing import ArrayLike
from scipy.linalg import eigh_tridiagonal
from scipy.special import roots_genlaguerre

from . import redundancy
from .defect_yield import (
    YIELD_MODELS,
    log_bose_einstein_yield,
    log_exponential_yield,
    log_murphy_yield,
    log_negative_binomial_yield,
    log_poisson_yield,
    log_sqrt_exponential_yield,
)

__all__ = [
    "log_mixed_yield",
    "mixed_yield",
    "LogFactor",
    "RedundantBlocks",
    "log_redundant_yield",
]

LogFactor = Callable[[np.ndarray], ArrayLike]
"""Callable mapping defect densities [1/cm^2] (trailing node axis) to ``log r(D)``."""

# exp(-60) ~ 1e-26: beyond this many mean defects the tilted triangle has no weight.
_TAIL_CUT = 60.0
# Above this shape scipy's Gamma(alpha) normaliser overflows; use Golub-Welsch directly.
_SCIPY_LAGUERRE_MAX_ALPHA = 150.0
# Tilt refinement: passes of the factor and the change in (tilt x D) that ends them.
_MAX_PASSES = 4
_TILT_TOLERANCE = 1e-3
# Densities, in multiples of the typical one, where the factor's decay rate is read.
_PROBE_MULTIPLES = np.array([1e8, 2e8])


class _Rule(NamedTuple):
    log_normaliser: np.ndarray  # log E[exp(-A_t D)], shape S
    densities: np.ndarray  # nodes in D [1/cm^2], shape S + (m,), ascending
    log_weights: np.ndarray  # log weights of the tilted distribution, sum to 1


def _result(x: ArrayLike) -> np.ndarray:
    return np.asarray(x)[()]


def _logsumexp(a: np.ndarray, axis: int = -1, keepdims: bool = False) -> np.ndarray:
    """log(sum(exp(a))) along one axis; scipy's version is several times slower here."""
    top = np.max(a, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)  # rows of -inf (or inf) stay as they are
    with np.errstate(divide="ignore"):
        out = np.log(np.sum(np.exp(a - top), axis=axis, keepdims=True)) + top
    return out if keepdims else np.squeeze(out, axis=axis)


@functools.lru_cache(maxsize=128)
def _gamma_table(alpha: float, n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes of Gamma(alpha) scaled to mean 1, and log weights summing to 1."""
    if np.isinf(alpha):
        # Point mass at the mean: the Poisson limit.
        nodes = np.ones(n_nodes)
        log_w = np.full(n_nodes, -np.log(n_nodes))
    else:
        nodes = log_w = None
        if alpha < _SCIPY_LAGUERRE_MAX_ALPHA:
            # scipy polishes roots and weights, so tiny weights keep relative precision.
            s, w = roots_genlaguerre(n_nodes, alpha - 1.0)
            if np.all(np.isfinite(w)) and np.all(w >= 0) and w.sum() > 0:
                nodes = s / alpha
                with np.errstate(divide="ignore"):
                    log_w = np.log(w)
        if nodes is None or log_w is None:
            # Golub-Welsch on the Laguerre Jacobi matrix scaled by 1/alpha; weights come
            # out normalised, so Gamma(alpha) never has to be formed.
            k = np.arange(n_nodes, dtype=float)
            diagonal = (2 * k + alpha) / alpha
            off = np.sqrt(k[1:] * (k[1:] + alpha - 1.0)) / alpha
            nodes, vectors = eigh_tridiagonal(diagonal, off)
            with np.errstate(divide="ignore"):
                log_w = 2 * np.log(np.abs(vectors[0]))
        log_w = log_w - _logsumexp(log_w)
    nodes.setflags(write=False)
    log_w.setflags(write=False)
    return nodes, log_w


@functools.lru_cache(maxsize=16)
def _legendre_table(n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes mapped to [0, 1] and their log weights (sum 1)."""
    x, w = np.polynomial.legendre.leggauss(n_nodes)
    nodes = (x + 1) / 2
    log_w = np.log(w / 2)
    nodes.setflags(write=False)
    log_w.setflags(write=False)
    return nodes, log_w


def _gamma_tables(alpha: np.ndarray, n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Node tables for an array of shapes, gathered from the per-value cache."""
    unique, inverse = np.unique(alpha, return_inverse=True)
    tables = [_gamma_table(float(a), n_nodes) for a in unique]
    nodes = np.stack([t[0] for t in tables])[inverse].reshape(alpha.shape + (n_nodes,))
    log_w = np.stack([t[1] for t in tables])[inverse].reshape(alpha.shape + (n_nodes,))
    return nodes, log_w


def _gamma_rule(
    alpha: np.ndarray, mean_density: np.ndarray, tilt: np.ndarray, n_nodes: int
) -> _Rule:
    """Tilted Gamma(shape alpha, mean D0): again a gamma, shape alpha, scale shrunk."""
    nodes, log_w = _gamma_tables(alpha, n_nodes)
    infinite = np.isinf(alpha)
    safe_alpha = np.where(infinite, 1.0, alpha)
    ratio = np.where(infinite, 0.0, tilt * mean_density / safe_alpha)
    log_norm = log_negative_binomial_yield(tilt * mean_density, alpha)
    densities = (mean_density / (1 + ratio))[..., None] * nodes
    return _Rule(np.asarray(log_norm), densities, log_w)


def _murphy_rule(mean_density: np.ndarray, tilt: np.ndarray, n_nodes: int) -> _Rule:
    """Tilted triangle on [0, 2 D0]: Gauss-Legendre on each linear piece."""
    t, log_w0 = _legendre_table(n_nodes)
    c = np.asarray(tilt * mean_density, dtype=float)[..., None]
    # Past _TAIL_CUT mean defects exp(-c u) has no weight left; shrink the pieces so the
    # nodes stay where the mass is.
    with np.errstate(divide="ignore"):
        width = np.where(c > _TAIL_CUT, _TAIL_CUT / np.where(c > 0, c, 1.0), 1.0)
    u_low = width * t
    u_high = 1 + width * t
    log_w_low = log_w0 + np.log(width) + np.log(u_low) - c * u_low
    log_w_high = log_w0 + np.log(width) + np.log(2 - u_high) - c * u_high
    u = np.concatenate(np.broadcast_arrays(u_low, u_high), axis=-1)
    log_w = np.concatenate(np.broadcast_arrays(log_w_low, log_w_high), axis=-1)
    log_w = log_w - _logsumexp(log_w, axis=-1, keepdims=True)
    densities = np.asarray(mean_density, dtype=float)[..., None] * u
    return _Rule(np.asarray(log_murphy_yield(c[..., 0])), densities, log_w)


@functools.lru_cache(maxsize=16)
def _half_laguerre_table(n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes of Gamma(1/2, 1) (= Z^2/2 for standard normal Z), log weights sum 1."""
    v, w = roots_genlaguerre(n_nodes, -0.5)
    log_w = np.log(w) - _logsumexp(np.log(w))
    v.setflags(write=False)
    log_w.setflags(write=False)
    return v, log_w


def _sqrt_exponential_rule(mean_density: np.ndarray, tilt: np.ndarray, n_nodes: int) -> _Rule:
    """Tilted Levy density: an inverse Gaussian, sampled through its two chi-square roots.

    X = D / D0 is Levy with scale 1/2 (X = 1 / (2 Z^2)); tilted by exp(-t X) it is
    inverse Gaussian with shape 1/2 and mean 1 / (2 sqrt t). The Michael-Schucany-Haas
    map sends Y = Z^2 to two roots x1 <= x2 taken with probabilities 1/(1 + q x1) and
    q x1/(1 + q x1), q = 2 sqrt t; the pair is symmetric in +-Z, so the average is
    smooth in Y and Gauss-Laguerre in Y/2 converges fast.
    """
    v, log_w0 = _half_laguerre_table(n_nodes)
    t = np.asarray(tilt * mean_density, dtype=float)[..., None]
    q = 2 * np.sqrt(t)
    y = 2 * v
    denominator = q + y + np.sqrt(y * (2 * q + y))
    x1 = 1 / denominator
    positive = q > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        x2 = np.where(positive, denominator / np.where(positive, q * q, 1.0), np.inf)
        log_p1 = -np.log1p(q * x1)
        log_p2 = np.where(positive, np.log(q * x1) + log_p1, -np.inf)
    # Untilted case: the upper branch has no weight; park it on the largest lower node
    # so that nodes stay ascending and finite.
    x2 = np.where(positive, x2, x1[..., :1])
    # x1 falls and x2 rises with y: reverse the first branch to keep nodes ascending.
    x = np.concatenate(np.broadcast_arrays(x1[..., ::-1], x2), axis=-1)
    log_w = np.concatenate(
        np.broadcast_arrays((log_w0 + log_p1)[..., ::-1], log_w0 + log_p2), axis=-1
    )
    log_w = log_w - _logsumexp(log_w, axis=-1, keepdims=True)
    densities = np.asarray(mean_density, dtype=float)[..., None] * x
    return _Rule(np.asarray(log_sqrt_exponential_yield(t[..., 0])), densities, log_w)


def _poisson_rule(mean_density: np.ndarray, tilt: np.ndarray) -> _Rule:
    densities = (
        np.asarray(mean_density, dtype=float)[..., None]
        + np.zeros_like(np.asarray(tilt, dtype=float))[..., None]
    )
    return _Rule(
        np.asarray(log_poisson_yield(tilt * mean_density)),
        densities,
        np.zeros(densities.shape),
    )


def _average_slope(
    densities: np.ndarray, log_factor: np.ndarray, log_terms: np.ndarray
) -> np.ndarray:
    """Slope of -log r [cm^2] averaged over the integrand's mass, clipped at 0."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        log_total = _logsumexp(log_terms, axis=-1, keepdims=True)
        mass = np.nan_to_num(np.exp(log_terms - log_total))
        step = np.diff(densities, axis=-1)
        rise = np.diff(log_factor, axis=-1)
        ok = (step > 0) & np.isfinite(rise)
        slope = np.where(ok, -rise / np.where(ok, step, 1.0), 0.0)
        weight = np.where(ok, (mass[..., 1:] + mass[..., :-1]) / 2, 0.0)
        total = weight.sum(axis=-1)
        safe_total = np.where(total > 0, total, 1.0)
        average = np.where(total > 0, (weight * slope).sum(axis=-1) / safe_total, 0.0)
    return np.maximum(average, 0.0)


def _asymptotic_slope(factor: LogFactor, scale: np.ndarray) -> np.ndarray:
    """Decay rate of -log r [cm^2] far beyond any density that matters.

    Tilting past this rate would leave a residual that grows exponentially in the tail
    of the density distribution, so it caps the tilt (0 for a factor that stays flat).
    """
    probes = np.asarray(scale, dtype=float)[..., None] * _PROBE_MULTIPLES
    log_r = np.asarray(factor(probes), dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        step = probes[..., 1] - probes[..., 0]
        rise = log_r[..., 1] - log_r[..., 0]
        slope = -rise / np.where(step > 0, step, 1.0)
    # A factor that reaches zero decays faster than any exponential: no cap.
    slope = np.where(np.isneginf(log_r[..., 1]), np.inf, slope)
    return np.where((step > 0) & ~np.isnan(slope), slope, 0.0)


def _mass_mean(densities: np.ndarray, log_terms: np.ndarray) -> np.ndarray:
    """Mean density [1/cm^2] under the normalised integrand."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        log_total = _logsumexp(log_terms, axis=-1, keepdims=True)
        mass = np.nan_to_num(np.exp(log_terms - log_total))
    return (mass * densities).sum(axis=-1)


def _closed_form(
    model: str,
    density: np.ndarray,
    area: np.ndarray,
    clustering_alpha: np.ndarray | None,
    critical_layers: np.ndarray | None,
) -> np.ndarray:
    ad = area * density
    if model == "poisson":
        return log_poisson_yield(ad)
    if model == "murphy":
        return log_murphy_yield(ad)
    if model == "exponential":
        return log_exponential_yield(ad)
    if model == "sqrt_exponential":
        return log_sqrt_exponential_yield(ad)
    if model == "negative_binomial":
        return log_negative_binomial_yield(ad, clustering_alpha)
    return log_bose_einstein_yield(ad, critical_layers)


def _check_model(model: str, clustering_alpha, critical_layers) -> None:
    """A known yield model with the parameters it needs (ValueError otherwise)."""
    if model not in YIELD_MODELS:
        raise ValueError(
            f"unknown yield model {model!r}; use one of {', '.join(sorted(YIELD_MODELS))}"
        )
    given = {"clustering_alpha": clustering_alpha, "critical_layers": critical_layers}
    for name in YIELD_MODELS[model].parameters:
        if given[name] is None:
            raise ValueError(f"yield model {model!r} needs {name}")


def log_mixed_yield(
    model: str,
    defect_density_per_cm2: ArrayLike,
    plain_critical_area_cm2: ArrayLike,
    factor: LogFactor | None = None,
    *,
    clustering_alpha: ArrayLike | None = None,
    critical_layers: ArrayLike | None = None,
    n_nodes: int = 48,
) -> np.ndarray:
    """Log yield of a die whose yield at density D is ``exp(-A D) r(D)``, mixed over D.

    Parameters
    ----------
    model : str
        Yield model name, a key of :data:`~optimizer.formulas.defect_yield.YIELD_MODELS`.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2], >= 0: the mean for "poisson", "murphy",
        "exponential" and "negative_binomial"; the scale of the Levy distribution for
        "sqrt_exponential"; the density *per critical layer* for "bose_einstein" (the
        total then has mean ``critical_layers`` times it).
    plain_critical_area_cm2 : array_like
        Critical area whose every defect kills the die [cm^2], >= 0.
    factor : callable or None
        ``factor(d)`` returns ``log r(d)`` [-] for densities ``d`` [1/cm^2] given with a
        trailing node axis (shape ``S + (m,)``, S the broadcast shape of the inputs);
        its own parameters must broadcast against that, e.g. ``area[..., None]``. It is
        called a few times with different node counts ``m``. ``r`` should be
        non-increasing in D (redundancy); ``None`` means ``r = 1`` and returns the
        model's closed form.
    clustering_alpha : array_like, optional
        Clustering parameter [-], > 0, required for "negative_binomial"
        (``np.inf`` gives Poisson).
    critical_layers : array_like, optional
        Number of critical layers [-], > 0, required for "bose_einstein".
    n_nodes : int
        Quadrature nodes [-]; "murphy" and "sqrt_exponential" use twice as many points.
        Raise it for factors that drop sharply near the typical density.

    Returns
    -------
    numpy.ndarray
        ``log E_D[exp(-A D) r(D)]`` [-], <= 0 when r <= 1.

    Raises
    ------
    ValueError
        If the model name is unknown or a parameter it needs is missing.

    Notes
    -----
    With ``f`` the density distribution of the model and a tilt :math:`A_t`,

    .. math::

        E[e^{-A D} r(D)] = E[e^{-A_t D}] \\sum_k w_k\\, r(D_k)\\, e^{(A_t - A) D_k}

    where :math:`(D_k, w_k)` is a Gauss rule for the tilted density
    :math:`\\propto e^{-A_t D} f(D)` and :math:`E[e^{-A_t D}]` is the closed form.
    Gamma family (negative binomial, exponential, Bose-Einstein): generalised
    Gauss-Laguerre, :math:`D_k = D_0 s_k / (\\alpha + A_t D_0)`. Murphy: Gauss-Legendre
    on both linear pieces of the triangle. Levy: Gauss-Laguerre over the chi-square
    variable of the tilted (inverse Gaussian) law. Poisson: ``r(D0)``. The tilt starts
    at ``A``; each further pass (at most four factor calls, plus one that reads the
    decay rate of ``r`` at very high D) moves it so that the tilted distribution's mean
    matches the integrand's (gamma, Levy) or adds the mass-weighted slope of
    ``-log r`` (Murphy), capped by the far-out decay rate of ``r``.

    References
    ----------
    .. [1] C. H. Stapper, "Integrated circuit yield statistics", Proc. IEEE 71(4), 1983
       (yield models as mixtures of Poisson yields).
    .. [2] G. H. Golub and J. H. Welsch, "Calculation of Gauss quadrature rules",
       Math. Comp. 23, 1969.
    .. [3] J. R. Michael, W. R. Schucany and R. W. Haas, "Generating random variates
       using transformations with multiple roots", Amer. Statist. 30(2), 1976.
    """
    _check_model(model, clustering_alpha, critical_layers)
    density = np.asarray(defect_density_per_cm2, dtype=float)
    area = np.asarray(plain_critical_area_cm2, dtype=float)
    alpha = None if clustering_alpha is None else np.asarray(clustering_alpha, dtype=float)
    layers = None if critical_layers is None else np.asarray(critical_layers, dtype=float)

    if factor is None:
        return _result(_closed_form(model, density, area, alpha, layers))

    mixture = _build_mixture(model, density, alpha, layers, n_nodes)
    extra_tilt = np.zeros(np.broadcast_shapes(density.shape, area.shape))
    cap = None
    for attempt in range(_MAX_PASSES):
        log_norm, densities, log_w = mixture.rule(area + extra_tilt)
        log_r = np.asarray(factor(densities), dtype=float)
        with np.errstate(invalid="ignore"):
            # Undo the extra tilt inside the sum; r = 0 stays a zero term.
            log_residual = np.where(
                np.isneginf(log_r), -np.inf, log_r + extra_tilt[..., None] * densities
            )
        log_terms = log_w + log_residual
        log_yield = log_norm + _logsumexp(log_terms, axis=-1)
        if model == "poisson" or attempt == _MAX_PASSES - 1:
            break
        if mixture.tilt_for_mean is None:
            new_tilt = _average_slope(densities, log_r, log_terms)
        else:
            if cap is None:
                cap = _asymptotic_slope(factor, mixture.scale)
            target = _mass_mean(densities, log_terms)
            with np.errstate(invalid="ignore"):
                wanted = mixture.tilt_for_mean(target) - area
                usable = np.isfinite(wanted) & (target > 0)
                new_tilt = np.maximum(np.where(usable, np.minimum(wanted, cap), 0.0), 0.0)
        # Judge the change in mean defects per die, which is what the nodes feel.
        settled = bool(np.all(np.abs(new_tilt - extra_tilt) * mixture.scale <= _TILT_TOLERANCE))
        extra_tilt = new_tilt
        if settled:
            break
    return _result(log_yield)


class _Mixture(NamedTuple):
    rule: Callable[[np.ndarray], _Rule]
    # Total tilt A_t [cm^2] whose tilted distribution has a given mean; None: use slopes.
    tilt_for_mean: Callable[[np.ndarray], np.ndarray] | None
    scale: np.ndarray  # typical density [1/cm^2]


def _build_mixture(
    model: str,
    density: np.ndarray,
    alpha: np.ndarray | None,
    layers: np.ndarray | None,
    n_nodes: int,
) -> _Mixture:
    if model in ("negative_binomial", "exponential", "bose_einstein"):
        if model == "exponential":
            shape = np.ones_like(density)
            mean_density = density
        elif model == "negative_binomial":
            assert alpha is not None
            shape = np.broadcast_to(alpha, np.broadcast_shapes(alpha.shape, density.shape))
            mean_density = density
        else:
            assert layers is not None
            shape = np.broadcast_to(layers, np.broadcast_shapes(layers.shape, density.shape))
            mean_density = layers * density

        def gamma_rule(tilt: np.ndarray) -> _Rule:
            full = np.broadcast_shapes(shape.shape, np.shape(tilt))
            return _gamma_rule(np.broadcast_to(shape, full), mean_density, tilt, n_nodes)

        def gamma_tilt(mean: np.ndarray) -> np.ndarray:
            # Tilted gamma mean: alpha / (alpha / D0 + A_t).
            with np.errstate(divide="ignore", invalid="ignore"):
                return np.where(np.isinf(shape), 0.0, shape / mean - shape / mean_density)

        return _Mixture(gamma_rule, gamma_tilt, np.asarray(mean_density))

    if model == "sqrt_exponential":

        def levy_rule(tilt: np.ndarray) -> _Rule:
            return _sqrt_exponential_rule(density, tilt, n_nodes)

        def levy_tilt(mean: np.ndarray) -> np.ndarray:
            # Tilted Levy (inverse Gaussian) mean: D0 / (2 sqrt(A_t D0)).
            with np.errstate(divide="ignore", invalid="ignore"):
                return density / (4 * mean * mean)

        return _Mixture(levy_rule, levy_tilt, density)

    if model == "murphy":

        def murphy_rule(tilt: np.ndarray) -> _Rule:
            return _murphy_rule(density, tilt, n_nodes)

        # Bounded support: no tail to protect, the slope of log r is enough.
        return _Mixture(murphy_rule, None, density)

    def poisson_rule(tilt: np.ndarray) -> _Rule:
        return _poisson_rule(density, tilt)

    return _Mixture(poisson_rule, None, density)


def mixed_yield(
    model: str,
    defect_density_per_cm2: ArrayLike,
    plain_critical_area_cm2: ArrayLike,
    factor: LogFactor | None = None,
    *,
    clustering_alpha: ArrayLike | None = None,
    critical_layers: ArrayLike | None = None,
    n_nodes: int = 48,
) -> np.ndarray:
    """Yield ``E_D[exp(-A D) r(D)]``; the exponential of :func:`log_mixed_yield`.

    Parameters
    ----------
    model : str
        Yield model name, a key of ``YIELD_MODELS``.
    defect_density_per_cm2 : array_like
        Defect density [1/cm^2] (per critical layer for "bose_einstein").
    plain_critical_area_cm2 : array_like
        Critical area without redundancy [cm^2].
    factor : callable or None
        ``log r(D)`` as in :func:`log_mixed_yield`.
    clustering_alpha : array_like, optional
        Clustering parameter [-] for "negative_binomial".
    critical_layers : array_like, optional
        Number of critical layers [-] for "bose_einstein".
    n_nodes : int
        Quadrature nodes [-].

    Returns
    -------
    numpy.ndarray
        Yield [-], in [0, 1] when r <= 1.

    Notes
    -----
    .. math:: Y = E_D[e^{-A D} r(D)]

    References
    ----------
    .. [1] C. H. Stapper, Proc. IEEE 71(4), 1983.
    """
    return _result(
        np.exp(
            log_mixed_yield(
                model,
                defect_density_per_cm2,
                plain_critical_area_cm2,
                factor,
                clustering_alpha=clustering_alpha,
                critical_layers=critical_layers,
                n_nodes=n_nodes,
            )
        )
    )


# --------------------------------------------------------------------------- exact route
#
# Redundancy through the number of defects: given D, the defects on the redundant
# critical area W (all units of every redundant block) are Poisson(W D) and spread
# uniformly over it, so P(die good | D) = exp(-A D) sum_k Poisson(k; W D) pi_k with pi_k
# the D-free survival given k defects (redundancy.block_survival_by_count, several
# blocks joined by a binomial convolution). Mixing over D then only needs
#     c_k = E_D[exp(-A D) Poisson(k; W D)],
# the probability of k defects on the redundant area and none elsewhere, which has a
# recurrence in k for every model. All terms are non-negative: nothing cancels.

_GAMMA_KIND, _LEVY_KIND, _TRIANGLE_KIND = 0, 1, 2
_STATUS_OK, _STATUS_LONGER = 0, 1
# Relative truncation error allowed in the series (rounding adds ~ K eps on top).
_SERIES_TOLERANCE = 1e-14
# Survival tables start this long and grow 4x per retry up to the cap; dies still
# unfinished there go to adaptive quadrature.
_FIRST_TABLE_LENGTH = 256
_MAX_TABLE_LENGTH = 4096
# Above this log(E[exp(-A D)] / E[exp(-(A + W) D)]) the scaled series could overflow.
_MAX_LOG_EXCESS = 650.0
# Murphy's per-uniform sequence is filled in chunks of at least this many terms.
_TRIANGLE_CHUNK = 32


class RedundantBlocks(NamedTuple):
    """Redundant blocks of each die, arrays of shape (dies, blocks), broadcastable.

    A block is ``total_units`` identical units of critical area ``unit_area_cm2``; it
    works when between ``min_good`` and ``max_good`` (inclusive) units are good. A unit
    is good without an unrepairable defect and with at most ``max_repairs``
    repairable ones (a fraction ``repairable_fraction`` of its defects). Entries with
    ``total_units == 0`` are ignored.
    """

    unit_area_cm2: ArrayLike
    total_units: ArrayLike
    min_good: ArrayLike
    max_good: ArrayLike
    max_repairs: ArrayLike
    repairable_fraction: ArrayLike


@njit(cache=True, nogil=True)
def _poisson_upper_tails(omega, out):
    """``out[i] = P(Poisson(omega) > i)`` to full relative precision, omega > 0.

    The top value comes from its own series (above the mean) or as one minus a lower
    sum that is at most about one half (below it); the rest by adding pmf terms
    downwards, so no step subtracts nearly equal numbers.
    """
    m = out.shape[0]
    top = m - 1
    log_omega = math.log(omega)
    log_pmf = -omega + (top + 1) * log_omega - math.lgamma(top + 2.0)
    if top + 1 > omega:
        term = 1.0
        total = 1.0
        j = top + 2
        while term > 1e-17 * total:
            term *= omega / j
            total += term
            j += 1
        tail = math.exp(log_pmf) * total
    else:
        lower = 0.0
        lp = log_pmf - log_omega + math.log(top + 1.0)
        for i in range(top, -1, -1):
            lower += math.exp(lp)
            lp += math.log(i) - log_omega if i > 0 else 0.0
        tail = 1.0 - lower
    out[top] = tail
    lp = log_pmf - log_omega + math.log(top + 1.0)  # log pmf(top)
    for i in range(top, 0, -1):
        out[i - 1] = out[i] + math.exp(lp)
        lp += math.log(i) - log_omega


@njit(cache=True, nogil=True)
def _count_series(
    kind,
    par_a,
    par_b,
    log_excess,
    log_scale_error,
    table_index,
    weight,
    pi_tab,
    env_tab,
    complete,
    banded,
    tol,
    log_sum,
    status,
):
    """``log sum_k (c_k / c_0) pi_k`` per die, with a certified truncation.

    kind 0 (gamma): c_k / c_{k-1} = (a + b (k - 1)) / k with a = par_a, b = par_b.
    kind 1 (Levy): c_k / c_{k-1} = rho s_k / (2 k), s_1 = z, s_k = z^2 / s_(k-1) + 2k - 3,
    rho = par_a, z = par_b (ratio of Bessel functions K_(k-1/2) / K_(k-3/2), times z).
    kind 2 (triangle): c_k = sum_i v_i v_(k-i), v_i = rho^i P(Poisson(w) > i) / (1 - e^-w),
    rho = par_a, w = par_b.

    The tail after term k is at most env_k T_k, env_k bounding every later pi and T_k
    the rest of sum_j c_j / c_0. T_k is the smaller of R - S_k (R = exp(log_excess) the
    closed-form total, S_k the partial sum, plus a rounding allowance) and a geometric
    bound free of rounding: c_(k+1) / (1 - sup of later ratios) for gamma and Levy (where
    K_(j-1/2) >= K_(j-3/2) gives s_j <= z + 2j - 3), 2 sqrt(R) sum_(i > k/2) v_i for the
    triangle. Stops when env_k T_k <= tol x sum; status 1 means the tables were too
    short.
    """
    n, bmax = table_index.shape
    length = pi_tab.shape[1]
    eps = 2.220446049250313e-16
    prefix = np.zeros((bmax, length))
    prefix_env = np.zeros((bmax, length))
    rows = np.zeros((bmax, length))
    share = np.zeros(bmax)
    other = np.zeros(bmax)
    tri = np.zeros(length)
    tails = np.zeros(length)
    for d in range(n):
        nb = 0
        band = False
        all_complete = True
        while nb < bmax and table_index[d, nb] >= 0:
            t_i = table_index[d, nb]
            band = band or banded[t_i]
            all_complete = all_complete and complete[t_i]
            nb += 1
        cum = weight[d, 0]
        for s in range(1, nb):
            # both shares from the weights: 1 - t would lose digits when t ~ 1
            share[s] = cum / (cum + weight[d, s])
            other[s] = weight[d, s] / (cum + weight[d, s])
            cum += weight[d, s]
            rows[s, 0] = 1.0
        a = par_a[d]
        b = par_b[d]
        excess = math.exp(log_excess[d])
        c = 1.0
        s_prev = 0.0
        filled = 0
        total = 0.0
        mass = 0.0
        result = _STATUS_OK
        k = 0
        while True:
            if k >= length:
                if not all_complete:
                    result = _STATUS_LONGER
                break
            # c_k / c_0 for the model
            if kind == 0:
                if k > 0:
                    c *= (a + b * (k - 1)) / k
            elif kind == 1:
                if k > 0:
                    if k == 1:
                        s_k = b
                    elif s_prev > 0.0:
                        s_k = b * b / s_prev + (2 * k - 3)
                    else:
                        s_k = 2.0 * k - 3.0
                    c *= a * s_k / (2 * k)
                    s_prev = s_k
            else:
                if k >= filled:
                    filled = min(length, max(_TRIANGLE_CHUNK, 4 * filled))
                    _poisson_upper_tails(b, tails[:filled])
                    power = 1.0
                    for i in range(filled):
                        tri[i] = power * (tails[i] / tails[0])
                        power *= a
                c = 0.0
                for i in range(k + 1):
                    c += tri[i] * tri[k - i]
            # survival of the die's redundant part given k defects on it
            first = table_index[d, 0]
            if nb == 1:
                pi_k = pi_tab[first, k]
                env_k = env_tab[first, k]
            else:
                pi_k = 0.0
                env_k = 0.0
                for s in range(1, nb):
                    t = share[s]
                    u = other[s]
                    row = rows[s]
                    if k > 0:
                        # entry k is new (the buffer holds the previous die's rows)
                        row[k] = t * row[k - 1]
                        for i in range(k - 1, 0, -1):
                            row[i] = t * row[i - 1] + u * row[i]
                        row[0] = u * row[0]
                    y = pi_tab[table_index[d, s]]
                    acc = 0.0
                    if s == 1:
                        x = pi_tab[first]
                    else:
                        x = prefix[s - 1]
                    for i in range(k + 1):
                        acc += row[i] * x[i] * y[k - i]
                    if s < nb - 1:
                        prefix[s, k] = acc
                    else:
                        pi_k = acc
                    if band:
                        y = env_tab[table_index[d, s]]
                        x = env_tab[first] if s == 1 else prefix_env[s - 1]
                        acc = 0.0
                        for i in range(k + 1):
                            acc += row[i] * x[i] * y[k - i]
                        if s < nb - 1:
                            prefix_env[s, k] = acc
                        else:
                            env_k = acc
                if not band:
                    env_k = pi_k
            total += c * pi_k
            mass += c
            # bound on everything after term k
            slack = eps * excess * (4.0 * (k + 1) + 2.0 * log_scale_error[d] + 4.0)
            rest = max(excess - mass, 0.0) + slack
            # rounding-free geometric bounds on the ratios of later terms
            if kind == 0:
                sup = max((a + b * (k + 1)) / (k + 2), b)
                if sup < 1.0:
                    rest = min(rest, c * (a + b * k) / (k + 1) / (1.0 - sup))
            elif kind == 1:
                # K_(j-1/2) >= K_(j-3/2) gives s_j <= z + 2j - 3
                sup = a * (1.0 + max(b - 3.0, 0.0) / (2.0 * (k + 2)))
                if sup < 1.0:
                    if k == 0:
                        s_next = b
                    elif s_prev > 0.0:
                        s_next = b * b / s_prev + (2 * k - 1)
                    else:
                        s_next = 2.0 * k - 1.0
                    rest = min(rest, c * a * s_next / (2 * (k + 1)) / (1.0 - sup))
            else:
                # c = v * v and v_(i+1) <= rho w / (i + 2) v_i: the terms beyond k have
                # i or k - i above k / 2, so their sum is <= 2 sum(v) sum_(i > k/2) v_i
                h = k // 2 + 1
                sup = a * b / (h + 2)
                if sup < 1.0 and h < filled:
                    rest = min(rest, 2.0 * math.sqrt(excess) * tri[h] / (1.0 - sup))
            if env_k * rest <= tol * total:
                break
            k += 1
        log_sum[d] = math.log(total) if total > 0 else -math.inf
        status[d] = result


def _log_closed(
    model: str, x: np.ndarray, density: np.ndarray, alpha: np.ndarray | None, layers
) -> np.ndarray:
    """log E[exp(-x D)] for critical areas x [cm^2]."""
    return np.asarray(_closed_form(model, density, x, alpha, layers), dtype=float)


def _series_parameters(
    model: str,
    density: np.ndarray,
    alpha: np.ndarray | None,
    layers: np.ndarray | None,
    plain: np.ndarray,
    redundant: np.ndarray,
) -> tuple[int, np.ndarray, np.ndarray]:
    """Kernel kind and the two per-die parameters of the c_k recurrence."""
    whole = plain + redundant
    if model in ("negative_binomial", "exponential", "bose_einstein"):
        # gamma with shape alpha, scale theta, mean alpha theta
        if model == "exponential":
            theta, mean = density, density
        elif model == "negative_binomial":
            assert alpha is not None
            theta, mean = density / alpha, density
        else:
            assert layers is not None
            theta, mean = density, layers * density
        stretch = 1.0 + whole * theta
        return _GAMMA_KIND, redundant * mean / stretch, redundant * theta / stretch
    share = np.divide(redundant, whole, out=np.zeros_like(whole), where=whole > 0)
    if model == "sqrt_exponential":
        return _LEVY_KIND, share, np.sqrt(whole * density)
    return _TRIANGLE_KIND, share, whole * density


def _table_key(units, low, high, repairs, fraction) -> tuple[int, int, int, int, float]:
    if repairs <= 0 or fraction <= 0:
        repairs, fraction = 0, 0.0  # every defect kills its unit
    return int(units), int(low), int(min(high, units)), int(repairs), float(fraction)


def _unique_blocks(
    units: np.ndarray, low: np.ndarray, high: np.ndarray, repairs: np.ndarray, fraction: np.ndarray
) -> tuple[list[tuple], np.ndarray]:
    """Distinct block kinds (survival tables) and the kind of each entry.

    Packs the integers and the index of the repairable fraction into one int64 so that
    a 1-d unique does the work (a row-wise unique is several times slower).
    """
    repairs = np.where(fraction > 0, repairs, 0)
    fraction = np.where(repairs > 0, fraction, 0.0)
    fractions, f_index = np.unique(fraction, return_inverse=True)
    parts = [f_index.ravel(), units, low - low.min(initial=0), high, repairs]
    key = np.zeros(units.shape, dtype=np.int64)
    room = 1
    for part in parts:
        span = int(part.max(initial=0)) + 1
        room *= span
        key = key * span + part
    if room >= 2**62:  # would overflow: fall back to the row-wise unique
        rows = np.stack([f_index.ravel(), units, low, high, repairs], axis=-1)
        _, first, inverse = np.unique(rows, axis=0, return_index=True, return_inverse=True)
    else:
        _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    keys = [
        _table_key(units[i], low[i], high[i], repairs[i], fractions[f_index.ravel()[i]])
        for i in first
    ]
    return keys, inverse.ravel()


def log_redundant_yield(
    model: str,
    defect_density_per_cm2: ArrayLike,
    plain_critical_area_cm2: ArrayLike,
    blocks: RedundantBlocks,
    *,
    clustering_alpha: ArrayLike | None = None,
    critical_layers: ArrayLike | None = None,
) -> np.ndarray:
    """Exact log yield of dies with spare units, array repair or salvage bands, mixed over D.

    Parameters
    ----------
    model : str
        Yield model name, a key of :data:`~optimizer.formulas.defect_yield.YIELD_MODELS`.
    defect_density_per_cm2 : array_like, shape (dies,)
        Defect density [1/cm^2], as in :func:`log_mixed_yield`.
    plain_critical_area_cm2 : array_like, shape (dies,)
        Critical area whose every defect kills the die [cm^2], >= 0.
    blocks : RedundantBlocks
        Redundant blocks of each die, arrays of shape (dies, blocks).
    clustering_alpha : array_like, optional
        Clustering parameter [-] for "negative_binomial" (``np.inf`` gives Poisson).
    critical_layers : array_like, optional
        Critical layers [-] for "bose_einstein".

    Returns
    -------
    numpy.ndarray, shape (dies,)
        ``log Y`` [-], ``Y = E_D[exp(-A D) prod_b F_b(D)]`` with ``F_b`` the probability
        that block b has an accepted number of good units at density D.

    Notes
    -----
    With W the critical area of all redundant units, given D the count K of defects on
    it is Poisson(W D), independent of the plain area's, and a die with K = k works with
    a probability :math:`\\pi_k` that does not depend on D (see
    :func:`~optimizer.formulas.redundancy.block_survival_by_count`; blocks are joined by
    a binomial convolution in the shares of W). Hence

    .. math::

        Y = \\sum_k c_k \\pi_k, \\qquad
        c_k = E_D\\left[e^{-A D} \\frac{(W D)^k}{k!} e^{-W D}\\right]

    with :math:`c_0 = L(A + W)` and :math:`\\sum_k c_k = L(A)`, L the model's closed form.
    Recurrences: gamma family (negative binomial, exponential, Bose-Einstein; shape
    :math:`\\alpha`, scale :math:`\\theta`) :math:`c_k / c_{k-1} = W \\theta (\\alpha + k -
    1) / (k (1 + (A + W) \\theta))`; Levy (``sqrt_exponential``) through modified Bessel
    functions of half-integer order, :math:`c_k \\propto (z/2)^k K_{k-1/2}(z) / k!`,
    :math:`z = \\sqrt{(A + W) D_0}`; Murphy's triangle as the sum of two uniform
    densities, a convolution of two sequences of Poisson tail probabilities. Poisson is
    evaluated at D0 directly. Every term is non-negative. The series stops when the
    remaining tail is below 1e-14 of the sum; the tail is at most
    :math:`\\max_{j > k} \\pi_j` times the rest of :math:`\\sum c_j`, itself bounded by
    :math:`L(A) - \\sum_{j \\le k} c_j` or, free of rounding, by a geometric series in the
    ratios of later terms. Dies that would need more than 4096 terms, or whose scaled
    terms could overflow, are integrated adaptively over D instead
    (``scipy.integrate.quad`` in log D).

    References
    ----------
    .. [1] C. H. Stapper, "Integrated circuit yield statistics", Proc. IEEE 71(4), 1983
       (yield models as mixtures of Poisson yields; the negative binomial count).
    .. [2] I. Koren and Z. Koren, "Defect tolerance in VLSI circuits: techniques and
       yield analysis", Proc. IEEE 86(9), 1998 (yield of redundant circuits as a sum
       over the number of defects).
    .. [3] NIST Digital Library of Mathematical Functions, 10.29.1 and 10.49.12
       (recurrence and closed form of K_(n+1/2)).
    """
    _check_model(model, clustering_alpha, critical_layers)
    density = np.atleast_1d(np.asarray(defect_density_per_cm2, dtype=float))
    plain = np.atleast_1d(np.asarray(plain_critical_area_cm2, dtype=float))
    columns = [np.atleast_2d(np.asarray(x)) for x in blocks]
    shape2 = np.broadcast_shapes(*(c.shape for c in columns))
    n = int(np.broadcast_shapes(density.shape, plain.shape, shape2[:1])[0])
    density = np.broadcast_to(density, (n,))
    plain = np.broadcast_to(plain, (n,))
    shape2 = (n, shape2[1])
    area, units, low, high, repairs, fraction = (np.broadcast_to(c, shape2) for c in columns)
    units = units.astype(np.int64)
    low = low.astype(np.int64)
    high = high.astype(np.int64)
    repairs = repairs.astype(np.int64)
    area = area.astype(float)
    fraction = fraction.astype(float)
    alpha = (
        None
        if clustering_alpha is None
        else np.broadcast_to(np.asarray(clustering_alpha, dtype=float), (n,))
    )
    layers = (
        None
        if critical_layers is None
        else np.broadcast_to(np.asarray(critical_layers, dtype=float), (n,))
    )

    # Blocks that cannot fail (no defects can reach their units, or every count is
    # accepted) drop out; blocks that can never be accepted make the yield zero.
    at_risk = (units > 0) & (area * density[:, None] > 0)
    accepts_all_good = (low <= units) & (high >= units)
    never = (units > 0) & ((low > np.minimum(high, units)) | (~at_risk & ~accepts_all_good))
    trivial = at_risk & (low <= 0) & (high >= units)
    active = at_risk & ~trivial
    out = np.full(n, -np.inf)
    dead = never.any(axis=1)
    weights = np.where(active, units * area, 0.0)
    redundant = weights.sum(axis=1)
    log_plain = _log_closed(model, plain, density, alpha, layers)

    poisson = np.zeros(n, dtype=bool)
    if model == "poisson":
        poisson[:] = True
    elif model == "negative_binomial":
        assert alpha is not None
        poisson = np.isinf(alpha)
    no_defects = (density * (plain + redundant) == 0) | (redundant == 0)
    done = dead | no_defects
    # All units good for sure, or no redundant block at risk: the plain closed form.
    out[~dead & no_defects] = log_plain[~dead & no_defects]
    direct = poisson & ~done
    if direct.any():
        out[direct] = _log_direct(
            density[direct],
            plain[direct],
            area[direct],
            units[direct],
            low[direct],
            high[direct],
            repairs[direct],
            fraction[direct],
            active[direct],
        )
    series = np.flatnonzero(~done & ~poisson)
    if series.size:
        out[series] = _log_series(
            model,
            density[series],
            None if alpha is None else alpha[series],
            None if layers is None else layers[series],
            plain[series],
            area[series],
            units[series],
            low[series],
            high[series],
            repairs[series],
            fraction[series],
            active[series],
            weights[series],
        )
    return out


def _log_direct(density, plain, area, units, low, high, repairs, fraction, active):
    """Poisson: no mixture, the product of block factors at D0."""
    factors = redundancy.log_block_factor(
        area, density[:, None], units, low, high, repairs, fraction
    )
    return -plain * density + np.where(active, factors, 0.0).sum(axis=1)


def _log_series(
    model,
    density,
    alpha,
    layers,
    plain,
    area,
    units,
    low,
    high,
    repairs,
    fraction,
    active,
    weights,
):
    """The count series for every die, with longer tables or quadrature where needed."""
    n = density.size
    redundant = weights.sum(axis=1)
    log_whole = _log_closed(model, plain + redundant, density, alpha, layers)
    log_plain = _log_closed(model, plain, density, alpha, layers)
    log_excess = log_plain - log_whole
    log_scale_error = np.abs(log_plain) + np.abs(log_whole)
    kind, par_a, par_b = _series_parameters(model, density, alpha, layers, plain, redundant)

    # compact each die's active blocks to the front
    order = np.argsort(~active, axis=1, kind="stable")
    take = np.take_along_axis
    act = take(active, order, 1)
    w = np.ascontiguousarray(np.where(act, take(weights, order, 1), 0.0))
    unique_keys, inverse = _unique_blocks(
        take(units, order, 1)[act],
        take(low, order, 1)[act],
        np.minimum(take(high, order, 1), take(units, order, 1))[act],
        take(repairs, order, 1)[act],
        take(fraction, order, 1)[act],
    )
    table_index = np.full(act.shape, -1, dtype=np.int64)
    table_index[act] = inverse.ravel()
    width = int(act.sum(axis=1).max(initial=0))
    table_index = np.ascontiguousarray(table_index[:, : max(width, 1)])
    w = np.ascontiguousarray(w[:, : max(width, 1)])

    out = np.full(n, np.nan)
    todo = np.flatnonzero(log_excess <= _MAX_LOG_EXCESS)
    length = _FIRST_TABLE_LENGTH
    while todo.size:
        # only the tables the remaining dies use, renumbered
        used, local = np.unique(table_index[todo], return_inverse=True)
        local = local.reshape(todo.size, -1) - (1 if used[0] < 0 else 0)
        used = used[used >= 0]
        tables = [redundancy.survival_table(*unique_keys[u], length) for u in used]
        pi_tab = np.ascontiguousarray(np.stack([t[0] for t in tables]))
        env_tab = np.ascontiguousarray(np.stack([t[1] for t in tables]))
        complete = np.array([t[2] for t in tables])
        banded = np.array([bool(np.any(t[0] != t[1])) for t in tables])
        log_sum = np.empty(todo.size)
        status = np.empty(todo.size, dtype=np.int64)
        _count_series(
            kind,
            np.ascontiguousarray(par_a[todo]),
            np.ascontiguousarray(par_b[todo]),
            np.ascontiguousarray(log_excess[todo]),
            np.ascontiguousarray(log_scale_error[todo]),
            np.ascontiguousarray(np.where(table_index[todo] >= 0, local, -1)),
            np.ascontiguousarray(w[todo]),
            pi_tab,
            env_tab,
            complete,
            banded,
            _SERIES_TOLERANCE,
            log_sum,
            status,
        )
        ok = status == _STATUS_OK
        out[todo[ok]] = log_whole[todo[ok]] + log_sum[ok]
        todo = todo[~ok]
        if length >= _MAX_TABLE_LENGTH:
            break
        length = min(4 * length, _MAX_TABLE_LENGTH)
    # the rare rest: adaptive quadrature over D
    for i in np.flatnonzero(np.isnan(out)):
        out[i] = _log_yield_by_quadrature(
            model,
            density[i],
            None if alpha is None else alpha[i],
            None if layers is None else layers[i],
            plain[i],
            (area[i], units[i], low[i], high[i], repairs[i], fraction[i], active[i]),
        )
    return out


def _log_density_in_log_d(model, x, density, alpha, layers) -> np.ndarray:
    """log of the density of X = log D [-] (the model's D distribution, Jacobian D)."""
    d = np.exp(x)
    if model == "sqrt_exponential":
        c = density / 2.0  # Levy scale
        with np.errstate(over="ignore"):
            return 0.5 * np.log(c / (2 * np.pi)) - 0.5 * x - c / (2 * d)
    if model == "murphy":
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(np.minimum(d, 2 * density - d), 0.0)) - 2 * np.log(density) + x
    if model == "exponential":
        shape, scale = 1.0, density
    elif model == "negative_binomial":
        shape, scale = alpha, density / alpha
    else:
        shape, scale = layers, density
    return shape * x - d / scale - math.lgamma(shape) - shape * math.log(scale)


def _log_yield_by_quadrature(model, density, alpha, layers, plain, block) -> float:
    """``log E_D[exp(-A D) prod_b F_b(D)]`` by adaptive quadrature in x = log D.

    A grid of the log integrand finds where its mass lies (everything more than e^-60
    below its peak is dropped); ``scipy.integrate.quad`` then integrates there, with the
    grid's peak and the model's scale as breakpoints, to a relative 1e-13.
    """
    area, units, low, high, repairs, fraction, active = block

    def log_integrand(x: np.ndarray) -> np.ndarray:
        d = np.exp(np.atleast_1d(x))
        factors = redundancy.log_block_factor(
            area[active],
            d[:, None],
            units[active],
            low[active],
            high[active],
            repairs[active],
            fraction[active],
        )
        return (
            _log_density_in_log_d(model, np.log(d), density, alpha, layers)
            - plain * d
            + np.asarray(factors).sum(axis=-1)
        )

    centre = math.log(density)
    upper = centre + math.log(2.0) if model == "murphy" else centre + 60.0
    # a gamma density of shape k falls only like exp(k log D) towards D = 0
    shape = {"exponential": 1.0, "negative_binomial": alpha, "bose_einstein": layers}.get(model)
    lower = centre - 80.0 - (60.0 / min(shape, 1.0) if shape is not None else 0.0)
    grid = np.linspace(lower, upper, 4001)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        values = log_integrand(grid)
    values = np.where(np.isnan(values), -np.inf, values)
    peak = float(values.max())
    if not np.isfinite(peak):
        return -math.inf
    keep = np.flatnonzero(values > peak - 60.0)
    lo = grid[max(keep[0] - 1, 0)]
    hi = grid[min(keep[-1] + 1, grid.size - 1)]
    points = [p for p in (float(grid[int(np.argmax(values))]), centre) if lo < p < hi]

    def integrand(x: float) -> float:
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            v = float(log_integrand(np.array([x]))[0] - peak)
        return math.exp(v) if v > -745 else 0.0

    from scipy import integrate  # only this fallback needs it (slow to import)

    value, _ = integrate.quad(
        integrand, lo, hi, points=points or None, epsabs=0.0, epsrel=1e-13, limit=500
    )
    return peak + math.log(value) if value > 0 else -math.inf
