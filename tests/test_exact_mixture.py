"""Exact yield of dies with spare units, array repair and salvage bands, for every model.

Outside truths, named beside each check:

* closed forms L(x) = E[exp(-x D)] of the models (Murphy 1964; Stapper 1983 for the
  gamma family; the Laplace transform exp(-sqrt(x D0)) of the Levy density), with the
  spare-unit factor expanded by the binomial theorem into a sum of L values and summed
  in Python's ``decimal`` arithmetic with enough digits that its cancellation costs
  nothing;
* ``scipy.integrate.quad`` over the model's density of D (written out below and checked
  against ``scipy.stats``) of the yield at fixed D from ``scipy.special`` binomial and
  Poisson probabilities;
* ``scipy.stats`` binomial and Poisson for the Poisson model, and limiting cases.

Yields are compared as logarithms: |log got - log expected| <= 1e-9 is a relative
error of 1e-9 however small the yield, so no absolute floor is needed.
"""

import math
from decimal import Decimal, localcontext

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats
from scipy.special import bdtr, bdtrc, pdtr, pdtrc

from optimizer.evaluator import DieBatch, Evaluator
from optimizer.formulas import defect_mixture
from optimizer.formulas.defect_mixture import RedundantBlocks, log_redundant_yield
from optimizer.problem import YIELD_MODEL_NAMES, parse_problem

MODELS = YIELD_MODEL_NAMES
# every model but Poisson has a density of D to integrate over
MIXED = tuple(m for m in MODELS if m != "poisson")
# mean defects per unit, a D0, from far below to far above one
UNIT_DEFECTS = [1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 0.1, 1.0, 10.0]
D0 = 0.37  # defect density [1/cm^2] (per layer for Bose-Einstein)
RTOL = 1e-9


def model_parameters(model, alpha):
    return {
        "clustering_alpha": alpha if model == "negative_binomial" else None,
        "critical_layers": alpha if model == "bose_einstein" else None,
    }


def shapes(model):
    """Clustering parameters swept per model: alpha for the negative binomial (0.3 to
    50), layers for Bose-Einstein (not necessarily integer), none otherwise."""
    if model == "negative_binomial":
        return [0.3, 2.0, 50.0]
    if model == "bose_einstein":
        return [1.0, 4.5]
    return [None]


def ours(model, d0, plain, blocks, alpha=None):
    """log yield from the package; ``blocks`` is a list per die of tuples
    (unit area, units, min good, max good, repairs, repairable fraction)."""
    width = max(len(b) for b in blocks)
    arr = np.zeros((len(blocks), width, 6))
    for i, die in enumerate(blocks):
        arr[i, : len(die)] = die
    spec = RedundantBlocks(*(arr[:, :, j] for j in range(6)))
    return log_redundant_yield(
        model, np.broadcast_to(d0, len(blocks)), plain, spec, **model_parameters(model, alpha)
    )


# --------------------------------------------------------------------------- closed forms


def laplace_decimal(model, x, d0, alpha):
    """E[exp(-x D)] in decimal arithmetic: the model's closed form at mean defects x d0."""
    m = (x if isinstance(x, Decimal) else Decimal(x)) * Decimal(d0)
    if model == "poisson":
        return (-m).exp()
    if model == "murphy":  # Murphy (1964): triangular density on [0, 2 D0]
        return Decimal(1) if m == 0 else ((1 - (-m).exp()) / m) ** 2
    if model == "exponential":
        return 1 / (1 + m)
    if model == "sqrt_exponential":  # Levy density with scale D0 / 2
        return (-m.sqrt()).exp()
    if model == "negative_binomial":  # Stapper (1983): gamma density, shape alpha
        a = Decimal(alpha)
        return (1 + m / a) ** (-a)
    return (1 + m) ** (-Decimal(alpha))  # Bose-Einstein: gamma, shape = layers


def closed_float(model, x, d0, alpha):
    return float(laplace_decimal(model, x, d0, alpha).ln())


def unit_polynomial(units, low, high):
    """Integer coefficients c_m of P(low <= good <= high) = sum_m c_m y^m for
    Binomial(units, y) good units (binomial theorem on (1 - y)^(units - g))."""
    coef = [0] * (units + 1)
    for g in range(low, min(high, units) + 1):
        for i in range(units - g + 1):
            coef[g + i] += math.comb(units, g) * math.comb(units - g, i) * (-1) ** i
    return coef


