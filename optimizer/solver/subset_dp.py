"""Exact dynamic program over subsets of blocks: a second exact method and a reference.

In a class of problems the total cost of a design on one packaging option with a fixed
die count n is a sum of per-die terms plus a constant:

    total = V (sum_i c_i + F_n) / Y_n + sum_i nre_i + const_g,

where c_i is die i's cost per passed die, nre_i its NRE, F_n = n x bond cost + carrier,
package and final-test costs, and Y_n = bond_yield^n x carrier and package yields. That
holds when every block has count 1 (a die content is a set of blocks, each die its own
design), test escapes are zero (otherwise prod(1 - DL_i) multiplies the sum), the carrier
cost does not depend on the dies (no silicon interposer) and no process has a
defect-reduction curve (its one-time cost and shared target couple the dies on it).
Salvage bins only touch one-die products, which are priced whole.

For each (packaging, n) the best design is then a minimum-weight partition of the block
set into exactly n parts with w_n(T) = min over the variants of content T of
(V / Y_n) c + nre. The recursion over subsets that fixes the lowest element of the
remaining set in the next part is the textbook subset DP for set partitioning
(F. V. Fomin and D. Kratsch, "Exact Exponential Algorithms", Springer 2010, ch. 3;
O(3^B) per die count). The ``top`` best designs of each (packaging, n) are then read off
by a best-first (A*) search whose heuristic is the DP's exact cost-to-go, and every
design returned is priced by the evaluator.

Outside that class the same DP on linearised weights (:func:`dp_seeds`) gives the
integer-programming search good designs to start from: heuristics, priced exactly there.
"""

from __future__ import annotations

import heapq
import math
import os
import time
from concurrent.futures import ThreadPoolExecutor, as_completed

import numpy as np
from numba import njit

from optimizer.errors import ProblemError
from optimizer.evaluator import Evaluator
from optimizer.formulas import assembly
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem, Requirements
from optimizer.solver.candidates import (
    CandidateSet,
    OutOfTime,
    build_candidates,
    enumerate_contents,
)
from optimizer.solver.search import PROFIT_RTOL, RankedSelection, SearchOutcome
from optimizer.solver.selection import Selection, price_selections

# 2^B contents are priced and 3^(B-1)/2 transitions made per level: 20 blocks is about
# a million dies and 580 million transitions per level, the practical end
MAX_BLOCKS = 20


def applicability(problem: Problem) -> str | None:
    """Why the subset DP is not exact for ``problem``, or None when it is."""
    for block in problem.block:
        if block.count != 1:
            return (
                f"block '{block.name}' has count {block.count}; the subset method needs "
                "every block count 1"
            )
    if len(problem.block) > MAX_BLOCKS:
        return f"{len(problem.block)} blocks; the subset method handles at most {MAX_BLOCKS}"
    # one-die products are priced whole: the couplings below only matter with several dies
    if all(_max_dies(problem, g) < 2 for g in range(len(problem.packaging))):
        return None
    for process in problem.process:
        if process.fault_coverage < 1.0:
            return (
                f"process '{process.name}' has fault coverage {process.fault_coverage:g} < 1: "
                "test escapes multiply the dies' costs in a multi-die package"
            )
        if process.defect_reduction is not None:
            return (
                f"process '{process.name}' has a defect-reduction curve: its shared target "
                "and one-time cost couple the dies on that process"
            )
    for g, packaging in enumerate(problem.packaging):
        if packaging.kind == "silicon_interposer" and _max_dies(problem, g) >= 2:
            return (
                f"packaging '{packaging.name}' is a silicon interposer: its cost depends on "
                "the dies' total area"
            )
    return None


def _max_dies(problem: Problem, g: int) -> int:
    packaging = problem.packaging[g]
    if packaging.kind == "single_die":
        return 1
    return min(packaging.max_dies, problem.constraints.max_dies, len(problem.block))


