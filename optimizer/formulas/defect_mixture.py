"""Yield models as Poisson yields averaged over the defect density.

Each model of :mod:`defect_yield` is ``E_D[exp(-A D)]`` for some distribution of the
density D over dies. Redundancy (spare units, array repair) changes the yield at a given
D by a factor ``r(D)``; with clustering the die yield is then
``E_D[exp(-A D) r(D)]``, averaged over the same distribution. This module computes that
average by Gaussian quadrature, in log space so that very small yields stay finite.

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
from collections.abc import Callable
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike
from scipy.linalg import eigh_tridiagonal
from scipy.special import roots_genlaguerre

from .defect_yield import (
    YIELD_MODELS,
    log_bose_einstein_yield,
    log_exponential_yield,
    log_murphy_yield,
    log_negative_binomial_yield,
    log_poisson_yield,
    log_sqrt_exponential_yield,
)

__all__ = ["log_mixed_yield", "mixed_yield", "LogFactor"]

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
    if model not in YIELD_MODELS:
        raise ValueError(
            f"unknown yield model {model!r}; use one of {', '.join(sorted(YIELD_MODELS))}"
        )
    given = {"clustering_alpha": clustering_alpha, "critical_layers": critical_layers}
    for name in YIELD_MODELS[model].parameters:
        if given[name] is None:
            raise ValueError(f"yield model {model!r} needs {name}")
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
