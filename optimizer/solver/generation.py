"""The proof without pricing every candidate die: columns generated on demand.

Pricing every content a die could hold grows with the power set of the blocks (about
16 million contents at 24 single blocks). Instead:

1. Start from a few contents (the whole design, one instance of each block, and an
   area-balanced split for every die count) and price them exactly.
2. For every (packaging, die count) program, solve the linear relaxation over the
   contents known and ask :func:`~optimizer.solver.content_search.contents_below` for
   contents whose columns could have negative reduced cost under its duals; price them
   and repeat until there is none. The Lagrangian bound L of the last duals then holds
   over every content: a design uses at most n columns, each missing one has reduced
   cost above -eps, so no design of the program costs less than L - n eps.
3. Search the known contents with the proven integer-program search for a threshold T
   (the K-th best exact total cost).
4. For every program whose bound L is below T, add every content whose columns could
   have reduced cost below T - L: a design holding any other content costs at least
   L plus that column's reduced cost, so more than T. Search again; T can only fall,
   so the proof over the known contents is a proof over all of them.
"""

from __future__ import annotations

import math
import time

import numpy as np

from optimizer.evaluator import Evaluator
from optimizer.problem import Requirements
from optimizer.solver import progress
from optimizer.solver.candidates import (
    CandidateSet,
    OutOfTime,
    build_candidates,
    join_candidates,
    keep_rules_hold,
)
from optimizer.solver.content_search import DualPrices, contents_below
from optimizer.solver.cost_floor import CostFloor
from optimizer.solver.milp import build_columns, dual_bound, relax
from optimizer.solver.search import (
    CUTOFF_RTOL,
    SearchOutcome,
    milp_search,
    tie_tolerance,
)
from optimizer.solver.selection import Selection

# contents added per round of column generation: the BATCH of least reduced-cost floor
# among the first SEARCH_MOST found (any improving column will do)
BATCH = 200
SEARCH_MOST = 20_000
# reduced costs above -EPS x |bound| count as non-negative
EPS = 1e-9


def _starting_contents(evaluator: Evaluator, counts_of_dies: list[int]) -> np.ndarray:
    """The whole design, one instance of each block alone, and for every die count an
    area-balanced split of the block instances (largest first onto the emptiest die)."""
    blocks = evaluator.blocks
    count = blocks.count.astype(np.int64)
    n_blocks = count.size
    unit = (blocks.area_mm2 * blocks.scale).min(axis=0)
    rows = [count.copy()]
    for b in range(n_blocks):
        single = np.zeros(n_blocks, dtype=np.int64)
        single[b] = 1
        rows.append(single)
    items = np.repeat(np.arange(n_blocks), count)
    items = items[np.argsort(-unit[items], kind="stable")]
    for n in counts_of_dies:
        if n < 2 or n > items.size:
            continue
        dies = np.zeros((n, n_blocks), dtype=np.int64)
        load = np.zeros(n)
        for b in items:
            d = int(np.argmin(load))
            dies[d, b] += 1
            load[d] += unit[b]
        rows.extend(dies[dies.any(axis=1)])
    return np.unique(np.array(rows, dtype=np.int64), axis=0)


def _signed(columns, row_dual: np.ndarray) -> np.ndarray:
    """Duals with the sign their row side allows (solver noise set to zero), so that
    rows left out of the reduced-cost floor only ever add to it."""
    program = columns.linear_program
    u = np.asarray(row_dual, dtype=float).copy()
    u[(u > 0) & ~np.isfinite(program.row_lower)] = 0.0
    u[(u < 0) & ~np.isfinite(program.row_upper)] = 0.0
    return u


def _merged(first: SearchOutcome, second: SearchOutcome, top: int) -> SearchOutcome:
    """Two searches over disjoint parts of the designs as one: the best of both, the
    lesser bound, proven when both are."""
    ranked = sorted(
        {r.selection: r for r in [*first.ranked, *second.ranked]}.values(),
        key=lambda r: (r.total_cost, r.selection),
    )[:top]
    bound = min(first.bound_total_cost, second.bound_total_cost)
    stats = dict(second.stats)
    for name in ("rounds", "cuts", "relaxations", "programs_searched", "milp_seconds"):
        stats[name] = first.stats.get(name, 0) + second.stats.get(name, 0)
    return SearchOutcome(
        ranked=ranked,
        candidates=second.candidates,
        bound_total_cost=bound,
        proven=first.proven and second.proven,
        method=second.method,
        seconds=first.seconds + second.seconds,
        log=first.log
        + ["search of the designs holding a die added by the screening:"]
        + second.log,
        stats=stats,
        priced={**first.priced, **second.priced},
    )


