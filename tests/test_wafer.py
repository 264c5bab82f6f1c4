"""Checks of the gross-dies-per-wafer formulas against outside truths.

Each check names its source: a published worked example, a limiting case derived by
hand, an independent brute-force scan, or a statement of common practice.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from optimizer.formulas.wafer import (
    die_shape_mm,
    gross_dies_classic,
    gross_dies_exact,
    gross_dies_exact_many,
    usable_radius_mm,
    wafer_map,
)

TOL_MM = 1e-9  # corner clearance convention stated in gross_dies_exact


def brute_force_best(radius_mm, width_mm, height_mm, n_offsets=60):
    """Best count over a uniform n x n scan of grid offsets, checking every corner.

    Written independently of the module: enumerate the sites of each shifted grid and
    keep those whose four corners are within the radius.
    """
    frac = (np.arange(n_offsets) + 0.5) / n_offsets
    x0 = (frac * width_mm)[:, None]
    y0 = (frac * height_mm)[:, None]
    i = np.arange(-math.ceil(radius_mm / width_mm) - 1, math.ceil(radius_mm / width_mm) + 1)
    j = np.arange(-math.ceil(radius_mm / height_mm) - 1, math.ceil(radius_mm / height_mm) + 1)
    x_lo = x0 + i[None, :] * width_mm  # offsets x columns
    y_lo = y0 + j[None, :] * height_mm  # offsets x rows
    x_far = np.maximum(np.abs(x_lo), np.abs(x_lo + width_mm))
    y_far = np.maximum(np.abs(y_lo), np.abs(y_lo + height_mm))
    # inside[a, b, row, col] for x-offset a and y-offset b
    inside = (
        x_far[:, None, None, :] ** 2 + y_far[None, :, :, None] ** 2 <= (radius_mm + TOL_MM) ** 2
    )
    return int(inside.sum(axis=(2, 3)).max())


def best_over_x_fine_y(radius_mm, width_mm, height_mm, n_y=300):
    """Best count over a fine scan of y-offsets, maximised exactly over the x-offset.

    For a fixed y-offset an optimal grid can be slid left until the left edge of some
    row's first site meets that row's chord, so trying x0 = -c_k (mod width) for every
    row chord half-width c_k is exact in x.
    """
    j = np.arange(-math.ceil(radius_mm / height_mm) - 1, math.ceil(radius_mm / height_mm) + 1)
    best = 0
    for y0 in (np.arange(n_y) + 0.5) / n_y * height_mm:
        y_lo = y0 + j * height_mm
        y_far = np.maximum(np.abs(y_lo), np.abs(y_lo + height_mm))
        y_far = y_far[y_far <= radius_mm + TOL_MM]
        if y_far.size == 0:
            continue
        c = np.sqrt(np.maximum((radius_mm + TOL_MM) ** 2 - y_far**2, 0.0))
        x0 = np.mod(-c, width_mm)[:, None]
        # sites i with x0 + i w >= -c and x0 + (i + 1) w <= c, per row
        first = np.ceil((-c[None, :] - x0) / width_mm)
        last = np.floor((c[None, :] - x0) / width_mm) - 1
        best = max(best, int(np.maximum(last - first + 1, 0).sum(axis=1).max()))
    return best


# --- classic formula ---------------------------------------------------------------


def test_classic_matches_textbook_worked_example():
    # Hennessy & Patterson, Computer Architecture: A Quantitative Approach, cost of an
    # integrated circuit (values from memory): 300 mm wafer, 1.5 cm x 1.5 cm die gives
    # about 270 dies (formula 269.7); a 1.0 cm^2 die gives about 640. No scribe, no edge
    # exclusion in that example.
    assert abs(gross_dies_classic(300.0, 225.0) - 270.0) <= 0.5
    assert abs(gross_dies_classic(300.0, 100.0) - 640.0) <= 0.5


def test_classic_vectorised_equals_scalar_loop():
    # Vector equals scalar loop (common practice for vectorised formulas).
    diameters = np.array([[200.0], [294.0], [450.0]])
    areas = np.array([1.0, 25.0, 100.0, 625.0])
    vector = gross_dies_classic(diameters, areas)
    loop = [[gross_dies_classic(float(d), float(a)) for a in areas] for d in diameters[:, 0]]
    assert vector.shape == (3, 4)
    assert_allclose(vector, loop, rtol=1e-15)


# --- small helpers -------------------------------------------------------------------


def test_usable_radius_definition():
    # Common practice: R = wafer diameter / 2 - edge exclusion.
    assert usable_radius_mm(300.0, 3.0) == pytest.approx(147.0, abs=1e-12)
    assert usable_radius_mm(200.0, 0.0) == pytest.approx(100.0, abs=1e-12)
    with pytest.raises(ValueError):
        usable_radius_mm(300.0, -1.0)


def test_die_shape_area_and_aspect():
    # Limiting case derived by hand: width * height = area, width / height = aspect.
    area = np.array([1.0, 100.0, 400.0])
    width, height = die_shape_mm(area, aspect_ratio=np.array([1.0, 4.0, 0.25]))
    assert_allclose(width * height, area, rtol=1e-12)
    assert_allclose(width / height, [1.0, 4.0, 0.25], rtol=1e-12)
    assert_allclose(die_shape_mm(100.0, 4.0), (20.0, 5.0), rtol=1e-12)


# --- exact count: hand-derived limiting cases ---------------------------------------


def test_site_larger_than_usable_diameter_gives_zero():
    # Limiting case derived by hand: a site wider than the usable diameter, or a square
    # whose diagonal (1.5 * sqrt(2) R = 2.12 R) exceeds it, cannot fit.
    assert gross_dies_exact(100.0, 201.0, 1.0) == 0
    assert gross_dies_exact(100.0, 1.0, 201.0) == 0
    assert gross_dies_exact(100.0, 150.0, 150.0) == 0
    assert len(wafer_map(100.0, 150.0, 150.0)) == 0


def test_site_inscribed_exactly_counts_once():
    # Limiting case derived by hand: a 6 x 8 site has a 10 diagonal, so it fits a circle
    # of radius 5 only with all corners on the edge (edge counts as inside). The same
    # for a 14 x 6 site in radius hypot(7, 3), which is not exact in floating point and
    # relies on the stated 1e-9 mm clearance.
    assert gross_dies_exact(5.0, 6.0, 8.0) == 1
    assert gross_dies_exact(5.0 - 1e-6, 6.0, 8.0) == 0
    assert gross_dies_exact(math.hypot(7.0, 3.0), 14.0, 6.0) == 1
    assert gross_dies_exact(math.hypot(7.0, 3.0) - 1e-6, 14.0, 6.0) == 0


@pytest.mark.parametrize(("side_over_radius", "expected"), [(0.70, 4), (0.75, 2)])
def test_few_large_squares_hand_derived(side_over_radius, expected):
    # Limiting case derived by hand, radius R, square side s:
    # s = 0.70 R: at most 2 rows and 2 per row (3 s > 2 R); the centred 2 x 2 block has
    #   diagonal 2 sqrt(2) s = 1.98 R <= 2 R, so 4.
    # s = 0.75 R: the 2 x 2 block (2.12 R) does not fit; a row of 2 needs its far edge at
    #   |y| <= sqrt(1 - 0.75^2) R = 0.66 R, and two rows span 1.5 R, so the other row
    #   cannot hold even one site: 2.
    radius = 100.0
    side = side_over_radius * radius
    assert gross_dies_exact(radius, side, side) == expected


# --- exact count against brute force -------------------------------------------------


@pytest.mark.parametrize(
    ("radius", "width", "height"),
    [
        (147.0, 10.08, 10.08),  # 100 mm^2 die with scribe on a 300 mm wafer
        (147.0, 20.08, 20.08),
        (147.0, 20.0, 5.0),  # 4:1 aspect
        (147.0, 7.3, 13.1),
        (60.0, 3.2, 3.2),
        (60.0, 9.0, 2.2),
        (30.0, 17.0, 11.0),  # a handful of large sites
    ],
)
def test_exact_never_below_brute_force_scan(radius, width, height):
    # Brute force: independent 60 x 60 scan of offsets (above). The exact search must
    # match or beat every scanned offset; it may beat the scan because the best offset
    # window can be narrower than the scan step (common practice; hence the touching search).
    exact = gross_dies_exact(radius, width, height)
    scan = brute_force_best(radius, width, height)
    assert exact >= scan
    # Guard against a count that is not achievable: the map re-checks every site.
    assert len(wafer_map(radius, width, height)) == exact


@pytest.mark.parametrize(
    ("width", "height"),
    [(13.0, 15.0), (19.0, 3.0), (20.0, 7.0), (21.0, 21.0), (17.0, 9.0), (10.08, 10.08)],
)
def test_exact_never_below_x_exact_y_scan(width, height):
    # Brute force, stronger than the 2-D scan: exact over x for each of 300 y-offsets
    # (above). These footprints need touching pairs of corners more than a radius apart;
    # a search that drops them falls one die short of this scan.
    assert gross_dies_exact(147.0, width, height) >= best_over_x_fine_y(147.0, width, height)


@pytest.mark.parametrize(
    ("radius", "width", "height"),
    [(147.0, 10.08, 10.08), (147.0, 20.0, 5.0), (60.0, 3.2, 4.7), (30.0, 17.0, 11.0)],
)
def test_wafer_map_sites_inside_and_disjoint(radius, width, height):
    # Definition of a valid placement (common practice): every corner of every site
    # within the usable circle, sites on one grid without overlap, count as reported.
    corners = wafer_map(radius, width, height)
    assert corners.shape == (gross_dies_exact(radius, width, height), 2)
    for dx in (0.0, width):
        for dy in (0.0, height):
            dist = np.hypot(corners[:, 0] + dx, corners[:, 1] + dy)
            assert np.all(dist <= radius + TOL_MM)
    # One regular grid: every corner is the first one plus whole steps.
    steps = (corners - corners[0]) / np.array([width, height])
    assert_allclose(steps, np.round(steps), atol=1e-9)
    # Disjoint: no two sites share a grid cell.
    assert len(np.unique(np.round(steps).astype(np.int64), axis=0)) == len(corners)


# --- exact count against the classic formula ------------------------------------------


@settings(max_examples=40, deadline=None)
@given(
    area=st.floats(min_value=10.0, max_value=400.0),
    aspect=st.floats(min_value=1.0, max_value=1.2),
)
def test_exact_near_classic_for_near_square_dies(area, aspect):
    # Common practice: for near-square mid-size dies the exact count
    # is at or a few percent above the classic formula. Measured here on a 300 mm wafer:
    # about +0.5 % at 10 mm^2 rising to about +10 % near 360 mm^2, so the upper bound is
    # wider above 300 mm^2 where the dies are already large.
    width, height = die_shape_mm(area, aspect)
    exact = gross_dies_exact(150.0, float(width), float(height))
    classic = gross_dies_classic(300.0, area)
    upper = 0.08 if area <= 300.0 else 0.12
    assert -0.03 <= exact / classic - 1.0 <= upper


@pytest.mark.parametrize("area", [10.0, 20.0, 30.0])
def test_classic_overestimates_long_thin_dies(area):
    # Common practice: for long thin dies (aspect above about 3) the
    # formula overestimates, since it ignores the shape. At 4:1 the effect is small (a
    # few dies in thousands, measured) and shows for small dies; the exact count also
    # drops below that of the square die of the same area.
    width, height = die_shape_mm(area, 4.0)
    thin = gross_dies_exact(150.0, float(width), float(height))
    square_side = math.sqrt(area)
    assert thin < gross_dies_classic(300.0, area)
    assert thin < gross_dies_exact(150.0, square_side, square_side)


@pytest.mark.parametrize("area", [25.0, 100.0, 200.0])
def test_classic_overestimates_very_thin_dies(area):
    # Common practice: at 8:1 the overestimate is clear at every
    # mid size, by more than 1 %.
    width, height = die_shape_mm(area, 8.0)
    thin = gross_dies_exact(150.0, float(width), float(height))
    assert thin < 0.99 * gross_dies_classic(300.0, area)


@pytest.mark.parametrize("side", [50.0, 60.0, 75.0])
def test_classic_underestimates_very_large_dies(side):
    # Common practice: for very large dies the formula
    # underestimates badly, by tens of percent (its edge term overcounts the loss).
    exact = gross_dies_exact(150.0, side, side)
    assert exact >= 1.2 * gross_dies_classic(300.0, side * side)


# --- vectorised front and symmetry ----------------------------------------------------


def test_exact_many_equals_scalar_loop():
    # Vector equals scalar loop (common practice), including repeated and swapped
    # footprints that share cache entries.
    radius = np.array([[147.0], [97.0]])
    width = np.array([10.08, 5.08, 20.0, 5.0, 10.08])
    height = np.array([10.08, 15.08, 5.0, 20.0, 10.08])
    vector = gross_dies_exact_many(radius, width, height)
    loop = [
        [gross_dies_exact(float(r), float(w), float(h)) for w, h in zip(width, height, strict=True)]
        for r in radius[:, 0]
    ]
    assert vector.dtype == np.int64
    assert vector.shape == (2, 5)
    np.testing.assert_array_equal(vector, loop)


@pytest.mark.parametrize(("width", "height"), [(20.0, 5.0), (7.3, 13.1), (3.2, 9.9), (41.0, 23.0)])
def test_quarter_turn_symmetry(width, height):
    # Limiting case derived by hand: a quarter turn maps the circle onto itself and swaps
    # the site's width and height; the search treats rows and columns differently.
    assert gross_dies_exact(147.0, width, height) == gross_dies_exact(147.0, height, width)


@settings(max_examples=60, deadline=None)
@given(
    radius=st.floats(20.0, 150.0),
    width=st.floats(2.0, 40.0),
    height=st.floats(2.0, 40.0),
    fx=st.floats(0.0, 0.999),
    fy=st.floats(0.0, 0.999),
)
def test_count_at_an_offset_equals_corner_enumeration(radius, width, height, fx, fy):
    # Definition of a whole site (common practice): all four corners within the usable
    # circle. The compiled row-by-row count at one grid offset must equal a direct
    # enumeration of sites and corners, written independently here.
    from optimizer.formulas.grid_search import sites_at

    x0, y0 = fx * width, fy * height
    i = np.arange(-math.ceil(radius / width) - 2, math.ceil(radius / width) + 2)
    j = np.arange(-math.ceil(radius / height) - 2, math.ceil(radius / height) + 2)
    x_lo = x0 + i * width
    y_lo = y0 + j * height
    x_far = np.maximum(np.abs(x_lo), np.abs(x_lo + width))
    y_far = np.maximum(np.abs(y_lo), np.abs(y_lo + height))
    direct = int((x_far[None, :] ** 2 + y_far[:, None] ** 2 <= (radius + TOL_MM) ** 2).sum())
    # A corner within rounding of the circle may fall either way; skip such draws.
    margin = np.abs(np.hypot(x_far[None, :], y_far[:, None]) - radius).min()
    if margin > 1e-6:
        assert sites_at(x0, y0, radius, width, height) == direct


def test_counting_threads_give_the_same_counts(monkeypatch):
    # The threaded path must count exactly what the one-thread path counts.
    from optimizer.formulas import wafer

    rng = np.random.default_rng(3)
    sides = rng.uniform(1.5, 30.0, size=(64, 2))
    monkeypatch.setattr(wafer, "_PARALLEL_MIN_STEPS", 0.0)
    wafer.clear_count_cache()
    monkeypatch.setenv("DIEPLAN_COUNT_WORKERS", "2")
    threaded = gross_dies_exact_many(147.0, sides[:, 0], sides[:, 1])
    wafer.clear_count_cache()
    monkeypatch.setenv("DIEPLAN_COUNT_WORKERS", "1")
    inline = gross_dies_exact_many(147.0, sides[:, 0], sides[:, 1])
    wafer.clear_count_cache()
    assert np.array_equal(threaded, inline)


@pytest.mark.parametrize(
    ("radius", "side"), [(147.0, 10.08), (147.0, 23.7), (60.0, 3.2), (97.0, 7.77)]
)
def test_square_sites_shortcut_equals_every_touching_pair(radius, side):
    # The search tries only half the touching pairs of square sites (diagonal mirror).
    # Reference: every lattice vector (a, b) in all four quadrants and both roots, each
    # evaluated by the row count, written out here without the symmetry argument.
    from optimizer.formulas.grid_search import sites_at

    n = int(2 * radius / side)
    best = 0
    for a in range(-n, n + 1):
        for b in range(-n, n + 1):
            vx, vy = a * side, b * side
            length2 = vx * vx + vy * vy
            if length2 == 0 or length2 > (2 * radius) ** 2:
                continue
            length = math.sqrt(length2)
            half = math.sqrt(max(radius**2 - length2 / 4, 0.0))
            for sign in (1.0, -1.0):
                px = -vx / 2 - sign * vy / length * half
                py = -vy / 2 + sign * vx / length * half
                best = max(best, sites_at(px % side, py % side, radius, side, side))
    assert gross_dies_exact(radius, side, side) == best


# --- many footprints: bisection along chains ------------------------------------------


def one_at_a_time(radius, width, height):
    """Reference: `gross_dies_exact` called on each footprint separately (no cache, no
    bisection), after the same 1e-9 mm rounding as the vectorised front."""
    r, w, h = np.broadcast_arrays(
        *(np.round(np.asarray(x, dtype=float), 9) for x in (radius, width, height))
    )
    flat = [
        gross_dies_exact(float(a), float(b), float(c))
        for a, b, c in zip(r.ravel(), w.ravel(), h.ravel(), strict=True)
    ]
    return np.array(flat, dtype=np.int64).reshape(r.shape)


def capped_chain(rng, n, short_mm, scribe_mm=0.1, area_range=(20.0, 800.0)):
    """Footprints of dies of random area, square until the side reaches the reticle's
    short side, then stretched: width = min(sqrt(A), short), height = A / width."""
    area = rng.uniform(*area_range, n)
    width = np.minimum(np.sqrt(area), short_mm)
    return width + scribe_mm, area / width + scribe_mm


@pytest.fixture
def counted_rows(monkeypatch):
    """Fresh cache, and a record of how many footprints the counting kernel saw."""
    from optimizer.formulas import wafer

    seen = []
    kernel = wafer._count_footprints

    def spy(keys):
        seen.append(len(keys))
        return kernel(keys)

    wafer.clear_count_cache()
    monkeypatch.setattr(wafer, "_count_footprints", spy)
    yield seen
    wafer.clear_count_cache()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_exact_many_on_capped_chains_equals_one_at_a_time(seed, counted_rows):
    # Reference: the per-footprint path. Dense chains (many footprints per count value)
    # so that most footprints are filled in by bisection, not counted.
    rng = np.random.default_rng(seed)
    radius = rng.uniform(60.0, 147.0)
    width, height = capped_chain(rng, 1500, short_mm=rng.uniform(12.0, 26.0))
    swap = rng.random(width.size) < 0.5  # either orientation, in shuffled order
    width, height = np.where(swap, height, width), np.where(swap, width, height)
    many = gross_dies_exact_many(radius, width, height)
    np.testing.assert_array_equal(many, one_at_a_time(radius, width, height))
    assert sum(counted_rows) < 0.5 * width.size  # bisection did fill in


def test_exact_many_on_a_long_chain_equals_per_footprint_path(counted_rows):
    # Reference: the per-footprint path of the vectorised front (`bisect=False`, which
    # counts every new footprint with the kernel), on a longer chain of 300 mm wafer dies.
    from optimizer.formulas import wafer

    rng = np.random.default_rng(7)
    width, height = capped_chain(rng, 20_000, short_mm=26.0)
    many = gross_dies_exact_many(147.0, width, height)
    wafer.clear_count_cache()
    reference = wafer._exact_many(147.0, width, height, bisect=False)
    np.testing.assert_array_equal(many, reference)
    assert np.all(np.diff(many[np.argsort(width + height)]) <= 0)  # one chain: monotone
    assert sum(counted_rows) < 0.5 * width.size + 20_000  # the second call counts all


@pytest.mark.parametrize("seed", [3, 4])
def test_exact_many_on_non_chains_equals_one_at_a_time(seed, counted_rows):
    # Reference: the per-footprint path. Random sides (mostly not comparable), a chain
    # with random footprints mixed in, and two radii in one call.
    rng = np.random.default_rng(seed)
    scattered = rng.uniform(3.0, 40.0, size=(300, 2))
    chain_w, chain_h = capped_chain(rng, 400, short_mm=18.0)
    width = np.concatenate([scattered[:, 0], chain_w])
    height = np.concatenate([scattered[:, 1], chain_h])
    radius = np.where(rng.random(width.size) < 0.7, 147.0, 97.0)
    many = gross_dies_exact_many(radius, width, height)
    np.testing.assert_array_equal(many, one_at_a_time(radius, width, height))


def test_exact_many_with_duplicates_and_partial_cache_equals_one_at_a_time(counted_rows):
    # Reference: the per-footprint path. Repeated footprints, footprints equal after the
    # 1e-9 mm rounding, swapped orientations, and a cache holding part of the chain.
    rng = np.random.default_rng(5)
    width, height = capped_chain(rng, 600, short_mm=20.0)
    gross_dies_exact_many(147.0, width[::3], height[::3])  # some already cached
    pick = rng.integers(0, width.size, 2000)
    w, h = width[pick], height[pick]
    w = np.where(rng.random(w.size) < 0.3, w + 2e-11, w)  # same key after rounding
    swap = rng.random(w.size) < 0.5
    w, h = np.where(swap, h, w), np.where(swap, w, h)
    many = gross_dies_exact_many(147.0, w, h)
    np.testing.assert_array_equal(many, one_at_a_time(147.0, w, h))
    # a duplicate-only chain of one footprint value
    np.testing.assert_array_equal(
        gross_dies_exact_many(147.0, np.full(40, 10.08), np.full(40, 10.08)),
        np.full(40, gross_dies_exact(147.0, 10.08, 10.08)),
    )


def test_chains_cover_every_row_once_in_chain_order():
    # Definition of a chain (common practice): along it both sides are non-decreasing,
    # within one radius; every row is on exactly one chain or left over. A chain with a
    # few outliers mixed in must still be found for most of its rows.
    from optimizer.formulas import wafer

    rng = np.random.default_rng(6)
    lo, hi = np.sort(rng.uniform(3.0, 40.0, size=(3000, 2)), axis=1).T
    radius = np.where(np.arange(3000) < 5, 147.0, 97.0)  # 5 outliers on the chain's wafer
    chain_w, chain_h = capped_chain(rng, 3000, short_mm=22.0)
    keys, _ = wafer._unique_footprints(
        np.concatenate([radius, np.full(3000, 147.0)]),
        np.round(np.concatenate([lo, chain_w]), 9),
        np.round(np.concatenate([hi, chain_h]), 9),
    )
    order, starts, stops = wafer._chains(keys)
    assert np.array_equal(np.sort(order), np.arange(len(keys)))
    for first, last in zip(starts, stops, strict=True):
        chain = keys[order[first : last + 1]]
        assert len(chain) >= wafer._MIN_CHAIN
        assert np.all(chain[:, 0] == chain[0, 0])
        assert np.all(np.diff(chain[:, 1]) >= 0) and np.all(np.diff(chain[:, 2]) >= 0)
    on_big_wafer = keys[order[: stops[-1] + 1], 0] == 147.0
    assert np.count_nonzero(on_big_wafer) >= 2900


@settings(max_examples=150, deadline=None)
@given(
    radius=st.floats(5.0, 150.0),
    width=st.floats(1.5, 60.0),
    height=st.floats(1.5, 60.0),
    shrink_w=st.floats(0.5, 1.0),
    shrink_h=st.floats(0.5, 1.0),
)
def test_exact_count_is_monotone_in_the_footprint(radius, width, height, shrink_w, shrink_h):
    # Our own argument, in the notes of wafer._count_by_bisection: scaling an optimal grid
    # by diag(W'/W, H'/H) about the wafer centre moves no corner outward, so a smaller
    # site never fits fewer whole sites. Checked here on the per-footprint count.
    small = gross_dies_exact(radius, width * shrink_w, height * shrink_h)
    assert small >= gross_dies_exact(radius, width, height)
