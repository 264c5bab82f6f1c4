"""Product life: a plan of periods, one ordinary problem per period, and present value.

A problem file may hold one optional ``[life]`` table. Without it nothing changes. With
it, the product is sold over a list of periods (years or quarters); each period has its
own volume and, optionally, its own unit price, process defect densities and wafer
costs, and packaging costs. The file's ordinary values ([market], [[process]],
[[packaging]]) are the values at the start of the life (t = 0): D_0, the base wafer
cost, the base unit price. Example (invented numbers, for problems/server_processor.toml)::

    [life]
    period = "quarter"              # "year" or "quarter"
    volumes = [20000, 60000, 90000, 90000, 70000, 40000]   # good units sold per period
    discount_rate = 0.09            # per year, 0 to 1; 0 means no discounting
    one_time_period = 1             # NRE and one-time yield spend paid at this period's start
    read_curves_at = "middle"       # where in a period curves are read: start, middle, end
    targets = "once"                # defect-density targets bought once, or "per_period"

    [life.market]
    unit_price = { form = "erosion", per_year = 0.10 }

    [life.process.leading]
    defect_density = { form = "learn_by_time", mature = "0.06 /cm^2", time_constant = "18 month" }
    wafer_cost = [17000.0, 17000.0, 16500.0, 16500.0, 16000.0, 16000.0]

    [life.process.legacy.defect_density]   # a curve may also be written as a table
    form = "learn_by_wafers"
    mature = "0.04 /cm^2"
    wafer_scale = 40000             # wafers
    wafer_starts = [9000, 9000, 10000, 10000, 10000, 10000]   # the fab's, per period

    [life.packaging.organic_multichip]
    package_cost = { form = "erosion", per_year = 0.04 }

What may vary: ``life.market.unit_price``; ``life.process.NAME.defect_density`` and
``.wafer_cost``; ``life.packaging.NAME.bond_cost_per_die``, ``.carrier_cost``,
``.package_cost`` and ``.final_test_cost``. Each is either a list of one value per
period (written like the field itself: ``"0.08 /cm^2"`` strings for densities, plain
numbers for money) or a curve table with a ``form``:

``per_period``       ``values = [...]``, one per period (a bare list is the same).
``erosion``          x(t) = x_0 (1 - per_year)^t; ``per_year`` from -1 to below 1 (a
                     negative rate is a yearly rise).
``learn_by_time``    x(t) = mature + (x_0 - mature) exp(-t / time_constant);
                     ``time_constant`` a time with its unit ("1.5 year", "18 month").
``learn_by_wafers``  x = mature + (x_0 - mature) exp(-W / wafer_scale), W the wafers the
                     fab has started: ``started_before`` (default 0) plus the per-period
                     ``wafer_starts`` list up to the reading time.

``mature`` is written like the field and lies between the field's lower bound and x_0
(a learning curve falls). t is in years from the start of the first period, read at each
period's start, middle (default) or end (``read_curves_at``); W is read at the same
point (half of the period's own wafer starts at the middle).

Conventions:

* Periods are back to back from t = 0: period k (1-based) spans [(k-1) L, k L] years,
  L = 1 (year) or 0.25 (quarter); labels are ``Y1, Y2, ...`` or ``Q1, Q2, ...``.
* Cash flows are discounted at the period's **end** (end-of-period discounting, common
  practice): factor (1 + r)^-(k L), r the yearly rate.
* NRE and one-time yield spend are paid once, at the **start** of ``one_time_period``
  (default 1, i.e. t = 0): factor (1 + r)^-((p-1) L).
* Salvage-bin demand (stated for the whole life) is shared out by the period's share of
  the life's volume; salvage-bin prices follow the unit price's ratio to its base.
* A bought defect-density reduction ([[process]] defect_reduction, design
  defect_targets) is a ratio off the period's density: its floor, table points and
  targets are scaled by D_k / D_0, so the one-time cost and per-wafer adder of a target
  are the same in every period and one choice holds for the whole life.
* ``targets = "once"`` (default): a design's target level is chosen once, its one-time
  cost paid with the NRE. ``targets = "per_period"``: each period buys its own level (a
  yield programme run period by period): the level's one-time cost is spent in every
  period that uses it, as part of that period's cash flow (discounted with it), and the
  one-time payment holds the NRE only. The solver then picks each period's best level.
* ``market.volume`` of the file is not used by the periods (``volumes`` replaces it).

API:

``life_plan(problem_data, source) -> LifePlan | None``
    Read and validate the [life] table of a decoded file (None without one). The rest of
    the file is validated as an ordinary problem first (``without_life(data)``), and
    every period's problem is built and validated here, so a plan that loads is usable.
``load_life(path) -> (Problem, LifePlan | None)``
    Read a file: the base problem (checked as ``load_problem`` does) and its plan.
``periods(problem, plan) -> list[Period]``
    One :class:`Period` per period: ``label``, ``start_years``, ``end_years``,
    ``curve_years``, ``volume``, ``share``, ``discount`` and ``problem``, an ordinary
    :class:`~optimizer.problem.Problem` with that period's numbers. ``problem`` must be
    the base problem the plan was read with.
``discounts(plan)``, ``one_time_discount(plan)``
    The end-of-period factors, and the factor of the one-time payments.
``npv(cash_flows, discounts)``, ``annuity_factor(rate, n, period_years)``,
``payback_period(cash_flows, discounts, one_time, one_time_discount, one_time_index)``,
``plan_npv(plan, cash_flows, one_time)``, ``plan_payback(plan, cash_flows, one_time)``
    Present-value arithmetic (see each function).
``erosion``, ``learn_by_time``, ``learn_by_wafers``
    The curve formulas, as plain functions.

Cash flows for the present value: a period's cash flow is its *operating* profit,
revenue + salvage revenue - volume x manufacturing cost per good unit. Each period's
problem still carries the file's NRE and one-time costs (so it equals the base problem
where nothing varies); the evaluator's profit of a period problem therefore needs its
NRE and improvement spend added back, and those are charged once, with
``one_time_discount``.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from optimizer.errors import ProblemError
from optimizer.problem import (
    MAX_DEFECT_DENSITY_PER_CM2,
    MAX_MONEY,
    MAX_VOLUME,
    MIN_PRICE,
    MIN_VOLUME,
    Problem,
    _label,
    _number,
    _one_of,
    _quantity,
    _range_text,
    check_feasible,
    parse_problem,
    read_problem_data,
)
from optimizer.units import DEFECT_DENSITY, QuantityKind, shorten

PERIOD_YEARS = {"year": 1.0, "quarter": 0.25}
PERIOD_LETTER = {"year": "Y", "quarter": "Q"}
READ_POINTS = {"start": 0.0, "middle": 0.5, "end": 1.0}  # fraction of the period
FORMS = ("per_period", "erosion", "learn_by_time", "learn_by_wafers")
# keys each form takes besides ``form``: (required, optional)
FORM_KEYS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "per_period": (("values",), ()),
    "erosion": (("per_year",), ()),
    "learn_by_time": (("mature", "time_constant"), ()),
    "learn_by_wafers": (("mature", "wafer_scale", "wafer_starts"), ("started_before",)),
}
LIFE_KEYS = (
    "period",
    "volumes",
    "discount_rate",
    "one_time_period",
    "read_curves_at",
    "targets",
    "market",
    "process",
    "packaging",
)
TARGET_MODES = ("once", "per_period")
# 50 years of quarters; every period is an ordinary problem, validated at load time
MAX_PERIODS = 200
MAX_DISCOUNT_RATE = 1.0  # per year
MAX_TIME_CONSTANT_YEARS = 1000.0
MAX_WAFERS = 1e12
TIME = QuantityKind("time", "year", "year", "18 month")


# ---------------------------------------------------------------- curve formulas
def erosion(base: float, per_year: float, t_years: float) -> float:
    """x(t) = x_0 (1 - e)^t: a constant yearly erosion (a rise when e < 0)."""
    return base * (1.0 - per_year) ** t_years


def learn_by_time(base: float, mature: float, time_constant_years: float, t_years: float) -> float:
    """D(t) = D_mature + (D_0 - D_mature) exp(-t / tau)."""
    return mature + (base - mature) * math.exp(-t_years / time_constant_years)


def learn_by_wafers(base: float, mature: float, wafer_scale: float, wafers: float) -> float:
    """D(W) = D_mature + (D_0 - D_mature) exp(-W / W_scale), W cumulative wafer starts."""
    return mature + (base - mature) * math.exp(-wafers / wafer_scale)


# ---------------------------------------------------------------- present value
def discount_factor(rate: float, years: float) -> float:
    """(1 + r)^-t for a yearly rate r and a time t in years."""
    if not rate > -1.0:
        raise ValueError(f"a yearly rate must be above -1 (got {rate})")
    return (1.0 + rate) ** -years


def npv(cash_flows: Sequence[float], discounts: Sequence[float]) -> float:
    """Net present value: the sum of each cash flow times its discount factor."""
    if len(cash_flows) != len(discounts):
        raise ValueError(
            f"{len(cash_flows)} cash flows but {len(discounts)} discount factors; pair them up"
        )
    return math.fsum(c * d for c, d in zip(cash_flows, discounts, strict=True))


def annuity_factor(rate: float, n: int, period_years: float = 1.0) -> float:
    """Present value of 1 paid at the end of each of ``n`` periods of ``period_years``.

    Closed form (end-of-period, ordinary annuity): (1 - (1 + i)^-n) / i with the
    per-period rate i = (1 + r)^L - 1 for the yearly rate r; n when i = 0.
    """
    if n < 0 or int(n) != n:
        raise ValueError(f"n must be a whole number of periods, 0 or more (got {n})")
    if not period_years > 0:
        raise ValueError(f"period_years must be above 0 (got {period_years})")
    if not rate > -1.0:
        raise ValueError(f"a yearly rate must be above -1 (got {rate})")
    i = (1.0 + rate) ** period_years - 1.0
    if i == 0.0:
        return float(n)
    return (1.0 - (1.0 + i) ** -n) / i


def payback_period(
    cash_flows: Sequence[float],
    discounts: Sequence[float],
    one_time: float = 0.0,
    one_time_discount: float = 1.0,
    one_time_index: int = 0,
) -> int | None:
    """Index (from 0) of the first period whose cumulative discounted cash flow, the
    one-time payment included, is non-negative; None if it never is.

    The one-time payment (a positive amount, discounted by ``one_time_discount``) falls at
    the start of period ``one_time_index``; periods before it have nothing to pay back
    and are not candidates, though their cash counts towards the sum.
    """
    if len(cash_flows) != len(discounts):
        raise ValueError(
            f"{len(cash_flows)} cash flows but {len(discounts)} discount factors; pair them up"
        )
    if not 0 <= one_time_index < max(len(cash_flows), 1):
        raise ValueError(f"one_time_index {one_time_index} is not a period")
    terms: list[float] = []
    for k, (c, d) in enumerate(zip(cash_flows, discounts, strict=True)):
        if k == one_time_index:
            terms.append(-one_time * one_time_discount)
        terms.append(c * d)
        if k >= one_time_index and math.fsum(terms) >= 0.0:
            return k
    return None


# ---------------------------------------------------------------- the plan
@dataclass(frozen=True)
class _Spec:
    """A field a plan may vary: its attribute, how its file value is read, its range."""

    attribute: str
    read: Callable[[object], float]  # file value -> base units; ValueError if bad
    lo: float
    hi: float
    low_open: bool
    unit: str  # base unit as written ("" for money)

    def encode(self, value: float) -> object:
        """The value as a file writes it (exact: repr round-trips a float)."""
        return f"{float(value)!r} {self.unit}" if self.unit else float(value)

    def in_range(self, value: float) -> bool:
        low_ok = value > self.lo if self.low_open else value >= self.lo
        return low_ok and value <= self.hi and math.isfinite(value)


def _money(attribute: str, lo: float = 0.0, low_open: bool = False) -> _Spec:
    return _Spec(
        attribute, _number(lo, MAX_MONEY, low_open=low_open).func, lo, MAX_MONEY, low_open, ""
    )


_DENSITY = _Spec(
    "defect_density_per_cm2",
    _quantity(DEFECT_DENSITY, 0, MAX_DEFECT_DENSITY_PER_CM2).func,
    0.0,
    MAX_DEFECT_DENSITY_PER_CM2,
    False,
    "/cm^2",
)
SPECS: dict[str, dict[str, _Spec]] = {
    "market": {"unit_price": _money("unit_price", MIN_PRICE)},
    "process": {"defect_density": _DENSITY, "wafer_cost": _money("wafer_cost", low_open=True)},
    "packaging": {
        key: _money(key)
        for key in ("bond_cost_per_die", "carrier_cost", "package_cost", "final_test_cost")
    },
}


@dataclass(frozen=True)
class Curve:
    """How one value moves over the life (see the module docstring for the forms)."""

    form: str
    values: tuple[float, ...] = ()  # per_period
    per_year: float = 0.0  # erosion
    mature: float = 0.0  # learn_by_time, learn_by_wafers
    time_constant_years: float = 0.0  # learn_by_time
    wafer_scale: float = 0.0  # learn_by_wafers
    wafer_starts: tuple[float, ...] = ()
    started_before: float = 0.0

    def at(self, base: float, times: Sequence[float], wafers: Sequence[float]) -> list[float]:
        """The value in each period, given its base value, the reading times in years
        and (for learn_by_wafers) the cumulative wafer starts at those times."""
        if self.form == "per_period":
            return list(self.values)
        if self.form == "erosion":
            return [erosion(base, self.per_year, t) for t in times]
        if self.form == "learn_by_time":
            return [learn_by_time(base, self.mature, self.time_constant_years, t) for t in times]
        return [learn_by_wafers(base, self.mature, self.wafer_scale, w) for w in wafers]

    def cumulative_wafers(self, fraction: float) -> list[float]:
        """Wafers started by the reading point of each period (learn_by_wafers)."""
        out, before = [], self.started_before
        for w in self.wafer_starts:
            out.append(before + fraction * w)
            before += w
        return out


@dataclass(frozen=True)
class Track:
    """One varied field: where it is, its curve and its value in each period."""

    path: str  # e.g. "process.leading.defect_density" (as under [life])
    section: str  # market, process or packaging
    item: str | None  # the process or packaging name
    key: str  # the field's key in the file
    curve: Curve
    values: tuple[float, ...]


@dataclass(frozen=True)
class LifePlan:
    """A validated [life] table with every period's problem built."""

    source: str
    period: str  # "year" or "quarter"
    volumes: tuple[float, ...]
    discount_rate: float  # per year
    one_time_period: int  # 1-based
    read_curves_at: str
    tracks: tuple[Track, ...]
    targets: str  # "once" or "per_period": how defect-density targets are bought
    base: Problem = field(repr=False, compare=False)
    problems: tuple[Problem, ...] = field(repr=False, compare=False)

    @property
    def n(self) -> int:
        return len(self.volumes)

    @property
    def period_years(self) -> float:
        return PERIOD_YEARS[self.period]

    @property
    def labels(self) -> list[str]:
        return [f"{PERIOD_LETTER[self.period]}{k + 1}" for k in range(self.n)]

    @property
    def life_years(self) -> float:
        return self.n * self.period_years

    def curve_years(self) -> list[float]:
        """Where each period's curves are read, in years from the start."""
        f = READ_POINTS[self.read_curves_at]
        return [(k + f) * self.period_years for k in range(self.n)]

    def track(self, path: str) -> Track:
        for t in self.tracks:
            if t.path == path:
                return t
        raise KeyError(path)


