"""The decision table: the best design of every architecture, each proven within it.

An architecture is a packaging option and a die count ("organic substrate, 3 dies").
After the overall search, each architecture's own program is searched again with its own
threshold (the best design of that architecture found so far), seeded with every design
the overall search priced and reusing its candidate dies. A row is proven when its
program closes; under a time budget it carries its own bound and gap instead.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field, replace

import numpy as np

from optimizer.designs import DesignResult, evaluate_specs
from optimizer.evaluator import COST_COMPONENTS, Evaluator
from optimizer.invariants import InvariantViolation
from optimizer.problem import Requirements
from optimizer.solver import progress
from optimizer.solver.candidates import OutOfTime, build_candidates
from optimizer.solver.search import (
    RankedSelection,
    SearchOutcome,
    milp_search,
    tie_tolerance,
)
from optimizer.solver.selection import selection_specs
from optimizer.solver.verify import verify_solution

# architectures with more process mixes than this are split into the first ones only
MAX_MIXES = 12
# a process-mix search gets at least this many seconds of the time left: its first
# relaxation and scout cannot be cut short, so a thinner share would find nothing
MIX_FLOOR = 1.0
# likewise for an architecture's first search: most rows close in well under a second,
# and the few that need a few seconds should not be cut and searched again
ROW_FLOOR = 2.5


@dataclass(frozen=True)
class ArchitectureRow:
    """The best design of one (packaging, die count), or why there is none."""

    packaging: str
    n_dies: int
    design: DesignResult | None
    proven: bool  # best within its architecture (to the tie tolerance)
    profit_bound: float  # no design of this architecture earns more
    gap: float  # relative, between the row's design and its bound
    optimum: bool = False  # the row holding the overall optimum
    reason: str = ""  # why no design fills the row
    # money by which the optimum beats this row, per component (sum = profit gap)
    gap_components: dict[str, float] = field(default_factory=dict)
    mix: str = ""  # for a process-mix row: the dies per process it is held to
    mixes: list[ArchitectureRow] = field(default_factory=list)  # its process-mix rows
    mixes_omitted: int = 0  # process mixes past MAX_MIXES, not searched

    @property
    def label(self) -> str:
        dies = "1 die" if self.n_dies == 1 else f"{self.n_dies} dies"
        return f"{self.packaging}, {dies}"

    @property
    def process_mix(self) -> str:
        """The processes of the row's dies, e.g. "2x leading + 1x legacy"."""
        if self.design is None:
            return self.mix
        counts: dict[str, int] = {}
        for die in self.design.dies:
            counts[die.process] = counts.get(die.process, 0) + die.copies
        return " + ".join(f"{k}x {name}" for name, k in counts.items())

    @property
    def profit(self) -> float:
        return self.design.profit if self.design is not None else math.nan

    def to_dict(self) -> dict:
        data = asdict(replace(self, mixes=[]))
        data["mixes"] = [row.to_dict() for row in self.mixes]
        data.update(
            architecture=self.label,
            process_mix=self.process_mix,
            profit=self.profit if self.design is not None else None,
        )
        return data


def architectures(evaluator: Evaluator) -> list[tuple[int, int]]:
    """Every (packaging index, die count) the problem allows, in file order."""
    problem = evaluator.problem
    pairs = []
    for g, packaging in enumerate(problem.packaging):
        n_max = min(packaging.max_dies, problem.constraints.max_dies)
        pairs.extend((g, n) for n in range(1, n_max + 1))
    return pairs


def gap_components(optimum: DesignResult, other: DesignResult) -> dict[str, float]:
    """Money by which ``optimum`` beats ``other``, per cost component and salvage.

    Profit is revenue + salvage revenue - volume x (sum of the per-unit components), so
    the components add up to the profit gap.
    """
    volume = optimum.volume
    parts = {
        name: volume * (other.breakdown[name] - optimum.breakdown[name]) for name in COST_COMPONENTS
    }
    parts["salvage"] = optimum.salvage_revenue - other.salvage_revenue
    return parts


