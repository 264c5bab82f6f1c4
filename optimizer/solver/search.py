"""The proof loop: bound with the integer programs, price exactly, cut, repeat.

For every packaging option g and die count n a lower-bounding integer program is solved;
each selection it returns is priced exactly by the evaluator. While some program's bound
is below the K-th best exact total cost, its current selection is cut off and it is
solved again. When no program is open, the K best designs are proven; with a time limit
the best found is returned with the proven bound and the gap. When every block has count
1, designs of the subset DP (approximate outside its exact class) are priced first: they
only set the first threshold.
"""

from __future__ import annotations

import heapq
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from optimizer.evaluator import Evaluator
from optimizer.problem import Requirements
from optimizer.solver import progress
from optimizer.solver.candidates import (
    CandidateSet,
    OutOfTime,
    build_candidates,
    enumerate_contents,
)
from optimizer.solver.milp import (
    PRESOLVE_MAX_COLUMNS,
    Columns,
    RelaxedBound,
    SubProblem,
    build_columns,
    build_subproblem,
    cut_current,
    dual_bound,
    relax,
    solve_round,
)
from optimizer.solver.multiset_dp import (
    MAX_LISTED,
    MAX_NODES,
    MAX_WORK,
    PRICE_BATCH,
    ProgramDP,
)
from optimizer.solver.partitions import enumerate_program
from optimizer.solver.selection import Selection, price_selections, selection_mix

# Designs whose profits differ by less than this share of the best profit are ties: the
# proof says no design is more profitable than the winner by more than that.
PROFIT_RTOL = 1e-9


# after this many cut-and-price rounds a program is priced whole when it holds at most
# ENUMERATE_BUDGET designs (vectorised pricing does that in well under a second)
ENUMERATE_AFTER = 6
ENUMERATE_BUDGET = 200_000
# before its first integer program, a program is priced whole if it has this few designs
ENUMERATE_FIRST = 20_000
# designs per second a program priced whole is assumed to take at least, after the walk
# over its partitions (25,000 measured: 116,782 eight-die designs of 14 blocks in 4.6 s)
ENUMERATE_RATE = 10_000
# programs small enough are first closed by listing their designs in order of a bound
# from dynamic programming over blocks (multiset_dp), before any relaxation
MULTISET_DP = True
# relative gap at which a scouting integer program (incumbents only, no bound) stops
SCOUT_GAP = 1e-3
# under a time limit, a round of an integer program gets at least this many seconds
ROUND_FLOOR = 1.0
# a scouting program left with no design has this many times more columns next time
SCOUT_WIDEN = 4
# integer programs skip selections bounded above the threshold by more than this share
# of it (well above HiGHS's tolerances, so that no selection that could rank is skipped)
CUTOFF_RTOL = 1e-7
# Incumbents from the subset DP before the first program (problems whose blocks all have
# count 1): the integer programs of near-tied designs can take minutes to find a first
# good design, the DP well under a second. Off only to measure what it brings.
DP_SEEDING = True
# under a time limit, the seeding DP may take at most this share of the time left
SEED_SHARE = 0.5
# HiGHS presolve rules (bits of its option presolve_rule_off) that do not stop at the
# time limit: rule 16 spent 1.9 s on a 3,200-column two-die program of the tie family
# whatever the limit (0.05 s or 1 s); switched off under a time limit only
SLOW_PRESOLVE_RULES = 1 << 16
# Nor does HiGHS stop inside some phases of a program too large for presolve: its
# feasibility-jump heuristic ran 90 s past a 1 s limit on a 262,143-column program (6 s
# on a 65,535-column one); without it, the root's first LP and cut round still ran up
# to 8 s past. Under a time limit such a program gets no feasibility jump, and a round
# only while this many seconds per column are left (measured: 2 to 3e-5).
LARGE_ROUND_SECONDS_PER_COLUMN = 5e-5


def tie_tolerance(revenue: float, threshold_cost: float) -> float:
    """Money within which two designs count as tied, at the current K-th best cost."""
    if not math.isfinite(threshold_cost):
        return 0.0
    return PROFIT_RTOL * max(abs(revenue - threshold_cost), 1.0)


@dataclass(frozen=True)
class RankedSelection:
    selection: Selection
    total_cost: float  # volume x cost per good unit + NRE (exact)
    profit: float


