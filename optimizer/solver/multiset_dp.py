"""One program's designs in the order of their bound, by dynamic programming over blocks.

An integer program of :mod:`optimizer.solver.milp` (one packaging option, exactly n
dies) bounds every design's total cost by a linear objective over columns (a candidate
die and its copies): column costs, a constant, the one-time cost of each process's
defect-density target and, for a silicon interposer, the carrier term
``factor x max_j(slope_j x area + intercept_j)``. Dropping two of its rows (at most one
column per candidate die, the interposer's area cap) leaves a problem that dynamic
programming solves exactly, for every target profile (one defect density per process
with a curve: a product holds one per process) and every carrier piece j:

    best[r, m] = min over columns (k copies of content t, k t <= r, t holding the first
                 block kind left in r) of  cost_j(column) + best[r - k t, m - k],

r a multiset of block instances still to place (an index in mixed radix) and m the dies
still to use: the textbook recursion over subsets for set partitioning (F. V. Fomin and
D. Kratsch, "Exact Exponential Algorithms", Springer 2010, ch. 3), over multisets. With
its cost-to-go as the heuristic, a best-first (A*) search lists complete designs in
non-decreasing order of ``max_j`` of their bound, which is at most their exact cost.
Every design listed is priced exactly; once the least bound left is above the search's
threshold no design of the program can rank, and the program is closed without an
integer program. The columns holding the first block kind left are taken in
non-increasing column order, so each design is listed once.
"""

from __future__ import annotations

import heapq
import itertools
import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from optimizer.solver.milp import Columns

# work of one program's tables (pairs of nested multisets x die counts x tables) above
# which the integer program is used instead: about a tenth of a second compiled
MAX_WORK = 60_000_000
# search nodes and designs listed per program before it is left to the integer program
# (the least bound left then still tightens the program's bound): a loose bound (test
# escapes of several percent) lists many designs, which pricing whole or the integer
# program handle faster
MAX_NODES = 20_000
MAX_LISTED = 2_000
# complete designs priced together
PRICE_BATCH = 64


@njit(cache=True, nogil=True)
def _tables(weight, radix, n):  # pragma: no cover - compiled
    """best[r, m]: least cost of placing multiset r on exactly m dies (inf if none).

    ``weight[s, k]`` is the least cost of k copies of one die of content s / k (inf if
    none); states are mixed-radix indices with radices ``radix``.
    """
    n_blocks = radix.size
    stride = np.ones(n_blocks, dtype=np.int64)
    for b in range(1, n_blocks):
        stride[b] = stride[b - 1] * radix[b - 1]
    states = stride[-1] * radix[-1]
    k_most = np.zeros(states, dtype=np.int64)
    for s in range(states):
        for k in range(n, 0, -1):
            if weight[s, k] < np.inf:
                k_most[s] = k
                break
    best = np.full((states, n + 1), np.inf)
    best[0, 0] = 0.0
    have = np.zeros(n_blocks, dtype=np.int64)
    take = np.zeros(n_blocks, dtype=np.int64)
    for r in range(1, states):
        x = r
        first = -1
        for b in range(n_blocks):
            have[b] = x % radix[b]
            x //= radix[b]
            if first < 0 and have[b] > 0:
                first = b
        for b in range(n_blocks):
            take[b] = 0
        take[first] = 1
        s = stride[first]
        while True:
            for k in range(1, k_most[s] + 1):
                w = weight[s, k]
                if w < np.inf:
                    rest = r - s
                    for m in range(k, n + 1):
                        v = w + best[rest, m - k]
                        if v < best[r, m]:
                            best[r, m] = v
            b = first
            while b < n_blocks:
                if take[b] < have[b]:
                    take[b] += 1
                    s += stride[b]
                    break
                low = 1 if b == first else 0
                s -= (take[b] - low) * stride[b]
                take[b] = low
                b += 1
            if b == n_blocks:
                break
    return best


@dataclass
class _Profile:
    """Columns allowed with one defect-density target per process, and its tables."""

    allowed: np.ndarray  # column indices (usable, of this profile), ascending
    constant: np.ndarray  # per carrier piece: program constant + target and carrier terms
    needs: list[set[int]]  # per process held off its base: its groups, one to be used
    best: np.ndarray = None  # (pieces, states, n + 1)