def spare_yield_decimal(model, d0, plain, blocks, alpha):
    """log E[exp(-A D) prod_b P(block b accepted | D)] for blocks without repair.

    With y_b = exp(-a_b D) each factor is a polynomial in y_b, so the mixture is a finite
    sum of closed forms L(A + sum_b m_b a_b). The alternating sum is done with enough
    digits to cover its cancellation (terms up to 3^N times the smallest L), and the
    arguments are formed in decimal too: a float rounding there would be amplified by it.
    """
    polys = [
        [(m, c) for m, c in enumerate(unit_polynomial(n, lo, hi)) if c]
        for (_, n, lo, hi, _, _) in blocks
    ]
    total_units = sum(b[1] for b in blocks)
    smallest = closed_float(model, plain + sum(b[0] * b[1] for b in blocks), d0, alpha)
    digits = 40 + int(total_units * math.log10(3) + (-smallest) / math.log(10))
    with localcontext() as ctx:
        ctx.prec = digits
        terms = [(Decimal(plain), 1)]
        for (a, *_), poly in zip(blocks, polys, strict=True):
            terms = [(x + m * Decimal(a), c * cm) for x, c in terms for m, cm in poly]
        total = sum(c * laplace_decimal(model, x, d0, alpha) for x, c in terms)
        return float(total.ln()) if total > 0 else -math.inf


@pytest.mark.parametrize("model", MODELS)
def test_spares_match_closed_form_sums_on_a_dense_grid(model):
    # Closed form: binomial-theorem expansion of the spare factor into L values, summed
    # in decimal (see spare_yield_decimal); every model, a D0 from 1e-6 to 10, n from 1
    # to 64 needed units, 0 to 4 spares, with and without other critical area.
    counts = [(1, 1), (1, 4), (2, 1), (7, 3), (16, 2), (64, 1), (60, 4), (32, 0)]
    cases = []
    for alpha in shapes(model):
        for unit_defects in UNIT_DEFECTS:
            for needed, spare in counts:
                for plain_defects in (0.0, 0.8):
                    a = unit_defects / D0
                    n = needed + spare
                    cases.append((alpha, plain_defects / D0, [(a, n, needed, n, 0, 0.0)]))
    for alpha in shapes(model):
        mine = [c for c in cases if c[0] == alpha]
        got = ours(model, D0, np.array([c[1] for c in mine]), [c[2] for c in mine], alpha)
        expected = [spare_yield_decimal(model, D0, c[1], c[2], alpha) for c in mine]
        assert_allclose(got, expected, rtol=0, atol=RTOL)


@pytest.mark.parametrize("model", MODELS)
def test_two_blocks_and_salvage_bands_match_closed_form_sums(model):
    # Closed form as above for two redundant blocks on one die (one mixture over the
    # shared D) and for salvage bands "between lo and hi good units".
    dies = [
        [(1e-5 / D0, 9, 8, 9, 0, 0.0), (0.3 / D0, 5, 3, 5, 0, 0.0)],
        [(0.02 / D0, 16, 14, 15, 0, 0.0)],  # band: 14 or 15 of 16 good
        [(2.0 / D0, 8, 2, 4, 0, 0.0), (1e-4 / D0, 3, 1, 3, 0, 0.0)],
        [(1e-6 / D0, 64, 60, 63, 0, 0.0)],  # band far in the tail of a tiny failure rate
    ]
    for alpha in shapes(model):
        for plain in (0.0, 1.5 / D0):
            got = ours(model, D0, plain, dies, alpha)
            expected = [spare_yield_decimal(model, D0, plain, die, alpha) for die in dies]
            assert_allclose(got, expected, rtol=0, atol=RTOL)


@pytest.mark.parametrize("model", MODELS)
def test_no_spare_and_no_repair_reduce_to_the_model_formula(model):
    # Limiting cases: s = 0 spares leaves the units plain area, Y = L(A + n a); a repair
    # budget of 0 makes every defect fatal, Y = L(A + a) whatever the repairable share.
    for alpha in shapes(model):
        for unit_defects in UNIT_DEFECTS:
            a = unit_defects / D0
            plain = 0.5 / D0
            blocks = [[(a, 12, 12, 12, 0, 0.0)], [(a, 1, 1, 1, 0, 0.7)], [(a, 3, 3, 3, 0, 1.0)]]
            got = ours(model, D0, plain, blocks, alpha)
            expected = [
                closed_float(model, plain + 12 * a, D0, alpha),
                closed_float(model, plain + a, D0, alpha),
                closed_float(model, plain + 3 * a, D0, alpha),
            ]
            assert_allclose(got, expected, rtol=0, atol=1e-13)


