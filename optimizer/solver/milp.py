"""The integer program: which candidate dies, how many copies, proven best.

For one packaging option g and die count n, with x_c copies of candidate c, the exact
cost per good unit is

    N(x) exp(-L(x)) / (y_carrier y_package y_bond^n),
    N(x) = sum_c k_c x_c + n bond + package + final test + S(A_tot(x)),
    L(x) = sum_c x_c ln(1 - DL_c) <= 0,

(k_c cost per passed die, DL_c its defect level, S the carrier cost per good one as a
function of total die area). With t = -L = sum_i t_i over the chosen columns i,
exp(t) - 1 = sum_i t_i phi(t) with phi(x) = (e^x - 1) / x increasing, and t >= tau_i, the
column's own escapes plus the least any other die could add; so
N exp(-L) >= N + sum_i N_i t_i phi(tau_i), where N_i is the least N of any selection
holding column i: its own dies, the cheapest possible die for every other one, the
fixed costs and the carrier's floor. (With phi = 1 this is the tangent exp(t) >= 1 + t,
which is loose when test escapes are several percent.) S is replaced by a convex
piecewise-linear under-estimator. The resulting linear objective is a valid lower bound
of the total cost V x cost per good unit + NRE of every selection.

Copies are one-hot, x_c = sum_k k w_ck with binary w_ck, so that z_c = sum_k w_ck
carries the die's NRE once and a no-good cut on a selection is a single inequality.

Columns are first screened with the linear relaxation, solved directly with HiGHS on
the arrays: a column at zero in the relaxed optimum with reduced cost r can only appear
in selections whose bound is at least z_LP + r, so columns with z_LP + r above the
current K-th best exact cost are left out of the integer program (built with Pyomo and
solved by HiGHS), which keeps it small without losing any selection that could rank.
"""

from __future__ import annotations

import contextlib
import functools
import math
import os
import sys
import time
from dataclasses import dataclass, field

import highspy
import numpy as np
import scipy.sparse as sp

from optimizer.evaluator import Evaluator
from optimizer.problem import Packaging
from optimizer.solver.candidates import CandidateSet
from optimizer.solver.selection import Selection

# Bounds read from the integer-program solver are lowered by this share of their size
# before use: HiGHS works to feasibility tolerances of 1e-9 on a scaled objective, so its
# bound is trusted only to that precision, never taken as exact.
SOLVER_RTOL = 1e-9


@contextlib.contextmanager
def _stdout_silenced():
    """Silence file descriptor 1: HiGHS prints a banner from C++ on its first use."""
    sys.stdout.flush()
    saved = os.dup(1)
    try:
        with open(os.devnull, "w") as devnull:
            os.dup2(devnull.fileno(), 1)
            yield
    finally:
        os.dup2(saved, 1)
        os.close(saved)


with _stdout_silenced():
    highspy.Highs()  # the first instance prints the banner; later ones are quiet


def carrier_underestimator(
    evaluator: Evaluator, packaging: Packaging, area_lo: float, area_hi: float, points: int = 96
) -> tuple[np.ndarray, np.ndarray]:
    """Slopes and intercepts of a convex piecewise-linear lower bound of S(total area).

    S is non-decreasing in area (a larger square interposer never fits more sites per
    wafer nor yields better), so on [a_i, a_i+1] S >= S(a_i). The lower convex hull of
    the corner points (a_i, S(a_i)), (a_i+1, S(a_i)) lies below that step function.
    """
    grid = np.linspace(area_lo, max(area_hi, area_lo + 1e-6), points)
    values = evaluator.carrier_cost(packaging, grid).cost
    # areas whose carrier cannot be made (no site on its wafer) hold no design: any
    # bound is valid there, so the hull is built over the buildable areas only
    finite = np.isfinite(values)
    if not finite.any():
        return np.array([0.0]), np.array([0.0])
    last = int(np.flatnonzero(finite)[-1])
    if last + 1 < grid.size:
        # S is finite somewhere up to the next grid point and at least S(last) there
        values = np.r_[values[: last + 1], values[last]]
        grid = grid[: last + 2]
    else:
        grid, values = grid[finite], values[finite]
    values = np.minimum.accumulate(values[::-1])[::-1]  # guard: never above a later value
    xs = np.concatenate([grid[:-1], grid[1:]])
    ys = np.concatenate([values[:-1], values[:-1]])
    order = np.lexsort((ys, xs))
    xs, ys = xs[order], ys[order]
    hull: list[tuple[float, float]] = []
    for x, y in zip(xs, ys, strict=True):
        if hull and abs(hull[-1][0] - x) < 1e-12:
            continue  # keep the lower of equal-x points (sorted by y)
        while len(hull) >= 2:
            (x1, y1), (x2, y2) = hull[-2], hull[-1]
            if (x2 - x1) * (y - y1) - (y2 - y1) * (x - x1) <= 0:
                hull.pop()
            else:
                break
        hull.append((x, y))
    if len(hull) == 1:
        return np.array([0.0]), np.array([hull[0][1]])
    h = np.array(hull)
    slopes = np.diff(h[:, 1]) / np.diff(h[:, 0])
    intercepts = h[:-1, 1] - slopes * h[:-1, 0]
    return slopes, intercepts


@dataclass(frozen=True)
class ColumnShape:
    """What programs of one packaging and span share: columns, coverage, carrier rows."""

    col_c: np.ndarray  # candidate of each column
    col_k: np.ndarray  # copies of each column
    cover: sp.csr_matrix  # (B, cols): block instances covered
    once_groups: np.ndarray  # group id per column (candidate), for sum_k w_ck <= 1
    area: np.ndarray | None = None  # total-area coefficient per column (interposer)
    area_cap: float = math.inf
    carrier_slopes: np.ndarray | None = None
    carrier_intercepts: np.ndarray | None = None
    # defect-density targets: column -> (process, target) group, or -1 for processes
    # without a curve; per group its process, target index and one-time cost
    target_group: np.ndarray | None = None
    group_process: np.ndarray | None = None
    group_level: np.ndarray | None = None
    group_cost: np.ndarray | None = None
    group_density: np.ndarray | None = None  # target defect density [/cm^2]