@dataclass(frozen=True)
class Period:
    """One period of the life and its ordinary problem."""

    index: int  # from 0
    label: str  # "Y1", "Q3", ...
    start_years: float
    end_years: float
    curve_years: float  # where its curves were read
    volume: float
    share: float  # of the life's volume (salvage demand is shared by it)
    discount: float  # end-of-period factor for its cash flow
    problem: Problem


def discounts(plan: LifePlan) -> list[float]:
    """End-of-period discount factors, (1 + r)^-(k L) for k = 1..n."""
    years = plan.period_years
    return [discount_factor(plan.discount_rate, (k + 1) * years) for k in range(plan.n)]


def one_time_discount(plan: LifePlan) -> float:
    """Factor for NRE and one-time yield spend, paid at the start of one_time_period."""
    return discount_factor(plan.discount_rate, (plan.one_time_period - 1) * plan.period_years)


def plan_npv(plan: LifePlan, cash_flows: Sequence[float], one_time: float) -> float:
    """NPV of a design over the life: its period cash flows (operating profit; see the
    module docstring) discounted at period ends, less its one-time costs."""
    return npv(cash_flows, discounts(plan)) - one_time * one_time_discount(plan)


def plan_payback(plan: LifePlan, cash_flows: Sequence[float], one_time: float) -> int | None:
    """:func:`payback_period` with the plan's discounting and one-time timing."""
    return payback_period(
        cash_flows, discounts(plan), one_time, one_time_discount(plan), plan.one_time_period - 1
    )


