"""Gross dies per wafer: the classic approximation and an exact count.

A wafer holds a regular grid of rectangular die sites (die plus scribe line in each
direction), stepped like a stepper map: every row shares one x-offset. A site counts when
all four of its corners lie inside the usable circle (wafer radius minus edge exclusion).
The exact count is maximised over the grid offset. The count is piecewise constant in the
offset and an optimal grid can be slid until two lattice corners touch the circle, so the
exact search only has to try those touching positions (see `gross_dies_exact`).

The classic approximation ``pi d^2 / (4 S) - pi d / sqrt(2 S)`` is kept for reports and as
a check; it ignores the die shape.
"""

from __future__ import annotations

import itertools
import math
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from optimizer.formulas.grid_search import CLEARANCE_TOL_MM, best_counts, best_offset

__all__ = [
    "usable_radius_mm",
    "gross_dies_classic",
    "die_shape_mm",
    "gross_dies_exact",
    "gross_dies_exact_many",
    "wafer_map",
]

# Estimated inner-loop steps (candidate offsets x rows) above which new footprints are
# counted on several threads; below it, starting threads costs more than it saves.
_PARALLEL_MIN_STEPS = 2e6

# Footprints are rounded to this grid before caching so that equal footprints computed
# along different arithmetic paths share one entry.
_CACHE_DECIMALS = 9

# Rounds of chain peeling per radius, and the shortest chain worth bisecting; rows left
# over are counted one by one (see `_chains`).
_CHAIN_ROUNDS = 8
_MIN_CHAIN = 16


def usable_radius_mm(wafer_diameter_mm: float, edge_exclusion_mm: float) -> float:
    """Radius of the wafer area that may hold dies.

    Parameters
    ----------
    wafer_diameter_mm : float
        Wafer diameter [mm].
    edge_exclusion_mm : float
        Ring at the wafer edge where no die may lie [mm].

    Returns
    -------
    float
        Usable radius ``wafer_diameter_mm / 2 - edge_exclusion_mm`` [mm], never below 0.

    Raises
    ------
    ValueError
        If the diameter is not positive or the edge exclusion is negative.
    """
    if not wafer_diameter_mm > 0:
        raise ValueError(f"wafer_diameter_mm must be > 0, got {wafer_diameter_mm}")
    if not edge_exclusion_mm >= 0:
        raise ValueError(f"edge_exclusion_mm must be >= 0, got {edge_exclusion_mm}")
    return max(0.5 * float(wafer_diameter_mm) - float(edge_exclusion_mm), 0.0)


def gross_dies_classic(usable_diameter_mm, site_area_mm2):
    """Classic dies-per-wafer approximation (area term minus edge-loss term).

    Parameters
    ----------
    usable_diameter_mm : float or array_like
        Usable diameter ``d`` of the wafer [mm].
    site_area_mm2 : float or array_like
        Area ``S`` of one die site, die plus scribe [mm^2]. Broadcasts with
        `usable_diameter_mm`.

    Returns
    -------
    float or numpy.ndarray
        ``N = pi d^2 / (4 S) - pi d / sqrt(2 S)`` [dies], not floored. Goes negative for
        sites comparable to the wafer, where the formula no longer applies.

    Notes
    -----
    The first term is the wafer area over the site area; the second approximates the
    partial sites lost along the circumference. The formula sees only the site area, not
    its shape: it overestimates for long thin dies and underestimates badly for very
    large dies (compare `gross_dies_exact`).

    References
    ----------
    J. L. Hennessy and D. A. Patterson, *Computer Architecture: A Quantitative Approach*,
    section on the cost of an integrated circuit.
    """
    d = np.asarray(usable_diameter_mm, dtype=float)
    s = np.asarray(site_area_mm2, dtype=float)
    n = np.pi * d**2 / (4.0 * s) - np.pi * d / np.sqrt(2.0 * s)
    return float(n) if n.ndim == 0 else n