# --------------------------------------------------------------------------- Poisson


def test_poisson_spares_repair_and_bands_equal_scipy_stats():
    # Reference library: with no clustering the yield is exp(-A D0) times the block
    # probabilities at D0, from scipy.stats.binom and scipy.stats.poisson directly.
    d0, plain = 0.9, 0.4
    for unit_defects in UNIT_DEFECTS:
        a = unit_defects / d0
        q = -math.expm1(-a * d0)
        for needed, spare in [(1, 1), (7, 3), (64, 4)]:
            n = needed + spare
            got = ours("poisson", d0, plain, [[(a, n, needed, n, 0, 0.0)]])[0]
            expected = -plain * d0 + math.log(stats.binom.cdf(spare, n, q))
            assert_allclose(got, expected, rtol=1e-13, atol=1e-12)
        for repairs, fraction in [(1, 0.5), (16, 0.9)]:
            got = ours("poisson", d0, plain, [[(a, 1, 1, 1, repairs, fraction)]])[0]
            unit = math.exp(-(1 - fraction) * a * d0) * stats.poisson.cdf(
                repairs, fraction * a * d0
            )
            assert_allclose(got, -plain * d0 + math.log(unit), rtol=1e-13, atol=1e-12)
        # band: exactly 6 or 7 of 8 units good
        got = ours("poisson", d0, plain, [[(a, 8, 6, 7, 0, 0.0)]])[0]
        band = stats.binom.pmf([6, 7], 8, math.exp(-a * d0)).sum()
        assert_allclose(got, -plain * d0 + math.log(band), rtol=0, atol=1e-9)


# --------------------------------------------------------------------------- quadrature


def log_density_of_log_d(model, x, d0, alpha):
    """log density of X = log D for the model's distribution of D (Jacobian included)."""
    if x > 700:
        return -math.inf
    d = math.exp(x)
    if d == 0:
        return -math.inf
    if model == "sqrt_exponential":  # Levy, scale c: sqrt(c / 2 pi) d^-3/2 e^(-c / 2d)
        c = d0 / 2
        return 0.5 * math.log(c / (2 * math.pi)) - 0.5 * x - c / (2 * d)
    if model == "murphy":  # triangle on [0, 2 D0], peak 1 / D0 at D0
        if d >= 2 * d0:
            return -math.inf
        return math.log(min(d, 2 * d0 - d)) - 2 * math.log(d0) + x
    shape, scale = {
        "exponential": (1.0, d0),
        "negative_binomial": (alpha, (d0 / alpha) if alpha else None),
        "bose_einstein": (alpha, d0),
    }[model]
    return shape * x - d / scale - math.lgamma(shape) - shape * math.log(scale)


def test_densities_written_out_agree_with_scipy_stats():
    # Reference library: the densities of D used by the quadrature below are those of
    # scipy.stats (levy, triang, expon, gamma).
    d0, alpha = 0.37, 2.5
    refs = {
        "sqrt_exponential": stats.levy(scale=d0 / 2),
        "murphy": stats.triang(c=0.5, loc=0.0, scale=2 * d0),
        "exponential": stats.expon(scale=d0),
        "negative_binomial": stats.gamma(a=alpha, scale=d0 / alpha),
        "bose_einstein": stats.gamma(a=alpha, scale=d0),
    }
    for model, dist in refs.items():
        for d in (0.01, 0.2, 0.5, 0.7, 3.0):
            if model == "murphy" and d >= 2 * d0:
                continue
            got = log_density_of_log_d(model, math.log(d), d0, alpha) - math.log(d)
            assert_allclose(got, dist.logpdf(d), rtol=1e-12)


def unit_log_probabilities(d, a, repairs, fraction):
    """log P(unit good), log P(unit bad) at density d, both without cancellation."""
    if repairs > 0 and fraction > 0:
        m = fraction * a * d
        good_cdf = pdtr(repairs, m)
        log_good = -(1 - fraction) * a * d + math.log(good_cdf) if good_cdf > 0 else -math.inf
        bad = -math.expm1(-(1 - fraction) * a * d) + math.exp(-(1 - fraction) * a * d) * pdtrc(
            repairs, m
        )
    else:
        log_good = -a * d
        bad = -math.expm1(-a * d)
    if bad < 0.5:
        log_bad = math.log(bad) if bad > 0 else -math.inf
    else:
        log_bad = math.log(-math.expm1(log_good))
    return log_good, log_bad, bad


