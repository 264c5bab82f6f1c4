"""Checks of the defect-limited yield models and their defect-density mixtures.

Each check names its outside truth: a published table or worked example (recomputed by
hand with the math module), a limiting case, a reference library (scipy), or an
independent computation written in the test.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy import integrate, stats

from optimizer.formulas.defect_mixture import log_mixed_yield, mixed_yield
from optimizer.formulas.defect_yield import (
    YIELD_MODELS,
    bose_einstein_yield,
    exponential_yield,
    log_bose_einstein_yield,
    log_exponential_yield,
    log_murphy_yield,
    log_negative_binomial_yield,
    log_poisson_yield,
    log_sqrt_exponential_yield,
    murphy_yield,
    negative_binomial_yield,
    poisson_yield,
    sqrt_exponential_yield,
)
from optimizer.formulas.redundancy import log_spare_unit_factor

CHECK_TABLE_AD = [0.05, 0.25, 0.5, 1.0, 1.5, 3.0]


# --------------------------------------------------------------------------- closed forms


def test_check_table_recomputed_by_hand():
    # Murphy, Proc. IEEE 52(12), 1964 and Seeds (1967): Poisson / Murphy / 1/(1+AD) at
    # the usual check-table points, recomputed here with the math module.
    for ad in CHECK_TABLE_AD:
        assert_allclose(poisson_yield(ad), math.exp(-ad), rtol=1e-14)
        assert_allclose(murphy_yield(ad), ((1 - math.exp(-ad)) / ad) ** 2, rtol=1e-13)
        assert_allclose(exponential_yield(ad), 1 / (1 + ad), rtol=1e-14)
        assert_allclose(sqrt_exponential_yield(ad), math.exp(-math.sqrt(ad)), rtol=1e-14)


def test_published_spot_values_at_ad_one():
    # Murphy (1964) / Seeds (1967) as widely tabulated, from memory: at AD = 1 the
    # Poisson, Murphy and 1/(1+AD) yields are 0.3679, 0.3996 and 0.5000.
    assert_allclose(poisson_yield(1.0), 0.3679, atol=5e-5)
    assert_allclose(murphy_yield(1.0), 0.3996, atol=5e-5)
    assert_allclose(exponential_yield(1.0), 0.5000, atol=5e-5)


def test_negative_binomial_textbook_example():
    # Hennessy and Patterson, Computer Architecture: A Quantitative Approach, cost of an
    # integrated circuit (from memory): alpha = 4, D = 0.30 /cm^2, A = 2.5 cm^2 gives
    # about 0.50. Recomputed here; the printed figure is the rounded value.
    by_hand = (1 + 0.30 * 2.5 / 4) ** -4
    assert abs(by_hand - 0.50) < 0.01
    assert_allclose(negative_binomial_yield(0.30 * 2.5, 4.0), by_hand, rtol=1e-14)


def test_bose_einstein_textbook_example():
    # Hennessy and Patterson (later editions, from memory): Y = 1/(1 + D A)^N with
    # D = 0.031 /cm^2 per layer and N = 13.5 gives 0.40 for 2.25 cm^2 and 0.66 for
    # 1.0 cm^2. Some printed editions are internally inconsistent, so the check is on
    # the recomputation, which matches the rounded figures.
    for area, printed in ((2.25, 0.40), (1.0, 0.66)):
        by_hand = (1 + 0.031 * area) ** -13.5
        assert abs(by_hand - printed) < 0.01
        assert_allclose(bose_einstein_yield(0.031 * area, 13.5), by_hand, rtol=1e-14)


def test_negative_binomial_tends_to_poisson():
    # Limiting case (Stapper, Proc. IEEE 71(4), 1983): alpha -> infinity gives Poisson;
    # the relative gap is about AD^2 / (2 alpha), below 1e-7 here.
    ad = np.array(CHECK_TABLE_AD)
    assert_allclose(negative_binomial_yield(ad, 1e8), poisson_yield(ad), rtol=1e-7)
    # alpha = inf is the Poisson model exactly.
    assert_array_equal(log_negative_binomial_yield(ad, np.inf), log_poisson_yield(ad))


def test_exponential_is_negative_binomial_with_alpha_one():
    # Limiting case: an exponential density is a gamma density of shape 1.
    ad = np.array(CHECK_TABLE_AD)
    assert_allclose(exponential_yield(ad), negative_binomial_yield(ad, 1.0), rtol=1e-15)


def test_murphy_tends_to_poisson_for_small_ad():
    # Limiting case derived by hand: Murphy / Poisson = (sinh(x/2)/(x/2))^2
    # = 1 + x^2/12 + O(x^4), so the relative difference is O(AD^2).
    for x in (1e-2, 1e-3, 1e-4):
        rel = murphy_yield(x) / poisson_yield(x) - 1
        assert_allclose(rel / x**2, 1 / 12, rtol=1e-2)


def test_murphy_small_ad_keeps_relative_precision():
    # Series by hand: log Y = -x + x^2/12 - x^4/1440 + ...; at x = 1e-9 the log must
    # keep its leading digits (naive formulas lose them to cancellation).
    x = 1e-9
    assert_allclose(log_murphy_yield(x), -x + x**2 / 12, rtol=1e-14)


@pytest.mark.parametrize(
    "log_fn",
    [
        log_poisson_yield,
        log_murphy_yield,
        log_exponential_yield,
        log_sqrt_exponential_yield,
        lambda ad: log_negative_binomial_yield(ad, 2.0),
        lambda ad: log_bose_einstein_yield(ad, 5.0),
    ],
)
def test_every_model_is_one_at_zero_and_finite_far_out(log_fn):
    # Limiting case: no defects means every die is good.
    assert log_fn(0.0) == 0.0
    # Log space must not underflow where the linear yield does (exp(-1e4) == 0).
    assert np.isfinite(log_fn(1e4))
    assert log_fn(1e4) < 0


@pytest.mark.parametrize(
    "log_fn, lin_fn",
    [
        (log_poisson_yield, poisson_yield),
        (log_murphy_yield, murphy_yield),
        (log_exponential_yield, exponential_yield),
        (log_sqrt_exponential_yield, sqrt_exponential_yield),
        (
            lambda ad: log_negative_binomial_yield(ad, 0.7),
            lambda ad: negative_binomial_yield(ad, 0.7),
        ),
        (lambda ad: log_bose_einstein_yield(ad, 3.0), lambda ad: bose_einstein_yield(ad, 3.0)),
    ],
)
def test_log_variants_match_log_of_linear(log_fn, lin_fn):
    # Reference: numpy's log of the linear value where that value is representable
    # (near Y = 1 the log of the linear value itself is only good to ~1e-16 absolute).
    ad = np.array([0.0, 1e-6, 0.01, 0.3, 1.0, 7.0, 40.0, 300.0])
    assert_allclose(log_fn(ad), np.log(lin_fn(ad)), rtol=1e-12, atol=1e-15)


def test_vector_equals_scalar_loop():
    # Broadcasting check: an array call equals the scalar calls one by one.
    ad = np.array([[0.0, 0.1], [2.0, 50.0]])
    alpha = np.array([0.5, 4.0])
    vec = negative_binomial_yield(ad, alpha)
    for i in range(2):
        for j in range(2):
            assert vec[i, j] == negative_binomial_yield(ad[i, j], alpha[j])


def test_model_table_lists_the_parameters_each_model_needs():
    # The problem schema selects models by these names and reads their parameters here.
    assert set(YIELD_MODELS) == {
        "poisson",
        "murphy",
        "exponential",
        "sqrt_exponential",
        "negative_binomial",
        "bose_einstein",
    }
    assert YIELD_MODELS["negative_binomial"].parameters == ("clustering_alpha",)
    assert YIELD_MODELS["bose_einstein"].parameters == ("critical_layers",)
    assert YIELD_MODELS["poisson"].parameters == ()
    with pytest.raises(AttributeError):
        YIELD_MODELS["poisson"].name = "other"  # frozen: shared across the program


CLOSED_FORMS = {
    "poisson": lambda ad, a, n: poisson_yield(ad),
    "murphy": lambda ad, a, n: murphy_yield(ad),
    "exponential": lambda ad, a, n: exponential_yield(ad),
    "sqrt_exponential": lambda ad, a, n: sqrt_exponential_yield(ad),
    "negative_binomial": lambda ad, a, n: negative_binomial_yield(ad, a),
    "bose_einstein": lambda ad, a, n: bose_einstein_yield(ad, n),
}


@settings(max_examples=60, deadline=None)
@given(
    model=st.sampled_from(sorted(CLOSED_FORMS)),
    ad_low=st.floats(0.0, 1e3),
    extra=st.floats(0.0, 1e3),
    alpha=st.floats(0.05, 1e3),
    layers=st.floats(0.5, 40.0),
)
def test_every_model_is_a_probability_non_increasing_in_ad(model, ad_low, extra, alpha, layers):
    # Property of any yield model: more expected defects never raise the yield.
    fn = CLOSED_FORMS[model]
    y_low = fn(ad_low, alpha, layers)
    y_high = fn(ad_low + extra, alpha, layers)
    assert 0.0 <= y_high <= 1.0 and 0.0 <= y_low <= 1.0
    assert y_high <= y_low * (1 + 1e-14)


# --------------------------------------------------------------------------- mixtures


def zero_factor(d):
    return np.zeros_like(d)


@pytest.mark.parametrize("alpha", [0.5, 1.0, 2.0, 5.0])
@pytest.mark.parametrize("ad", [0.01, 0.5, 3.0, 20.0])
def test_gamma_mixture_with_unit_factor_is_negative_binomial(alpha, ad):
    # Stapper (1983): the negative binomial yield is the Poisson yield averaged over a
    # gamma density; the quadrature path (factor given) must reproduce the closed form.
    d0 = 0.4
    got = mixed_yield("negative_binomial", d0, ad / d0, zero_factor, clustering_alpha=alpha)
    assert_allclose(got, negative_binomial_yield(ad, alpha), rtol=1e-9)


# alpha = 400 takes the Golub-Welsch branch of the node tables (Gamma(400) overflows).
@pytest.mark.parametrize("alpha", [0.5, 1.0, 2.0, 5.0, 400.0])
@pytest.mark.parametrize("ad", [0.01, 0.5, 3.0, 20.0])
def test_spare_mixture_without_spares_is_closed_form_of_whole_area(alpha, ad):
    # Limiting case: with no spare, all n units must be good, so the units are plain
    # area and the mixture equals the closed form of plain + n * unit area.
    d0, n_units = 0.25, 6
    unit = 0.6 * ad / d0 / n_units
    plain = 0.4 * ad / d0

    def factor(d):
        return log_spare_unit_factor(unit, d, n_units, 0)

    got = log_mixed_yield("negative_binomial", d0, plain, factor, clustering_alpha=alpha)
    assert_allclose(got, log_negative_binomial_yield(ad, alpha), rtol=1e-9)


@pytest.mark.parametrize(
    "model, kwargs, closed, rtol",
    [
        ("murphy", {}, log_murphy_yield, 1e-8),
        ("sqrt_exponential", {}, log_sqrt_exponential_yield, 1e-6),
        ("exponential", {}, log_exponential_yield, 1e-9),
        ("poisson", {}, log_poisson_yield, 1e-12),
    ],
)
@pytest.mark.parametrize("ad", [0.01, 0.5, 3.0, 20.0])
@pytest.mark.parametrize("plain_share", [0.0, 0.5, 1.0])
def test_mixture_reproduces_closed_form(model, kwargs, closed, rtol, ad, plain_share):
    # Each closed form is E_D[exp(-A D)] for its density distribution (Murphy 1964:
    # triangle; Levy for exp(-sqrt(AD))). Moving part of the area into an exponential
    # factor r(D) = exp(-k D) must not change the result.
    d0 = 0.5
    plain = plain_share * ad / d0
    k = (1 - plain_share) * ad / d0

    def factor(d):
        return -k * d

    assert_allclose(log_mixed_yield(model, d0, plain, factor, **kwargs), closed(ad), rtol=rtol)
    assert_allclose(
        log_mixed_yield(model, d0, ad / d0, zero_factor, **kwargs), closed(ad), rtol=rtol
    )


@pytest.mark.parametrize("ad_per_layer", [0.001, 0.05, 0.3, 2.0])
@pytest.mark.parametrize("layers", [1.0, 4.0, 13.5])
def test_bose_einstein_mixture_reproduces_closed_form(ad_per_layer, layers):
    # Stapper (1983): (1 + AD)^-n is a gamma mixture of shape n and total mean n D.
    d_layer = 0.031
    area = ad_per_layer / d_layer

    def factor(d):
        return -0.3 * area * d  # 30 % of the area moved into the factor

    got = log_mixed_yield("bose_einstein", d_layer, 0.7 * area, factor, critical_layers=layers)
    assert_allclose(got, log_bose_einstein_yield(ad_per_layer, layers), rtol=1e-9)


def gamma_reference(alpha, d0, plain, log_factor):
    """E over D ~ Gamma(alpha, mean d0) by adaptive quadrature (scipy.integrate.quad)."""
    dist = stats.gamma(alpha, scale=d0 / alpha)

    def integrand(d):
        return math.exp(-plain * d + float(log_factor(d))) * dist.pdf(d)

    edges = np.concatenate([[0.0], d0 * np.geomspace(1e-6, 1e3, 40), [np.inf]])
    total = sum(
        integrate.quad(integrand, lo, hi, epsabs=0, epsrel=1e-12, limit=200)[0]
        for lo, hi in zip(edges[:-1], edges[1:], strict=True)
    )
    return math.log(total)


@pytest.mark.parametrize(
    "alpha, needed, spare, block_ad, plain_ad",
    [(0.5, 8, 1, 1.0, 0.3), (2.0, 16, 2, 3.0, 1.0), (1.0, 64, 4, 2.0, 0.0), (5.0, 4, 4, 5.0, 0.5)],
)
def test_spare_mixture_matches_adaptive_quadrature(alpha, needed, spare, block_ad, plain_ad):
    # Reference library: scipy.integrate.quad over the gamma density of the
    # conditional yield exp(-A D) P(at least n of n+s units good | D).
    d0 = 0.5
    unit = block_ad / d0 / (needed + spare)

    def factor(d):
        return log_spare_unit_factor(unit, d, needed, spare)

    got = log_mixed_yield("negative_binomial", d0, plain_ad / d0, factor, clustering_alpha=alpha)
    assert_allclose(got, gamma_reference(alpha, d0, plain_ad / d0, factor), rtol=1e-8)


def test_mixture_vector_equals_scalar_loop():
    # Broadcasting check, including per-element clustering parameters.
    d0 = np.array([0.1, 0.3, 0.9])
    plain = np.array([[1.0], [4.0]])
    alpha = np.array([0.5, 2.0, np.inf])
    unit = 0.2

    def factor(d):
        return log_spare_unit_factor(unit, d, 4, 1)

    vec = log_mixed_yield("negative_binomial", d0, plain, factor, clustering_alpha=alpha)
    assert vec.shape == (2, 3)
    for i in range(2):
        for j in range(3):
            one = log_mixed_yield(
                "negative_binomial", d0[j], plain[i, 0], factor, clustering_alpha=alpha[j]
            )
            assert_allclose(vec[i, j], one, rtol=1e-12)


def test_mixture_limits_poisson_and_zero_density():
    # Limiting cases: a point-mass density gives exp(-A D0) r(D0); with alpha = inf the
    # gamma mixture is that point mass; at D0 = 0 only r(0) remains.
    def factor(d):
        return log_spare_unit_factor(0.5, d, 3, 1)

    expected = -2.0 * 0.7 + log_spare_unit_factor(0.5, 0.7, 3, 1)
    assert_allclose(log_mixed_yield("poisson", 0.7, 2.0, factor), expected, rtol=1e-14)
    assert_allclose(
        log_mixed_yield("negative_binomial", 0.7, 2.0, factor, clustering_alpha=np.inf),
        expected,
        rtol=1e-12,
    )
    for model in ("murphy", "sqrt_exponential", "exponential"):
        assert log_mixed_yield(model, 0.0, 2.0, factor) == 0.0


def test_mixture_log_space_survives_underflow():
    # Log space: a yield of exp(-2000 * ...) is zero in linear terms but its log must
    # match the closed form.
    got = log_mixed_yield("negative_binomial", 1.0, 4000.0, zero_factor, clustering_alpha=1e4)
    assert np.isfinite(got)
    assert_allclose(got, log_negative_binomial_yield(4000.0, 1e4), rtol=1e-9)


def test_mixture_rejects_unknown_model_and_missing_parameter():
    # Models are chosen by explicit name, with their parameters (DEVELOPERS.md).
    with pytest.raises(ValueError, match="unknown yield model"):
        log_mixed_yield("seeds", 0.1, 1.0)
    with pytest.raises(ValueError, match="clustering_alpha"):
        log_mixed_yield("negative_binomial", 0.1, 1.0)
    with pytest.raises(ValueError, match="critical_layers"):
        log_mixed_yield("bose_einstein", 0.1, 1.0, zero_factor)