def empty_reason(evaluator: Evaluator, g: int, n: int, need: Requirements) -> str:
    """Why no admissible design has ``n`` dies on packaging ``g``, in the user's terms."""
    problem = evaluator.problem
    blocks = evaluator.blocks
    limits = problem.constraints
    packaging = problem.packaging[g]
    instances = int(blocks.count.sum())
    if n > instances:
        return f"only {instances} block instances to place, fewer than {n} dies"
    unit_min = (blocks.area_mm2 * blocks.scale).min(axis=0)
    total_min = float(blocks.count @ unit_min)
    field_mm2 = max(p.reticle_width_mm * p.reticle_height_mm for p in problem.process)
    largest = min(limits.max_die_area_mm2, field_mm2)
    if total_min > n * largest + 1e-9:
        where = "reticle field" if field_mm2 <= limits.max_die_area_mm2 else "max_die_area"
        return (
            f"the blocks need at least {total_min:,.0f} mm^2 of silicon, more than {n} "
            f"{'die' if n == 1 else 'dies'} of at most {largest:,.0f} mm^2 hold ({where})"
        )
    if packaging.kind == "silicon_interposer":
        need_area = packaging.interposer_area_factor * total_min
        need_area += packaging.interposer_extra_area_mm2
        if need_area > packaging.interposer_max_area_mm2:
            return (
                f"an interposer for these dies needs at least {need_area:,.0f} mm^2, over its "
                f"limit of {packaging.interposer_max_area_mm2:,.0f} mm^2"
            )
    total_max = float(blocks.count @ (blocks.area_mm2 * blocks.scale).max(axis=0))
    if n * limits.min_die_area_mm2 > total_max * 1.3 + 1e-9:
        return (
            f"{n} dies of at least {limits.min_die_area_mm2:g} mm^2 (min_die_area) are more "
            f"silicon than the blocks fill"
        )
    if limits.keep_together or limits.keep_apart:
        rules = "keep_together / keep_apart rules"
    else:
        rules = "die-area range"
    text = f"no split into {n} dies keeps the {rules} within the die-area limits"
    if need.any():
        text = (
            f"no design of {n} dies keeps the {rules}, the die-area limits and the required "
            "targets ([requirements]) together"
        )
    if packaging.kind == "silicon_interposer":
        text += " and fits the interposer"
    return text


def _generated(outcome: SearchOutcome) -> bool:
    """Whether the optimum's candidate dies were generated on demand (not all known)."""
    return "contents_generated" in outcome.stats


def _row_search(evaluator: Evaluator, outcome: SearchOutcome, **kwargs) -> SearchOutcome:
    """One row's search: over the optimum's candidate dies, or, when those were
    generated on demand, generating more for the row's own proof (its seed then only
    the optimum's designs, whose indices every row's candidates share)."""
    if not _generated(outcome):
        return milp_search(evaluator, **kwargs)
    from optimizer.solver.generation import generated_search

    kwargs["seed"] = outcome.priced
    return generated_search(evaluator, **kwargs)


def decision_table(
    evaluator: Evaluator,
    outcome: SearchOutcome,
    optimum: DesignResult,
    optimum_proven: bool,
    optimum_bound: float,
    need: Requirements,
    source: str,
    deadline: float | None = None,
    split: int = 0,
) -> list[ArchitectureRow]:
    """One row per architecture, best profit first, empty rows last.

    ``optimum`` is the reported winner (its row is taken from the overall proof);
    ``deadline`` (a `time.perf_counter` instant) bounds the extra searches: a row still
    open then carries its bound and gap. The optimum's architecture and the ``split``
    most profitable multi-die ones are also split by process mix (rows in ``mixes``),
    when the problem has several processes and the method is the proven search.
    """
    problem = evaluator.problem
    revenue = problem.market.unit_price * problem.market.volume
    best_key = (optimum.packaging, optimum.n_dies)
    pairs = architectures(evaluator)
    splitting = split > 0 and len(problem.process) > 1 and outcome.method != "exhaustive"
    # rows first; a share of the time is kept for the process mixes
    rows_deadline = deadline
    if deadline is not None and splitting:
        rows_deadline = time.perf_counter() + 0.5 * max(deadline - time.perf_counter(), 0.0)
    rows: list[ArchitectureRow] = []
    seed = dict(outcome.priced)
    # most promising rows first (best design already priced for them, then fewest dies),
    # so that under a time limit the rows that compete with the optimum are proven and
    # the ones far behind keep a gap
    known: dict[tuple[int, int], float] = {}
    for sel, total in seed.items():
        key = (sel.packaging_index, sel.n_dies)
        if math.isfinite(total):
            known[key] = min(known.get(key, math.inf), total)
    pairs.sort(key=lambda pair: (known.get(pair, math.inf), pair[1], pair[0]))
    for index, (g, n) in enumerate(pairs):
        packaging = problem.packaging[g]
        dies = "1 die" if n == 1 else f"{n} dies"
        progress.stage(
            f"decision table: {packaging.name}, {dies} (row {index + 1} of {len(pairs)})"
        )
        if (packaging.name, n) == best_key:
            rows.append(_optimum_row(packaging.name, optimum, optimum_proven, optimum_bound))
            continue
        if g not in outcome.candidates:
            rows.append(_not_searched(packaging.name, n))
            continue
        if outcome.method in ("exhaustive", "subset_dp"):
            # both keep the best design of every architecture they priced, proven
            found = _from_exhaustive(outcome, g, n, revenue)
        else:
            found = _row_search(
                evaluator,
                outcome,
                top=1,
                deadline=_share(rows_deadline, len(pairs) - index, ROW_FLOOR),
                requirements=need,
                architecture=(g, n),
                candidates=outcome.candidates,
                seed=seed,
            )
            seed.update(found.priced)
        rows.append(_row_of(evaluator, found, found.candidates[g], g, n, optimum, need, source))
    _check_table(rows, optimum, optimum_proven, revenue)
    rows = best_first(rows)
    if splitting:
        rows = _split_by_mix(
            evaluator,
            rows,
            split,
            optimum,
            optimum_proven,
            need,
            source,
            deadline,
            seed,
            generated=_generated(outcome),
        )
    if deadline is not None and outcome.method not in ("exhaustive", "subset_dp"):
        rows = _second_pass(evaluator, outcome, rows, optimum, need, source, deadline, seed)
        _check_table(rows, optimum, optimum_proven, revenue)
    return rows