def block_log_probability(d, block):
    """log P(low <= good units <= high | d): 1 - failures when failing is rare,
    otherwise the binomial terms summed in logs."""
    a, n, low, high, repairs, fraction = block
    log_good, log_bad, bad = unit_log_probabilities(d, a, repairs, fraction)
    fail = (bdtrc(n - low, n, bad) if low > 0 else 0.0) + (
        bdtr(n - high - 1, n, bad) if high < n else 0.0
    )
    if fail < 0.5:
        return math.log1p(-fail)
    logs = [
        math.lgamma(n + 1)
        - math.lgamma(j + 1)
        - math.lgamma(n - j + 1)
        + (j * log_bad if j else 0.0)
        + ((n - j) * log_good if n - j else 0.0)
        for j in range(n - min(high, n), n - low + 1)
    ]
    top = max(logs)
    return top + math.log(sum(math.exp(v - top) for v in logs)) if top > -math.inf else top


def quadrature_log_yield(model, d0, plain, blocks, alpha):
    """log E[exp(-A D) prod_b P_b(D)] by scipy.integrate.quad in x = log D.

    The integral is split at the model's scale and at 1 / (critical area) of each block
    and of the plain area, in pieces at most 3 wide, with infinite end pieces. The lost
    yield (1 - prod P_b) is integrated when it is small and subtracted from the closed
    form L(A), which keeps full relative precision near yield 1.
    """

    def log_ok(d):
        return sum(block_log_probability(d, b) for b in blocks)

    def weight(x):
        return log_density_of_log_d(model, x, d0, alpha) - plain * math.exp(min(x, 700))

    def lost(x):
        w = weight(x)
        return math.exp(w) * -math.expm1(log_ok(math.exp(x))) if w > -745 else 0.0

    def kept(x):
        w = weight(x) + (log_ok(math.exp(x)) if x < 700 else -math.inf)
        return math.exp(w) if w > -745 else 0.0

    scales = [d0] + [1 / (b[0] * b[1]) for b in blocks] + [1 / b[0] for b in blocks]
    scales += [1 / plain] if plain > 0 else []
    top = math.log(2 * d0) if model == "murphy" else None
    marks = sorted({math.log(s) for s in scales if top is None or math.log(s) < top})
    edges = [marks[0] - 40.0, *marks, top if top is not None else marks[-1] + 40.0]
    pieces = [edges[0]]
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        m = max(1, math.ceil((hi - lo) / 3))
        pieces += [lo + (hi - lo) * (i + 1) / m for i in range(m)]

    def integral(f):
        opts = {"epsabs": 0.0, "epsrel": 1e-12, "limit": 100}
        total = integrate.quad(f, -np.inf, pieces[0], **opts)[0]
        for lo, hi in zip(pieces[:-1], pieces[1:], strict=True):
            if hi > lo:
                total += integrate.quad(f, lo, hi, **opts)[0]
        if top is None:
            total += integrate.quad(f, pieces[-1], np.inf, **opts)[0]
        return total

    base = closed_float(model, plain, d0, alpha)
    loss = integral(lost)
    if loss < 0.5 * math.exp(base):
        return base + math.log1p(-loss / math.exp(base))
    return math.log(integral(kept))


REPAIR_BLOCKS = [
    (1, 1, 1, 0.9),  # one array, one repair
    (1, 1, 16, 0.5),  # one array, 16 repairs, half the defects repairable
    (8, 7, 2, 0.8),  # 7 of 8 arrays, each with 2 repairs (spares and repair together)
    (64, 64, 4, 0.7),  # 64 arrays all needed, 4 repairs each
]


@pytest.mark.parametrize("model", MIXED)
def test_array_repair_matches_quadrature_over_the_density(model):
    # Reference library: scipy.integrate.quad over the density of D (quadrature_log_yield)
    # of exp(-A D) P(block accepted | D) with the unit yield from scipy.special.pdtr.
    unit_grid = [1e-6, 1e-3, 0.1, 1.0, 10.0]
    for i, alpha in enumerate(shapes(model)):
        cases = []
        for j, unit_defects in enumerate(unit_grid):
            for k, (units, needed, repairs, fraction) in enumerate(REPAIR_BLOCKS):
                # thin the NB and BE sweeps: each shape sees every unit size and block kind
                if (i + j + k) % len(shapes(model)) and alpha is not None:
                    continue
                plain = 0.0 if (j + k) % 2 else 0.6 / D0
                block = (unit_defects / D0, units, needed, units, repairs, fraction)
                cases.append((plain, [block]))
        got = ours(model, D0, np.array([c[0] for c in cases]), [c[1] for c in cases], alpha)
        expected = [quadrature_log_yield(model, D0, c[0], c[1], alpha) for c in cases]
        assert_allclose(got, expected, rtol=0, atol=RTOL)


