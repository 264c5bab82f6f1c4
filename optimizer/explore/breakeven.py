"""Break-even of each main input between two fixed designs.

The optimum and a challenger (say two chiplets against one monolithic die) are held
fixed: partition, processes, spares, repair, defect-density targets, margins and
packaging stay as chosen (see :mod:`optimizer.explore.fixed`). One input at a time is
moved over a plausible range, 0.1x to 10x its file value by default and never past the
limits the schema puts on the field (a yield stays at or below 1). Where the profit
difference challenger - optimum changes sign between neighbouring points of a
geometric grid, the value where the two profits are equal is located by Brent's method
in log space (R. P. Brent, *Algorithms for Minimization without Derivatives*,
Prentice-Hall, 1973, ch. 4; ``scipy.optimize.brentq``). The break-even nearest the file
value (in log distance) is reported, with the side on which the challenger earns more.

Values where a design cannot be built leave gaps in the grid; roots are bracketed only
between neighbouring points where both designs are priced.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np
from scipy.optimize import brentq

from optimizer.explore.fixed import FixedDesign, ScenarioPricer
from optimizer.explore.paths import FieldPath, PathError, parse_path, problem_with, read_value
from optimizer.problem import Problem, ProblemError

FLIP = "flip"
NO_FLIP = "no flip in range"
NOT_PRICEABLE = "not priceable"

# Relative to the larger profit: below this the two designs count as tied. Both profits
# come from the same arithmetic, so a real tie is exact up to round-off.
_TIE_RTOL = 1e-12
# Above this relative gap at a located root, the difference jumps instead of crossing.
_JUMP_RTOL = 1e-6
# A schema limit is located to this log distance, or snapped to a short decimal once the
# bisection interval is narrower than the snap width.
_LIMIT_LOG_TOL = 1e-10
_SNAP_LOG_WIDTH = 1e-6

# (section, field) -> words and unit of the label; "{c}" is the currency, "{item}" the
# process or packaging name.
_WORDS: dict[tuple[str, str], tuple[str, str]] = {
    ("market", "volume"): ("volume", "units"),
    ("market", "unit_price"): ("unit price", "{c}/unit"),
    ("process", "defect_density"): ("defect density of {item}", "/cm^2"),
    ("process", "wafer_cost"): ("wafer cost of {item}", "{c}/wafer"),
    ("process", "mask_set_cost"): ("mask set cost of {item}", "{c}"),
    ("packaging", "bond_yield"): ("bond yield of {item}", "fraction"),
    ("packaging", "carrier_cost"): ("carrier cost of {item}", "{c}/carrier"),
    ("packaging", "package_cost"): ("package cost of {item}", "{c}/package"),
    ("design_cost", "per_die_design"): ("design cost per die design", "{c}"),
    ("design_cost", "per_mm2"): ("design cost per mm^2 of die", "{c}/mm^2"),
}


@dataclass(frozen=True)
class BreakEven:
    """Where the challenger's profit equals the optimum's as one input moves.

    Attributes
    ----------
    path, label
        The input (path text) and its name in words with its unit.
    file_value
        The input's value in the problem file (base unit).
    value
        The break-even value nearest the file value (NaN when there is none).
    challenger_wins
        ``"above"`` or ``"below"``: the side of ``value`` where the challenger earns
        more; ``""`` when neither side.
    status
        ``"flip"``, ``"no flip in range"`` or ``"not priceable"``.
    ratio
        value / file_value.
    profit
        Profit of either design at the break-even (NaN without one).
    low, high
        The range scanned (the requested range cut at the field's schema limits).
    note
        Why a row is not priceable, a tie at the file value, or anything else worth saying.
    """

    path: str
    label: str
    file_value: float
    value: float
    challenger_wins: str
    status: str
    ratio: float
    profit: float
    low: float = math.nan
    high: float = math.nan
    note: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


# ---------------------------------------------------------------- which inputs
def _used(problem: Problem, designs: Sequence) -> tuple[list[str], list[str]]:
    """Processes and packagings used by the designs, in file order.

    A silicon interposer is made on a process, so that process counts as used.
    """
    processes: set[str] = set()
    packagings: set[str] = set()
    for design in designs:
        dies = design.specs if isinstance(design, FixedDesign) else design.dies
        processes.update(die.process for die in dies)
        packagings.add(design.packaging)
    for item in problem.packaging:
        if item.name in packagings and item.kind == "silicon_interposer":
            processes.add(item.interposer_process)
    return (
        [p.name for p in problem.process if p.name in processes],
        [g.name for g in problem.packaging if g.name in packagings],
    )


def input_candidates(problem: Problem, designs: Sequence) -> list[tuple[str, str]]:
    """Every main input as (path, reason it is skipped or ``""``), in report order.

    ``designs`` are :class:`FixedDesign` or priced ``DesignResult`` objects.
    """
    processes, packagings = _used(problem, designs)
    out: list[tuple[str, str]] = []

    def add(text: str, section: object, attribute: str, positive_only: bool) -> None:
        value = getattr(section, attribute)
        if attribute not in section.model_fields_set:
            out.append((text, "not in the file (the schema default applies)"))
        elif positive_only and not value > 0:
            out.append((text, f"is {value:g} in the file; a ratio range needs a positive value"))
        else:
            out.append((text, ""))

    add("market.volume", problem.market, "volume", True)
    add("market.unit_price", problem.market, "unit_price", True)
    for name in processes:
        process = problem.process[problem.process_index(name)]
        for key, attribute in (
            ("defect_density", "defect_density_per_cm2"),
            ("wafer_cost", "wafer_cost"),
            ("mask_set_cost", "mask_set_cost"),
        ):
            add(f"process.{name}.{key}", process, attribute, True)
    for name in packagings:
        packaging = problem.packaging[problem.packaging_index(name)]
        for key in ("bond_yield", "carrier_cost", "package_cost"):
            add(f"packaging.{name}.{key}", packaging, key, True)
    for key in ("per_die_design", "per_mm2"):
        add(f"design_cost.{key}", problem.design_cost, key, True)
    return out


def main_inputs(problem: Problem, designs: Sequence) -> list[str]:
    """Path texts of the main inputs of ``designs`` (see :func:`input_candidates`).

    Market volume and price; defect density, wafer cost and mask-set cost of every process
    used; bond yield, carrier cost and package cost of every packaging used; design cost
    per die design and per mm^2. Inputs absent from the file or zero there are left out
    (:func:`skipped_inputs` says why).
    """
    return [text for text, reason in input_candidates(problem, designs) if not reason]


def skipped_inputs(problem: Problem, designs: Sequence) -> dict[str, str]:
    """Main inputs left out by :func:`main_inputs`, with the reason."""
    return {text: reason for text, reason in input_candidates(problem, designs) if reason}


# ---------------------------------------------------------------- words
def _words(path: FieldPath, currency: str) -> tuple[str, str]:
    """(words, unit) of an input; the unit has the currency filled in."""
    steps = path.steps
    items = [s.item for s in steps if s.item is not None]
    known = _WORDS.get((steps[0].key, steps[-1].key)) if len(steps) <= 2 else None
    if known is not None:
        words, unit = known
    else:
        words = steps[-1].key.replace("_", " ")
        if items:
            words += " of {item}"
        unit = path.unit_text
    return words.format(item=items[-1] if items else ""), unit.format(c=currency)


def input_label(path: str | FieldPath, currency: str) -> str:
    """An input in plain words with its unit: ``"defect density of leading [/cm^2]"``."""
    path = parse_path(path) if isinstance(path, str) else path
    words, unit = _words(path, currency)
    return f"{words} [{unit}]" if unit else words


def _number(x: float) -> str:
    """Three significant figures with thousands separators; four below 1,000."""
    if not math.isfinite(x):
        return str(x)
    if abs(x) >= 1000:
        return f"{float(f'{x:.3g}'):,.0f}"
    return f"{x:.4g}"


def break_even_text(row: BreakEven, currency: str) -> str:
    """One sentence: where the challenger wins, or that it does not in the range."""
    if row.status == NOT_PRICEABLE:
        return f"not priceable: {row.note}" if row.note else "not priceable"
    span = (
        f"between {row.low / row.file_value:.3g}x and {row.high / row.file_value:.3g}x "
        "the file value"
    )
    if row.status == NO_FLIP:
        return f"no flip {span}"
    try:
        unit = _words(parse_path(row.path), currency)[1]
    except PathError:
        unit = ""
    amount = _number(row.value) + (f" {unit}" if unit and unit != "fraction" else "")
    if row.value == row.file_value:
        where = "the two designs tie at the file value"
        if row.challenger_wins:
            return f"{where}; the challenger wins {row.challenger_wins} it"
        return where
    if not row.challenger_wins:
        return f"the profits touch at {amount} ({row.ratio:.3g}x the file value) without a flip"
    return f"the challenger wins {row.challenger_wins} {amount} ({row.ratio:.3g}x the file value)"


# ---------------------------------------------------------------- the scan
def _valid(data: dict, source: str, path: FieldPath, x: float) -> bool:
    try:
        problem_with(data, [(path, x)], source)
    except ProblemError:
        return False
    return True


def _limit(data: dict, source: str, path: FieldPath, good: float, bad: float) -> float:
    """The last valid value between ``good`` (valid) and ``bad`` (not), by bisection.

    Schema limits are round numbers (a yield at most 1) or another field's value (a
    defect-reduction floor), so once the interval is narrow the shortest decimal inside
    it that is still valid is taken: usually the limit itself, found in fewer steps.
    """
    u_good, u_bad = math.log(good), math.log(bad)
    while abs(u_bad - u_good) > _LIMIT_LOG_TOL:
        mid = 0.5 * (u_good + u_bad)
        if _valid(data, source, path, math.exp(mid)):
            u_good = mid
        else:
            u_bad = mid
        if abs(u_bad - u_good) < _SNAP_LOG_WIDTH:
            lo, hi = sorted((math.exp(u_good), math.exp(u_bad)))
            for digits in range(1, 13):
                snapped = float(f"{math.exp(u_good):.{digits}g}")
                if lo <= snapped <= hi and _valid(data, source, path, snapped):
                    return snapped
    return math.exp(u_good)


def _scan_range(
    data: dict, source: str, path: FieldPath, file_value: float, low: float, high: float
) -> tuple[float, float]:
    """``[low, high]`` cut at the field's schema limits around the file value."""
    if not _valid(data, source, path, low):
        low = _limit(data, source, path, file_value, low)
    if not _valid(data, source, path, high):
        high = _limit(data, source, path, file_value, high)
    return low, high


