"""Candidate dies: every admissible die content x process x local options, priced in bulk.

A die content is a vector of block instances (0..count per block). Each content is tried
on every process with every combination of the spare-unit and array-repair choices of the
blocks it carries; all of them are priced by the evaluator in one call per packaging
option (interface area depends on the packaging). Variants of one content that are
dominated in every respect that matters later (cost per passed die, defect level, NRE,
area, salvage-bin yield) are dropped: swapping a dominated die for its dominator never
makes a design worse.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from optimizer.evaluator import DieBatch, DiePrices, Evaluator
from optimizer.problem import Requirements
from optimizer.solver import progress


@dataclass(frozen=True)
class CandidateSet:
    """Priced, admissible candidate dies for one packaging option."""

    packaging_index: int
    process: np.ndarray  # (C,)
    instances: np.ndarray  # (C, B)
    spares: np.ndarray  # (C, B)
    repairs: np.ndarray  # (C, B)
    prices: DiePrices
    max_copies: np.ndarray  # (C,) most copies of this die one product can hold
    level: np.ndarray  # (C,) index into its process's defect_targets()
    critical_option: np.ndarray  # (C,) index into the critical-area options

    def __len__(self) -> int:
        return int(self.process.shape[0])

    def take(self, rows: np.ndarray) -> CandidateSet:
        """The candidates ``rows`` only (indices into this set)."""
        return CandidateSet(
            packaging_index=self.packaging_index,
            process=self.process[rows],
            instances=self.instances[rows],
            spares=self.spares[rows],
            repairs=self.repairs[rows],
            prices=self.prices.take(rows),
            max_copies=self.max_copies[rows],
            level=self.level[rows],
            critical_option=self.critical_option[rows],
        )


def join_candidates(first: CandidateSet, second: CandidateSet) -> CandidateSet:
    """``first`` followed by ``second`` (indices into ``first`` stay valid)."""

    def both(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return np.concatenate([a, b.astype(a.dtype, copy=False)])

    prices = DiePrices(
        **{
            name: both(getattr(first.prices, name), getattr(second.prices, name))
            for name in DiePrices.__dataclass_fields__
        }
    )
    return CandidateSet(
        packaging_index=first.packaging_index,
        process=both(first.process, second.process),
        instances=both(first.instances, second.instances),
        spares=both(first.spares, second.spares),
        repairs=both(first.repairs, second.repairs),
        prices=prices,
        max_copies=both(first.max_copies, second.max_copies),
        level=both(first.level, second.level),
        critical_option=both(first.critical_option, second.critical_option),
    )


def keep_rules_hold(evaluator: Evaluator, contents: np.ndarray) -> np.ndarray:
    """Mask of contents (C x B) that the keep-together and keep-apart rules allow."""
    problem = evaluator.problem
    blocks = evaluator.blocks
    index = {name: i for i, name in enumerate(blocks.names)}
    ok = np.ones(len(contents), dtype=bool)
    share = contents / blocks.count[None, :]
    for group in problem.constraints.keep_together:
        cols = [index[name] for name in group]
        ok &= np.all(np.isclose(share[:, cols], share[:, cols[:1]]), axis=1)
    for group in problem.constraints.keep_apart:
        cols = [index[name] for name in group]
        ok &= (contents[:, cols] > 0).sum(axis=1) <= 1
    return ok


def enumerate_contents(evaluator: Evaluator, max_area_mm2: float | None = None) -> np.ndarray:
    """All block-instance vectors a single die could carry (C x B), smallest area first.

    A content is kept when its block area on the most compact process fits the die-area
    limit and the keep-together / keep-apart rules hold.
    """
    problem = evaluator.problem
    blocks = evaluator.blocks
    unit_min = (blocks.area_mm2 * blocks.scale).min(axis=0)  # (B,) most compact process
    if max_area_mm2 is None:
        field = max(p.reticle_width_mm * p.reticle_height_mm for p in problem.process)
        max_area_mm2 = min(problem.constraints.max_die_area_mm2, field)
    contents = np.zeros((1, 0), dtype=np.int64)
    area = np.zeros(1)
    for b in range(blocks.n_blocks):
        choices = np.arange(blocks.count[b] + 1)
        contents = np.concatenate(
            [np.repeat(contents, len(choices), axis=0), np.tile(choices, len(contents))[:, None]],
            axis=1,
        )
        area = np.repeat(area, len(choices)) + np.tile(choices, len(area)) * unit_min[b]
        keep = area <= max_area_mm2 + 1e-9
        contents, area = contents[keep], area[keep]
    nonempty = contents.sum(axis=1) > 0
    contents, area = contents[nonempty], area[nonempty]
    ok = keep_rules_hold(evaluator, contents)
    order = np.argsort(area[ok], kind="stable")
    return contents[ok][order]


def _variants(evaluator: Evaluator, contents: np.ndarray, packaging) -> tuple[DieBatch, dict]:
    """Expand contents over processes, defect-density targets, design margins,
    critical-area options and the local spare / repair choices."""
    problem = evaluator.problem
    b_count = evaluator.blocks.n_blocks
    option_blocks = []  # (block, kind, choices) for blocks with a real choice
    for b, block in enumerate(problem.block):
        if len(block.spare_choices) > 1:
            option_blocks.append((b, "spare", block.spare_choices))
        if block.repair is not None and len(set(block.repair.repair_choices) | {0}) > 1:
            option_blocks.append((b, "repair", sorted(set(block.repair.repair_choices) | {0})))
    combos = list(itertools.product(*[choices for _, _, choices in option_blocks])) or [()]
    combo_arr = np.array(combos, dtype=np.int64).reshape(len(combos), len(option_blocks))
    critical = (
        problem.critical_area_reduction.options()
        if problem.critical_area_reduction is not None
        else [(1.0, 0.0)]
    )
    c = len(contents)
    parts: dict[str, list[np.ndarray]] = {
        k: []
        for k in (
            "process",
            "content",
            "spares",
            "repairs",
            "level",
            "critical",
            "density",
            "adder",
            "one_time",
            "sigma",
            "margin_overhead",
            "sens",
            "crit_overhead",
        )
    }
    for combo in combo_arr:
        # narrow integers: these arrays have one row per variant, millions at 20 blocks
        spare = np.zeros((c, b_count), dtype=np.int32)
        repair = np.zeros((c, b_count), dtype=np.int32)
        valid = np.ones(c, dtype=bool)
        for (b, kind, _), value in zip(option_blocks, combo, strict=True):
            present = contents[:, b] > 0
            # an option on a block the die does not carry is the same die as option 0
            valid &= present | (value == 0)
            (spare if kind == "spare" else repair)[:, b] = np.where(present, value, 0)
        m = int(valid.sum())
        for p, process in enumerate(problem.process):
            for level, (density, one_time, adder) in enumerate(process.defect_targets()):
                for sigma, overhead in process.margin_options():
                    for k, (sens, crit_overhead) in enumerate(critical):
                        parts["process"].append(np.full(m, p, dtype=np.int64))
                        parts["content"].append(np.flatnonzero(valid))
                        parts["spares"].append(spare[valid])
                        parts["repairs"].append(repair[valid])
                        parts["level"].append(np.full(m, level, dtype=np.int64))
                        parts["critical"].append(np.full(m, k, dtype=np.int64))
                        for key, value in (
                            ("density", density),
                            ("adder", adder),
                            ("one_time", one_time),
                            ("sigma", sigma),
                            ("margin_overhead", overhead),
                            ("sens", sens),
                            ("crit_overhead", crit_overhead),
                        ):
                            parts[key].append(np.full(m, value, dtype=float))
    arr = {k: np.concatenate(v) for k, v in parts.items()}
    content = arr["content"]
    batch = DieBatch(
        process=arr["process"],
        instances=contents.astype(np.int32)[content],
        spares=arr["spares"],
        repairs=arr["repairs"],
        # a die's interface area depends on its content only
        interface_area_mm2=evaluator.interface_area_mm2(contents, packaging)[content],
        defect_density_per_cm2=arr["density"],
        wafer_cost_adder=arr["adder"],
        improvement_one_time=arr["one_time"],
        sigma_margin=arr["sigma"],
        margin_overhead=arr["margin_overhead"],
        sensitivity_factor=arr["sens"],
        critical_overhead=arr["crit_overhead"],
    )
    return batch, {"level": arr["level"], "critical": arr["critical"]}


_PARETO_CHUNK = 4_000_000
_PRICE_CHUNK = 200_000


class OutOfTime(Exception):
    """The wall-clock deadline passed while candidate dies were being priced."""


def _price_in_chunks(evaluator: Evaluator, batch: DieBatch, deadline: float | None) -> DiePrices:
    """Price a batch, a slice at a time when a deadline has to be watched.

    Slices start small and grow to about a tenth of a second of work each, since dies
    with redundancy price far slower than plain ones.
    """
    if deadline is not None and time.perf_counter() > deadline:
        raise OutOfTime
    if deadline is None or len(batch) == 0:
        prices = evaluator.price_dies(batch)
        progress.priced(len(batch))
        return prices
    parts = []
    first, size = 0, 1_000
    while first < len(batch):
        rows = np.arange(first, min(first + size, len(batch)))
        began = time.perf_counter()
        parts.append(evaluator.price_dies(_take_batch(batch, rows)))
        progress.priced(rows.size)
        now = time.perf_counter()
        if now > deadline:
            raise OutOfTime
        first += rows.size
        rate = rows.size / max(now - began, 1e-6)
        size = int(min(max(0.1 * rate, 1_000), _PRICE_CHUNK))
    if len(parts) == 1:
        return parts[0]
    return DiePrices(
        **{
            name: np.concatenate([getattr(part, name) for part in parts])
            for name in DiePrices.__dataclass_fields__
        }
    )


def _take_batch(batch: DieBatch, rows: np.ndarray) -> DieBatch:
    return DieBatch(
        **{
            name: (value[rows] if isinstance(value, np.ndarray) else value)
            for name, value in vars(batch).items()
        }
    )


def _row_groups(rows: np.ndarray) -> np.ndarray:
    """Group id of each row of a non-negative integer matrix (equal rows, equal ids).

    Rows are read as numbers in a mixed radix when that fits 63 bits, so one 1-D sort
    replaces the much slower row-wise unique.
    """
    if rows.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    radix = rows.max(axis=0).astype(np.int64) + 1
    if float(np.prod(radix.astype(float))) >= 2.0**62:
        return np.unique(rows, axis=0, return_inverse=True)[1].ravel()
    weights = np.cumprod(np.r_[1, radix[:-1]]).astype(np.int64)
    return np.unique(rows.astype(np.int64) @ weights, return_inverse=True)[1].ravel()


def pareto_keep(group: np.ndarray, metrics: np.ndarray, depth: int = 1) -> np.ndarray:
    """Mask of rows dominated by fewer than ``depth`` other rows of the same group.

    A row is dominated by another row of its group that is no worse in every metric and
    better in one (of exact ties the first row dominates). A die dominated by K others
    can be in no top-K design: each swap for a dominator gives a distinct design that is
    no worse.
    """
    order = np.argsort(group, kind="stable")
    g = group[order]
    starts = np.flatnonzero(np.r_[True, g[1:] != g[:-1]])
    sizes = np.diff(np.r_[starts, len(g)])
    keep_sorted = np.ones(len(g), dtype=bool)
    m = metrics[order]
    # groups of one size are compared together, as a stack
    for size in np.unique(sizes[sizes > 1]):
        same = starts[sizes == size]
        # a few million comparisons at a time bound the temporaries
        per_chunk = max(1, _PARETO_CHUNK // (size * size * m.shape[1]))
        for first in range(0, same.size, per_chunk):
            rows = same[first : first + per_chunk, None] + np.arange(size)[None, :]
            keep_sorted[rows] = _dominators(m[rows]) < depth
    keep = np.empty(len(g), dtype=bool)
    keep[order] = keep_sorted
    return keep


def _dominators(block: np.ndarray) -> np.ndarray:
    """Per row of each (groups, size, metrics) stack: rows of its group dominating it."""
    size = block.shape[1]
    other = block[:, None, :, :]  # [., i, j, .]: row j ...
    this = block[:, :, None, :]  # ... against row i
    le = np.all(other <= this, axis=3)
    lt = np.any(other < this, axis=3)
    idx = np.arange(size)
    tie_first = np.all(other == this, axis=3) & (idx[None, :] < idx[:, None])[None]
    return ((le & lt) | tie_first).sum(axis=2)


def build_candidates(
    evaluator: Evaluator,
    packaging_index: int,
    contents: np.ndarray | None = None,
    prune: bool = True,
    depth: int = 1,
    requirements: Requirements | None = None,
    deadline: float | None = None,
    by_process: bool = False,
    mandate_metrics: bool = False,
    adjust: Callable | None = None,
) -> CandidateSet:
    """Price every admissible candidate die for one packaging option.

    With ``by_process`` a die is only dropped for a dominating variant on its own
    process, so that designs with a stated count of dies per process stay complete.
    With ``mandate_metrics`` a dominating variant must also have no lower die yield and
    sigma margin, so that it meets every mandate the dropped one meets (products of a
    family with mandates of their own share dies). ``adjust(prices, process, instances,
    spares, repairs, critical_option)`` may return changed die prices before the
    filters and pruning (a product of a family whose library already pays some NRE).

    With ``prune`` (the solver's default) variants of a content dominated by ``depth``
    others (the number of ranked designs wanted) are dropped; the exhaustive reference
    keeps them all. Past ``deadline`` (a `time.perf_counter` instant) pricing stops
    with :class:`OutOfTime`.
    """
    problem = evaluator.problem
    packaging = problem.packaging[packaging_index]
    blocks = evaluator.blocks
    if contents is None:
        contents = enumerate_contents(evaluator)
    if packaging.kind == "single_die":
        contents = contents[np.all(contents == blocks.count[None, :], axis=1)]
    batch, extra = _variants(evaluator, contents, packaging)
    # drop dies over the area limits before pricing them (pricing is the costly part)
    limits = problem.constraints
    field = np.array([p.reticle_width_mm * p.reticle_height_mm for p in problem.process])
    area = evaluator.die_area_mm2(batch)
    fits = (area <= np.minimum(limits.max_die_area_mm2, field[batch.process]) + 1e-9) & (
        area >= limits.min_die_area_mm2 - 1e-9
    )
    if not fits.all():
        keep = np.flatnonzero(fits)
        batch = _take_batch(batch, keep)
        extra = {name: value[keep] for name, value in extra.items()}
    process, inst, spare, repair = batch.process, batch.instances, batch.spares, batch.repairs
    prices = _price_in_chunks(evaluator, batch, deadline)
    if adjust is not None:
        prices = adjust(prices, process, inst, spare, repair, extra["critical"])
    ok = (
        prices.fits_reticle
        & (prices.gross_dies_per_wafer > 0)
        & np.isfinite(prices.cost_per_passed_die)
        & (prices.area_mm2 >= limits.min_die_area_mm2 - 1e-9)
        & (prices.area_mm2 <= limits.max_die_area_mm2 + 1e-9)
    )
    need = requirements if requirements is not None else problem.requirements
    if need.min_die_yield is not None:
        ok &= prices.die_yield >= need.min_die_yield * (1 - 1e-12)
    if need.min_sigma_margin is not None:
        ok &= np.isfinite(prices.sigma_margin) & (
            prices.sigma_margin >= need.min_sigma_margin * (1 - 1e-12)
        )
    if need.max_defect_level is not None:
        ok &= prices.defect_level <= need.max_defect_level * (1 + 1e-12)
    idx = np.flatnonzero(ok)
    # Dominance is checked among variants of one content that share the one-time
    # yield-improvement situation: processes without a defect-reduction curve together
    # (no target, nothing shared), each (process, target) of a curve process on its own.
    curve = np.array([p.defect_reduction is not None for p in problem.process])
    own = curve[process[idx]] | by_process
    spend_key = np.where(own, 1 + process[idx] * 1000 + extra["level"][idx], 0)
    group = _row_groups(np.column_stack([inst[idx], spend_key]))
    # every term of the profit a die enters: its cost, its test escapes, its NRE, its
    # area (carrier cost) and, for one-die products, the partly good dies each salvage
    # bin takes (more is better, so negated)
    metrics = np.column_stack(
        [
            prices.cost_per_passed_die[idx],
            -prices.log1m_defect_level[idx],
            prices.nre[idx],
            prices.area_mm2[idx],
            -prices.salvage_per_good[idx],
        ]
    )
    if mandate_metrics:
        sigma = np.nan_to_num(prices.sigma_margin[idx], nan=0.0, posinf=np.inf)
        metrics = np.column_stack([metrics, -prices.die_yield[idx], -sigma])
    if prune:
        idx = idx[pareto_keep(group.ravel(), metrics, depth)]
    inst_k = inst[idx]
    with np.errstate(divide="ignore"):
        per_block = np.where(
            inst_k > 0, blocks.count[None, :] // np.maximum(inst_k, 1), np.iinfo(np.int64).max
        )
    cap = min(packaging.max_dies, limits.max_dies)
    max_copies = np.minimum(per_block.min(axis=1), cap)
    return CandidateSet(
        packaging_index=packaging_index,
        process=process[idx],
        instances=inst_k,
        spares=spare[idx],
        repairs=repair[idx],
        prices=prices.take(idx),
        max_copies=max_copies,
        level=extra["level"][idx],
        critical_option=extra["critical"][idx],
    )