@pytest.mark.parametrize("model", MIXED)
def test_mixed_redundancy_on_one_die_matches_quadrature(model):
    # Reference library as above: spares with repair, several blocks and a salvage band
    # on one die, all sharing one density D.
    dies = [
        [(1e-4 / D0, 6, 4, 6, 3, 0.85), (0.05 / D0, 17, 16, 17, 0, 0.0)],
        [(0.2 / D0, 16, 12, 14, 1, 0.6), (2e-6 / D0, 64, 62, 64, 16, 0.9)],
        [(3.0 / D0, 4, 2, 4, 8, 0.95), (1e-3 / D0, 1, 1, 1, 0, 0.0), (0.4 / D0, 2, 1, 2, 0, 0.0)],
    ]
    for alpha in shapes(model)[:2]:
        for plain in (0.0, 0.9 / D0):
            got = ours(model, D0, plain, dies, alpha)
            expected = [quadrature_log_yield(model, D0, plain, die, alpha) for die in dies]
            assert_allclose(got, expected, rtol=0, atol=RTOL)


# --------------------------------------------------------------------------- limits


@pytest.mark.parametrize("model", MODELS)
def test_vanishing_unit_defects_give_the_plain_yield(model):
    # Limiting case a D0 -> 0. Bracket: all units good is one way to pass and nothing on
    # the units can fail is the best case, so L(A + N a) <= Y <= L(A); the bracket
    # closes as a -> 0 (slowly for the Levy density, like sqrt(N a D0): it has no mean).
    for unit_defects in (1e-12, 1e-26):
        a = unit_defects / D0
        blocks = [[(a, 100, 1, 100, 0, 0.0)], [(a, 5, 4, 5, 16, 0.9)]]
        for alpha in shapes(model):
            for plain in (0.0, 0.7 / D0):
                got = ours(model, D0, plain, blocks, alpha)
                upper = closed_float(model, plain, D0, alpha)
                lower = [closed_float(model, plain + b[0][0] * b[0][1], D0, alpha) for b in blocks]
                assert np.all(got <= upper + 1e-15)
                assert np.all(got >= np.array(lower) - 1e-15)
                if unit_defects < 1e-20:
                    assert_allclose(got, upper, rtol=0, atol=1e-10)


def test_weak_clustering_tends_to_poisson():
    # Limiting case alpha -> infinity: the gamma density narrows to a point and the
    # negative binomial yield tends to the Poisson one; the log gap shrinks like 1 / alpha
    # (the gamma variance is D0^2 / alpha), here bounded by (mean defects)^2 / alpha.
    die = [[(0.05 / D0, 10, 8, 10, 2, 0.7), (0.2 / D0, 3, 2, 3, 0, 0.0)]]
    plain = 0.5 / D0
    poisson = ours("poisson", D0, plain, die)[0]
    mean_defects = 0.5 + 10 * 0.05 + 3 * 0.2
    gaps = []
    for alpha in (1e2, 1e4, 1e6):
        gap = abs(ours("negative_binomial", D0, plain, die, alpha)[0] - poisson)
        assert gap <= mean_defects**2 / alpha
        gaps.append(gap)
    assert gaps[2] < gaps[1] / 50 < gaps[0] / 2500
    inf = ours("negative_binomial", D0, plain, die, np.inf)[0]
    assert inf == poisson


# --------------------------------------------------------------------------- mechanics


@pytest.mark.parametrize("model", MIXED)
def test_adaptive_quadrature_fallback_is_exact_too(model, monkeypatch):
    # The fallback for dies the series cannot finish: force every die onto it and check
    # it against the closed-form sums of the first test.
    monkeypatch.setattr(defect_mixture, "_MAX_LOG_EXCESS", -1.0)
    alpha = shapes(model)[0]
    dies = [[(1e-5 / D0, 5, 4, 5, 0, 0.0)], [(1.0 / D0, 20, 16, 20, 0, 0.0)]]
    for plain in (0.0, 0.3 / D0):
        got = ours(model, D0, plain, dies, alpha)
        expected = [spare_yield_decimal(model, D0, plain, die, alpha) for die in dies]
        assert_allclose(got, expected, rtol=0, atol=RTOL)