def _row(
    path_text: str,
    label: str,
    file_value: float,
    status: str,
    note: str,
    low=math.nan,
    high=math.nan,
) -> BreakEven:
    return BreakEven(
        path_text, label, file_value, math.nan, "", status, math.nan, math.nan, low, high, note
    )


def _one(
    data: dict,
    source: str,
    base: Problem,
    designs: list[FixedDesign],
    path_text: str,
    low_factor: float,
    high_factor: float,
    points: int,
) -> BreakEven:
    currency = base.market.currency
    try:
        path = parse_path(path_text)
        file_value = read_value(base, path)
    except PathError as exc:
        return _row(path_text, path_text, math.nan, NOT_PRICEABLE, str(exc))
    label = input_label(path, currency)
    if file_value is None or not file_value > 0:
        shown = "unset" if file_value is None else f"{file_value:g}"
        return _row(
            path.text,
            label,
            math.nan if file_value is None else file_value,
            NOT_PRICEABLE,
            f"the file value is {shown}; a ratio range needs a positive value",
        )
    if path.integer:
        return _row(
            path.text,
            label,
            file_value,
            NOT_PRICEABLE,
            "takes whole numbers only; profit steps rather than crosses",
        )
    try:
        problem_with(data, [(path, file_value)], source)
    except ProblemError as exc:
        # the file's own value must round-trip, else every scenario fails the same way
        return _row(
            path.text,
            label,
            file_value,
            NOT_PRICEABLE,
            f"the file value cannot be written back ({exc.field}: {exc.message})",
        )
    low, high = _scan_range(
        data, source, path, file_value, low_factor * file_value, high_factor * file_value
    )
    pricer = ScenarioPricer(data, source, designs, [path])
    cache: dict[float, tuple[float, float, float]] = {}

    def at(x: float) -> tuple[float, float, float]:
        """(challenger - optimum, optimum's profit, profit scale) at ``x``; NaN if unpriced."""
        if x not in cache:
            try:
                p_opt, p_ch = pricer.price(np.array([[x]])).profit[0]
            except ProblemError:
                p_opt = p_ch = math.nan
            finite = math.isfinite(p_opt) and math.isfinite(p_ch)
            diff = p_ch - p_opt if finite else math.nan
            cache[x] = (diff, p_opt, max(abs(p_opt), abs(p_ch), 1.0))
        return cache[x]

    grid = np.geomspace(low, high, max(2, points)) if high > low else np.array([file_value])
    grid = np.unique(np.append(grid, file_value))
    diff = np.array([at(float(x))[0] for x in grid])
    scale = np.array([at(float(x))[2] for x in grid])
    sign = np.where(np.isfinite(diff), np.sign(diff), np.nan)
    sign[np.abs(diff) <= _TIE_RTOL * scale] = 0.0
    u0 = math.log(file_value)
    i0 = int(np.flatnonzero(grid == file_value)[0])

    def side_after(i: int, step: int) -> float:
        """Sign of the difference at the first priced, untied grid point from ``i``."""
        j = i + step
        while 0 <= j < len(grid) and sign[j] == 0:
            j += step
        return float(sign[j]) if 0 <= j < len(grid) else math.nan

    def wins(below: float, above: float) -> str:
        return "above" if above > 0 else "below" if below > 0 else ""

    if not np.isfinite(diff).any():
        return _row(
            path.text,
            label,
            file_value,
            NOT_PRICEABLE,
            "a design cannot be built anywhere in the range",
            low,
            high,
        )
    if np.all(sign[np.isfinite(sign)] == 0):
        return _row(
            path.text,
            label,
            file_value,
            NO_FLIP,
            "the two designs earn the same profit throughout",
            low,
            high,
        )
    if sign[i0] == 0:
        p_opt = at(file_value)[1]
        return BreakEven(
            path.text,
            label,
            file_value,
            file_value,
            wins(side_after(i0, -1), side_after(i0, 1)),
            FLIP,
            1.0,
            p_opt,
            low,
            high,
            "the two designs tie at the file value",
        )

    # Roots: sign changes between neighbouring priced points, and grid points where the
    # difference is zero with opposite signs on either side.
    roots: list[tuple[float, str, tuple[int, int] | None]] = []
    for i in range(len(grid) - 1):
        if sign[i] * sign[i + 1] < 0:
            roots.append((float(grid[i]), "above" if sign[i + 1] > 0 else "below", (i, i + 1)))
        elif sign[i] == 0 and 0 < i:
            below, above = side_after(i, -1), side_after(i, 1)
            if below * above < 0:
                roots.append((float(grid[i]), wins(below, above), None))
    if not roots:
        gaps = not np.isfinite(diff).all()
        note = "a design cannot be built at some values in the range" if gaps else ""
        return _row(path.text, label, file_value, NO_FLIP, note, low, high)

    def locate(item: tuple[float, str, tuple[int, int] | None]) -> float:
        x, _, bracket = item
        if bracket is None:
            return x
        a, b = (math.log(float(grid[k])) for k in bracket)
        u = brentq(lambda u: at(math.exp(u))[0], a, b, xtol=1e-13, rtol=4 * np.finfo(float).eps)
        return math.exp(u)

    # Grid brackets rarely hold more than one or two roots: locate them all, keep the nearest.
    located = [(locate(r), r[1]) for r in roots]
    value, side = min(located, key=lambda item: abs(math.log(item[0]) - u0))
    d, p_opt, s = at(value)
    note = ""
    if not abs(d) <= _JUMP_RTOL * s:
        note = "the profit difference jumps here rather than crossing zero"
    return BreakEven(
        path.text, label, file_value, value, side, FLIP, value / file_value, p_opt, low, high, note
    )


def break_even(
    data: dict,
    source: str,
    optimum: FixedDesign,
    challenger: FixedDesign,
    paths: Sequence[str],
    low_factor: float = 0.1,
    high_factor: float = 10.0,
    points: int = 13,
) -> list[BreakEven]:
    """Break-even of each input between two fixed designs, one input at a time.

    Parameters
    ----------
    data, source
        The decoded problem file and its name for messages.
    optimum, challenger
        The two designs, held fixed.
    paths
        Inputs to move (path texts, e.g. from :func:`main_inputs`); the others stay as in
        the file.
    low_factor, high_factor
        The range scanned, as multiples of the file value (cut at schema limits).
    points
        Grid points of the geometric scan (the file value is added).

    Returns
    -------
    list[BreakEven]
        One row per path, in the order given.
    """
    if not 0 < low_factor <= 1 <= high_factor:
        raise ValueError("need 0 < low_factor <= 1 <= high_factor")
    base = problem_with(data, [], source)
    designs = [optimum, challenger]
    return [
        _one(data, source, base, designs, text, low_factor, high_factor, points) for text in paths
    ]