@njit("float64[:, ::1](float64[::1], int64, int64)", cache=True, nogil=True)
def _levels(weight, low_bits, levels):  # pragma: no cover - compiled
    """best[S, k - 1]: cheapest split of S into k parts, S over the lowest ``low_bits``
    blocks, k = 1..levels; ``weight`` is indexed by block masks."""
    size = 1 << low_bits
    best = np.full((size, levels), np.inf)
    count = np.zeros(size, dtype=np.int64)
    for s in range(1, size):
        count[s] = count[s >> 1] + (s & 1)
        best[s, 0] = weight[s]
        low = s & -s
        rest = s ^ low
        if rest == 0 or levels == 1:
            continue
        sub = rest
        while True:
            sub = (sub - 1) & rest  # proper subsets of rest, largest first, 0 last
            w = weight[low | sub]
            if w < np.inf:
                r = rest ^ sub
                top = min(levels - 1, count[r])
                for k in range(1, top + 1):
                    v = w + best[r, k - 1]
                    if v < best[s, k]:
                        best[s, k] = v
            if sub == 0:
                break
    return best


def subset_dp(
    evaluator: Evaluator,
    top: int = 1,
    requirements: Requirements | None = None,
    deadline: float | None = None,
    source: str = "<problem>",
    workers: int | None = None,
) -> SearchOutcome:
    """The ``top`` most profitable designs, exactly, by the subset DP.

    Raises :class:`ProblemError` (field ``method``) when the problem is outside the
    class in which the DP is exact (see :func:`applicability`). Past ``deadline`` (a
    `time.perf_counter` instant) it returns the designs found so far, unproven. The die
    counts are worked on ``workers`` threads (default: the CPU count).
    """
    start = time.perf_counter()
    problem = evaluator.problem
    reason = applicability(problem)
    if reason is not None:
        raise ProblemError(source, "method", f"subset_dp does not apply: {reason}")
    market = problem.market
    revenue = market.unit_price * market.volume
    n_blocks = evaluator.blocks.n_blocks
    full = (1 << n_blocks) - 1
    bit = 1 << np.arange(n_blocks, dtype=np.int64)
    workers = workers or os.cpu_count() or 1
    log: list[str] = []
    candidates: dict[int, CandidateSet] = {}
    priced: dict[Selection, float] = {}
    stats = {"candidate_dies": 0, "designs_priced": 0, "dp_levels": 0, "pricing_seconds": 0.0}
    stopped = False
    try:
        began = time.perf_counter()
        contents = enumerate_contents(evaluator)
        stats["pricing_seconds"] += time.perf_counter() - began
        for g in range(len(problem.packaging)):
            began = time.perf_counter()
            # every variant kept: the DP takes the best per content itself
            cset = build_candidates(
                evaluator, g, contents, prune=False, requirements=requirements, deadline=deadline
            )
            stats["pricing_seconds"] += time.perf_counter() - began
            candidates[g] = cset
            stats["candidate_dies"] += len(cset)
            if len(cset) == 0:
                continue
            masks = cset.instances.astype(np.int64) @ bit
            whole = np.flatnonzero(masks == full)
            _price(evaluator, cset, [Selection.of(g, [(c, 1)]) for c in whole], revenue, priced)
            if _max_dies(problem, g) >= 2:
                _check_separable(problem, cset, g)
                _packaging_dp(
                    evaluator, cset, masks, top, revenue, priced, stats, log, deadline, workers
                )
    except OutOfTime:
        stopped = True
        log.append("stopped at the time limit before every (packaging, die count) was solved")
    stats["designs_priced"] = len(priced)
    ranked_items = sorted(
        ((sel, total) for sel, total in priced.items() if math.isfinite(total)),
        key=lambda item: (item[1], item[0]),
    )[:top]
    ranked = [RankedSelection(sel, total, revenue - total) for sel, total in ranked_items]
    if stopped:
        bound = -math.inf
    else:
        bound = ranked[0].total_cost if ranked else math.inf
    log.insert(0, f"subset DP over {n_blocks} blocks: {stats['candidate_dies']} candidate dies")
    return SearchOutcome(
        ranked=ranked,
        candidates=candidates,
        bound_total_cost=bound,
        proven=not stopped,
        method="subset_dp",
        seconds=time.perf_counter() - start,
        log=log,
        stats=stats,
        priced=priced,
    )