@dataclass
class SearchOutcome:
    """What a search found and what it proved."""

    ranked: list[RankedSelection]
    candidates: dict[int, CandidateSet]
    bound_total_cost: float  # no design costs less than this
    proven: bool
    method: str
    seconds: float
    log: list[str] = field(default_factory=list)
    stats: dict = field(default_factory=dict)
    # every design priced exactly on the way: selection -> total cost (inf if invalid)
    priced: dict[Selection, float] = field(default_factory=dict)


def _kth(values: list[float], k: int) -> float:
    return heapq.nsmallest(k, values)[-1] if len(values) >= k else math.inf


def milp_search(
    evaluator: Evaluator,
    top: int = 1,
    deadline: float | None = None,
    screen_columns: int = 200,
    candidate_cache: dict | None = None,
    requirements: Requirements | None = None,
    architecture: tuple[int, int] | tuple[int, int, tuple[int, ...]] | None = None,
    candidates: dict[int, CandidateSet] | None = None,
    seed: dict[Selection, float] | None = None,
    require: dict[int, np.ndarray] | None = None,
    ceiling: float | None = None,
    dp_seeds: bool = True,
) -> SearchOutcome:
    """Proven top-``top`` designs by integer programming with exact verification.

    1. For every (packaging, die count) the linear relaxation gives a bound and reduced
       costs. 2. Small integer programs over the most promising columns give exact
       incumbents. 3. Columns that cannot reach the K-th best exact cost are dropped and
       the full programs enumerate, cut and price until every bound clears it.

    ``deadline`` is a `time.perf_counter` instant for the whole search, pricing of the
    candidate dies included.

    With ``architecture`` = (packaging index, die count) only designs of that packaging
    and die count are searched: the best of one architecture, proven within it. A third
    item, the dies per process (indexed like the problem's processes), narrows it to
    one process mix; ``candidates`` must then be pruned per process.
    ``candidates`` (from an earlier search of the same problem) skips the pricing of
    candidate dies, and ``seed`` (designs priced earlier, selection -> total cost) gives
    the search its first incumbents. With ``require`` (per packaging, a mask over its
    candidates) only designs holding at least one of those dies are searched, the
    others having been searched before (the proof covers both together). With
    ``ceiling`` (a total cost) every design costing at most that much is searched for,
    however many there are: they are all in ``priced`` when the search is proven.
    ``dp_seeds=False`` skips the subset-DP first designs (searches run many times over,
    such as a life's per-period bounds, close as fast without them).
    """
    start = time.perf_counter()
    problem = evaluator.problem
    market = problem.market
    revenue = market.unit_price * market.volume
    log: list[str] = []
    # an architecture row's search is a stage of the decision table: it tells no stage;
    # only a search of the whole problem tells its bound (column generation's searches
    # cover the dies generated so far)
    tells_stage = architecture is None
    tells_bound = tells_stage and require is None and ceiling is None and candidates is None
    # Candidate dies do not depend on the market section: scenarios that differ only there
    # (price, volume) can share one priced candidate table through ``candidate_cache``.
    need = requirements if requirements is not None else problem.requirements
    key = (
        problem.model_dump_json(exclude={"market", "design", "title", "note", "requirements"}),
        top,
        need.model_dump_json(),
        # dies are priced and pruned by the share of them each salvage bin takes
        tuple((b.block, b.min_good) for b in market.salvage_bin),
    )
    cached = candidate_cache.get(key) if candidate_cache is not None else None
    if candidates is not None:
        cached = candidates
    if tells_stage and cached is None:
        progress.stage("listing the block contents a die could hold")
    contents = enumerate_contents(evaluator) if cached is None else None
    candidates = {}
    # one-die packagings first: their few candidates give a design to report even when
    # the time limit ends the pricing of the others
    order = sorted(
        range(len(problem.packaging)),
        key=lambda g: (problem.packaging[g].kind != "single_die", g),
    )
    mix = architecture[2] if architecture is not None and len(architecture) > 2 else None
    if architecture is not None:
        order = [architecture[0]]
        architecture = (architecture[0], architecture[1])

    def in_scope(sel: Selection) -> bool:
        if architecture is None:
            return True
        if (sel.packaging_index, sel.n_dies) != architecture:
            return False
        found = selection_mix(sel, candidates[sel.packaging_index], len(problem.process))
        return mix is None or found == mix

    pricing_cut = False
    try:
        for g in order:
            packaging = problem.packaging[g]
            if tells_stage and cached is None:
                progress.stage(f"pricing candidate dies: packaging {packaging.name}")
            cset = (
                cached[g]
                if cached is not None
                else build_candidates(
                    evaluator, g, contents, depth=top, requirements=need, deadline=deadline
                )
            )
            candidates[g] = cset
            if cached is None:
                log.append(f"packaging {packaging.name}: {len(cset)} candidate dies after pruning")
    except OutOfTime:
        pricing_cut = True
        missing = [problem.packaging[g].name for g in order if g not in candidates]
        log.append(f"out of time while pricing candidate dies of {', '.join(missing)}")
    if candidate_cache is not None and not pricing_cut:
        candidate_cache[key] = candidates

    process_of = None
    if mix is not None and architecture[0] in candidates:
        process_of = candidates[architecture[0]].process
    exact: dict[Selection, float] = {
        sel: total for sel, total in (seed or {}).items() if in_scope(sel)
    }

    def price(sub: SubProblem) -> None:
        sel = sub.current
        if sel is None or sel in exact:
            return
        prices = price_selections(evaluator, candidates[sel.packaging_index], [sel])
        # total cost = revenue - profit: volume x cost + one-time costs - salvage revenue;
        # infinite for an invalid product (carrier too large, clashing targets)
        exact[sel] = float(revenue - prices.profit[0])
        progress.found(prices.profit)

    def remaining() -> float | None:
        return None if deadline is None else deadline - time.perf_counter()

    # until a first design is found, a fifth of the time left after pricing is kept for
    # a short look at the most promising programs (below), so that a time limit returns
    # a design with its gap rather than nothing, and still ends on time
    reserve = 0.0 if deadline is None else 0.2 * max(deadline - time.perf_counter(), 0.0)

    def out_of_time() -> bool:
        left = remaining()
        if left is None:
            return False
        if not any(math.isfinite(v) for v in exact.values()):
            return left <= reserve
        return left <= 0

    def soft_deadline() -> float | None:
        if deadline is None or any(math.isfinite(v) for v in exact.values()):
            return deadline
        return deadline - reserve

    def price_whole(columns: Columns, kept: np.ndarray, most: int) -> int | None:
        """Price every design of a program from its kept columns, if at most ``most``;
        the number priced, or None (too many, or out of time)."""
        end = soft_deadline()
        if end is not None:
            # the walk over partitions stops at its deadline, the pricing of the designs
            # it found does not: half the time left for each
            half = max(end - time.perf_counter(), 0.0) / 2
            most = min(most, int(ENUMERATE_RATE * half))
            end = time.perf_counter() + half
        found = enumerate_program(
            evaluator,
            candidates[columns.packaging_index],
            np.unique(columns.col_c[kept]),
            columns.n_dies,
            top,
            most,
            end,
            mix=mix,
        )
        if found is None:
            return None
        designs, count = found
        for total, sel in designs:
            if in_scope(sel):
                exact.setdefault(sel, total)
        if designs and progress.listening():
            progress.found(revenue - min(total for total, _ in designs))
        return count

    dp_stats = {"dp_programs": 0, "dp_closed": 0, "dp_nodes": 0}

    def close_by_dp(columns: Columns) -> float:
        """List a program's designs in order of their DP bound, pricing each, until none
        left could rank: -inf when not tried, else the least bound of the designs not
        listed (above the threshold: closed)."""
        count = evaluator.blocks.count
        if not MULTISET_DP or columns.require is not None or columns.n_dies_max:
            return -math.inf
        if ProgramDP.work(columns, count) > MAX_WORK:
            return -math.inf
        dp = ProgramDP(columns, count, mix, process_of)
        dp.build()
        dp_stats["dp_programs"] += 1
        stream = dp.designs(cutoff())
        g = columns.packaging_index
        pending: list[Selection] = []

        def flush() -> None:
            fresh = [sel for sel in dict.fromkeys(pending) if sel not in exact]
            pending.clear()
            if fresh:
                prices = price_selections(evaluator, candidates[g], fresh)
                for sel, profit in zip(fresh, prices.profit, strict=True):
                    exact[sel] = float(revenue - profit)
                progress.found(prices.profit)
                stream.limit = min(stream.limit, cutoff())

        while not out_of_time() and stream.listed < MAX_LISTED:
            item = stream.next_design(MAX_NODES)
            if item is None:
                break
            sel = Selection.of(g, [(columns.col_c[c], columns.col_k[c]) for c in item[1]])
            if in_scope(sel):
                pending.append(sel)
            if len(pending) >= PRICE_BATCH:
                flush()
        flush()
        dp_stats["dp_nodes"] += dp.nodes
        if not open_bound(stream.bound):
            dp_stats["dp_closed"] += 1
        return stream.bound

    def program(columns: Columns, keep: np.ndarray) -> SubProblem:
        sub = build_subproblem(columns, keep, mix, process_of)
        if deadline is not None:
            sub.solver.setOptionValue("presolve_rule_off", SLOW_PRESOLVE_RULES)
            if sub.keep.size > PRESOLVE_MAX_COLUMNS:
                sub.solver.setOptionValue("mip_heuristic_run_feasibility_jump", False)
        return sub

    def room(sub: SubProblem) -> bool:
        """Whether a round of ``sub`` can end by the deadline (a large program's round
        runs past its own time limit: see LARGE_ROUND_SECONDS_PER_COLUMN)."""
        left = budget()
        if left is None or sub.keep.size <= PRESOLVE_MAX_COLUMNS:
            return True
        return left >= LARGE_ROUND_SECONDS_PER_COLUMN * sub.keep.size

    def budget() -> float | None:
        soft = soft_deadline()
        return None if soft is None else soft - time.perf_counter()

    def threshold() -> float:
        if ceiling is not None:
            return ceiling
        return _kth(list(exact.values()), top)

    def cutoff() -> float:
        """Money above which a program's selections need not be looked for: the
        threshold, with room for the solver's tolerances (a wider cut-off is safe)."""
        limit = threshold()
        if not math.isfinite(limit):
            return math.inf
        return limit + tie_tolerance(revenue, limit) + CUTOFF_RTOL * abs(limit)

    def open_bound(value: float) -> bool:
        limit = threshold()
        return value < limit - tie_tolerance(revenue, limit)

    # one-die designs need no program: price them all at once for a first threshold
    for g, cset in candidates.items():
        if architecture is not None and architecture != (g, 1):
            continue
        whole = np.flatnonzero(np.all(cset.instances == evaluator.blocks.count[None, :], axis=1))
        if whole.size:
            sels = [s for s in (Selection.of(g, [(int(c), 1)]) for c in whole) if in_scope(s)]
            if not sels:
                continue
            prices = price_selections(evaluator, cset, sels)
            for sel, profit in zip(sels, prices.profit, strict=True):
                exact[sel] = float(revenue - profit)
            progress.found(prices.profit)

    # an architecture's search seeded with the designs of an earlier search (the
    # decision table) already holds that search's DP designs
    seeded = architecture is not None and any(
        math.isfinite(total) and sel.n_dies > 1 and in_scope(sel)
        for sel, total in (seed or {}).items()
    )
    if (
        DP_SEEDING
        and dp_seeds
        and not pricing_cut
        and require is None
        and mix is None
        and not seeded
    ):
        if tells_stage:
            progress.stage("first designs from the subset DP")
        _add_dp_seeds(evaluator, candidates, top, deadline, architecture, in_scope, exact, log)

    timed_out = pricing_cut
    # packagings whose candidates were not all priced: nothing is known of them
    unexplored: list[float] = [-math.inf] if pricing_cut else []
    programs: list[tuple[float, Columns, np.ndarray | None]] = []
    n_programs = 0
    if tells_stage:
        progress.stage("bounding every (packaging, die count) together")
    # Every packaging's die counts 2..n_max are first bounded together by one program.
    # When that bound is open, each die count gets a program built on the same rows and
    # columns, so the joint program's duals bound it without a solve (`dual_bound`).
    for g, packaging in enumerate(problem.packaging):
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        if pricing_cut or n_max < 2 or g not in candidates or len(candidates[g]) == 0:
            continue
        counts = range(2, n_max + 1)
        if architecture is not None:
            counts = [n for n in counts if (g, n) == architecture]
        if require is not None and not require[g].any():
            continue  # every design of this packaging was searched before
        n_programs += len(counts)
        joint_bound = joint = None
        if n_max > 2 and architecture is None:
            joint = build_columns(evaluator, candidates[g], 2, n_max)
            if joint is not None and require is not None:
                joint.require = require[g]
            if joint is None or not open_bound(joint.quick_bound()):
                continue
            # out of time, the die counts are listed below and left unexplored
            if not out_of_time():
                joint_bound = relax(joint, stop_above=threshold(), deadline=soft_deadline())
                if not joint_bound.feasible or not open_bound(joint_bound.value):
                    log.append(f"packaging {packaging.name}: 2 to {n_max} dies closed together")
                    continue
        for n in counts:
            if deadline is not None and time.perf_counter() > deadline:
                # no time to build the others: the joint program bounds them all
                timed_out = True
                floor = -math.inf if joint is None else joint.quick_bound()
                if joint_bound is not None:
                    floor = max(floor, joint_bound.value)
                unexplored.append(floor)
                break
            span = n_max if architecture is None else n
            columns = build_columns(evaluator, candidates[g], n, span=span, like=joint)
            if columns is None:
                continue
            if require is not None:
                columns.require = require[g]
            if mix is not None:
                on = process_of[columns.col_c[columns.usable]]
                if any(dies and not np.any(on == p) for p, dies in enumerate(mix)):
                    continue  # a process the mix needs has no die here: no design
                columns.mix = (mix, process_of)
            cheap = columns.quick_bound()
            if joint_bound is not None and open_bound(cheap):
                cheap = max(cheap, dual_bound(columns, joint_bound.row_dual))
            hint = joint_bound.row_dual if joint_bound is not None else None
            programs.append((cheap, columns, hint))
    programs.sort(key=lambda item: item[0])
    log.append(
        f"{sum(open_bound(b) for b, _, _ in programs)} of {n_programs} (packaging, die count) "
        f"programs open after joint bounds, {time.perf_counter() - start:.2f} s"
    )

    # Programs in order of their cheapest bound: the most promising is relaxed and
    # searched first, so that its designs tighten the threshold for the others.
    relaxed: list[tuple[float, Columns, RelaxedBound]] = []
    subs: list[SubProblem] = []

    def until(end: float) -> float:
        """Seconds to ``end`` (at least ROUND_FLOOR while time is left)."""
        left = budget()
        wanted = max(end - time.perf_counter(), ROUND_FLOOR)
        return wanted if left is None else min(left, wanted)

    def share(parts: int) -> float:
        """Seconds for one of ``parts`` searches still to run. Without a limit, a slice
        as long as the search so far: a program whose round runs out is tried again
        later with a longer one, after the others (so that no single hard program
        holds up the designs that would screen it)."""
        left = budget()
        if left is None:
            return max(ROUND_FLOOR, time.perf_counter() - start)
        return max(min(left, ROUND_FLOOR), left / max(parts, 1))

    for index, (cheap, columns, hint) in enumerate(programs):
        if not open_bound(cheap):
            continue
        if timed_out or out_of_time():
            timed_out = True
            unexplored.append(cheap)
            continue
        name = f"[{problem.packaging[columns.packaging_index].name}, {columns.n_dies} dies]"
        if tells_stage:
            progress.stage(f"bounding and searching {name} ({index + 1} of {len(programs)})")
        listed = close_by_dp(columns)
        if listed > -math.inf:
            if not open_bound(listed):
                log.append(f"{name} closed by listing its designs in order of their DP bound")
                continue
            # stopped early: the designs not listed are bounded by the next one's bound
            cheap = max(cheap, listed)
            if timed_out or out_of_time():
                timed_out = True
                unexplored.append(cheap)
                continue
        bound = relax(columns, row_hint=hint, stop_above=threshold(), deadline=soft_deadline())
        columns.release_arrays()  # its integer program needs only the columns
        # both are bounds: a relaxation cut short by the deadline may hold the weaker
        value = max(bound.value, cheap) if bound.feasible else bound.value
        if not bound.feasible or not open_bound(value):
            continue
        relaxed.append((value, columns, bound))
        usable = columns.usable
        # a program with few designs is priced whole: cheaper than one integer program
        count = price_whole(columns, _screen(bound, usable, threshold()), ENUMERATE_FIRST)
        if count is not None:
            log.append(
                f"[{problem.packaging[columns.packaging_index].name}, {columns.n_dies} dies] "
                f"closed by pricing all {count} of its designs"
            )
            continue
        # unless the screen already leaves a small program, a small program over the
        # least-reduced-cost columns tightens the threshold first, so that the screen
        # drops as many columns as possible; widened while it holds no design at all
        order = np.argsort(np.where(usable, bound.reduced_cost, np.inf), kind="stable")
        basic = np.flatnonzero(~bound.at_zero)
        # this program's share of the time: its scouts and its first round
        part = share(len(programs) - index)
        program_end = time.perf_counter() + part
        width = screen_columns
        while _screen(bound, usable, threshold()).size > screen_columns:
            few = np.union1d(order[:width], basic)
            if mix is not None:
                # the best columns of every process the mix needs, not just the best
                on = process_of[columns.col_c[order]]
                for p in np.flatnonzero(np.asarray(mix) > 0):
                    few = np.union1d(few, order[on == p][:width])
            few = few[usable[few]]
            if few.size >= usable.sum():
                break
            scout = program(columns, few)
            # the scout is for incumbents only: its bound is not used, so a loose gap
            scout.set_gap(SCOUT_GAP)
            for _ in range(top):
                scout.set_cutoff(cutoff())
                solve_round(scout, until(program_end))
                price(scout)
                if scout.current is None or out_of_time():
                    break
                cut_current(scout)
            if scout.rounds > 1 or scout.current is not None or out_of_time():
                break
            if not scout.exhausted:
                break  # not for want of columns: stopped by its time limit
            width *= SCOUT_WIDEN
        if out_of_time():
            # no round left for it: the program stays open at its relaxation's bound
            timed_out = True
            unexplored.append(value)
            continue
        sub = program(columns, _screen(bound, usable, threshold()))
        sub.bound = value
        sub.log.append(f"relaxation {value:.8g}; {sub.keep.size} of {columns.n_cols} columns kept")
        subs.append(sub)
        # under a time limit, a first round gets a share of it: one hard program must
        # not keep the others (and their designs) from being looked at
        if not room(sub):
            sub.log.append("no round: too large for the time left")
            continue
        sub.set_cutoff(cutoff())
        solve_round(sub, until(program_end))
        price(sub)
    log.append(f"{len(relaxed)} relaxations kept, {time.perf_counter() - start:.2f} s")
    # programs left open (at their bounds) because a round would overrun the deadline
    too_large: set[int] = set()
    while not timed_out:
        open_subs = [s for s in subs if not s.exhausted and open_bound(s.bound)]
        workable = [s for s in open_subs if id(s) not in too_large]
        if not workable:
            timed_out = bool(open_subs)
            break
        open_subs = workable
        if tells_stage:
            n_open = len(open_subs)
            progress.stage(f"proving: {n_open} program{'s' if n_open > 1 else ''} still open")
        if tells_bound and progress.listening():
            # the bound the search would return if it stopped now (as computed below)
            still_open = [
                s.bound for s in subs if (s.failed or not s.exhausted) and open_bound(s.bound)
            ]
            best_cost = min((v for v in exact.values() if math.isfinite(v)), default=math.inf)
            progress.bounded(revenue - min([best_cost, *still_open, *unexplored]))
        # lowest bound first, but a program whose last round ran out of its time share
        # without a design waits until the others have had theirs
        sub = min(open_subs, key=lambda s: (s.stalls, s.bound))
        if sub.current is not None:
            cut_current(sub)
        if out_of_time():
            timed_out = True
            break
        if sub.rounds >= ENUMERATE_AFTER and not sub.enumeration_tried:
            # a long cut-and-price loop means a loose bound; when the program's designs
            # are few, pricing every one of them closes it exactly and at once
            sub.enumeration_tried = True
            count = price_whole(sub.columns, sub.keep, ENUMERATE_BUDGET)
            if count is not None:
                sub.exhausted, sub.bound, sub.current = True, math.inf, None
                sub.log.append(f"closed by pricing all {count} of its designs")
                continue
        if not room(sub):
            too_large.add(id(sub))
            sub.log.append("no further round: too large for the time left")
            continue
        sub.set_cutoff(cutoff())
        solve_round(sub, share(len(open_subs)))
        price(sub)
    if timed_out and not any(math.isfinite(v) for v in exact.values()):
        # out of time before any design: a short look at the most promising program so
        # that the user gets the best design found with its gap rather than nothing
        pending = sorted(relaxed, key=lambda item: item[0]) or [
            (quick, columns, None) for quick, columns, _ in programs
        ]
        for _, columns, bound in pending[:3]:
            if remaining() <= 0:
                break
            if bound is None:
                bound = relax(columns, deadline=deadline)
                if not bound.feasible or not math.isfinite(bound.value):
                    continue
            order = np.argsort(bound.reduced_cost, kind="stable")
            few = np.union1d(order[:screen_columns], np.flatnonzero(~bound.at_zero))
            scout = program(columns, few)
            scout.set_cutoff(cutoff())
            solve_round(scout, remaining())
            price(scout)
            if any(math.isfinite(v) for v in exact.values()):
                break
    ranked_items = sorted(
        ((sel, total) for sel, total in exact.items() if math.isfinite(total)),
        key=lambda item: (item[1], item[0]),
    )[:top]
    ranked = [RankedSelection(sel, total, revenue - total) for sel, total in ranked_items]
    open_bounds = [
        s.bound for s in subs if (s.failed or not s.exhausted) and open_bound(s.bound)
    ] + unexplored
    best = ranked[0].total_cost if ranked else math.inf
    bound = min([best, *open_bounds])
    proven = not timed_out and not open_bounds
    for s in subs:
        log.extend(
            f"[{problem.packaging[s.packaging_index].name}, {s.n_dies} dies] {line}"
            for line in s.log
        )
    stats = {
        "programs": n_programs,
        "programs_built": len(programs),
        "relaxations": len(relaxed),
        "programs_searched": len(subs),
        "rounds": sum(s.rounds for s in subs),
        "cuts": sum(s.cuts for s in subs),
        "designs_priced": len(exact),
        "candidate_dies": int(sum(len(c) for c in candidates.values())),
        "milp_seconds": float(sum(s.seconds for s in subs)),
        **dp_stats,
    }
    return SearchOutcome(
        ranked=ranked,
        candidates=candidates,
        bound_total_cost=bound,
        proven=proven,
        method="milp",
        seconds=time.perf_counter() - start,
        log=log,
        stats=stats,
        priced=exact,
    )


