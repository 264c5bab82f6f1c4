"""Array views of a problem: the numbers the evaluator and solver index by position.

Built once per problem so that pricing thousands of candidate dies is pure numpy.
Block order, process order and packaging order follow the problem file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from optimizer.problem import BLOCK_KINDS, Problem


@dataclass(frozen=True)
class BlockTable:
    """Per-block arrays (length B) and per-process area scales (P x B)."""

    names: tuple[str, ...]
    area_mm2: np.ndarray
    count: np.ndarray
    defect_sensitivity: np.ndarray
    kind_index: np.ndarray
    has_repair: np.ndarray
    repairable_fraction: np.ndarray
    area_per_repair_mm2: np.ndarray
    repair_test_cost: np.ndarray
    scale: np.ndarray  # (P, B): area multiplier of each block on each process

    @property
    def n_blocks(self) -> int:
        return len(self.names)


@dataclass(frozen=True)
class LinkTable:
    """Links between blocks: endpoint indices (L x 2) and bandwidth [GB/s]."""

    ends: np.ndarray
    bandwidth_gbps: np.ndarray


def block_table(problem: Problem) -> BlockTable:
    blocks = problem.block
    kind_index = np.array([BLOCK_KINDS.index(b.kind) for b in blocks], dtype=np.int64)
    scale = np.array(
        [[p.area_scale.of(b.kind) for b in blocks] for p in problem.process], dtype=float
    )
    return BlockTable(
        names=tuple(b.name for b in blocks),
        area_mm2=np.array([b.area_mm2 for b in blocks], dtype=float),
        count=np.array([b.count for b in blocks], dtype=np.int64),
        defect_sensitivity=np.array([b.defect_sensitivity for b in blocks], dtype=float),
        kind_index=kind_index,
        has_repair=np.array([b.repair is not None for b in blocks]),
        repairable_fraction=np.array(
            [b.repair.repairable_fraction if b.repair else 0.0 for b in blocks], dtype=float
        ),
        area_per_repair_mm2=np.array(
            [b.repair.area_per_repair_mm2 if b.repair else 0.0 for b in blocks], dtype=float
        ),
        repair_test_cost=np.array(
            [b.repair.test_cost_per_die if b.repair else 0.0 for b in blocks], dtype=float
        ),
        scale=scale,
    )


def link_table(problem: Problem) -> LinkTable:
    index = {b.name: i for i, b in enumerate(problem.block)}
    ends = np.array(
        [[index[a], index[b]] for a, b in (link.blocks for link in problem.link)], dtype=np.int64
    ).reshape(-1, 2)
    bandwidth = np.array([link.bandwidth_gbps for link in problem.link], dtype=float)
    return LinkTable(ends=ends, bandwidth_gbps=bandwidth)