def _check_separable(problem: Problem, cset: CandidateSet, g: int) -> None:
    """The priced dies must show what :func:`applicability` promised."""
    prices = cset.prices
    if np.any(prices.log1m_defect_level != 0) or np.any(prices.improvement_one_time != 0):
        raise InvariantViolation(
            f"subset DP: dies on packaging '{problem.packaging[g].name}' have test escapes "
            "or yield-improvement spend although the problem passed the applicability check"
        )


def _price(
    evaluator: Evaluator,
    cset: CandidateSet,
    selections: list[Selection],
    revenue: float,
    priced: dict[Selection, float],
) -> np.ndarray:
    """Exact total cost of each selection (kept in ``priced``)."""
    if not selections:
        return np.zeros(0)
    profit = price_selections(evaluator, cset, selections).profit
    total = revenue - profit
    for sel, value in zip(selections, total, strict=True):
        priced[sel] = float(value)
    return total


def _packaging_dp(
    evaluator: Evaluator,
    cset: CandidateSet,
    masks: np.ndarray,
    top: int,
    revenue: float,
    priced: dict[Selection, float],
    stats: dict,
    log: list[str],
    deadline: float | None,
    workers: int,
) -> None:
    """Best ``top`` designs of every die count 2..n_max on one packaging option."""
    problem = evaluator.problem
    g = cset.packaging_index
    packaging = problem.packaging[g]
    n_blocks = evaluator.blocks.n_blocks
    counts = np.arange(2, _max_dies(problem, g) + 1)
    scale = _volume_over_yield(problem, g, counts)
    fixed = (
        counts * packaging.bond_cost_per_die
        + packaging.carrier_cost
        + packaging.package_cost
        + packaging.final_test_cost
    )
    # die counts with the same V / Y_n share one weight and so one DP (all of them when
    # bonds never fail)
    groups: dict[float, list[int]] = {}
    for n, a in zip(counts.tolist(), scale.tolist(), strict=True):
        groups.setdefault(a, []).append(n)
    cost = cset.prices.cost_per_passed_die
    nre = cset.prices.nre
    low_bits = n_blocks - 1

    def run(a: float, ns: list[int]):
        w, c = _best_variants(a * cost + nre, masks, n_blocks, top)
        levels = max(ns) - 1
        best = _levels(np.ascontiguousarray(w[:, 0]), low_bits, levels)
        return a, ns, w, c, best

    if deadline is not None and time.perf_counter() > deadline:
        raise OutOfTime
    jobs = sorted(groups.items(), key=lambda item: -max(item[1]))  # longest first
    found: list[tuple[int, float, float, tuple[int, ...]]] = []
    pool = ThreadPoolExecutor(max_workers=max(1, min(workers, len(jobs))))
    futures = [pool.submit(run, a, ns) for a, ns in jobs]
    try:
        for future in as_completed(futures):
            a, ns, w, c, best = future.result()
            stats["dp_levels"] += best.shape[1]
            for n in ns:
                for dp_value, dies in _best_paths(best, w, c, n_blocks, n, top):
                    found.append((n, a, dp_value, dies))
            if deadline is not None and time.perf_counter() > deadline:
                raise OutOfTime
    finally:
        # out of time, a compiled DP already running cannot be stopped: it is left to
        # finish in the background rather than waited for
        pool.shutdown(wait=False, cancel_futures=True)
        _finish(evaluator, cset, found, fixed, counts, revenue, priced, log)


def _volume_over_yield(problem: Problem, g: int, counts: np.ndarray) -> np.ndarray:
    """V / Y_n for the die counts ``counts`` on packaging ``g``, by the evaluator's own
    package-yield formula without test escapes (log(1 - DL) = 0)."""
    packaging = problem.packaging[g]
    log_y = assembly.log_package_yield(
        np.zeros((counts.size, 1)),
        counts[:, None].astype(float),
        packaging.bond_yield,
        packaging.carrier_yield,
        packaging.package_yield,
    )
    return problem.market.volume * np.exp(-np.asarray(log_y, dtype=float).reshape(counts.size))