def _links(evaluator: Evaluator, g: int) -> dict:
    """The die-to-die links as the content search prices their interface area."""
    packaging = evaluator.problem.packaging[g]
    links = evaluator.links
    if packaging.kind == "single_die" or len(links.bandwidth_gbps) == 0:
        return {}
    return {
        "link_ends": links.ends,
        "link_gbps": links.bandwidth_gbps,
        "interface_density": packaging.interface_density_gbps_per_mm2,
        "port_area": packaging.port_area_mm2,
    }


def _least_area(evaluator: Evaluator) -> float:
    """Least total die area of any design: every block instance at its most compact."""
    blocks = evaluator.blocks
    return float(blocks.count @ (blocks.area_mm2 * blocks.scale).min(axis=0))


def _carrier_too_small(evaluator: Evaluator, g: int) -> bool:
    """Whether the packaging's interposer cannot hold the blocks at their least area."""
    packaging = evaluator.problem.packaging[g]
    if packaging.kind != "silicon_interposer":
        return False
    cap = (
        packaging.interposer_max_area_mm2 - packaging.interposer_extra_area_mm2
    ) / packaging.interposer_area_factor
    return _least_area(evaluator) > cap + 1e-9


def _others(evaluator: Evaluator, g: int, n: int, columns) -> float:
    """Least per-unit cost besides the dies in `milp.build_columns`'s escape term:
    bonding, package, final test and the carrier at its floor."""
    packaging = evaluator.problem.packaging[g]
    fixed = n * packaging.bond_cost_per_die + packaging.package_cost + packaging.final_test_cost
    if columns.carrier_slopes is None:
        return fixed + packaging.carrier_cost
    blocks = evaluator.blocks
    area_lo = float(blocks.count @ (blocks.area_mm2 * blocks.scale).min(axis=0))
    return fixed + float((columns.carrier_slopes * area_lo + columns.carrier_intercepts).max())


def _area_price(columns, u: np.ndarray, mix_rows: int) -> float:
    """What one mm^2 of die adds to a column's reduced cost through the interposer rows:
    the area cap (a <= row, dual <= 0) and the carrier under-estimator (c - slope x area
    >= intercept, duals >= 0), so never negative with signed duals."""
    if columns.carrier_slopes is None:
        return 0.0
    slopes = columns.carrier_slopes
    end = u.size - mix_rows
    pwl = u[end - slopes.size : end]
    cap = u[end - slopes.size - 1]
    return max(float(pwl @ slopes - cap), 0.0)