@pytest.mark.parametrize("model", MIXED)
def test_batch_equals_one_die_at_a_time(model):
    # Vector equals scalar loop: a die's yield never depends on the dies priced with it
    # (block order, table lengths and scratch buffers are shared inside one call).
    rng = np.random.default_rng(11)
    dies, plains = [], []
    for _ in range(30):
        die = []
        for _ in range(int(rng.integers(1, 4))):
            units = int(rng.integers(1, 20))
            low = int(rng.integers(1, units + 1))
            high = units if rng.random() < 0.7 else int(rng.integers(low, units + 1))
            die.append(
                (
                    10 ** rng.uniform(-5, 0.5) / D0,
                    units,
                    low,
                    high,
                    int(rng.choice([0, 0, 2, 8])),
                    float(rng.uniform(0.3, 1.0)),
                )
            )
        dies.append(die)
        plains.append(float(rng.choice([0.0, 0.4 / D0])))
    alpha = shapes(model)[-1]
    together = ours(model, D0, np.array(plains), dies, alpha)
    for i in range(len(dies)):
        alone = ours(model, D0, plains[i], [dies[i]], alpha)[0]
        assert_allclose(together[i], alone, rtol=1e-13, atol=1e-15)


def test_evaluator_prices_sqrt_exponential_spares_and_salvage_exactly():
    # The bug this module fixes: exp(-sqrt(AD)) dies with spares were priced up to ~1 %
    # too high at small defects per unit. End to end through the evaluator, the yield
    # and the salvage band (6 or 7 of 8 cores good, per full-spec die) equal the
    # closed-form sums.
    problem = parse_problem(
        {
            "market": {
                "unit_price": 100.0,
                "volume": 1000,
                "salvage_bin": [
                    {
                        "name": "six",
                        "block": "core",
                        "min_good": 6,
                        "unit_price": 60.0,
                        "demand": 100,
                    }
                ],
            },
            "process": [
                {
                    "name": "p",
                    "wafer_diameter": "300 mm",
                    "edge_exclusion": "3 mm",
                    "scribe_width": "0.1 mm",
                    "wafer_cost": 5000.0,
                    "defect_density": f"{D0} /cm^2",
                    "yield_model": "sqrt_exponential",
                    "systematic_yield": 0.9,
                }
            ],
            "packaging": [{"name": "single", "kind": "single_die"}],
            "block": [
                {"name": "core", "area": "0.01 mm^2", "count": 8, "spare_choices": [0, 1, 2]},
                {"name": "glue", "area": "30 mm^2"},
            ],
        }
    )
    ev = Evaluator(problem)
    spares = np.array([[0, 0], [1, 0], [2, 0]])
    batch = DieBatch(
        process=np.zeros(3, dtype=np.int64),
        instances=np.tile([8, 1], (3, 1)),
        spares=spares,
        repairs=np.zeros((3, 2), dtype=np.int64),
        interface_area_mm2=np.zeros(3),
    )
    prices = ev.price_dies(batch)
    a, plain = 0.01 / 100, 30.0 / 100  # critical areas [cm^2]
    for i, s in enumerate(spares[:, 0]):
        n = 8 + s
        full = spare_yield_decimal("sqrt_exponential", D0, plain, [(a, n, 8, n, 0, 0.0)], None)
        band = spare_yield_decimal("sqrt_exponential", D0, plain, [(a, n, 6, 7, 0, 0.0)], None)
        assert_allclose(prices.log_hard_yield[i], full + math.log(0.9), rtol=0, atol=RTOL)
        assert_allclose(prices.salvage_per_good[i, 0], math.exp(band - full), rtol=RTOL)
    # the spares must matter here, or the check would not test them
    assert prices.log_hard_yield[2] - prices.log_hard_yield[0] > 1e-4


@pytest.mark.parametrize("model", MODELS)
def test_defect_free_dies_by_hand(model):
    # Limiting case by hand: with no defects every unit is good, so a die passes an
    # "at least" requirement for sure and never falls in a band that excludes the
    # all-good count.
    blocks = [[(0.2, 8, 6, 8, 2, 0.5)], [(0.2, 8, 6, 7, 0, 0.0)], [(0.0, 8, 6, 7, 0, 0.0)]]
    alpha = shapes(model)[0]
    got = ours(model, 0.0, 0.4, blocks, alpha)
    assert got[0] == 0.0
    assert got[1] == -np.inf and got[2] == -np.inf