def _second_pass(
    evaluator: Evaluator,
    outcome: SearchOutcome,
    rows: list[ArchitectureRow],
    optimum: DesignResult,
    need: Requirements,
    source: str,
    deadline: float,
    seed: dict,
) -> list[ArchitectureRow]:
    """Rows left open by their first share of the time searched again, most promising
    first, with the time the others did not use (and every design priced so far)."""
    problem = evaluator.problem
    redo = [
        i
        for i, row in enumerate(rows)
        if not row.proven
        and not row.optimum
        and problem.packaging_index(row.packaging) in outcome.candidates
    ]
    rows = list(rows)
    for done, i in enumerate(redo):
        if time.perf_counter() >= deadline:
            break
        row = rows[i]
        progress.stage(f"decision table, rows still open: {row.label} ({done + 1} of {len(redo)})")
        g = problem.packaging_index(row.packaging)
        found = _row_search(
            evaluator,
            outcome,
            top=1,
            deadline=_share(deadline, len(redo) - done),
            requirements=need,
            architecture=(g, row.n_dies),
            candidates=outcome.candidates,
            seed=seed,
        )
        seed.update(found.priced)
        again = _row_of(evaluator, found, found.candidates[g], g, row.n_dies, optimum, need, source)
        better = again.design is not None and (row.design is None or again.profit > row.profit)
        if again.proven or better or again.profit_bound < row.profit_bound:
            rows[i] = replace(again, mixes=row.mixes, mixes_omitted=row.mixes_omitted)
    return best_first(rows)


def best_first(rows: list[ArchitectureRow]) -> list[ArchitectureRow]:
    """Rows with a design by profit, best first, then the empty ones in their order."""
    filled = sorted((r for r in rows if r.design is not None), key=lambda r: -r.profit)
    return filled + [r for r in rows if r.design is None]


def _share(deadline: float | None, parts: int, floor: float = 0.0) -> float | None:
    """An even share of the time left for one of ``parts`` searches still to run, at
    least ``floor`` seconds while any time is left (never past ``deadline``)."""
    if deadline is None:
        return None
    now = time.perf_counter()
    left = max(deadline - now, 0.0)
    return now + min(max(left / max(parts, 1), floor), left)


def _optimum_row(
    packaging: str, optimum: DesignResult, proven: bool, bound: float, mix: str = ""
) -> ArchitectureRow:
    gap = max(0.0, (bound - optimum.profit) / max(abs(optimum.profit), 1e-12))
    return ArchitectureRow(
        packaging,
        optimum.n_dies,
        optimum,
        proven,
        bound,
        0.0 if proven else gap,
        optimum=True,
        mix=mix,
    )