def die_shape_mm(die_area_mm2, aspect_ratio=1.0):
    """Width and height of a rectangular die of given area and aspect ratio.

    Parameters
    ----------
    die_area_mm2 : float or array_like
        Die area [mm^2].
    aspect_ratio : float or array_like, optional
        Width over height [-]; above 1 means a die wider than tall. Broadcasts with
        `die_area_mm2`. Default 1 (square).

    Returns
    -------
    width_mm : numpy.ndarray
        ``sqrt(area * aspect_ratio)`` [mm].
    height_mm : numpy.ndarray
        ``sqrt(area / aspect_ratio)`` [mm].
    """
    area = np.asarray(die_area_mm2, dtype=float)
    ratio = np.asarray(aspect_ratio, dtype=float)
    if np.any(ratio <= 0):
        raise ValueError("aspect_ratio must be > 0")
    return np.sqrt(area * ratio), np.sqrt(area / ratio)


def _check_footprint(usable_radius_mm: float, site_width_mm: float, site_height_mm: float) -> None:
    if not usable_radius_mm >= 0:
        raise ValueError(f"usable_radius_mm must be >= 0, got {usable_radius_mm}")
    if not (site_width_mm > 0 and site_height_mm > 0):
        raise ValueError(
            f"site width and height must be > 0, got {site_width_mm} x {site_height_mm}"
        )


def _row_indices(r: float, h: float) -> np.ndarray:
    """Row numbers ``j`` (row spans ``[y0 + j h, y0 + (j+1) h]``, ``0 <= y0 < h``) that can
    meet the circle."""
    j_lo = int(math.floor(-r / h)) - 1
    j_hi = int(math.ceil(r / h))
    return np.arange(j_lo, j_hi + 1, dtype=float)


def gross_dies_exact(usable_radius_mm: float, site_width_mm: float, site_height_mm: float) -> int:
    """Exact maximum number of whole die sites on a wafer.

    Parameters
    ----------
    usable_radius_mm : float
        Radius of the usable wafer area [mm] (see `usable_radius_mm`).
    site_width_mm : float
        Site pitch along x, die width plus scribe [mm].
    site_height_mm : float
        Site pitch along y, die height plus scribe [mm].

    Returns
    -------
    int
        Largest number of sites of one regular grid (common x-offset for all rows) whose
        four corners all lie inside the usable circle, over all grid offsets [dies].

    Notes
    -----
    Convention: a corner exactly on the circle counts as inside; a corner counts when its
    distance from the centre is at most ``R + 1e-9`` mm, a clearance that only absorbs
    floating-point rounding.

    Why the search is exact: fix an optimal offset and the set S of sites it keeps. The
    offsets that keep every site of S form an intersection of disks of radius R, one per
    corner of S. These disks have distinct centres (every site has four corners), so the
    intersection is not a whole disk and has a point where two boundary circles meet:
    there two lattice corners ``p`` and ``p + v`` lie on the usable circle, with ``v`` a
    lattice difference vector, ``0 < |v| <= 2R``. Trying every such position (reduced
    modulo the lattice) therefore reaches the optimum; no single-touch position is needed
    because the four corners of any kept site already supply the pairs. Mirror symmetries
    of circle and grid cut the candidates to about one per die site.

    For each candidate offset the count is analytic: row ``j`` keeps the sites between
    ``-c_j`` and ``c_j``, ``c_j = sqrt(R^2 - y_j^2)`` with ``y_j`` the row edge farther
    from the centre. Work grows as the number of sites times the number of rows, about
    ``(R^2 / S)^1.5``: milliseconds for 100 mm^2 dies on a 300 mm wafer, well under a
    second for 1 mm^2 dies.
    """
    _check_footprint(usable_radius_mm, site_width_mm, site_height_mm)
    return best_offset(float(usable_radius_mm), float(site_width_mm), float(site_height_mm))[0]


# Exact counts by rounded footprint (radius, short side, long side); a quarter turn maps
# the grid onto itself, so sorted sides share an entry.
_COUNT_CACHE: dict[tuple[float, float, float], int] = {}
# whole calls of gross_dies_exact_many, oldest dropped first
_CALL_CACHE: dict[tuple, np.ndarray] = {}
_CALL_CACHE_SIZE = 64
_CALL_CACHE_MAX_ITEMS = 20_000