def _best_variants(
    value: np.ndarray, masks: np.ndarray, n_blocks: int, k: int
) -> tuple[np.ndarray, np.ndarray]:
    """The ``k`` least ``value``s per content mask (2^B x k, inf where fewer) and the
    candidate indices they belong to (-1 where none)."""
    order = np.lexsort((value, masks))
    m = masks[order]
    first = np.r_[0, np.flatnonzero(m[1:] != m[:-1]) + 1]
    rank = np.arange(m.size) - np.repeat(first, np.diff(np.r_[first, m.size]))
    keep = rank < k
    w = np.full((1 << n_blocks, k), np.inf)
    c = np.full((1 << n_blocks, k), -1, dtype=np.int64)
    w[m[keep], rank[keep]] = value[order][keep]
    c[m[keep], rank[keep]] = order[keep]
    return w, c


def _finish(
    evaluator: Evaluator,
    cset: CandidateSet,
    found: list[tuple[int, float, float, tuple[int, ...]]],
    fixed: np.ndarray,
    counts: np.ndarray,
    revenue: float,
    priced: dict[Selection, float],
    log: list[str],
) -> None:
    """Price the designs the DP found and check them against the DP's own figure."""
    if not found:
        return
    g = cset.packaging_index
    problem = evaluator.problem
    selections = [Selection.of(g, [(c, 1) for c in dies]) for _, _, _, dies in found]
    total = _price(evaluator, cset, selections, revenue, priced)
    const = problem.packaging[g].design_cost
    for (n, a, dp_value, _), exact in zip(found, total, strict=True):
        predicted = dp_value + a * fixed[int(np.flatnonzero(counts == n)[0])] + const
        # a gap means a coupling between dies the DP does not model: the answer would
        # be wrong, so stop rather than report it
        if not math.isclose(predicted, exact, rel_tol=PROFIT_RTOL * 1e-2, abs_tol=1e-6):
            raise InvariantViolation(
                f"subset DP: design of {n} dies on '{problem.packaging[g].name}' costs "
                f"{exact:.12g} by the evaluator, {predicted:.12g} by the DP"
            )
    best_n = {}
    for (n, _, _, _), exact in zip(found, total, strict=True):
        best_n[n] = min(best_n.get(n, math.inf), float(exact))
    log.append(
        f"packaging {problem.packaging[g].name}: best total cost by die count "
        + ", ".join(f"{n}: {best_n[n]:.10g}" for n in sorted(best_n))
    )


# ------------------------------------------------------------------ seeds for the search

# the DP makes about 3^(B-1) transitions per level: 18 blocks is 0.4 s over 15 levels
SEED_MAX_BLOCKS = 18
# die counts whose V / Y_n differ by less than this share are seeded by one DP: the
# weights of the others are then that little off, and every seed is priced exactly
SEED_SCALE_RTOL = 0.02
# designs read off per (packaging, die count), at least
SEED_DESIGNS = 3
# a generous time per 3^(B-1) transitions (3e-9 s measured, whatever the number of
# levels past two), to skip a DP that would end past the deadline: a compiled DP once
# started cannot be stopped
_SECONDS_PER_TRANSITION = 1e-8


def seed_reason(problem: Problem) -> str | None:
    """Why :func:`dp_seeds` finds nothing for ``problem``, or None when it may."""
    if any(block.count != 1 for block in problem.block):
        return "a block has count above 1"
    if len(problem.block) > SEED_MAX_BLOCKS:
        return f"more than {SEED_MAX_BLOCKS} blocks"
    if len(problem.block) < 2:
        return "one block"
    return None