def periods(problem: Problem, plan: LifePlan) -> list[Period]:
    """The plan's periods, each with its ordinary problem.

    ``problem`` must be the base problem the plan was read with (the file without
    [life]); to vary the base, read the plan again from the changed data.
    """
    if problem != plan.base:
        raise ValueError(
            "periods() needs the problem the plan was read with; call life_plan on the "
            "data this problem came from"
        )
    years = plan.period_years
    total = math.fsum(plan.volumes)
    factors = discounts(plan)
    read_at = plan.curve_years()
    return [
        Period(
            index=k,
            label=label,
            start_years=k * years,
            end_years=(k + 1) * years,
            curve_years=read_at[k],
            volume=plan.volumes[k],
            share=plan.volumes[k] / total,
            discount=factors[k],
            problem=plan.problems[k],
        )
        for k, label in enumerate(plan.labels)
    ]


# ---------------------------------------------------------------- reading
def has_life(data: object) -> bool:
    return isinstance(data, dict) and "life" in data


def without_life(data: dict) -> dict:
    """The decoded file without its [life] table: an ordinary problem document."""
    return {k: v for k, v in data.items() if k != "life"}


def load_life(path: str | Path) -> tuple[Problem, LifePlan | None]:
    """Read a problem file: its base problem (checked as load_problem does) and plan."""
    data, source = read_problem_data(path)
    plan = life_plan(data, source)
    problem = plan.base if plan is not None else parse_problem(data, source)
    check_feasible(problem, source)
    return problem, plan