def _count_threads() -> int:
    """Threads for counting: DIEPLAN_COUNT_WORKERS, else the CPU count (1 = in-line)."""
    return max(1, int(os.environ.get("DIEPLAN_COUNT_WORKERS", os.cpu_count() or 1)))


def _count_footprints(keys: np.ndarray) -> np.ndarray:
    """Exact counts of footprints given as rows (radius, short side, long side)."""
    r, w, h = (np.ascontiguousarray(keys[:, i]) for i in range(3))
    threads = _count_threads()
    # the search tries about (2r/w)(2r/h) offsets, each over about 2r/h rows
    steps = float(np.sum((2 * r / w + 1) * (2 * r / h + 1) * (2 * r / h + 3)))
    if threads == 1 or steps < _PARALLEL_MIN_STEPS or len(keys) < 2 * threads:
        return best_counts(r, w, h)
    # interleave so that each thread gets a similar mix of small and large dies
    parts = [np.arange(t, len(keys), threads) for t in range(threads)]
    out = np.empty(len(keys), dtype=np.int64)
    with ThreadPoolExecutor(max_workers=threads) as pool:
        counted = pool.map(lambda idx: best_counts(r[idx], w[idx], h[idx]), parts)
        for idx, part in zip(parts, counted, strict=True):
            out[idx] = part
    return out


def clear_count_cache() -> None:
    """Forget cached exact counts (benchmarks time cold runs with it)."""
    _COUNT_CACHE.clear()
    _CALL_CACHE.clear()


