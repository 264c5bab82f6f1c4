"""Branch and bound over blocks: the contents whose die columns could have a reduced
cost below a limit, found without listing every content.

For the linear program of one (packaging, die count), a column holding k copies of a die
with content q on process p has reduced cost

    r = cost - k (pi . q + mu + rho_p) - (terms of rows whose duals make them >= 0),

pi the duals of the block cover rows, mu of the die-count row and rho_p of the process
mix row, plus k x area x lambda for the carrier rows of an interposer (lambda >= 0).
Its cost is at least k F_p(a, c) + N_p(a), with F_p the floor of the cost per
passed die (times the program's volume factor) and N_p the NRE floor, both
non-decreasing in the content's block area a and critical area c
(:mod:`optimizer.solver.cost_floor`).

Blocks are decided one at a time. At a node with area a, critical area c and prize
pi . q, any completion adds some area x >= 0, at least sigma x critical area (sigma the
least critical area per unit area of the blocks left) and at most P(x) prize, P the
fractional-knapsack value of the blocks left with area budget x (concave, piecewise
linear). On x in [x_j, x_j+1] of a grid, monotonicity gives

    r >= k F_p(a + x_j, c + sigma x_j) + N_p(a + x_j) - k (pi . q + P(x_j+1) + mu + rho_p),

and the node is dropped for (p, k) when the least of these over j is at or above the
limit. Only monotonicity is used, so the floor may be any non-decreasing bound (gross-die
counts are steps, yields of clustered defects are not convex).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from optimizer.evaluator import MM2_PER_CM2
from optimizer.solver.cost_floor import CostFloor

# area grid points per process for the completion bound (a multiple of COARSE_EVERY)
GRID = 24
COARSE_EVERY = 6
# nodes expanded together (bounds the temporaries: nodes x processes x copies x GRID)
CHUNK = 20_000


@dataclass(frozen=True)
class DualPrices:
    """What the oracle needs of a linear program's duals."""

    factor: float  # money per unit of cost per passed die (volume over assembly yields)
    cover: np.ndarray  # (B,) duals of the block cover rows
    count: float  # dual of the die-count row
    process: np.ndarray  # (P,) duals of the process-mix rows (zeros without a mix)
    max_copies: int  # most copies a column may hold
    processes: np.ndarray | None = None  # (P,) processes allowed (None: all)
    # money per mm^2 of die per copy that the carrier rows (interposer area cap and cost
    # under-estimator) add to a column's reduced cost; >= 0 with signed duals
    area_price: float = 0.0
    # the test-escape term of a column's cost (see `milp.build_columns`): with n dies,
    # factor x (k die + (n - k) cheapest + others) x k escape, escape its floor per die
    n_dies: int = 0
    cheapest: float = 0.0  # least cost per passed die of any die
    others: float = 0.0  # least per-unit cost besides the dies (bonding, package, carrier)
    # die-to-die links on this packaging (none for one-die packagings): (L, 2) block
    # ends, bandwidth [GB/s], interface density [GB/s/mm^2] and port area [mm^2]
    link_ends: np.ndarray | None = None
    link_gbps: np.ndarray | None = None
    interface_density: float = 1.0
    port_area: float = 0.0


def _knapsack(values: np.ndarray, weights: np.ndarray, counts: np.ndarray, x: np.ndarray):
    """Fractional-knapsack value of items (value, weight, count) at each budget ``x``."""
    good = values > 0
    if not good.any():
        return np.zeros_like(x)
    ratio = values[good] / weights[good]
    order = np.argsort(-ratio, kind="stable")
    w = (weights[good] * counts[good])[order]
    v = (values[good] * counts[good])[order]
    cw = np.r_[0.0, np.cumsum(w)]
    cv = np.r_[0.0, np.cumsum(v)]
    return np.interp(x, cw, cv, right=cv[-1])