def life_plan(problem_data: dict, source: str = "<problem>") -> LifePlan | None:
    """Read and validate the [life] table of a decoded problem file (None without one).

    Raises ProblemError naming the file and the field (``life.volumes[2]``,
    ``life.process.leading.defect_density.mature``, ...) with what to do.
    """
    if not has_life(problem_data):
        return None
    data = without_life(problem_data)
    base = parse_problem(data, source)
    return _Reader(problem_data["life"], base, data, source).plan()


class _Reader:
    def __init__(self, raw: object, base: Problem, data: dict, source: str):
        self.raw, self.base, self.data, self.source = raw, base, data, source

    def fail(self, where: str, message: str) -> None:
        raise ProblemError(self.source, f"life.{where}" if where else "life", message)

    def number(self, where: str, value: object, check) -> float:
        try:
            return check.func(value)
        except ValueError as exc:
            self.fail(where, str(exc))

    # ------------------------------------------------------------ top level
    def plan(self) -> LifePlan:
        raw = self.raw
        if not isinstance(raw, dict):
            self.fail(
                "", "must be a table; write it as [life] with period, volumes and discount_rate"
            )
        for key in raw:
            if key not in LIFE_KEYS:
                self.fail(_label(key), f"is not a known field; [life] takes {', '.join(LIFE_KEYS)}")
        for key, example in (
            ("period", 'period = "year"'),
            ("volumes", "volumes = [100000, 200000, 150000]"),
            ("discount_rate", "discount_rate = 0.08 (per year; 0 for none)"),
        ):
            if key not in raw:
                self.fail(key, f"is required but missing; add it, e.g. {example}")
        period = raw["period"]
        if not isinstance(period, str) or period not in PERIOD_YEARS:
            self.fail("period", f"got {shorten(period)}; use one of 'year', 'quarter'")
        self.period = period
        volumes = raw["volumes"]
        if not isinstance(volumes, list) or not volumes:
            self.fail(
                "volumes",
                "must be a list of good units sold in each period; write it like "
                "[100000, 200000, 150000]",
            )
        if len(volumes) > MAX_PERIODS:
            self.fail(
                "volumes",
                f"has {len(volumes)} periods; a life takes at most "
                f"{MAX_PERIODS}, so use years instead of quarters or fewer periods",
            )
        self.n = len(volumes)
        self.labels = [f"{PERIOD_LETTER[period]}{k + 1}" for k in range(self.n)]
        self.volumes = tuple(
            self.number(f"volumes[{k}]", v, _number(MIN_VOLUME, MAX_VOLUME))
            for k, v in enumerate(volumes)
        )
        rate = self.number("discount_rate", raw["discount_rate"], _number(0, MAX_DISCOUNT_RATE))
        one_time = 1
        if "one_time_period" in raw:
            one_time = int(
                self.number(
                    "one_time_period", raw["one_time_period"], _number(1, self.n, whole=True)
                )
            )
        read_at = raw.get("read_curves_at", "middle")
        if not isinstance(read_at, str) or read_at not in READ_POINTS:
            self.fail(
                "read_curves_at", f"got {shorten(read_at)}; use one of 'start', 'middle', 'end'"
            )
        targets = raw.get("targets", "once")
        if not isinstance(targets, str) or targets not in TARGET_MODES:
            self.fail(
                "targets",
                f"got {shorten(targets)}; use 'once' (one target level for the life) or "
                "'per_period' (each period buys its own)",
            )
        fraction = READ_POINTS[read_at]
        self.times = [(k + fraction) * PERIOD_YEARS[period] for k in range(self.n)]
        self.fraction = fraction
        tracks = self.section_tracks(raw)
        plan = LifePlan(
            source=self.source,
            period=period,
            volumes=self.volumes,
            discount_rate=rate,
            one_time_period=one_time,
            read_curves_at=read_at,
            tracks=tuple(tracks),
            targets=targets,
            base=self.base,
            problems=(),
        )
        problems = tuple(self.period_problem(plan, k) for k in range(self.n))
        return dataclasses.replace(plan, problems=problems)

    # ------------------------------------------------------------ sections
    def section_tracks(self, raw: dict) -> list[Track]:
        tracks: list[Track] = []
        market = raw.get("market", {})
        if not isinstance(market, dict):
            self.fail("market", "must be a table; write it as [life.market]")
        for key, value in market.items():
            if key == "volume":
                self.fail("market.volume", "the volume of each period is life.volumes; remove this")
            tracks.append(self.track("market", None, key, value))
        for section, items in (("process", self.base.process), ("packaging", self.base.packaging)):
            table = raw.get(section, {})
            if not isinstance(table, dict):
                self.fail(
                    section,
                    f"must be a table of {section} names; write it as [life.{section}.NAME]",
                )
            names = [item.name for item in items]
            for name, fields in table.items():
                if name not in names:
                    self.fail(
                        f"{section}.{_label(name)}",
                        f"no [[{section}]] is named {shorten(name)}; use one of {_one_of(names)}",
                    )
                if not isinstance(fields, dict):
                    self.fail(
                        f"{section}.{_label(name)}",
                        f"must be a table; write it as [life.{section}.{_label(name)}]",
                    )
                for key, value in fields.items():
                    tracks.append(self.track(section, name, key, value))
        return tracks

    def base_value(self, section: str, item: str | None, spec: _Spec) -> float:
        if section == "market":
            return float(getattr(self.base.market, spec.attribute))
        items = self.base.process if section == "process" else self.base.packaging
        owner = next(x for x in items if x.name == item)
        return float(getattr(owner, spec.attribute))

    def track(self, section: str, item: str | None, key: str, value: object) -> Track:
        # the full names: Track.path is also the key of LifePlan.track()
        path = f"{section}.{item + '.' if item is not None else ''}{key}"
        specs = SPECS[section]
        if key not in specs:
            self.fail(path, f"cannot vary over the life; a {section} takes {', '.join(specs)} here")
        spec = specs[key]
        base = self.base_value(section, item, spec)
        curve = self.curve(path, value, spec, base)
        wafers = curve.cumulative_wafers(self.fraction)
        values = curve.at(base, self.times, wafers)
        for k, v in enumerate(values):
            if not spec.in_range(v):
                unit = f" {spec.unit}" if spec.unit else ""
                self.fail(
                    path,
                    f"gives {v:.6g}{unit} in period {self.labels[k]}, outside "
                    f"{key}'s range ({_range_text(spec.lo, spec.hi, spec.low_open, spec.unit)}"
                    "); use a gentler curve or fewer periods",
                )
        if section == "process" and key == "defect_density":
            self.check_reducible(path, item, values)
        if section == "market":
            self.check_salvage(path, base, values)
        return Track(path, section, item, key, curve, tuple(values))

    def curve(self, path: str, value: object, spec: _Spec, base: float) -> Curve:
        bare = isinstance(value, list)
        if bare:
            value = {"form": "per_period", "values": value}
        if not isinstance(value, dict):
            self.fail(
                path,
                "must be a list of one value per period or a curve table; write it like "
                '{ form = "erosion", per_year = 0.05 }',
            )
        form = value.get("form")
        if form is None:
            self.fail(f"{path}.form", f"is required but missing; use one of {_one_of(FORMS)}")
        if form not in FORMS:
            self.fail(f"{path}.form", f"got {shorten(form)}; use one of {_one_of(FORMS)}")
        required, optional = FORM_KEYS[form]
        for key in value:
            if key != "form" and key not in required + optional:
                self.fail(
                    f"{path}.{_label(key)}",
                    f"does not belong to a '{form}' curve (it "
                    f"takes {', '.join(required + optional)}); remove it",
                )
        for key in required:
            if key not in value:
                self.fail(f"{path}.{key}", f"is required but missing for a '{form}' curve; add it")
        if form == "per_period":
            where = path if bare else f"{path}.values"
            values = self.per_period(where, value["values"], spec.read)
            return Curve(form, values=values)
        if form == "erosion":
            rate = self.number(f"{path}.per_year", value["per_year"], _number(-1, 1))
            if rate >= 1:
                self.fail(
                    f"{path}.per_year",
                    "must be below 1 (got 1: the value would vanish "
                    "after a year); use a rate from -1 to below 1",
                )
            return Curve(form, per_year=rate)
        mature = self.number(f"{path}.mature", value["mature"], _Check(spec.read))
        if mature > base:
            unit = f" {spec.unit}" if spec.unit else ""
            self.fail(
                f"{path}.mature",
                f"{mature:g}{unit} is above the file's base value "
                f"{base:g}{unit}; a learning curve falls towards its mature value, so "
                "lower mature or raise the base",
            )
        if form == "learn_by_time":
            tau = self.number(
                f"{path}.time_constant",
                value["time_constant"],
                _quantity(TIME, 0, MAX_TIME_CONSTANT_YEARS, low_open=True),
            )
            return Curve(form, mature=mature, time_constant_years=tau)
        scale = self.number(
            f"{path}.wafer_scale", value["wafer_scale"], _number(0, MAX_WAFERS, low_open=True)
        )
        starts = self.per_period(
            f"{path}.wafer_starts", value["wafer_starts"], _number(0, MAX_WAFERS).func
        )
        before = self.number(
            f"{path}.started_before", value.get("started_before", 0.0), _number(0, MAX_WAFERS)
        )
        return Curve(
            form, mature=mature, wafer_scale=scale, wafer_starts=starts, started_before=before
        )

    def per_period(self, where: str, values: object, read) -> tuple[float, ...]:
        if not isinstance(values, list):
            self.fail(where, "must be a list; write one value per period in square brackets")
        if len(values) != self.n:
            self.fail(
                where,
                f"has {len(values)} values but life.volumes has {self.n} "
                "periods; give one value per period",
            )
        return tuple(self.number(f"{where}[{k}]", v, _Check(read)) for k, v in enumerate(values))

    def check_reducible(self, path: str, item: str, values: list[float]) -> None:
        """A bought reduction is a ratio off the period's density, so it needs one above 0."""
        process = next(p for p in self.base.process if p.name == item)
        targeted = any(item in d.defect_targets for d in self.base.design)
        if process.defect_reduction is None and not targeted:
            return
        for k, v in enumerate(values):
            if v <= 0:
                self.fail(
                    path,
                    f"is 0 in period {self.labels[k]}, but process "
                    f"{shorten(item)} has defect-density targets (defect_reduction or a "
                    "design's defect_targets), which scale with it; keep it above 0",
                )

    def check_salvage(self, path: str, base: float, values: list[float]) -> None:
        for sbin in self.base.market.salvage_bin:
            for k, v in enumerate(values):
                price = sbin.unit_price * (v / base)
                if not MIN_PRICE <= price <= MAX_MONEY:
                    self.fail(
                        path,
                        f"takes salvage bin {shorten(sbin.name)} to a price of "
                        f"{price:.6g} in period {self.labels[k]}, outside "
                        f"{_range_text(MIN_PRICE, MAX_MONEY, False, '')}; use a gentler "
                        "curve",
                    )

    # ------------------------------------------------------------ period problems
    def period_problem(self, plan: LifePlan, k: int) -> Problem:
        data = period_data(self.data, self.base, plan, k)
        try:
            return parse_problem(data, self.source)
        except ProblemError as exc:  # a safety net: the checks above should prevent it
            raise ProblemError(
                self.source,
                "life",
                f"in period {plan.labels[k]} the file's {exc.field} becomes invalid: {exc.message}",
            ) from None


