"""Compiled search for the grid offset that fits the most whole die sites on a wafer.

The mathematics is in `optimizer.formulas.wafer.gross_dies_exact`: an optimal grid can
be slid until two lattice corners touch the usable circle, so only those touching
positions are tried, and at each the count is analytic row by row. This module is the
inner loop, compiled with Numba because it is a double loop over about one candidate per
die site times the number of rows, which plain NumPy spends mostly in call overhead on.

The kernels release the GIL, so a caller may run several in threads. They are compiled
for their one signature when this module is imported (from the on-disk cache after the
first time).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# A corner may sit this far outside the circle and still count: it only absorbs
# floating-point rounding of corners placed exactly on the edge.
CLEARANCE_TOL_MM = 1e-9


@njit("float64(float64, float64)", cache=True, nogil=True)
def _floor_mod(value, period):
    """``value`` reduced to ``[0, period)``."""
    out = value - period * math.floor(value / period)
    if out >= period:  # rounding of a value just below a multiple of the period
        out = 0.0
    return out


@njit("int64(float64, float64, float64, float64, float64)", cache=True, nogil=True)
def sites_at(x0, y0, r, w, h):
    """Whole sites inside the circle for the grid with a site corner at ``(x0, y0)``.

    Row ``j`` spans ``[y0 + j h, y0 + (j + 1) h]``; its edge farther from the centre
    limits the chord, and the row keeps the sites ``i`` with ``x0 + i w >= -c`` and
    ``x0 + (i + 1) w <= c``.
    """
    r_tol2 = (r + CLEARANCE_TOL_MM) * (r + CLEARANCE_TOL_MM)
    j_lo = int(math.floor(-r / h)) - 1
    j_hi = int(math.ceil(r / h))
    xs = x0 / w
    total = 0
    for j in range(j_lo, j_hi + 1):
        y_far = abs(y0 + (j + 0.5) * h) + 0.5 * h
        room = r_tol2 - y_far * y_far
        if room <= 0.0:
            continue
        half_chord_w = math.sqrt(room) / w
        n = math.floor(half_chord_w - xs) + math.floor(half_chord_w + xs)
        if n > 0.0:
            total += int(n)
    return total


@njit("Tuple((int64, float64, float64))(float64, float64, float64)", cache=True, nogil=True)
def best_offset(r, w, h):
    """Largest site count over grid offsets, and an offset ``(x0, y0)`` reaching it.

    Tries every offset at which two lattice corners ``p`` and ``p + v`` lie on the
    circle, ``v = (a w, b h)``, ``0 < |v| <= 2 r``: ``p = -v/2 + n sqrt(r^2 - |v|^2/4)``
    with ``n`` a unit normal of ``v``, reduced modulo the lattice. Only ``a, b >= 0`` and
    one root are needed: the mirror symmetries of circle and grid map the other touching
    pairs onto these. Square sites add the diagonal mirror, which maps the pair of
    ``(b, a)`` onto that of ``(a, b)``: then ``b <= a`` suffices.
    """
    if 2.0 * r < min(w, h):
        return 0, 0.0, 0.0
    a_max = int(math.floor(2.0 * r / w))
    b_max = int(math.floor(2.0 * r / h))
    # Allow the rounding of |v| = 2r (two corners diametrically opposite).
    reach2 = (2.0 * r) * (2.0 * r) * (1.0 + 1e-12)
    best, best_x, best_y = 0, 0.0, 0.0
    square = w == h
    for a in range(a_max + 1):
        vx = a * w
        for b in range(min(a, b_max) + 1 if square else b_max + 1):
            vy = b * h
            len2 = vx * vx + vy * vy
            if len2 <= 0.0 or len2 > reach2:
                continue
            length = math.sqrt(len2)
            half_chord = math.sqrt(max(r * r - 0.25 * len2, 0.0))
            x0 = _floor_mod(-0.5 * vx - vy / length * half_chord, w)
            y0 = _floor_mod(-0.5 * vy + vx / length * half_chord, h)
            count = sites_at(x0, y0, r, w, h)
            if count > best:
                best, best_x, best_y = count, x0, y0
    return best, best_x, best_y


@njit("int64[:](float64[:], float64[:], float64[:])", cache=True, nogil=True)
def best_counts(r, w, h):
    """`best_offset` counts of many footprints ``(r[k], w[k], h[k])``."""
    out = np.empty(r.size, dtype=np.int64)
    for k in range(r.size):
        out[k] = best_offset(r[k], w[k], h[k])[0]
    return out