def _not_searched(packaging: str, n: int, mix: str = "") -> ArchitectureRow:
    return ArchitectureRow(
        packaging,
        n,
        None,
        False,
        math.inf,
        math.inf,
        reason="not searched: the time limit ended while pricing its dies",
        mix=mix,
    )


def _row_of(
    evaluator: Evaluator,
    found: SearchOutcome,
    cset,
    g: int,
    n: int,
    optimum: DesignResult,
    need: Requirements,
    source: str,
    mix: str = "",
) -> ArchitectureRow:
    """The row a search of one architecture (or process mix) gives, checked."""
    problem = evaluator.problem
    packaging = problem.packaging[g]
    revenue = problem.market.unit_price * problem.market.volume
    bound = revenue - found.bound_total_cost
    if not found.ranked:
        reason = "no design found within the time limit"
        if found.proven:
            reason = (
                f"no admissible design has exactly {mix}"
                if mix
                else empty_reason(evaluator, g, n, need)
            )
        return ArchitectureRow(
            packaging.name, n, None, found.proven, bound, math.inf, reason=reason, mix=mix
        )
    item = found.ranked[0]
    specs = selection_specs(evaluator, cset, item.selection)
    design = evaluate_specs(
        evaluator, specs, packaging.name, f"{packaging.name} x{n}", source, requirements=need
    )
    tolerance = tie_tolerance(revenue, item.total_cost)
    verify_solution(
        problem,
        [design],
        need,
        proven=found.proven,
        bound_profit=bound,
        proven_profit=item.profit,
        tolerance=tolerance,
    )
    gap = max(0.0, (bound - design.profit) / max(abs(design.profit), 1e-12))
    return ArchitectureRow(
        packaging.name,
        n,
        design,
        found.proven,
        bound,
        0.0 if found.proven else gap,
        gap_components=gap_components(optimum, design),
        mix=mix,
    )


def mix_text(problem, counts: tuple[int, ...]) -> str:
    """Dies per process in words: "2x leading + 1x legacy"."""
    return " + ".join(f"{k}x {problem.process[p].name}" for p, k in enumerate(counts) if k)


def process_mixes(n_processes: int, n_dies: int) -> list[tuple[int, ...]]:
    """Every way to put ``n_dies`` dies on ``n_processes`` processes (counts per process)."""
    if n_processes == 1:
        return [(n_dies,)]
    out = []
    for first in range(n_dies, -1, -1):
        out.extend((first, *rest) for rest in process_mixes(n_processes - 1, n_dies - first))
    return out