class _Check:
    """Wrap a plain reader so :meth:`_Reader.number` can call it like a validator."""

    def __init__(self, func):
        self.func = func


def period_data(data: dict, base: Problem, plan: LifePlan, k: int) -> dict:
    """The decoded document of period ``k`` (from 0): the file without [life], with that
    period's volume, salvage demand share and varied values written in."""
    out = copy.deepcopy(data)
    share = plan.volumes[k] / math.fsum(plan.volumes)
    market = out["market"]
    market["volume"] = plan.volumes[k]
    price_ratio = 1.0
    for track in plan.tracks:
        if track.section == "market":
            market[track.key] = SPECS["market"][track.key].encode(track.values[k])
            price_ratio = track.values[k] / base.market.unit_price
    for raw, sbin in zip(market.get("salvage_bin", []), base.market.salvage_bin, strict=True):
        raw["demand"] = sbin.demand * share
        if price_ratio != 1.0:
            raw["unit_price"] = sbin.unit_price * price_ratio
    for track in plan.tracks:
        if track.section == "market":
            continue
        items = out[track.section]
        index = [item.name for item in getattr(base, track.section)].index(track.item)
        spec = SPECS[track.section][track.key]
        items[index][track.key] = spec.encode(track.values[k])
        if track.section == "process" and track.key == "defect_density":
            _scale_targets(out, base, index, track.values[k])
    return out