def contents_below(
    floor: CostFloor,
    prices: DualPrices,
    limit: float,
    counts: np.ndarray,
    exclude: set[bytes] | None = None,
    most: int | None = None,
    keep_apart: list[list[int]] | None = None,
) -> tuple[np.ndarray, np.ndarray, bool]:
    """Contents (rows of block instances) some column of which may have reduced cost
    below ``limit``; with their least bound, and whether the search was complete.

    ``exclude`` holds contents already known (as ``bytes`` of int16 rows); they are not
    returned. With ``most`` the search stops after that many contents (incomplete: for
    column generation, where any improving column will do).
    """
    n_proc = len(floor.processes)
    n_blocks = counts.size
    k_max = max(1, int(prices.max_copies))
    allowed = np.ones(n_proc, dtype=bool) if prices.processes is None else prices.processes
    copies = np.arange(1, k_max + 1)
    # decide big blocks first: their choice moves the bound most
    size = np.min([f.unit_area for f in floor.processes], axis=0)
    order = np.argsort(-size * counts, kind="stable")
    area = np.array([f.unit_area for f in floor.processes])  # (P, B)
    crit = np.array([f.unit_crit for f in floor.processes])
    max_area = np.array([f.max_area for f in floor.processes])
    # per level (blocks order[level:] left): completion prize on the grid, and sigma
    grid = np.linspace(0.0, 1.0, GRID + 1)[None, :] * max_area[:, None]  # (P, GRID+1)
    prize_left = np.zeros((n_blocks + 1, n_proc, k_max, GRID + 1))
    sigma = np.zeros((n_blocks + 1, n_proc))
    for level in range(n_blocks):
        rest = order[level:]
        for p in range(n_proc):
            sigma[level, p] = float(np.min(crit[p, rest] / area[p, rest]))
            for k in copies:
                prize_left[level, p, k - 1] = _knapsack(
                    k * prices.cover[rest], area[p, rest], counts[rest] // k, grid[p]
                )
    # P(x_j+1) for x in [x_j, x_j+1]; the last interval is unbounded: the whole value
    upper = np.concatenate([prize_left[..., 1:], prize_left[..., -1:]], axis=-1)
    # a coarse grid first (each interval longer, so a weaker but valid bound): most
    # nodes are dropped by it at a fifth of the work; the rest get the fine grid
    coarse = np.arange(0, GRID + 1, COARSE_EVERY)
    coarse_upper = prize_left[..., np.minimum(coarse + COARSE_EVERY, GRID)]
    coarse_grid = grid[:, coarse]
    shift = copies[None, :] * (prices.count + prices.process[:, None])  # (P, K)
    # a link's interface area is known once both its blocks are decided: links by the
    # level that decides their second block (interface only adds to area and yield loss)
    position = np.empty(n_blocks, dtype=np.int64)
    position[order] = np.arange(n_blocks)
    links_at: list[np.ndarray] = [np.zeros(0, dtype=np.int64)] * n_blocks
    if prices.link_ends is not None and len(prices.link_ends):
        last = position[prices.link_ends].max(axis=1)
        links_at = [np.flatnonzero(last == level) for level in range(n_blocks)]
    group_of = np.full(n_blocks, -1)
    for g, members in enumerate(keep_apart or []):
        group_of[members] = g

    found: list[np.ndarray] = []
    found_bound: list[np.ndarray] = []
    n_found = 0
    complete = True
    stack = [
        (
            0,
            np.zeros((1, n_blocks), dtype=np.int16),
            np.zeros((1, n_proc)),
            np.zeros((1, n_proc)),
            np.zeros(1),
            np.broadcast_to(allowed[None, :, None], (1, n_proc, k_max)).copy(),
        )
    ]
    while stack:
        level, q, a, c, prize, alive = stack.pop()
        if level == n_blocks:
            bound = _node_bound(floor, prices, a, c, prize, alive, None, shift, copies)
            nonempty = q.any(axis=1)
            best = bound.min(axis=(1, 2))
            hit = nonempty & (best < limit)
            rows = q[hit]
            if exclude:
                fresh = np.array([r.tobytes() not in exclude for r in rows], dtype=bool)
                rows, best = rows[fresh], best[hit][fresh]
            else:
                best = best[hit]
            found.append(rows)
            found_bound.append(best)
            n_found += rows.shape[0]
            if most is not None and n_found >= most:
                complete = not stack
                break
            continue
        b = int(order[level])
        m = np.arange(int(counts[b]) + 1)
        reps = m.size
        q = np.repeat(q, reps, axis=0)
        q[:, b] = np.tile(m, q.shape[0] // reps)
        mm = q[:, b].astype(float)
        a = np.repeat(a, reps, axis=0) + mm[:, None] * area[:, b][None, :]
        c = np.repeat(c, reps, axis=0) + mm[:, None] * crit[:, b][None, :]
        prize = np.repeat(prize, reps) + mm * prices.cover[b]
        if links_at[level].size:
            extra = _interface(prices, links_at[level], q, counts)
            a = a + extra[:, None]
            c = c + extra[:, None] / MM2_PER_CM2  # interface is critical area in full
        alive = np.repeat(alive, reps, axis=0)
        alive &= (q[:, b][:, None] <= counts[b] // copies[None, :])[:, None, :]
        alive &= (a <= max_area[None, :] + 1e-9)[:, :, None]
        if group_of[b] >= 0:
            members = np.flatnonzero(group_of == group_of[b])
            alive &= ((q[:, members] > 0).sum(axis=1) <= 1)[:, None, None]
        keep = alive.any(axis=(1, 2))
        q, a, c, prize, alive = q[keep], a[keep], c[keep], prize[keep], alive[keep]
        if q.shape[0] == 0:
            continue
        if level + 1 < n_blocks:
            for gain, points in (
                (coarse_upper[level + 1], coarse_grid),
                (upper[level + 1], grid),
            ):
                bound = _node_bound(
                    floor,
                    prices,
                    a,
                    c,
                    prize,
                    alive,
                    (gain, sigma[level + 1], points),
                    shift,
                    copies,
                )
                alive &= bound < limit
                keep = alive.any(axis=(1, 2))
                q, a, c, prize, alive = q[keep], a[keep], c[keep], prize[keep], alive[keep]
                if q.shape[0] == 0:
                    break
        for first in range(0, q.shape[0], CHUNK):
            part = slice(first, first + CHUNK)
            stack.append((level + 1, q[part], a[part], c[part], prize[part], alive[part]))
    if not found:
        return np.zeros((0, n_blocks), dtype=np.int16), np.zeros(0), complete
    return np.concatenate(found), np.concatenate(found_bound), complete


def _interface(prices: DualPrices, links: np.ndarray, q: np.ndarray, counts: np.ndarray):
    """Interface area [mm^2] of the given links, both of whose blocks are decided (as
    `Evaluator.interface_area_mm2` counts it)."""
    ends = prices.link_ends[links]
    share = q.astype(float) / counts[None, :]
    fa, fb = share[:, ends[:, 0]], share[:, ends[:, 1]]
    cut = prices.link_gbps[links][None, :] * (fa * (1 - fb) + fb * (1 - fa))
    ports = (cut > 1e-12).sum(axis=1)
    return cut.sum(axis=1) / prices.interface_density + ports * prices.port_area


def _node_bound(floor, prices, a, c, prize, alive, completion, shift, copies) -> np.ndarray:
    """Least reduced cost of any column below each node, per (process, copies):
    (nodes, P, K), infinite where the node is dead."""
    n = a.shape[0]
    n_proc = len(floor.processes)
    out = np.full((n, n_proc, copies.size), np.inf)
    for p in range(n_proc):
        rows = np.flatnonzero(alive[:, p, :].any(axis=1))
        if rows.size == 0:
            continue
        if completion is None:
            ax = a[rows, p][:, None]
            cx = c[rows, p][:, None]
            gain = np.zeros((1, copies.size, 1))
        else:
            upper, sigma, grid = completion
            ax = a[rows, p][:, None] + grid[p][None, :]
            cx = c[rows, p][:, None] + sigma[p] * grid[p][None, :]
            gain = upper[p][None, :, :]  # (1, K, GRID+1)
        die = floor.die_cost(p, ax, cx)  # (n, G)
        nre = floor.nre(p, ax)
        k = copies[None, :, None]
        value = k * (prices.factor * die + prices.area_price * ax)[:, None, :]
        if prices.n_dies:
            # N_i t_i phi >= (k die + (n - k) cheapest + others) k escape (phi >= 1)
            held = k * die[:, None, :] + (prices.n_dies - k) * prices.cheapest + prices.others
            with np.errstate(invalid="ignore"):
                escapes = prices.factor * held * k * floor.escape(p, cx)[:, None, :]
            # inf x 0 (no die that large, or no escapes): the die is impossible anyway
            value = value + np.where(np.isnan(escapes), np.inf, escapes)
        value = value + nre[:, None, :] - gain  # (n, K, G)
        best = value.min(axis=2) - copies[None, :] * prize[rows][:, None] - shift[p][None, :]
        out[rows, p, :] = np.where(alive[rows, p, :], best, np.inf)
    return out