_SHARED = tuple(f for f in ColumnShape.__dataclass_fields__)


@dataclass
class Columns:
    """The lower-bounding program of one (packaging, die count) pair, as arrays."""

    packaging_index: int
    n_dies: int  # die count; with n_dies_max above it, the fewest of a range of counts
    shape: ColumnShape
    cost: np.ndarray  # objective coefficient of each column
    constant: float
    cover_rhs: np.ndarray
    carrier_factor: float = 0.0
    n_dies_max: int = 0  # 0: exactly n_dies
    # die count the columns and carrier rows are built for; programs of one packaging
    # built for one span share rows and columns (columns above their count unusable)
    span: int = 0
    like: Columns | None = field(default=None, repr=False)  # lends its constraint matrix
    # (dies per process, process of each candidate): hold the relaxation to a process mix
    mix: tuple[tuple[int, ...], np.ndarray] | None = field(default=None, repr=False)
    # (per candidate) dies of which a selection must hold at least one: the designs of
    # the others were searched before
    require: np.ndarray | None = field(default=None, repr=False)

    def __getattr__(self, name: str):
        # the shared arrays read as the program's own (columns.col_c, columns.cover, ...)
        if name in _SHARED:
            return getattr(self.shape, name)
        raise AttributeError(name)

    @property
    def die_counts(self) -> tuple[int, int]:
        """Fewest and most dies the program allows."""
        return self.n_dies, max(self.n_dies, self.n_dies_max)

    @functools.cached_property
    def linear_program(self) -> _LinearProgram:
        """The relaxation's arrays (built once: bounds and the solve both use them)."""
        return _linear_program(self)

    def release_arrays(self) -> None:
        """Forget the cached relaxation arrays (rebuilt if asked for again)."""
        self.__dict__.pop("linear_program", None)

    @property
    def usable(self) -> np.ndarray:
        """Columns this program may use: no more copies than its most dies."""
        return self.col_k <= self.die_counts[1]

    @property
    def n_targets(self) -> int:
        """Target binaries y (groups above the base level)."""
        return 0 if self.group_level is None else int((self.group_level > 0).sum())

    @property
    def n_cols(self) -> int:
        return int(self.col_c.shape[0])

    def quick_bound(self) -> float:
        """A bound needing no solve: each block instance pays at least the cheapest
        per-instance share of any column covering it (the carrier at its floor)."""
        instances = np.asarray(self.cover.sum(axis=0)).ravel()
        share = np.where(self.usable, self.cost / instances, np.inf)
        per_block = np.full(self.cover.shape[0], np.inf)
        rows, cols = self.cover.nonzero()
        np.minimum.at(per_block, rows, share[cols])
        bound = self.constant + float(self.cover_rhs @ per_block)
        if self.carrier_slopes is not None:
            area_lo = float(self.area.min()) if self.area.size else 0.0
            floor = float((self.carrier_slopes * area_lo + self.carrier_intercepts).max())
            bound += self.carrier_factor * max(floor, 0.0)
        return bound


def build_columns(
    evaluator: Evaluator,
    candidates: CandidateSet,
    n_dies: int,
    n_dies_max: int | None = None,
    span: int | None = None,
    like: Columns | None = None,
    floors: tuple[float, float, float] | None = None,
) -> Columns | None:
    """Arrays of the lower-bounding program for one packaging option and die count.

    With ``n_dies_max`` the program bounds every die count from ``n_dies`` to
    ``n_dies_max`` at once: each coefficient grows with the die count (more bond yield
    loss, bonding and a larger carrier), so the fewest dies' coefficients, the most
    dies' columns and the carrier under-estimator over the widest area range give a
    bound valid for all of them.

    With ``span`` the columns (up to ``span`` copies) and the carrier under-estimator are
    those of ``span`` dies, so that programs of one packaging line up row by row and
    column by column and one program's duals give a bound of another (`dual_bound`).
    ``like``, a program of the same candidates and span, lends its columns, rows and
    constraint matrix, so that only the objective is computed again.

    The coefficients assume the cheapest die, the least test escape and the largest die
    among ``candidates``. When the program must also bound designs of dies not among
    them (candidates generated on demand), ``floors`` gives those three over every die
    that could exist: (least cost per passed die, least -ln(1 - defect level), largest
    die area [mm^2]).
    """
    n_most = n_dies if n_dies_max is None else max(n_dies, n_dies_max)
    span = max(n_most, span or 0)
    problem = evaluator.problem
    g = candidates.packaging_index
    packaging = problem.packaging[g]
    prices = candidates.prices
    count = evaluator.blocks.count
    usable = candidates.max_copies >= 1
    if n_most == 1:
        usable &= np.all(candidates.instances == count[None, :], axis=1)
    cand = np.flatnonzero(usable)
    if cand.size == 0:
        return None
    blocks = evaluator.blocks
    unit_min = (blocks.area_mm2 * blocks.scale).min(axis=0)
    area_lo = float(count @ unit_min)
    if like is not None and like.span == span and like.packaging_index == g:
        shape = like.shape
    else:
        shape = _column_shape(
            evaluator, candidates, cand, span, area_lo, None if floors is None else floors[2]
        )
        if shape is None:
            return None
    col_c, col_k = shape.col_c, shape.col_k
    market = problem.market
    factor = market.volume / (
        packaging.carrier_yield * packaging.package_yield * packaging.bond_yield**n_dies
    )
    fixed = (
        n_dies * packaging.bond_cost_per_die + packaging.package_cost + packaging.final_test_cost
    )
    if shape.carrier_slopes is not None:
        carrier_floor = float((shape.carrier_slopes * area_lo + shape.carrier_intercepts).max())
    else:
        carrier_floor = packaging.carrier_cost
    k_c = prices.cost_per_passed_die[col_c]
    ell = prices.log1m_defect_level[col_c]
    # N >= this column's own dies + the cheapest possible others + fixed + carrier floor
    cheapest = float(prices.cost_per_passed_die[cand].min()) if floors is None else floors[0]
    others = np.maximum(n_dies - col_k, 0)
    n_lo = col_k * k_c + others * cheapest + fixed + carrier_floor
    # Test escapes: with t_i = -k ln(1 - DL) >= 0 per column and t their sum,
    # e^t - 1 = sum_i t_i phi(t) with phi(x) = (e^x - 1) / x increasing, and every
    # selection holding column i has t >= tau_i = t_i + (its other dies' least escape),
    # so N (e^t - 1) >= sum_i n_lo_i t_i phi(tau_i): tight when the other dies escape least.
    t_col = -col_k * ell
    least_escape = float(-prices.log1m_defect_level[cand].max()) if floors is None else floors[1]
    tau = t_col + others * least_escape
    cost = factor * (col_k * k_c + n_lo * t_col * _expm1_ratio(tau)) + prices.nre[col_c]
    constant = factor * fixed + packaging.design_cost
    if shape.carrier_slopes is None:
        constant += factor * packaging.carrier_cost
    return Columns(
        packaging_index=g,
        n_dies=n_dies,
        shape=shape,
        cost=cost,
        constant=constant,
        cover_rhs=count.astype(float),
        carrier_factor=factor,
        n_dies_max=n_most if n_most > n_dies else 0,
        span=span,
        like=like if like is not None and like.shape is shape else None,
    )