def _scale_targets(out: dict, base: Problem, index: int, density: float) -> None:
    """Scale process ``index``'s reduction floor, table points and design targets by the
    period's density over the base density (a bought reduction is a ratio)."""
    process = base.process[index]
    d0 = process.defect_density_per_cm2
    if d0 <= 0 or density == d0:
        return
    ratio = density / d0

    def scaled(d: float) -> str:
        # the base density maps to the period's exactly; nothing may land above it
        return _DENSITY.encode(density if d == d0 else min(d * ratio, density))

    curve = process.defect_reduction
    raw = out["process"][index]
    if curve is not None:
        reduction = raw["defect_reduction"]
        if curve.form == "log_ratio":
            reduction["floor"] = scaled(curve.floor_per_cm2)
        reduction["points"] = [
            [scaled(d), *point[1:]]
            for (d, _, _), point in zip(curve.table(), reduction.get("points", []), strict=True)
        ]
        if not reduction["points"]:
            del reduction["points"]
    for design, raw_design in zip(base.design, out.get("design", []), strict=True):
        if process.name in design.defect_targets:
            raw_design["defect_targets"][process.name] = scaled(design.defect_targets[process.name])


__all__ = [
    "FORMS",
    "Curve",
    "LifePlan",
    "Period",
    "Track",
    "annuity_factor",
    "discount_factor",
    "discounts",
    "erosion",
    "has_life",
    "learn_by_time",
    "learn_by_wafers",
    "life_plan",
    "load_life",
    "npv",
    "one_time_discount",
    "payback_period",
    "period_data",
    "periods",
    "plan_npv",
    "plan_payback",
    "without_life",
]