def generated_search(
    evaluator: Evaluator,
    top: int = 1,
    deadline: float | None = None,
    requirements: Requirements | None = None,
    architecture: tuple | None = None,
    seed: dict[Selection, float] | None = None,
    candidates: dict[int, CandidateSet] | None = None,
) -> SearchOutcome:
    """Proven top-``top`` designs, candidate dies generated on demand (module docstring).

    Arguments as :func:`~optimizer.solver.search.milp_search`; ``candidates`` (from an
    earlier generated search of the same problem) and ``seed`` are starting points only:
    the contents they lack are still searched for.
    """
    start = time.perf_counter()
    problem = evaluator.problem
    need = requirements if requirements is not None else problem.requirements
    revenue = problem.market.unit_price * problem.market.volume
    floor = CostFloor(evaluator)
    # program coefficients that hold for dies not yet known as well
    floors = floor.program_floors()
    counts = evaluator.blocks.count.astype(np.int64)
    n_blocks = counts.size
    index = {name: i for i, name in enumerate(evaluator.blocks.names)}
    keep_apart = [[index[name] for name in group] for group in problem.constraints.keep_apart]
    mix = architecture[2] if architecture is not None and len(architecture) > 2 else None
    packagings = range(len(problem.packaging))
    if architecture is not None:
        packagings = [architecture[0]]
    programs: list[tuple[int, int]] = []
    for g in packagings:
        packaging = problem.packaging[g]
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        for n in range(2, n_max + 1):
            if architecture is None or architecture[1] == n:
                programs.append((g, n))
    log: list[str] = []
    # only the search of the whole problem tells its stage (an architecture row's is
    # part of the decision table)
    tells = architecture is None

    def tell(text: str) -> None:
        if tells:
            progress.stage(text)

    known: dict[int, CandidateSet] = dict(candidates or {})
    keys: set[bytes] = set()
    for g, cset in (candidates or {}).items():
        # one-die packagings hold the whole content only: they say nothing of the others
        if g in packagings and problem.packaging[g].kind != "single_die":
            keys.update(row.astype(np.int16).tobytes() for row in np.unique(cset.instances, axis=0))

    def add(contents: np.ndarray, screen=None) -> int:
        """Price new contents on every packaging searched; the number new. With
        ``screen(g, candidates)`` only the candidate dies it keeps are added."""
        rows = [
            r
            for r in np.asarray(contents, dtype=np.int64)
            if r.astype(np.int16).tobytes() not in keys
        ]
        if not rows:
            return 0
        fresh = np.array(rows, dtype=np.int64)
        # contents the keep rules forbid are known too (never searched for again), unpriced
        keys.update(r.astype(np.int16).tobytes() for r in fresh)
        fresh = fresh[keep_rules_hold(evaluator, fresh)]
        if fresh.size == 0:
            return 0
        for g in packagings:
            cset = build_candidates(
                evaluator,
                g,
                fresh,
                depth=top,
                requirements=need,
                deadline=deadline,
                by_process=mix is not None,
            )
            floor.check(cset.process, cset.instances, cset.prices)
            if screen is not None:
                cset = cset.take(np.flatnonzero(screen(g, cset)))
            known[g] = cset if g not in known else join_candidates(known[g], cset)
        return len(fresh)

    def out_of_time() -> bool:
        return deadline is not None and time.perf_counter() > deadline

    generated = 0
    timed_out = False
    tell("generating candidate dies: a first few contents")
    try:
        generated += add(_starting_contents(evaluator, [n for _, n in programs]))
    except OutOfTime:
        timed_out = True
    # step 2: every program's relaxation, generated to optimality over all contents
    duals: dict[tuple[int, int], tuple[DualPrices, float, int]] = {}
    open_programs: list[tuple[int, int]] = []
    for g, n in programs:
        if timed_out:
            open_programs.append((g, n))
            continue
        rounds = 0
        while True:
            if out_of_time():
                timed_out = True
                break
            tell(
                f"generating candidate dies: [{problem.packaging[g].name}, {n} dies], "
                f"round {rounds + 1}"
            )
            if _carrier_too_small(evaluator, g) or n * floors[2] < _least_area(evaluator):
                duals[(g, n)] = (None, math.inf, rounds)  # no design of this packaging
                break
            columns = build_columns(evaluator, known[g], n, span=n, floors=floors)
            if columns is None:
                break  # no die known for it yet: left open (unproven)
            if mix is not None:
                process_of = known[g].process
                columns.mix = (mix, process_of)
            bound = relax(columns, deadline=deadline, incomplete=True)
            if bound.row_dual is None:
                timed_out = out_of_time()
                break
            u = _signed(columns, bound.row_dual)
            value = dual_bound(columns, u)
            prices = DualPrices(
                factor=float(columns.carrier_factor),
                cover=u[:n_blocks],
                count=float(u[n_blocks]),
                process=(u[-len(mix) :] if mix is not None else np.zeros(len(problem.process))),
                max_copies=n,
                processes=None if mix is None else np.asarray(mix) > 0,
                area_price=_area_price(columns, u, 0 if mix is None else len(mix)),
                n_dies=n,
                cheapest=floors[0],
                others=_others(evaluator, g, n, columns),
                **_links(evaluator, g),
            )
            eps = EPS * max(abs(value), 1.0) if math.isfinite(value) else 0.0
            found, least, complete = contents_below(
                floor, prices, -eps, counts, keys, most=SEARCH_MOST, keep_apart=keep_apart
            )
            # the most promising only: early duals (of a program still short of columns)
            # would otherwise bring in many contents no design needs
            found = found[np.argsort(least, kind="stable")[:BATCH]]
            rounds += 1
            if found.shape[0] == 0 and complete:
                duals[(g, n)] = (prices, value - n * eps, rounds)
                break
            try:
                generated += add(found)
            except OutOfTime:
                timed_out = True
                break
        if (g, n) not in duals:
            open_programs.append((g, n))
    log.append(
        f"column generation: {len(duals)} of {len(programs)} relaxations complete over all "
        f"contents, {generated} contents priced, {time.perf_counter() - start:.2f} s"
    )

    def search(seed_now: dict[Selection, float], require=None) -> SearchOutcome:
        return milp_search(
            evaluator,
            top=top,
            deadline=deadline,
            requirements=need,
            architecture=architecture,
            candidates=known,
            seed=seed_now,
            require=require,
        )

    priced: dict[Selection, float] = dict(seed or {})
    tell("searching the candidate dies generated")
    outcome = search(priced)
    priced.update(outcome.priced)
    threshold = (
        sorted(r.total_cost for r in outcome.ranked)[top - 1]
        if len(outcome.ranked) >= top
        else math.inf
    )
    # step 4: every content that could beat the threshold, then the search again
    screened = 0
    screen_done = False
    sizes = {g: len(cset) for g, cset in known.items()}
    if math.isfinite(threshold) and not timed_out:
        tell("screening contents that could beat the best design found")
        limit_cost = threshold + tie_tolerance(revenue, threshold) + CUTOFF_RTOL * abs(threshold)
        wanted = []
        for prices, value, _ in duals.values():
            if prices is None or value >= limit_cost or out_of_time():
                continue
            found, _, _ = contents_below(
                floor, prices, limit_cost - value, counts, keys, keep_apart=keep_apart
            )
            wanted.append(found)

        def could_rank(g: int, cset: CandidateSet) -> np.ndarray:
            """Candidates some column of which, priced exactly, could still beat the
            threshold: a design holding column j costs at least L + its reduced cost
            (the other rows' duals only add to it, so they are left out)."""
            keep = np.zeros(len(cset), dtype=bool)
            for (h, n), (prices, value, _) in duals.items():
                if h != g or prices is None or value >= limit_cost:
                    continue
                cols = build_columns(evaluator, cset, n, span=n, floors=floors)
                if cols is None:
                    continue
                c, k = cols.col_c, cols.col_k.astype(float)
                process = cset.process[c]
                reduced = cols.cost - k * (
                    cset.instances[c] @ prices.cover + prices.count + prices.process[process]
                )
                reduced += prices.area_price * k * cset.prices.area_mm2[c]
                hit = value + reduced < limit_cost
                if prices.processes is not None:
                    hit &= prices.processes[process]
                keep[c[hit]] = True
            return keep

        if not out_of_time():
            try:
                if wanted:
                    screened = add(np.concatenate(wanted), screen=could_rank)
                screen_done = not out_of_time()
            except OutOfTime:
                timed_out = True
        grown = {g: np.arange(len(c)) >= sizes.get(g, 0) for g, c in known.items()}
        if any(mask.any() for mask in grown.values()):
            # designs of the dies known before were searched: only those holding a new
            # die are left, and the proofs of the two searches together cover all
            tell("searching again with the dies screened in")
            again = search(priced, require=grown)
            priced.update(again.priced)
            outcome = _merged(outcome, again, top)
    log.append(
        f"screening: {screened} more contents could beat the threshold; "
        f"{sum(len(c) for c in known.values())} candidate dies in all"
    )
    if open_programs:
        # a program whose relaxation was not generated to the end has no bound over all
        # contents: the search is not proven, and its bound is unknown
        bound = -math.inf
    elif screen_done:
        # designs holding an unknown content cost more than the threshold
        bound = outcome.bound_total_cost
    else:
        bound = min([outcome.bound_total_cost, *(value for _, value, _ in duals.values())])
    stats = dict(outcome.stats)
    stats.update(
        {
            "contents_generated": generated + screened,
            "generation_rounds": sum(r for _, _, r in duals.values()),
            "timed_out": timed_out or out_of_time(),
        }
    )
    return SearchOutcome(
        ranked=outcome.ranked,
        candidates=known,
        bound_total_cost=bound,
        proven=outcome.proven and not open_programs and screen_done and not timed_out,
        method="milp",
        seconds=time.perf_counter() - start,
        log=log + outcome.log,
        stats=stats,
        priced=priced,
    )