def dp_seeds(
    evaluator: Evaluator,
    candidates: dict[int, CandidateSet],
    top: int = 1,
    deadline: float | None = None,
    die_counts: dict[int, list[int]] | None = None,
) -> list[Selection]:
    """Promising multi-die designs by the subset DP, for incumbents of an exact search.

    Applies to any problem whose blocks all have count 1 (see :func:`seed_reason`; else
    it returns nothing). Outside the DP's exact class (see :func:`applicability`) the
    cost of a design is not a sum over its dies, so the DP works on a first-order
    approximation around a typical design of cost before scrap N, escapes t and die
    area A: die i weighs (V / Y_n) e^t (c_i + N t_i + S' a_i) + nre_i, with c_i its cost
    per passed die, t_i = -ln(1 - DL_i), a_i its area and S' the slope of the carrier
    cost in total die area (zero but for interposers). With defect-reduction curves
    (one target per process and product) each DP holds every process to one target
    level. The designs returned, the ``max(top, SEED_DESIGNS)`` best by that weight of
    every (packaging, die count), are approximations: price them exactly.

    ``candidates`` maps packaging index to its candidate dies (pruned is fine);
    ``die_counts`` limits the die counts per packaging (default: every count from 2);
    ``deadline`` (a `time.perf_counter` instant): no DP is started that would end past
    it, and the designs found by then are returned.
    """
    problem = evaluator.problem
    if seed_reason(problem) is not None:
        return []
    n_blocks = evaluator.blocks.n_blocks
    bit = 1 << np.arange(n_blocks, dtype=np.int64)
    k = max(top, SEED_DESIGNS)
    found: set[Selection] = set()

    def late(seconds: float = 0.0) -> bool:
        return deadline is not None and time.perf_counter() + seconds > deadline

    for g, cset in sorted(candidates.items()):
        counts = np.arange(2, _max_dies(problem, g) + 1)
        if die_counts is not None:
            counts = counts[np.isin(counts, list(die_counts.get(g, ())))]
        if counts.size == 0 or len(cset) == 0:
            continue
        usable = np.flatnonzero(cset.max_copies >= 1)
        masks = cset.instances[usable].astype(np.int64) @ bit
        for rows in _target_profiles(problem, cset, usable):
            for ns, value in _seed_weights(evaluator, cset, rows, counts):
                seconds = 3.0 ** (n_blocks - 1) * _SECONDS_PER_TRANSITION
                if late(seconds):
                    return sorted(found)
                in_rows = np.isin(usable, rows)
                take = usable[in_rows]
                w, c = _best_variants(value[take], masks[in_rows], n_blocks, k)
                best = _levels(np.ascontiguousarray(w[:, 0]), n_blocks - 1, max(ns) - 1)
                for n in ns:
                    if late():
                        return sorted(found)
                    for _, dies in _best_paths(best, w, c, n_blocks, n, k):
                        found.add(Selection.of(g, [(take[i], 1) for i in dies]))
    return sorted(found)


def _target_profiles(problem: Problem, cset: CandidateSet, usable: np.ndarray) -> list:
    """Candidate rows (of ``usable``) per target profile: level l of every process
    with a defect-reduction curve (its last level where it has fewer), since a product
    holds one target per process. One profile of every row without such curves."""
    levels = [
        len(p.defect_targets()) if p.defect_reduction is not None else 0 for p in problem.process
    ]
    if not any(levels):
        return [usable]
    profiles = []
    process, level = cset.process[usable], cset.level[usable]
    has = np.array(levels)[process] > 0
    for lv in range(max(levels)):
        wanted = np.minimum(lv, np.maximum(np.array(levels) - 1, 0))[process]
        profiles.append(usable[~has | (level == wanted)])
    return profiles