def _split_by_mix(
    evaluator: Evaluator,
    rows: list[ArchitectureRow],
    split: int,
    optimum: DesignResult,
    optimum_proven: bool,
    need: Requirements,
    source: str,
    deadline: float | None,
    seed: dict,
    generated: bool = False,
) -> list[ArchitectureRow]:
    """The optimum's and the ``split`` best multi-die architectures, with one sub-row
    per process mix (with ``generated``, each mix generates its own candidate dies)."""
    problem = evaluator.problem
    index = {p.name: i for i, p in enumerate(problem.process)}
    # the optimum's row and the best multi-die rows: mixes matter most for chiplets
    filled = [r for r in rows if r.design is not None]
    chosen = [r for r in filled if r.optimum]
    chosen += [r for r in filled if r.n_dies > 1 and not r.optimum][:split]
    jobs = []
    omitted: dict[tuple[str, int], int] = {}
    for row in chosen:
        g = problem.packaging_index(row.packaging)
        mixes = process_mixes(len(problem.process), row.n_dies)
        jobs.extend((row, g, m) for m in mixes[:MAX_MIXES])
        omitted[(row.packaging, row.n_dies)] = max(len(mixes) - MAX_MIXES, 0)
    candidates: dict[int, object] = {}
    narrowed: dict[tuple, object] = {}
    found_rows: dict[tuple[str, int], list[ArchitectureRow]] = {}
    for done, (row, g, counts) in enumerate(jobs):
        text = mix_text(problem, counts)
        progress.stage(
            f"decision table, process mixes: {row.label}, {text} ({done + 1} of {len(jobs)})"
        )
        own = [0] * len(problem.process)
        for die in row.design.dies:
            own[index[die.process]] += die.copies
        if tuple(own) == counts:
            # the row's own best has this mix: it is the mix's best too
            sub = replace(row, mix=text, mixes=[])
        else:
            if generated:
                from optimizer.solver.generation import generated_search

                # the mix's own generated search: per-process pruning of its dies
                found = generated_search(
                    evaluator,
                    top=1,
                    deadline=_share(deadline, len(jobs) - done, MIX_FLOOR),
                    requirements=need,
                    architecture=(g, row.n_dies, counts),
                )
                cset = found.candidates[g]
                sub = _row_of(evaluator, found, cset, g, row.n_dies, optimum, need, source, text)
                found_rows.setdefault((row.packaging, row.n_dies), []).append(sub)
                continue
            try:
                if g not in candidates:
                    candidates[g] = build_candidates(
                        evaluator, g, requirements=need, deadline=deadline, by_process=True
                    )
            except OutOfTime:
                found_rows.setdefault((row.packaging, row.n_dies), []).append(
                    _not_searched(row.packaging, row.n_dies, text)
                )
                continue
            # a design of this mix uses these processes only: so do its program's
            # columns, which tightens the relaxation the mix constraint is not part of
            used = tuple(p for p, k in enumerate(counts) if k)
            if (g, used) not in narrowed:
                rows_used = np.flatnonzero(np.isin(candidates[g].process, used))
                narrowed[g, used] = candidates[g].take(rows_used)
            cset = narrowed[g, used]
            found = milp_search(
                evaluator,
                top=1,
                deadline=_share(deadline, len(jobs) - done, MIX_FLOOR),
                requirements=need,
                architecture=(g, row.n_dies, counts),
                candidates={g: cset},
            )
            sub = _row_of(evaluator, found, cset, g, row.n_dies, optimum, need, source, text)
        found_rows.setdefault((row.packaging, row.n_dies), []).append(sub)
    out = []
    for row in rows:
        subs = found_rows.get((row.packaging, row.n_dies))
        if subs:
            subs = best_first(subs)
            row = replace(row, mixes=subs, mixes_omitted=omitted[(row.packaging, row.n_dies)])
            top_mix = subs[0] if subs[0].design is not None else None
            if top_mix is not None and top_mix.profit > row.profit + tie_tolerance(
                row.design.revenue, row.design.revenue - row.profit
            ):
                if row.proven:
                    raise InvariantViolation(
                        f"a process mix of '{row.label}' earns {top_mix.profit:.10g}, more "
                        f"than the architecture's proven best {row.profit:.10g}"
                    )
                # the row was open: the mix's design is its best found so far
                row = replace(
                    row,
                    design=top_mix.design,
                    gap=max(0.0, (row.profit_bound - top_mix.profit) / abs(top_mix.profit)),
                    gap_components=top_mix.gap_components,
                )
        out.append(row)
    return out


def _from_exhaustive(outcome: SearchOutcome, g: int, n: int, revenue: float) -> SearchOutcome:
    """The row's best from the brute-force reference, which prices every design."""
    mine = sorted(
        (total, sel)
        for sel, total in outcome.priced.items()
        if (sel.packaging_index, sel.n_dies) == (g, n) and math.isfinite(total)
    )
    ranked = [RankedSelection(sel, total, revenue - total) for total, sel in mine[:1]]
    bound = ranked[0].total_cost if ranked else math.inf
    if not outcome.proven:
        bound = -math.inf
    return SearchOutcome(
        ranked=ranked,
        candidates=outcome.candidates,
        bound_total_cost=bound,
        proven=outcome.proven,
        method="exhaustive",
        seconds=0.0,
    )


def _check_table(
    rows: list[ArchitectureRow], optimum: DesignResult, proven: bool, revenue: float
) -> None:
    """No row may beat a proven optimum, and each row's gap parts must add up."""
    tolerance = tie_tolerance(revenue, revenue - optimum.profit)
    for row in rows:
        if row.design is None or row.optimum:
            continue
        if proven and row.design.profit > optimum.profit + tolerance:
            raise InvariantViolation(
                f"architecture '{row.label}' earns {row.design.profit:.10g}, more than the "
                f"proven optimum {optimum.profit:.10g}"
            )
        total = sum(row.gap_components.values())
        difference = optimum.profit - row.design.profit
        if abs(total - difference) > 1e-6 * max(abs(optimum.profit), abs(difference), 1.0):
            raise InvariantViolation(
                f"the gap parts of '{row.label}' add up to {total:.10g}, not {difference:.10g}"
            )