def _unique_footprints(r: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    """Distinct (radius, short, long) rows and the inverse index, as `numpy.unique`
    with ``axis=0`` gives, but by 1-D sorts (a call rarely has more than a few radii)."""
    radii, r_inverse = np.unique(r, return_inverse=True)
    if radii.size == 1:
        sides, inverse = np.unique(lo + 1j * hi, return_inverse=True)  # sorts by (lo, hi)
        unique = np.column_stack([np.full(sides.size, radii[0]), sides.real, sides.imag])
        return unique, inverse
    return np.unique(np.stack([r, lo, hi], axis=1), axis=0, return_inverse=True)


def _chains(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Split footprint rows into chains for `_count_by_bisection`.

    `keys` are distinct rows (radius, short side, long side) sorted lexicographically,
    as `_unique_footprints` returns them. Within one radius the rows are in order of the
    short side, so the rows whose long side reaches the running maximum form a chain:
    both sides non-decreasing. Such chains are peeled off in up to `_CHAIN_ROUNDS`
    rounds per radius; one shorter than `_MIN_CHAIN` is left over instead. Footprints
    of one shape rule (the solver's dies of one process) form a single chain; rows left
    over (general input) are still counted exactly, one by one.

    Returns
    -------
    order : numpy.ndarray
        Every row index once: the chains one after the other, each in chain order, then
        the rows left over.
    starts, stops : numpy.ndarray
        Position in `order` of the first and of the last row of each chain.
    """
    chains, left = [], []
    bounds = np.flatnonzero(np.diff(keys[:, 0])) + 1
    for rest in np.split(np.arange(len(keys)), bounds):
        for _ in range(_CHAIN_ROUNDS):
            if not len(rest):
                break
            hi = keys[rest, 2]
            on_chain = hi >= np.maximum.accumulate(hi)
            (chains if np.count_nonzero(on_chain) >= _MIN_CHAIN else left).append(rest[on_chain])
            rest = rest[~on_chain]
        left.append(rest)
    sizes = np.array([len(c) for c in chains], dtype=np.intp)
    stops = np.cumsum(sizes) - 1
    order = np.concatenate(chains + left) if len(keys) else np.empty(0, dtype=np.intp)
    return order, stops - sizes + 1, stops


def _count_by_bisection(keys: np.ndarray) -> np.ndarray:
    """Exact counts of distinct footprint rows (radius, short side, long side), sorted
    as `_unique_footprints` returns them; equal to `_count_footprints` of the same rows.

    Notes
    -----
    Why it is exact: the exact count is non-increasing in each side of the site. Take an
    optimal grid for a site ``W x H``; the circle is centred at the origin of the grid
    coordinates (see `grid_search.sites_at`: a row's chord runs from ``-c`` to ``c``,
    ``c = sqrt(R^2 - y^2)``). For ``W' <= W`` and ``H' <= H`` the linear map
    ``(x, y) -> (a x, b y)``, ``a = W'/W <= 1``, ``b = H'/H <= 1``, maps that grid
    (offset ``(x0, y0)``) onto a grid of ``W' x H'`` sites (offset ``(a x0, b y0)``) and
    each site corner onto the matching corner of the smaller site. Since
    ``(a x)^2 + (b y)^2 <= x^2 + y^2``, no corner moves away from the centre, so every
    corner within the radius (plus clearance) stays within it: the smaller site fits at
    least as many whole sites, ``count(W', H') >= count(W, H)``. This is our own
    argument, not a citation.

    Along a chain (radius fixed, short and long side both non-decreasing) the count is
    therefore a non-increasing step function: where the two ends of a stretch of the
    chain have equal counts, so does every footprint between them. Bisection counts the
    ends of each chain, then the middle of every stretch whose ends differ, and fills
    the stretches whose ends agree, level by level so that each level is one batched
    call of `_count_footprints`. It counts each footprint at most once, and in all about
    (distinct counts) x log2(chain length) of them instead of the whole chain. Decisions
    use the rounded rows themselves, the very footprints that are counted.

    The computed count lies between the counts for radius ``R`` (the touching search
    is exact for it) and for ``R + 1e-9`` mm (the clearance against rounding), both
    monotone by the argument above. They differ only within a relative ``1e-9 mm / R``
    of a step, so a wrongly filled stretch would need two distinct rows of one chain
    in one such window, the later counted higher. The tests and the benchmark compare
    with the per-footprint path.
    """
    n = len(keys)
    counts = np.full(n, -1, dtype=np.int64)
    order, starts, stops = _chains(keys)
    n_chained = int(stops[-1]) + 1 if len(stops) else 0

    def count_at(pos: np.ndarray) -> None:
        if len(pos):
            counts[pos] = _count_footprints(keys[order[pos]])

    # positions in `order`; the left-over rows are counted with the chain ends
    count_at(np.concatenate([starts, stops, np.arange(n_chained, n)]))
    lo, hi = starts, stops
    while True:
        split = (hi - lo >= 2) & (counts[lo] != counts[hi])
        lo, hi = lo[split], hi[split]
        if not len(lo):
            break
        mid = (lo + hi) // 2
        count_at(mid)
        lo, hi = np.concatenate([lo, mid]), np.concatenate([mid, hi])
    # every position left is inside a stretch whose ends agree: copy the left end
    known = np.where(counts[:n_chained] >= 0, np.arange(n_chained), 0)
    counts[:n_chained] = counts[np.maximum.accumulate(known)]
    out = np.empty(n, dtype=np.int64)
    out[order] = counts
    return out


def _exact_many(usable_radius_mm, site_width_mm, site_height_mm, *, bisect: bool) -> np.ndarray:
    """`gross_dies_exact_many`; ``bisect=False`` counts every new footprint on its own
    (the reference path for tests and benchmarks)."""
    r, w, h = np.broadcast_arrays(
        np.asarray(usable_radius_mm, dtype=float),
        np.asarray(site_width_mm, dtype=float),
        np.asarray(site_height_mm, dtype=float),
    )
    if np.any(~(r >= 0)) or np.any(~(w > 0)) or np.any(~(h > 0)):
        raise ValueError("usable radius must be >= 0 and site width and height > 0")
    r = np.round(r, _CACHE_DECIMALS)
    lo = np.round(np.minimum(w, h), _CACHE_DECIMALS)
    hi = np.round(np.maximum(w, h), _CACHE_DECIMALS)
    unique, inverse = _unique_footprints(r.ravel(), lo.ravel(), hi.ravel())
    # zip of column lists builds the key tuples much faster than tuple() per row
    tuples = list(zip(*(unique[:, i].tolist() for i in range(3)), strict=True))
    counts = np.fromiter(
        map(_COUNT_CACHE.get, tuples, itertools.repeat(-1)), dtype=np.int64, count=len(tuples)
    )
    new = np.flatnonzero(counts < 0)
    if len(new):
        # a subset of sorted distinct rows is still sorted and distinct
        counted = (_count_by_bisection if bisect else _count_footprints)(unique[new])
        counts[new] = counted
        keys = map(tuples.__getitem__, new.tolist())
        _COUNT_CACHE.update(zip(keys, counted.tolist(), strict=True))
    return counts[np.asarray(inverse).ravel()].reshape(r.shape)


def gross_dies_exact_many(usable_radius_mm, site_width_mm, site_height_mm) -> np.ndarray:
    """Vectorised `gross_dies_exact` over broadcast arrays of footprints.

    Parameters
    ----------
    usable_radius_mm : float or array_like
        Usable wafer radius [mm].
    site_width_mm : float or array_like
        Site pitch along x [mm].
    site_height_mm : float or array_like
        Site pitch along y [mm].

    Returns
    -------
    numpy.ndarray of int64
        Exact gross dies [dies], in the broadcast shape of the inputs.

    Notes
    -----
    Inputs are rounded to 1e-9 mm and width/height sorted (the count is unchanged by a
    quarter turn) before a cache lookup, so each distinct footprint is counted once, also
    across calls. New footprints are counted by bisection along chains of growing
    footprints, where the count is a non-increasing step function (see
    `_count_by_bisection`); the footprints actually counted go on several threads when
    there is enough work (environment variable DIEPLAN_COUNT_WORKERS, default the CPU
    count).
    """
    r, w, h = (
        np.asarray(v, dtype=float) for v in (usable_radius_mm, site_width_mm, site_height_mm)
    )
    # the same arrays come again and again (every period of a life prices the same
    # candidate dies): whole calls are remembered too, by their bytes; large calls
    # (the candidate tables of big problems) are not, since their keys alone would
    # hold megabytes each
    if max(r.size, w.size, h.size) > _CALL_CACHE_MAX_ITEMS:
        return _exact_many(r, w, h, bisect=True)
    key = (r.shape, w.shape, h.shape, r.tobytes(), w.tobytes(), h.tobytes())
    found = _CALL_CACHE.get(key)
    if found is None:
        found = _exact_many(r, w, h, bisect=True)
        found.setflags(write=False)
        if len(_CALL_CACHE) >= _CALL_CACHE_SIZE:
            _CALL_CACHE.pop(next(iter(_CALL_CACHE)))
        _CALL_CACHE[key] = found
    return found.copy()


def wafer_map(usable_radius_mm: float, site_width_mm: float, site_height_mm: float) -> np.ndarray:
    """Lower-left corners of the sites of an optimal grid placement.

    Parameters
    ----------
    usable_radius_mm : float
        Usable wafer radius [mm]; the circle is centred at the origin.
    site_width_mm : float
        Site pitch along x [mm].
    site_height_mm : float
        Site pitch along y [mm].

    Returns
    -------
    numpy.ndarray
        Array of shape ``(n, 2)`` with the ``(x, y)`` lower-left corner of each site [mm],
        rows ordered bottom to top and left to right; ``n`` equals `gross_dies_exact`.
    """
    _check_footprint(usable_radius_mm, site_width_mm, site_height_mm)
    r, w, h = float(usable_radius_mm), float(site_width_mm), float(site_height_mm)
    count, x0, y0 = best_offset(r, w, h)
    if count == 0:
        return np.empty((0, 2))
    rows = _row_indices(r, h)
    y_lo = y0 + rows * h
    y_far = np.abs(y_lo + 0.5 * h) + 0.5 * h
    half_chord = np.sqrt(np.maximum((r + CLEARANCE_TOL_MM) ** 2 - y_far**2, 0.0))
    # Same arithmetic as _counts_at so the map and the count agree to the last site.
    first = -np.floor(half_chord / w + x0 / w)
    last = np.floor(half_chord / w - x0 / w) - 1.0
    corners = [
        np.column_stack([x0 + np.arange(i0, i1 + 1) * w, np.full(int(i1 - i0 + 1), y)])
        for i0, i1, y in zip(first, last, y_lo, strict=True)
        if i1 >= i0
    ]
    return np.concatenate(corners, axis=0)
