"""Enumerating designs: every multiset partition of the block instances into die
contents, every assignment of candidate variants to the parts, priced in batches.

The exhaustive reference enumerates a whole problem this way; the proven search uses
:func:`enumerate_program` to close one (packaging, die count) program exactly when its
cut-and-price loop runs long and its designs are few.
"""

from __future__ import annotations

import itertools
import math
import time
from collections.abc import Iterator

import numpy as np

from optimizer.evaluator import Evaluator
from optimizer.solver.candidates import CandidateSet
from optimizer.solver.selection import Selection

MAX_CANDIDATES = 5_000
MAX_CONTENTS = 400


def multiset_partitions(
    total: tuple[int, ...], parts: list[tuple[int, ...]], max_parts: int, exact: bool = False
) -> Iterator[list[tuple[int, ...]]]:
    """Partitions of the count vector ``total`` into allowed ``parts`` (each multiset once),
    into at most ``max_parts`` parts, or exactly that many with ``exact``.

    Parts are produced in non-increasing lexicographic order, which makes every
    multiset of parts appear exactly once.
    """
    n_blocks = len(total)
    # Count vectors packed into one integer, block 0 in the highest field, each field one
    # bit wider than its total needs: integer order is then lexicographic order, and
    # "part fits in remaining" is a subtraction that leaves every field's spare top bit.
    widths = [int(t).bit_length() + 1 for t in total]
    offsets = [sum(widths[b + 1 :]) for b in range(n_blocks)]
    guard = sum(1 << (offsets[b] + widths[b] - 1) for b in range(n_blocks))
    field_of = [0] * (sum(widths) + 1)  # highest set bit -> its block
    for b in range(n_blocks):
        for bit in range(offsets[b], offsets[b] + widths[b]):
            field_of[bit + 1] = b

    def pack(vector: tuple[int, ...]) -> int:
        return sum(int(v) << offsets[b] for b, v in enumerate(vector))

    allowed = sorted(set(parts), reverse=True)
    largest = max((sum(part) for part in allowed), default=1)
    # parts holding block b, for each b: the next part must hold the first block still
    # to place (every later part is lexicographically no larger, so none of them could)
    holding = [
        [(pack(part), sum(part), part) for part in allowed if part[b] > 0] for b in range(n_blocks)
    ]

    def rec(remaining: int, left: int, ceiling: int, chosen: list):
        if remaining == 0:
            if not exact or len(chosen) == max_parts:
                yield list(chosen)
            return
        room = max_parts - len(chosen)
        # every part holds at least one instance and at most `largest`
        if room == 0 or -(-left // largest) > room or (exact and left < room):
            return
        first = field_of[remaining.bit_length()]
        guarded = remaining | guard
        for code, size, part in holding[first]:
            if code > ceiling or (guarded - code) & guard != guard:
                continue
            chosen.append(part)
            yield from rec(remaining - code, left - size, code, chosen)
            chosen.pop()

    whole = pack(tuple(total))
    yield from rec(whole, int(sum(total)), whole, [])


def assignments(groups: list[tuple[np.ndarray, int]]) -> np.ndarray:
    """All variant choices for parts grouped by identical content (rows x parts)."""
    per_group = [
        np.array(list(itertools.combinations_with_replacement(variants, mult)), dtype=np.int64)
        for variants, mult in groups
    ]
    rows = per_group[0]
    for nxt in per_group[1:]:
        rows = np.concatenate(
            [np.repeat(rows, len(nxt), axis=0), np.tile(nxt, (len(rows), 1))], axis=1
        )
    return rows


def slots(assign: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Merge repeated variants of a row into one slot with copies (NRE paid once)."""
    srt = np.sort(assign, axis=1)
    same_as_prev = np.zeros(srt.shape, dtype=bool)
    same_as_prev[:, 1:] = srt[:, 1:] == srt[:, :-1]
    head = np.arange(srt.shape[1])[None, :].repeat(srt.shape[0], axis=0)
    for j in range(1, srt.shape[1]):
        head[:, j] = np.where(same_as_prev[:, j], head[:, j - 1], j)
    copies = np.zeros(srt.shape, dtype=np.int64)
    rows = np.repeat(np.arange(srt.shape[0]), srt.shape[1])
    np.add.at(copies, (rows, head.ravel()), 1)
    return srt, copies


def price_batch(
    evaluator: Evaluator,
    cset: CandidateSet,
    rows: np.ndarray,
    top: int,
    revenue: float,
    best: list[tuple[float, Selection]],
) -> int:
    """Price a batch of variant assignments; keep its ``top`` best in ``best``."""
    slot_die, slot_copies = slots(rows)
    product = evaluator.assemble(cset.packaging_index, cset.prices, slot_die, slot_copies)
    # total cost = revenue - profit: volume x cost + one-time costs - salvage
    cost = revenue - product.profit
    for i in np.argsort(cost)[:top]:
        if math.isfinite(cost[i]):
            pairs = [(c, k) for c, k in zip(slot_die[i], slot_copies[i], strict=True) if k]
            best.append((float(cost[i]), Selection.of(cset.packaging_index, pairs)))
    return len(rows)


def group_counts(partition: list[tuple[int, ...]]) -> list[tuple[tuple[int, ...], int]]:
    counts: dict[tuple[int, ...], int] = {}
    for part in partition:
        counts[part] = counts.get(part, 0) + 1
    return list(counts.items())


def enumerate_program(
    evaluator: Evaluator,
    cset: CandidateSet,
    allowed: np.ndarray,
    n_dies: int,
    top: int,
    budget: int,
    deadline: float | None = None,
    mix: tuple[int, ...] | None = None,
) -> tuple[list[tuple[float, Selection]], int] | None:
    """Every design of exactly ``n_dies`` dies built from candidates ``allowed``, priced.

    Returns the ``top`` cheapest (total cost, selection) pairs and how many designs were
    priced, or None when there are more than ``budget`` designs (counted before any is
    priced) or the deadline passes. An exact alternative to the integer program for a
    (packaging, die count) pair whose cut-and-price loop runs long. With ``mix`` (dies
    per process) only designs with exactly that many dies on each process are priced.
    """
    problem = evaluator.problem
    revenue = problem.market.unit_price * problem.market.volume
    total = tuple(int(x) for x in evaluator.blocks.count)
    allowed = np.asarray(allowed, dtype=np.int64)
    if mix is not None:
        wanted = np.flatnonzero(np.asarray(mix) > 0)
        allowed = allowed[np.isin(cset.process[allowed], wanted)]
    # the walk over partitions visits every content at every step: only for programs
    # with few candidate dies (the integer program is the better tool for the others)
    if allowed.size > MAX_CANDIDATES:
        return None
    variants: dict[tuple, list[int]] = {}
    for i in allowed:
        variants.setdefault(tuple(int(v) for v in cset.instances[i]), []).append(int(i))
    if len(variants) > MAX_CONTENTS:
        return None
    partitions = []
    count = visited = 0
    for partition in multiset_partitions(total, list(variants), n_dies, exact=True):
        # partitions into fewer parts are walked but not priced: they count towards
        # the budget too, so that a large program is given up quickly
        visited += 1
        if visited > budget:
            return None
        if len(partition) != n_dies:
            continue
        groups = group_counts(partition)
        count += math.prod(math.comb(len(variants[key]) + m - 1, m) for key, m in groups)
        if count > budget or (deadline is not None and time.perf_counter() > deadline):
            return None
        partitions.append(groups)
    best: list[tuple[float, Selection]] = []
    buffers: dict[int, list[np.ndarray]] = {}
    for groups in partitions:
        rows = assignments([(np.array(variants[key]), m) for key, m in groups])
        if mix is not None:
            on = cset.process[rows]
            fits = np.ones(len(rows), dtype=bool)
            for p, dies in enumerate(mix):
                fits &= (on == p).sum(axis=1) == dies
            rows = rows[fits]
            if not len(rows):
                continue
        buffers.setdefault(rows.shape[1], []).append(rows)
    for width in list(buffers):
        price_batch(evaluator, cset, np.concatenate(buffers.pop(width)), top, revenue, best)
    best.sort(key=lambda item: (item[0], item[1]))
    return best[:top], count