def _expm1_ratio(x: np.ndarray) -> np.ndarray:
    """(e^x - 1) / x, equal to 1 at x = 0 (no loss of digits for small x)."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-8
    safe = np.where(small, 1.0, x)
    return np.where(small, 1.0 + 0.5 * x, np.expm1(safe) / safe)


def _column_shape(
    evaluator: Evaluator,
    candidates: CandidateSet,
    cand: np.ndarray,
    span: int,
    area_lo: float,
    largest_die: float | None = None,
) -> ColumnShape | None:
    """Columns, coverage and carrier rows for up to ``span`` copies of candidates ``cand``."""
    problem = evaluator.problem
    packaging = problem.packaging[candidates.packaging_index]
    prices = candidates.prices
    count = evaluator.blocks.count
    reps = np.minimum(candidates.max_copies[cand], span)
    col_c = np.repeat(cand, reps)
    starts = np.cumsum(reps) - reps
    col_k = np.arange(col_c.size) - np.repeat(starts, reps) + 1
    # a column whose copies alone exceed some block's count can never be used
    inst = candidates.instances[col_c]
    fits = np.all(inst * col_k[:, None] <= count[None, :], axis=1)
    col_c, col_k, inst = col_c[fits], col_k[fits], inst[fits]
    slopes = intercepts = None
    area_cap = math.inf
    if packaging.kind == "silicon_interposer":
        area_cap = (
            packaging.interposer_max_area_mm2 - packaging.interposer_extra_area_mm2
        ) / packaging.interposer_area_factor
        largest = float(prices.area_mm2[cand].max()) if largest_die is None else largest_die
        area_hi = min(area_cap, span * largest)
        if area_hi < area_lo:
            return None
        slopes, intercepts = carrier_underestimator(evaluator, packaging, area_lo, area_hi)
    rows, cols = np.nonzero(inst.T)
    cover = sp.csr_matrix(
        ((col_k[cols] * inst[cols, rows]).astype(float), (rows, cols)),
        shape=(evaluator.blocks.n_blocks, col_c.size),
    )
    return ColumnShape(
        col_c=col_c,
        col_k=col_k,
        cover=cover,
        once_groups=col_c,
        area=col_k * prices.area_mm2[col_c] if slopes is not None else None,
        area_cap=area_cap,
        carrier_slopes=slopes,
        carrier_intercepts=intercepts,
        **_target_groups(problem, candidates, col_c),
    )


def _target_groups(problem, candidates: CandidateSet, col_c: np.ndarray) -> dict:
    """Group columns by (process, defect-density target) for processes with a curve."""
    curve_processes = [p for p, proc in enumerate(problem.process) if proc.defect_reduction]
    if not curve_processes:
        return {}
    pairs = []
    density = []
    for p in curve_processes:
        for level, (d, one_time, _) in enumerate(problem.process[p].defect_targets()):
            pairs.append((p, level, one_time))
            density.append(d)
    proc = candidates.process[col_c].astype(np.int64)
    level = candidates.level[col_c].astype(np.int64)
    # (process, level) -> group id, -1 for processes without a curve
    lookup = np.full((len(problem.process), int(max(level.max(initial=0), 0)) + 1), -1)
    for g, (p, lv, _) in enumerate(pairs):
        if lv < lookup.shape[1]:
            lookup[p, lv] = g
    target_group = np.where(level >= 0, lookup[proc, np.maximum(level, 0)], -1)
    return {
        "target_group": target_group,
        "group_process": np.array([p for p, _, _ in pairs], dtype=np.int64),
        "group_level": np.array([lv for _, lv, _ in pairs], dtype=np.int64),
        "group_cost": np.array([c for _, _, c in pairs], dtype=float),
        "group_density": np.array(density, dtype=float),
    }


def target_rows(columns: Columns) -> tuple[sp.csr_matrix, np.ndarray, np.ndarray, np.ndarray]:
    """Rows tying columns to target binaries y (one per (process, target > base)).

    Over variables [w, y]: for a target group, sum k w <= n y; for a process, sum y <= 1;
    for the base level of a process, sum k w + n sum y <= n (one target per process).
    Returns the matrix, row lower and upper bounds, and the y objective costs.
    """
    n = columns.die_counts[1]
    n_cols = columns.n_cols
    y_groups = np.flatnonzero(columns.group_level > 0)
    y_of = {int(g): j for j, g in enumerate(y_groups)}
    data, rows, cols, upper = [], [], [], []
    row = 0
    for g in y_groups:
        members = np.flatnonzero(columns.target_group == g)
        data += columns.col_k[members].astype(float).tolist() + [-float(n)]
        cols += members.tolist() + [n_cols + y_of[int(g)]]
        rows += [row] * (members.size + 1)
        upper.append(0.0)
        row += 1
    for p in np.unique(columns.group_process):
        ys = [y_of[int(g)] for g in y_groups if columns.group_process[g] == p]
        if not ys:
            continue
        data += [1.0] * len(ys)
        cols += [n_cols + j for j in ys]
        rows += [row] * len(ys)
        upper.append(1.0)
        row += 1
        base = [
            g
            for g in range(len(columns.group_level))
            if columns.group_process[g] == p and columns.group_level[g] == 0
        ]
        members = np.flatnonzero(np.isin(columns.target_group, base))
        data += columns.col_k[members].astype(float).tolist() + [float(n)] * len(ys)
        cols += members.tolist() + [n_cols + j for j in ys]
        rows += [row] * (members.size + len(ys))
        upper.append(float(n))
        row += 1
    matrix = sp.csr_matrix((data, (rows, cols)), shape=(row, n_cols + len(y_groups)))
    return matrix, np.full(row, -np.inf), np.array(upper), columns.group_cost[y_groups]


@dataclass(frozen=True)
class RelaxedBound:
    """The linear relaxation: its optimum (a lower bound), reduced costs and row duals."""

    value: float
    reduced_cost: np.ndarray
    at_zero: np.ndarray  # columns at zero in the relaxed optimum
    feasible: bool
    row_dual: np.ndarray | None = None


@dataclass(frozen=True)
class _LinearProgram:
    """min cost x + constant, row_lower <= A x <= row_upper, col_lower <= x <= col_upper."""

    matrix: sp.csc_matrix
    row_lower: np.ndarray
    row_upper: np.ndarray
    col_lower: np.ndarray
    col_upper: np.ndarray
    cost: np.ndarray
    constant: float


def _carrier_top(columns: Columns) -> float:
    """Most the carrier variable needs: its under-estimator at the largest total area.

    A finite upper bound cuts off no selection (the variable sits at the under-estimator,
    which is non-decreasing, and no selection exceeds the area), and it keeps the
    Lagrangian bound finite when the solver leaves a tiny negative reduced cost on it.
    """
    area = columns.area_cap
    if not math.isfinite(area):
        area = (
            float(columns.area.max()) * max(columns.die_counts[1], 1) if columns.area.size else 0.0
        )
    return float(np.max(columns.carrier_intercepts + columns.carrier_slopes * area))


def _linear_program(columns: Columns) -> _LinearProgram:
    """The relaxation's arrays: variables [w, y targets, carrier]; rows cover, count,
    once, targets, area cap and carrier under-estimator."""
    n = columns.n_cols
    interposer = columns.carrier_slopes is not None
    n_y = columns.n_targets
    fewest, most = columns.die_counts
    like = columns.like
    if like is not None and n_y == 0 and columns.require is None:
        # the same rows and columns: only the die-count row, bounds and costs differ
        lent = like.linear_program
        count_row = columns.cover.shape[0]
        row_lower = lent.row_lower.copy()
        row_upper = lent.row_upper.copy()
        row_lower[count_row], row_upper[count_row] = fewest, most
        return _LinearProgram(
            matrix=lent.matrix,
            row_lower=row_lower,
            row_upper=row_upper,
            col_lower=lent.col_lower,
            col_upper=np.r_[
                columns.usable.astype(float), [_carrier_top(columns)] if interposer else []
            ],
            cost=np.r_[columns.cost, [columns.carrier_factor] if interposer else []],
            constant=columns.constant,
        )
    blocks = [columns.cover, sp.csr_matrix(columns.col_k.astype(float)[None, :])]
    lower = [columns.cover_rhs, np.array([fewest], dtype=float)]
    upper = [columns.cover_rhs, np.array([most], dtype=float)]
    groups, inverse, sizes = np.unique(columns.once_groups, return_inverse=True, return_counts=True)
    multi = sizes[inverse] > 1
    if multi.any():
        multi_groups = np.flatnonzero(sizes > 1)
        remap = -np.ones(len(groups), dtype=np.int64)
        remap[multi_groups] = np.arange(len(multi_groups))
        cols = np.flatnonzero(multi)
        once = sp.csr_matrix(
            (np.ones(cols.size), (remap[inverse[cols]], cols)), shape=(len(multi_groups), n)
        )
        blocks.append(once)
        lower.append(np.full(len(multi_groups), -np.inf))
        upper.append(np.ones(len(multi_groups)))
    a = sp.vstack(blocks, format="csr")
    a = sp.hstack([a, sp.csr_matrix((a.shape[0], n_y))], format="csr")
    y_cost = np.zeros(0)
    if n_y:
        t_rows, t_lo, t_hi, y_cost = target_rows(columns)
        a = sp.vstack([a, t_rows], format="csr")
        lower.append(t_lo)
        upper.append(t_hi)
    if interposer:
        a = sp.hstack([a, sp.csr_matrix((a.shape[0], 1))], format="csr")
        area_row = sp.csr_matrix(np.r_[columns.area, np.zeros(n_y), 0.0][None, :])
        pwl = sp.csr_matrix(
            np.column_stack(
                [
                    -columns.carrier_slopes[:, None] * columns.area[None, :],
                    np.zeros((len(columns.carrier_slopes), n_y)),
                    np.ones(len(columns.carrier_slopes)),
                ]
            )
        )
        a = sp.vstack([a, area_row, pwl], format="csr")
        lower += [np.array([-np.inf]), columns.carrier_intercepts]
        upper += [np.array([columns.area_cap]), np.full(len(columns.carrier_slopes), np.inf)]
    n_var = n + n_y + (1 if interposer else 0)
    if columns.require is not None:
        held = columns.require[columns.col_c].astype(float)
        a = sp.vstack([a, sp.csr_matrix(np.r_[held, np.zeros(n_var - n)][None, :])])
        lower.append(np.ones(1))
        upper.append(np.full(1, np.inf))
    if columns.mix is not None:
        counts, process = columns.mix
        on = process[columns.col_c]
        k = columns.col_k.astype(float)
        rows = np.array([np.where(on == p, k, 0.0) for p in range(len(counts))])
        a = sp.vstack([a, sp.csr_matrix(np.c_[rows, np.zeros((len(counts), n_var - n))])])
        lower.append(np.asarray(counts, dtype=float))
        upper.append(np.asarray(counts, dtype=float))
    return _LinearProgram(
        matrix=a.tocsc(),
        row_lower=np.concatenate(lower).astype(float),
        row_upper=np.concatenate(upper).astype(float),
        col_lower=np.zeros(n_var),
        col_upper=np.r_[
            columns.usable.astype(float),
            np.ones(n_y),
            [_carrier_top(columns)] if interposer else [],
        ],
        cost=np.r_[columns.cost, y_cost, [columns.carrier_factor] if interposer else []].astype(
            float
        ),
        constant=columns.constant,
    )


# Programs with more columns than this are relaxed by column generation.
_GENERATE_ABOVE = 20_000
_FIRST_COLUMNS = 4_000
_ADD_COLUMNS = 4_000


def _solver_for(program: _LinearProgram, cols: np.ndarray, scale: float) -> highspy.Highs:
    """A HiGHS instance holding the relaxation restricted to the variables ``cols``, its
    costs divided by ``scale`` (costs near one keep HiGHS's tolerances meaningful)."""
    a = program.matrix[:, cols]
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    lp = highspy.HighsLp()
    lp.num_col_ = a.shape[1]
    lp.num_row_ = a.shape[0]
    lp.col_cost_ = program.cost[cols] / scale
    lp.col_lower_ = program.col_lower[cols]
    lp.col_upper_ = program.col_upper[cols]
    lp.row_lower_ = program.row_lower
    lp.row_upper_ = program.row_upper
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = a.indptr.astype(np.int32)
    lp.a_matrix_.index_ = a.indices.astype(np.int32)
    lp.a_matrix_.value_ = a.data.astype(float)
    h.passModel(lp)
    return h


def _add_columns(h: highspy.Highs, program: _LinearProgram, cols: np.ndarray, scale: float):
    """Append the program's variables ``cols`` to the HiGHS instance."""
    a = program.matrix[:, cols]
    h.addCols(
        int(cols.size),
        program.cost[cols] / scale,
        program.col_lower[cols],
        program.col_upper[cols],
        int(a.nnz),
        a.indptr[:-1].astype(np.int32),
        a.indices.astype(np.int32),
        a.data.astype(float),
    )


def relax(
    columns: Columns,
    row_hint: np.ndarray | None = None,
    stop_above: float = math.inf,
    deadline: float | None = None,
    incomplete: bool = False,
) -> RelaxedBound:
    """Solve the linear relaxation with HiGHS directly on the arrays.

    Large programs are solved by column generation: a restricted program over the most
    promising columns (least reduced cost under ``row_hint``, duals of a program with the
    same rows, else least cost per block instance), then the columns whose reduced cost
    under its duals is negative are added until there are none. Artificial columns of
    prohibitive cost keep the restricted program feasible. The value returned is the
    Lagrangian bound of the duals over all columns (`dual_bound`), valid at any stage, so
    the generation may stop early: once it reaches ``stop_above``, or at ``deadline``
    (a `time.perf_counter` instant).
    """
    n = columns.n_cols
    program = columns.linear_program
    n_var = program.cost.size
    extra = np.arange(n, n_var)  # target and carrier variables stay in every program
    usable = np.flatnonzero(columns.usable)
    # ``incomplete`` columns may not cover every block yet (candidate dies are
    # generated on demand): the artificial columns keep the program feasible and its
    # duals meaningful
    generate = usable.size > _GENERATE_ABOVE or incomplete
    if generate:
        chosen = np.r_[_first_columns(columns, program, usable, row_hint), extra]
    else:
        chosen = np.r_[usable, extra]
    in_program = np.zeros(n_var, dtype=bool)
    in_program[chosen] = True
    scale = max(1.0, float(np.median(np.abs(program.cost[usable])))) if usable.size else 1.0
    h = _solver_for(program, chosen, scale)
    order = chosen.tolist()
    if generate:
        # one artificial per coverage row, the die-count row and any process-mix row
        # (the last rows), dearer than any design
        at = np.arange(columns.cover.shape[0] + 1, dtype=np.int32)
        total = program.row_lower.size
        mixed = 0 if columns.mix is None else len(columns.mix[0])
        if columns.require is not None:
            at = np.r_[at, np.array([total - mixed - 1], dtype=np.int32)]
        if mixed:
            at = np.r_[at, np.arange(total - mixed, total, dtype=np.int32)]
        rows = at.size
        big = 100.0 * float(np.abs(program.cost).max() + 1.0) / scale
        h.addCols(
            rows,
            np.full(rows, big),
            np.zeros(rows),
            np.full(rows, np.inf),
            rows,
            np.arange(rows, dtype=np.int32),
            at,
            np.ones(rows),
        )
        order += [-1] * rows
    found: tuple | None = None
    while True:
        if deadline is not None:
            h.setOptionValue("time_limit", max(deadline - time.perf_counter(), 0.01))
        h.run()
        status = h.getModelStatus()
        if status != highspy.HighsModelStatus.kOptimal:
            if status == highspy.HighsModelStatus.kTimeLimit:
                break
            if status == highspy.HighsModelStatus.kInfeasible and not generate:
                # the whole program is present: infeasible is a proof
                return RelaxedBound(math.inf, np.zeros(n), np.ones(n, dtype=bool), False)
            # any other outcome proves nothing: keep the bound from the last optimal
            # restricted program, or none, so that the program stays open
            break
        solution = h.getSolution()
        row_dual = np.asarray(solution.row_dual, dtype=float) * scale
        reduced_all = program.cost - program.matrix.T @ row_dual
        value = _lagrangian(program, row_dual, reduced_all)
        col_value = np.asarray(solution.col_value)
        found = (value, row_dual, reduced_all, col_value)
        if value >= stop_above or (deadline is not None and time.perf_counter() >= deadline):
            break
        pricing = np.flatnonzero(~in_program[:n] & columns.usable & (reduced_all[:n] < 0))
        if pricing.size == 0:
            artificial = col_value[np.asarray(order) < 0]
            if artificial.size == 0 or artificial.max() <= 1e-9:
                break
            missing = usable[~in_program[usable]]
            if missing.size == 0:  # every column present and still no cover: infeasible
                if incomplete:
                    break  # unless more columns are to come: their search needs the duals
                return RelaxedBound(math.inf, np.zeros(n), np.ones(n, dtype=bool), False)
            pricing = missing
        best = pricing[_cheapest(reduced_all[pricing], _ADD_COLUMNS)]
        _add_columns(h, program, best, scale)
        in_program[best] = True
        order += best.tolist()
    if found is None:  # out of time before a first solution: no bound yet
        return RelaxedBound(-math.inf, np.zeros(n), np.ones(n, dtype=bool), True)
    value, row_dual, reduced_all, col_value = found
    x = np.zeros(n_var)
    real = np.asarray(order[: col_value.size]) >= 0
    x[np.asarray(order[: col_value.size])[real]] = col_value[real]
    return RelaxedBound(float(value), reduced_all[:n], x[:n] < 1e-9, True, row_dual)


def _cheapest(values: np.ndarray, k: int) -> np.ndarray:
    """Indices of the ``k`` smallest ``values``, in increasing order."""
    if k < values.size:
        part = np.argpartition(values, k)[:k]
        return part[np.argsort(values[part], kind="stable")]
    return np.argsort(values, kind="stable")


def _by_share(columns: Columns, cols: np.ndarray, k: int) -> np.ndarray:
    """The ``k`` of ``cols`` with the least cost per block instance covered."""
    instances = np.asarray(columns.cover[:, cols].sum(axis=0)).ravel()
    return cols[_cheapest(columns.cost[cols] / instances, k)]


def _first_columns(
    columns: Columns, program: _LinearProgram, usable: np.ndarray, row_hint: np.ndarray | None
) -> np.ndarray:
    """Columns to start column generation with."""
    if row_hint is not None and row_hint.shape == program.row_lower.shape:
        reduced = program.cost[usable] - program.matrix[:, usable].T @ row_hint
        first = usable[_cheapest(reduced, _FIRST_COLUMNS)]
    else:
        first = _by_share(columns, usable, _FIRST_COLUMNS)
    # and for every block the columns that cover it most cheaply, among all columns and
    # among those large enough that the die-count limit can be met with them, so that
    # the restricted program is feasible from the start
    cover = columns.cover[:, usable].tocsr()
    held = np.asarray(cover.sum(axis=0)).ravel()
    share = columns.cost[usable] / held
    large_enough = held >= columns.cover_rhs.sum() / columns.die_counts[1] - 1e-9
    per_block = []
    for b in range(cover.shape[0]):
        idx = cover.indices[cover.indptr[b] : cover.indptr[b + 1]]
        per_block.append(idx[_cheapest(share[idx], 50)])
        large = idx[large_enough[idx]]
        per_block.append(large[_cheapest(share[large], 50)])
    return np.union1d(first, usable[np.concatenate(per_block)])


def _lagrangian(program: _LinearProgram, row_dual: np.ndarray, reduced: np.ndarray) -> float:
    """Lagrangian bound of ``program`` for multipliers ``row_dual`` whose reduced costs
    ``c - A' u`` are ``reduced`` (see `dual_bound`)."""
    u = row_dual
    side = np.where(u > 0, program.row_lower, np.where(u < 0, program.row_upper, 0.0))
    unbounded = ~np.isfinite(side)
    if unbounded.any():
        u = np.where(unbounded, 0.0, u)
        side = np.where(unbounded, 0.0, side)
        reduced = program.cost - program.matrix.T @ u
    if np.any((reduced < 0) & ~np.isfinite(program.col_upper)):
        return -math.inf
    at_upper = reduced < 0
    total = float(np.sum(reduced[at_upper] * program.col_upper[at_upper]))
    total += float(np.sum(reduced[~at_upper] * program.col_lower[~at_upper]))
    return program.constant + float(u @ side) + total


def dual_bound(columns: Columns, row_dual: np.ndarray) -> float:
    """Lagrangian lower bound of the program from any row multipliers, without a solve.

    For multipliers u the bound is ``constant + sum_i u_i b_i(u) + sum_j min over
    [l_j, u_j] of (c - A' u)_j x_j`` with ``b_i`` the row's lower side where ``u_i > 0``
    and its upper side where ``u_i < 0``; it is valid for every u (weak duality), and the
    duals of a program built for the same span (same rows and columns) make it tight
    when the two programs are close.
    """
    program = columns.linear_program
    u = np.asarray(row_dual, dtype=float)
    if u.shape != program.row_lower.shape:
        return -math.inf
    return _lagrangian(program, u, program.cost - program.matrix.T @ u)


@dataclass
class SubProblem:
    """The integer program of one (packaging, die count) pair over kept columns."""

    columns: Columns
    keep: np.ndarray  # column indices of the program's first variables
    solver: highspy.Highs
    bound: float = -math.inf  # lower bound on total cost of selections not yet cut off
    exhausted: bool = False
    failed: bool = False  # the solver gave up on it: its bound stays open, unproven
    enumeration_tried: bool = False  # whether pricing all its designs was attempted
    scale: float = 1.0  # the objective is the cost divided by this
    current: Selection | None = None
    active: np.ndarray | None = None
    rounds: int = 0
    seconds: float = 0.0
    cuts: int = 0
    stalls: int = 0  # rounds that ran out of time without a design
    cutoff: float = math.inf  # money: selections bounded above this are not looked for
    log: list[str] = field(default_factory=list)

    @property
    def packaging_index(self) -> int:
        return self.columns.packaging_index

    @property
    def n_dies(self) -> int:
        return self.columns.n_dies

    def set_gap(self, rel_gap: float) -> None:
        """Stop at this relative gap (a scout needs an incumbent, not a proof)."""
        self.solver.setOptionValue("mip_rel_gap", float(rel_gap))

    def set_cutoff(self, total_cost: float) -> None:
        """Look only for selections whose bound is at most ``total_cost`` (money).

        A program with none left there is closed for the search: its selections cannot
        beat the designs that set the cut-off. HiGHS prunes every node above it, which
        makes the proving rounds far shorter than a search for the plain optimum.
        """
        self.cutoff = float(total_cost)
        self.solver.setOptionValue(
            "objective_bound", self.cutoff / self.scale if math.isfinite(self.cutoff) else math.inf
        )


def program_rows(
    columns: Columns,
    keep: np.ndarray,
    mix: tuple[int, ...] | None = None,
    process: np.ndarray | None = None,
) -> tuple[sp.csr_matrix, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, int]:
    """The integer program over the columns ``keep``, as arrays.

    Variables: one binary w per kept column, one binary y per defect target above the
    base level, and (interposers) the carrier cost c. Rows: every block instance covered
    exactly once, the die count, the dies per process of ``mix``, at most one column per
    candidate die (copies are columns), the target rows, the interposer area cap and the
    carrier under-estimator c >= slope x area + intercept. Returns the matrix, row
    bounds, objective (cost, in money), integrality and column upper bounds, and the
    number of w variables. :mod:`optimizer.solver.formulation` states the same program
    in Pyomo, as a readable check.
    """
    n_w = keep.size
    n_y = columns.n_targets
    interposer = columns.carrier_slopes is not None
    n_var = n_w + n_y + (1 if interposer else 0)
    col_k = columns.col_k[keep].astype(float)
    blocks: list[sp.csr_matrix] = []
    lower: list[np.ndarray] = []
    upper: list[np.ndarray] = []

    def add(rows: sp.spmatrix, lo, hi) -> None:
        rows = sp.csr_matrix(rows)
        if rows.shape[1] < n_var:
            rows = sp.hstack([rows, sp.csr_matrix((rows.shape[0], n_var - rows.shape[1]))])
        blocks.append(sp.csr_matrix(rows))
        lower.append(np.broadcast_to(np.asarray(lo, dtype=float), (rows.shape[0],)))
        upper.append(np.broadcast_to(np.asarray(hi, dtype=float), (rows.shape[0],)))

    add(columns.cover[:, keep], columns.cover_rhs, columns.cover_rhs)
    add(col_k[None, :], columns.n_dies, columns.n_dies)
    if mix is not None:
        on = process[columns.col_c[keep]]
        for p, dies in enumerate(mix):
            # a process without a kept column gives an empty row: infeasible if dies > 0
            add(np.where(on == p, col_k, 0.0)[None, :], dies, dies)
    if columns.require is not None:
        add(columns.require[columns.col_c[keep]].astype(float)[None, :], 1.0, np.inf)
    groups = columns.once_groups[keep]
    _, inverse, sizes = np.unique(groups, return_inverse=True, return_counts=True)
    multi = np.flatnonzero(sizes[inverse] > 1)
    if multi.size:
        _, row_of = np.unique(inverse[multi], return_inverse=True)
        once = sp.csr_matrix(
            (np.ones(multi.size), (row_of, multi)), shape=(int(row_of.max()) + 1, n_w)
        )
        add(once, -np.inf, 1.0)
    y_cost = np.zeros(0)
    if n_y:
        t_rows, _, t_hi, y_cost = target_rows(columns)
        t_rows = t_rows.tocsc()
        picked = sp.hstack([t_rows[:, keep], t_rows[:, columns.n_cols :]], format="csr")
        add(picked, -np.inf, t_hi)
    if interposer:
        area = columns.area[keep]
        add(np.r_[area, np.zeros(n_var - n_w)][None, :], -np.inf, columns.area_cap)
        slopes, intercepts = columns.carrier_slopes, columns.carrier_intercepts
        pwl = np.zeros((slopes.size, n_var))
        pwl[:, :n_w] = -slopes[:, None] * area[None, :]
        pwl[:, -1] = 1.0
        add(pwl, intercepts, np.inf)
    matrix = sp.vstack(blocks, format="csr")
    cost = np.r_[columns.cost[keep], y_cost, [columns.carrier_factor] if interposer else []].astype(
        float
    )
    integral = np.r_[np.ones(n_w + n_y, dtype=bool), np.zeros(n_var - n_w - n_y, dtype=bool)]
    col_upper = np.r_[np.ones(n_w + n_y), [_carrier_top(columns)] if interposer else []]
    return (
        matrix,
        np.concatenate(lower),
        np.concatenate(upper),
        cost,
        integral,
        col_upper,
        n_w,
    )


def kept_columns(columns: Columns, keep: np.ndarray) -> np.ndarray:
    """The columns of ``keep`` an integer program of ``columns`` may use."""
    if columns.n_dies_max:
        raise ValueError("an integer program needs one die count, not a range")
    keep = np.asarray(keep, dtype=np.int64)
    return keep[columns.usable[keep]]


def build_subproblem(
    columns: Columns,
    keep: np.ndarray,
    mix: tuple[int, ...] | None = None,
    process: np.ndarray | None = None,
) -> SubProblem:
    """The integer program over the columns ``keep`` (indices into ``columns``), handed
    to HiGHS directly (rebuilding it through a modelling layer cost 0.4 s a program).

    With ``mix`` (dies per process, indexed like the problem's processes) and
    ``process`` (the process of each candidate die) it holds only selections with
    exactly that many dies on each process.
    """
    keep = kept_columns(columns, keep)
    matrix, row_lo, row_hi, cost, integral, col_hi, _ = program_rows(columns, keep, mix, process)
    # costs near one keep HiGHS's tolerances meaningful (raw costs reach 1e9)
    scale = max(1.0, float(np.median(np.abs(columns.cost[keep])))) if keep.size else 1.0
    a = matrix.tocsc()
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    lp = highspy.HighsLp()
    lp.num_col_ = a.shape[1]
    lp.num_row_ = a.shape[0]
    lp.col_cost_ = cost / scale
    lp.offset_ = columns.constant / scale
    lp.col_lower_ = np.zeros(a.shape[1])
    lp.col_upper_ = col_hi
    lp.row_lower_ = row_lo
    lp.row_upper_ = row_hi
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = a.indptr.astype(np.int32)
    lp.a_matrix_.index_ = a.indices.astype(np.int32)
    lp.a_matrix_.value_ = a.data.astype(float)
    lp.integrality_ = [
        highspy.HighsVarType.kInteger if i else highspy.HighsVarType.kContinuous for i in integral
    ]
    h.passModel(lp)
    h.setOptionValue("mip_rel_gap", 1e-10)
    h.setOptionValue("mip_abs_gap", 0.0)
    # tight feasibility tolerances: the search lowers the bound read back by SOLVER_RTOL,
    # which must cover the solver's own error
    for name in (
        "mip_feasibility_tolerance",
        "primal_feasibility_tolerance",
        "dual_feasibility_tolerance",
    ):
        h.setOptionValue(name, 1e-9)
    return SubProblem(columns, keep, h, scale=scale)


# programs with more columns than this are solved without presolve under a time limit
PRESOLVE_MAX_COLUMNS = 50_000

_ERRORS = {
    highspy.HighsModelStatus.kSolveError,
    highspy.HighsModelStatus.kPresolveError,
    highspy.HighsModelStatus.kPostsolveError,
    highspy.HighsModelStatus.kModelError,
}


def run_mip(h: highspy.Highs) -> highspy.HighsModelStatus:
    """Run HiGHS on its integer program; the model status (a seam for tests)."""
    h.run()
    return h.getModelStatus()


def solve_round(sub: SubProblem, time_limit: float | None = None) -> None:
    """Solve the current program; set its bound and the selection it found."""
    start = time.perf_counter()
    h = sub.solver
    h.setOptionValue("time_limit", max(time_limit, 0.01) if time_limit is not None else math.inf)
    if time_limit is not None and sub.keep.size > PRESOLVE_MAX_COLUMNS:
        # HiGHS's presolve of a large program does not stop at the time limit (a
        # 65,000-column program ran 60 s past a 1 s limit): under a limit, skip it
        h.setOptionValue("presolve", "off")
    status = run_mip(h)
    if status in _ERRORS:
        # HiGHS's presolve can fail on a program that cuts have made infeasible; solve
        # this program without it from now on
        h.setOptionValue("presolve", "off")
        status = run_mip(h)
    sub.rounds += 1
    sub.seconds += time.perf_counter() - start
    if status == highspy.HighsModelStatus.kInfeasible:
        # with a cut-off: none left at or below it (its bound is the cut-off)
        sub.exhausted = True
        sub.bound = max(sub.bound, sub.cutoff)
        sub.current = None
        sub.log.append(
            f"round {sub.rounds}: no selection left"
            + ("" if math.isinf(sub.cutoff) else f" at or below {sub.cutoff:.8g}")
        )
        return
    info = h.getInfo()
    if status not in _ERRORS:
        bound = info.mip_dual_bound
        if bound is not None and math.isfinite(bound):
            # trusted only to the solver's precision (see SOLVER_RTOL)
            value = float(bound) * sub.scale
            # nodes pruned by the cut-off hold only selections above it
            value = min(value - SOLVER_RTOL * abs(value), sub.cutoff)
            sub.bound = max(sub.bound, value)
    feasible = status not in _ERRORS and info.primal_solution_status == 2
    if not feasible:
        sub.current = None
        if status != highspy.HighsModelStatus.kTimeLimit:
            # the solver failed: stop working on this program, its bound stays open
            sub.failed = sub.exhausted = True
        else:
            sub.stalls += 1
        sub.log.append(f"round {sub.rounds}: no selection found ({status.name})")
        return
    values = np.asarray(h.getSolution().col_value)[: sub.keep.size]
    active = np.flatnonzero(values > 0.5)
    cols = sub.keep[active]
    sub.current = Selection.of(
        sub.packaging_index, zip(sub.columns.col_c[cols], sub.columns.col_k[cols], strict=True)
    )
    sub.active = active
    sub.log.append(
        f"round {sub.rounds}: bound {sub.bound:.8g}, selection objective "
        f"{info.objective_function_value * sub.scale:.8g} ({status.name})"
    )


def cut_current(sub: SubProblem) -> None:
    """Exclude the current selection from the program (a single no-good inequality)."""
    active = np.asarray(sub.active, dtype=np.int32)
    sub.solver.addRow(-np.inf, float(active.size - 1), active.size, active, np.ones(active.size))
    sub.cuts += 1
    sub.current = None  # the bound stays valid: a cut can only raise the optimum