class ProgramDP:
    """The designs of one program, cheapest bound first (see the module docstring)."""

    def __init__(
        self,
        columns: Columns,
        counts: np.ndarray,
        mix: tuple[int, ...] | None = None,
        process_of: np.ndarray | None = None,
    ):
        self.columns = columns
        self.n = columns.n_dies
        self.radix = np.asarray(counts, dtype=np.int64) + 1
        self.stride = np.cumprod(np.r_[1, self.radix[:-1]]).astype(np.int64)
        self.states = int(np.prod(self.radix))
        usable = np.flatnonzero(columns.usable)
        # with a process mix (dies per process), columns on processes it leaves out go,
        # and the search below drops paths with too many dies on a process
        self.mix = None if mix is None else np.asarray(mix, dtype=np.int64)
        self.col_process = np.zeros(columns.n_cols, dtype=np.int64)
        if mix is not None:
            self.col_process = np.asarray(process_of)[columns.col_c].astype(np.int64)
            usable = usable[self.mix[self.col_process[usable]] > 0]
        removal = columns.cover[:, usable].T.toarray().astype(np.int64)  # (cols, B)
        self.removal = np.zeros((columns.n_cols, removal.shape[1]), dtype=np.int64)
        self.removal[usable] = removal
        self.removal_index = self.removal @ self.stride
        self.first = np.argmax(self.removal > 0, axis=1)  # lowest block kind held
        self.k = columns.col_k.astype(np.int64)
        if columns.carrier_slopes is not None:
            slopes = np.asarray(columns.carrier_slopes, dtype=float)
            intercepts = np.asarray(columns.carrier_intercepts, dtype=float)
            self.piece_cost = columns.cost[None, :] + columns.carrier_factor * (
                slopes[:, None] * columns.area[None, :]
            )
            piece_constant = columns.constant + columns.carrier_factor * intercepts
        else:
            self.piece_cost = columns.cost[None, :].astype(float)
            piece_constant = np.array([columns.constant], dtype=float)
        self.target_group = (
            columns.target_group
            if columns.target_group is not None
            else np.full(columns.n_cols, -1, dtype=np.int64)
        )
        self.profiles = [
            _Profile(cols, piece_constant + extra, needs)
            for cols, extra, needs in _target_profiles(columns, usable)
        ]
        self.nodes = 0
        self._children: dict[tuple[int, int, int], tuple] = {}

    @staticmethod
    def work(columns: Columns, counts: np.ndarray) -> float:
        """Inner steps the tables would take (to decide whether to build them)."""
        c = np.asarray(counts, dtype=float)
        pairs = float(np.prod((c + 1) * (c + 2) / 2))
        pieces = 1 if columns.carrier_slopes is None else len(columns.carrier_slopes)
        return pairs * columns.n_dies * pieces * _n_profiles(columns)

    def build(self) -> None:
        for profile in self.profiles:
            tables = []
            for piece in range(self.piece_cost.shape[0]):
                weight = np.full((self.states, self.n + 1), np.inf)
                cols = profile.allowed
                np.minimum.at(
                    weight,
                    (self.removal_index[cols], self.k[cols]),
                    self.piece_cost[piece, cols],
                )
                tables.append(_tables(weight, self.radix, self.n))
            profile.best = np.stack(tables)

    def root_bound(self) -> float:
        """The least bound of any design of the program (inf: none)."""
        full = self.states - 1
        return min(
            (float(np.max(p.constant + p.best[:, full, self.n])) for p in self.profiles),
            default=math.inf,
        )

    def designs(self, limit: float) -> DesignStream:
        return DesignStream(self, limit)

    def children(self, q: int, r: int, m: int) -> tuple:
        """Columns that may come next at state (r, m) under profile q, with their
        per-piece cost plus cost-to-go (sorted by column index)."""
        key = (q, r, m)
        if key not in self._children:
            profile = self.profiles[q]
            have = (r // self.stride) % self.radix
            first = int(np.argmax(have > 0))
            cols = profile.allowed
            ok = (
                (self.first[cols] == first)
                & (self.k[cols] <= m)
                & np.all(self.removal[cols] <= have[None, :], axis=1)
            )
            cols = cols[ok]
            rest = r - self.removal_index[cols]
            ahead = self.piece_cost[:, cols] + profile.best[:, rest, m - self.k[cols]]
            finite = np.all(np.isfinite(ahead), axis=0)
            self._children[key] = (cols[finite], rest[finite], ahead[:, finite], first)
        return self._children[key]


@dataclass
class _Expansion:
    """The children of one search node, cheapest bound first (pushed one at a time)."""

    profile: int
    dies_left: int
    used: np.ndarray  # dies per process so far (with a process mix)
    so_far: np.ndarray  # per carrier piece: the bound's cost of the columns taken
    first: int  # block kind the children hold
    path: tuple[int, ...]
    cols: np.ndarray
    rest: np.ndarray  # state after each child
    bounds: np.ndarray  # ascending


class DesignStream:
    """Complete designs of a program in non-decreasing order of bound.

    ``limit`` is the money above which designs are no longer wanted (the search's
    cut-off); nodes past it are dropped, so the caller may lower it, never raise it. The
    children of a node are sorted once and pushed one at a time, each when its elder
    sibling is taken.
    """

    def __init__(self, dp: ProgramDP, limit: float):
        self.dp = dp
        self.limit = limit
        self.tick = itertools.count()
        self.heap: list[tuple] = []
        self.listed = 0
        full = dp.states - 1
        for q, profile in enumerate(dp.profiles):
            bound = np.max(profile.constant + profile.best[:, full, dp.n])
            root = _Expansion(
                q,
                dp.n,
                np.zeros(0 if dp.mix is None else dp.mix.size, dtype=np.int64),
                profile.constant,
                -1,
                (),
                np.array([-1]),
                np.array([full]),
                np.array([bound]),
            )
            self._push(root, 0)

    def _push(self, expansion: _Expansion, i: int) -> None:
        if i < expansion.bounds.size and expansion.bounds[i] < self.limit:
            heapq.heappush(self.heap, (float(expansion.bounds[i]), next(self.tick), expansion, i))

    @property
    def bound(self) -> float:
        """No design not yet listed has a lower bound than this (inf: none left)."""
        return self.heap[0][0] if self.heap else math.inf

    def next_design(self, node_budget: int) -> tuple[float, tuple[int, ...]] | None:
        """The next complete design (its bound, its columns), or None when none is left
        below the limit or ``node_budget`` expansions have been spent."""
        dp = self.dp
        while self.heap and self.heap[0][0] < self.limit:
            if dp.nodes >= node_budget:
                return None
            f, _, parent, i = heapq.heappop(self.heap)
            self._push(parent, i + 1)
            col = int(parent.cols[i])
            r = int(parent.rest[i])
            q, used = parent.profile, parent.used
            if col < 0:  # a root
                m, g, path = parent.dies_left, parent.so_far, ()
            else:
                path = (*parent.path, col)
                m = parent.dies_left - int(dp.k[col])
                g = parent.so_far + dp.piece_cost[:, col]
                if dp.mix is not None:
                    used = used.copy()
                    used[dp.col_process[col]] += dp.k[col]
            if r == 0 and m == 0:
                # a design leaving a process at its base level is listed under the
                # profile that has it there, not again under its other levels
                needs = dp.profiles[q].needs
                if needs:
                    used_groups = {int(dp.target_group[c]) for c in path}
                    if any(used_groups.isdisjoint(same) for same in needs):
                        continue
                self.listed += 1
                return f, path
            dp.nodes += 1
            cols, rest, ahead, first = dp.children(q, r, m)
            if col >= 0 and first == parent.first:
                # the same block kind as the column before: no larger column index
                cut = np.searchsorted(cols, col, side="right")
                cols, rest, ahead = cols[:cut], rest[:cut], ahead[:, :cut]
            if dp.mix is not None and cols.size:
                on = dp.col_process[cols]
                fits = used[on] + dp.k[cols] <= dp.mix[on]
                cols, rest, ahead = cols[fits], rest[fits], ahead[:, fits]
            if cols.size == 0:
                continue
            bounds = np.max(g[:, None] + ahead, axis=0)
            keep = np.flatnonzero(bounds < self.limit)
            order = keep[np.argsort(bounds[keep], kind="stable")]
            child = _Expansion(q, m, used, g, first, path, cols[order], rest[order], bounds[order])
            self._push(child, 0)
        return None


def _n_profiles(columns: Columns) -> int:
    if columns.group_level is None:
        return 1
    levels = np.bincount(columns.group_process)
    return int(np.prod(levels[levels > 0]))  # at most: levels of equal density merge


def _target_profiles(
    columns: Columns, usable: np.ndarray
) -> list[tuple[np.ndarray, float, list[set[int]]]]:
    """(allowed columns, one-time target cost, groups of which a design must use one) per
    choice of one defect-density target per process with a curve.

    A product holds one density per process; levels of one process with the same
    density may be mixed (the evaluator then charges the largest one-time cost of
    those used), so a choice is a density, its cost the least one-time cost at it. A
    design leaving a process out is listed under the choice holding its base level.
    """
    if columns.group_level is None:
        return [(usable, 0.0, [])]
    group = columns.target_group[usable]
    classes = []  # per process: (groups at one density, least one-time cost, holds base)
    for p in np.unique(columns.group_process):
        mine = np.flatnonzero(columns.group_process == p)
        density = columns.group_density[mine]
        per_density = []
        for d in np.unique(density):
            same = mine[np.abs(density - d) <= 1e-12 * abs(d)]
            base = bool(np.any(columns.group_level[same] == 0))
            per_density.append((same, float(columns.group_cost[same].min()), base))
        classes.append((mine, per_density))
    out = []
    for choice in itertools.product(*(per_density for _, per_density in classes)):
        barred = np.concatenate(
            [
                np.setdiff1d(mine, same)
                for (mine, _), (same, _, _) in zip(classes, choice, strict=True)
            ]
        )
        allowed = usable[~np.isin(group, barred)]
        cost = sum(c for _, c, _ in choice)
        needs = [set(same.tolist()) for same, _, base in choice if not base]
        out.append((allowed, cost, needs))
    return out


__all__ = ["MAX_LISTED", "MAX_NODES", "MAX_WORK", "PRICE_BATCH", "DesignStream", "ProgramDP"]
