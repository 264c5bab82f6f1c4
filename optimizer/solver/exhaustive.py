"""Brute-force reference: every partition of the blocks, every option, every packaging.

Enumerates every multiset partition of the block instances into admissible die contents
(at most the packaging's die limit), every assignment of a process and local options to
each die (identical contents may take the same variant, then they are one die design
with several copies), and every packaging option, and prices all of them with the
evaluator in vectorised batches. No pruning by dominance: it is the independent check of
the solver, practical for about eight blocks.
"""

from __future__ import annotations

import math
import time

import numpy as np

from optimizer.evaluator import Evaluator
from optimizer.problem import Requirements
from optimizer.solver.candidates import (
    CandidateSet,
    OutOfTime,
    build_candidates,
    enumerate_contents,
)
from optimizer.solver.partitions import (
    assignments,
    group_counts,
    multiset_partitions,
    price_batch,
)
from optimizer.solver.search import RankedSelection, SearchOutcome
from optimizer.solver.selection import Selection

CHUNK = 200_000


def exhaustive_search(
    evaluator: Evaluator,
    top: int = 1,
    requirements: Requirements | None = None,
    deadline: float | None = None,
) -> SearchOutcome:
    """Price every complete design and return the ``top`` best (exact, no proof needed).

    Past ``deadline`` (a `time.perf_counter` instant) it stops between batches and
    returns the best designs priced so far, unproven and without a bound.
    """
    start = time.perf_counter()
    problem = evaluator.problem
    market = problem.market
    revenue = market.unit_price * market.volume
    contents = enumerate_contents(evaluator)
    total = tuple(int(x) for x in evaluator.blocks.count)
    best: list[tuple[float, Selection]] = []
    candidates: dict[int, CandidateSet] = {}
    designs = 0
    stopped = False
    try:
        for g in range(len(problem.packaging)):
            designs += _search_packaging(
                evaluator,
                g,
                contents,
                total,
                top,
                revenue,
                best,
                candidates,
                requirements,
                deadline,
            )
    except OutOfTime:
        stopped = True
    best.sort(key=lambda item: (item[0], item[1]))
    ranked = [RankedSelection(sel, cost, revenue - cost) for cost, sel in best[:top]]
    if stopped:
        bound = -math.inf
    else:
        bound = ranked[0].total_cost if ranked else math.inf
    log = [f"priced {designs} complete designs"]
    if stopped:
        log.append("stopped at the time limit before every design was priced")
    return SearchOutcome(
        ranked=ranked,
        candidates=candidates,
        bound_total_cost=bound,
        proven=not stopped,
        method="exhaustive",
        seconds=time.perf_counter() - start,
        log=log,
        stats={"designs_priced": designs, "candidate_dies": sum(map(len, candidates.values()))},
        # every batch holds one packaging and die count, and keeps its best: so these hold
        # the best design of every architecture
        priced={sel: cost for cost, sel in best},
    )


def _search_packaging(
    evaluator: Evaluator,
    g: int,
    contents: np.ndarray,
    total: tuple[int, ...],
    top: int,
    revenue: float,
    best: list[tuple[float, Selection]],
    candidates: dict[int, CandidateSet],
    requirements: Requirements | None,
    deadline: float | None,
) -> int:
    """Price every design on packaging ``g`` into ``best``; returns how many."""
    problem = evaluator.problem
    packaging = problem.packaging[g]
    cset = build_candidates(
        evaluator, g, contents, prune=False, requirements=requirements, deadline=deadline
    )
    candidates[g] = cset
    if len(cset) == 0:
        return 0
    keys = [tuple(int(v) for v in row) for row in cset.instances]
    variants: dict[tuple, list[int]] = {}
    for i, key in enumerate(keys):
        variants.setdefault(key, []).append(i)
    n_max = min(packaging.max_dies, problem.constraints.max_dies)
    designs = 0
    buffers: dict[int, list[np.ndarray]] = {}
    buffered: dict[int, int] = {}

    def flush(width: int) -> int:
        if deadline is not None and time.perf_counter() > deadline:
            raise OutOfTime
        buffered.pop(width, None)
        return price_batch(evaluator, cset, np.concatenate(buffers.pop(width)), top, revenue, best)

    for partition in multiset_partitions(total, list(variants), n_max):
        groups = [(np.array(variants[key]), mult) for key, mult in group_counts(partition)]
        if deadline is not None and time.perf_counter() > deadline:
            raise OutOfTime
        rows = assignments(groups)
        width = rows.shape[1]
        buffers.setdefault(width, []).append(rows)
        buffered[width] = buffered.get(width, 0) + len(rows)
        if buffered[width] >= CHUNK:
            designs += flush(width)
    for width in list(buffers):
        designs += flush(width)
    return designs