def _seed_weights(
    evaluator: Evaluator, cset: CandidateSet, rows: np.ndarray, counts: np.ndarray
) -> list[tuple[list[int], np.ndarray]]:
    """(die counts, weight of every candidate) per group of die counts of close V / Y_n:
    the linearised weights of :func:`dp_seeds` (only ``rows`` are read)."""
    problem = evaluator.problem
    g = cset.packaging_index
    packaging = problem.packaging[g]
    prices = cset.prices
    scale = _volume_over_yield(problem, g, counts)
    # a typical design: per block the candidate with the least cost share of it (shares
    # by block area), its cost, escapes and area summed over blocks
    inst = cset.instances[rows].astype(float)
    unit = (evaluator.blocks.area_mm2 * evaluator.blocks.scale).min(axis=0)
    held = inst @ unit
    cost = prices.cost_per_passed_die[rows]
    escape = -prices.log1m_defect_level[rows]
    area = prices.area_mm2[rows]
    dies_cost = escapes = total_area = 0.0
    for b in range(inst.shape[1]):
        on = np.flatnonzero(inst[:, b] > 0)
        if on.size == 0:
            continue
        share = unit[b] / held[on]
        i = on[np.argmin(cost[on] * share)]
        dies_cost += cost[i] * unit[b] / held[i]
        escapes += escape[i] * unit[b] / held[i]
        total_area += area[i] * unit[b] / held[i]
    carrier = evaluator.carrier_cost(packaging, np.array([0.9, 1.0, 1.1]) * total_area).cost
    slope = 0.0
    if packaging.kind == "silicon_interposer" and np.all(np.isfinite(carrier)):
        slope = float(carrier[2] - carrier[0]) / (0.2 * max(total_area, 1e-9))
    base = float(carrier[1]) if np.isfinite(carrier[1]) else packaging.carrier_cost
    fixed = base + packaging.package_cost + packaging.final_test_cost
    out = []
    first = 0
    # die counts in order of V / Y_n (it grows with n): a group spans SEED_SCALE_RTOL
    for last in range(counts.size + 1):
        if last < counts.size and scale[last] <= scale[first] * (1 + SEED_SCALE_RTOL):
            continue
        ns = counts[first:last]
        n = int(ns[ns.size // 2])
        a = float(scale[first:last].mean())
        before_scrap = dies_cost + fixed + n * packaging.bond_cost_per_die
        per_die = cost + before_scrap * escape + slope * area
        value = np.full(len(cset), np.inf)
        value[rows] = a * math.exp(escapes) * per_die + prices.nre[rows]
        out.append(([int(x) for x in ns], value))
        first = last
    return out


def _submasks(rest: int) -> np.ndarray:
    """Every subset of the bit set ``rest`` (as masks)."""
    bits = [b for b in range(rest.bit_length()) if rest >> b & 1]
    idx = np.arange(1 << len(bits), dtype=np.int64)
    subs = np.zeros(idx.size, dtype=np.int64)
    for i, b in enumerate(bits):
        subs |= ((idx >> i) & 1) << b
    return subs


def _best_paths(
    best: np.ndarray, w: np.ndarray, c: np.ndarray, n_blocks: int, n: int, top: int
) -> list[tuple[float, tuple[int, ...]]]:
    """The ``top`` cheapest partitions into ``n`` dies (DP weight, candidate indices).

    Best-first search over partial partitions with the DP's exact cost-to-go as the
    heuristic (so complete designs come out cheapest first). Each expansion keeps only
    its ``top`` best children: a child beaten by ``top`` siblings' best completions
    leads to no design that could rank.
    """
    low_bits = n_blocks - 1
    lower = (1 << low_bits) - 1
    full = (1 << n_blocks) - 1
    tick = 0
    # (priority, -depth, tick, cost so far, dies left, blocks left, dies so far)
    heap = [(0.0, 0, tick, 0.0, n, full, ())]
    out: list[tuple[float, tuple[int, ...]]] = []
    while heap and len(out) < top:
        priority, depth, _, so_far, left, blocks, dies = heapq.heappop(heap)
        if left == 0:
            out.append((priority, dies))
            continue
        if blocks == full:
            subs = np.arange(lower + 1, dtype=np.int64)
            part = subs | (1 << low_bits)
            rest = lower ^ subs
        else:
            low = blocks & -blocks
            subs = _submasks(blocks ^ low)
            part = subs | low
            rest = (blocks ^ low) ^ subs
        if left == 1:
            keep = rest == 0
            part, rest = part[keep], rest[keep]
            value = so_far + w[part]
        else:
            # rest into left - 1 dies (the empty rest is infinite there)
            value = so_far + w[part] + best[rest, left - 2][:, None]
        flat = value.ravel()
        if flat.size > top:
            pick = np.argpartition(flat, top - 1)[:top]
        else:
            pick = np.arange(flat.size)
        for i in pick:
            if not np.isfinite(flat[i]):
                continue
            row, j = divmod(int(i), w.shape[1])
            tick += 1
            heapq.heappush(
                heap,
                (
                    float(flat[i]),
                    depth - 1,
                    tick,
                    so_far + float(w[part[row], j]),
                    left - 1,
                    int(rest[row]),
                    (*dies, int(c[part[row], j])),
                ),
            )
    return out


__all__ = ["MAX_BLOCKS", "applicability", "dp_seeds", "seed_reason", "subset_dp"]