def _add_dp_seeds(
    evaluator: Evaluator,
    candidates: dict[int, CandidateSet],
    top: int,
    deadline: float | None,
    architecture: tuple[int, int] | None,
    in_scope: Callable[[Selection], bool],
    exact: dict[Selection, float],
    log: list[str],
) -> None:
    """Price the subset DP's designs exactly into ``exact``: incumbents only (they
    tighten the threshold; every bound of the search stays what it was)."""
    # imported here: the subset DP module imports this one
    from optimizer.solver.subset_dp import dp_seeds, seed_reason

    problem = evaluator.problem
    if seed_reason(problem) is not None:
        return
    began = time.perf_counter()
    own = None if deadline is None else began + SEED_SHARE * max(deadline - began, 0.0)
    counts = None if architecture is None else {architecture[0]: [architecture[1]]}
    found = [
        s
        for s in dp_seeds(evaluator, candidates, top, own, counts)
        if s not in exact and in_scope(s)
    ]
    revenue = problem.market.unit_price * problem.market.volume
    for g in sorted({s.packaging_index for s in found}):
        group = [s for s in found if s.packaging_index == g]
        profit = price_selections(evaluator, candidates[g], group).profit
        for sel, value in zip(group, profit, strict=True):
            # total cost = revenue - profit, infinite for an invalid product
            exact[sel] = float(revenue - value)
        progress.found(profit)
    finite = [exact[s] for s in found if math.isfinite(exact[s])]
    log.append(
        f"subset DP seeds: {len(found)} designs priced, best total cost "
        f"{min(finite, default=math.inf):.10g}, {time.perf_counter() - began:.2f} s"
    )


def _screen(bound: RelaxedBound, usable: np.ndarray, threshold: float) -> np.ndarray:
    """Columns that may still rank: a column at zero whose reduced cost lifts the bound
    above the threshold is in no selection that could."""
    # conservative: keeps every column that could tie as well as those that could win
    limit = threshold * (1 + PROFIT_RTOL) + 1e-6
    lifted = bound.value + bound.reduced_cost > limit
    return np.flatnonzero(usable & ~(bound.at_zero & lifted))


def profit_bound(outcome: SearchOutcome, evaluator: Evaluator) -> float:
    market = evaluator.problem.market
    return market.unit_price * market.volume - outcome.bound_total_cost


def relative_gap(outcome: SearchOutcome, evaluator: Evaluator) -> float:
    """Gap between the best profit found and the proven profit bound, relative."""
    if not outcome.ranked:
        return math.inf
    best = outcome.ranked[0].profit
    bound = profit_bound(outcome, evaluator)
    return max(0.0, (bound - best) / max(abs(best), 1e-12))
