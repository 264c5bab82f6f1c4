"""Figures of exploration results (matplotlib, Agg backend); the CLI writes them.

Every function returns a :class:`matplotlib.figure.Figure` and draws nothing on screen.
Money axes are in the problem's currency, scaled to thousands, millions or billions.
Names from problem files are drawn as written: a '$' in a name does not start math.
"""

from __future__ import annotations

import functools
import math
import textwrap

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.cm import ScalarMappable  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.colors import LogNorm, Normalize, to_rgb  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import (  # noqa: E402
    FuncFormatter,
    LogFormatter,
    NullLocator,
    ScalarFormatter,
)
from matplotlib.transforms import blended_transform_factory  # noqa: E402

from optimizer.explore.compare import Comparison  # noqa: E402
from optimizer.explore.sensitivity import Sensitivity  # noqa: E402
from optimizer.explore.sweep import SweepResult  # noqa: E402
from optimizer.explore.uncertainty import Uncertainty  # noqa: E402


def axis_label(path) -> str:
    """An input path in words, with its unit: "defect density on leading [/cm^2]"."""
    words = path.steps[-1].key.replace("_", " ")
    owners = [step.item for step in path.steps[:-1] if step.item]
    text = words + (f" on {' / '.join(owners)}" if owners else "")
    return f"{text} [{path.unit_text}]" if path.unit_text else text


def plain_number(value: float) -> str:
    """A number as a reader writes it: 212,000 rather than 2.12e+05."""
    size = abs(value)
    if size >= 1e4 and size < 1e15:
        return f"{value:,.0f}"
    return f"{value:.4g}"


CAUTION = "Estimates for comparing options early; real decisions need foundry and assembly data."

COMPONENT_LABELS = {
    "silicon": "silicon",
    "interface": "die-to-die interface",
    "sort_test": "sort and repair test",
    "die_scrap": "dies failed at sort",
    "carrier": "substrate / interposer",
    "assembly": "assembly",
    "final_test": "final test",
    "package_scrap": "failed packages",
    "nre_per_unit": "NRE per unit",
    "improvement_per_unit": "yield improvement per unit",
}


def literal_text(draw):
    """Run a figure function with math parsing off, so any name draws as plain text."""

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context({"text.parse_math": False}):
            return draw(*args, **kwargs)

    return wrapper


def _money(value: float, _pos: object = None) -> str:
    if not math.isfinite(value):
        return ""
    # round first, so 999,960 reads "1 M" rather than "1e+03 k"
    size = abs(float(f"{value:.3g}"))
    for scale, suffix in ((1e9, " bn"), (1e6, " M"), (1e3, " k")):
        if size >= scale:
            return f"{value / scale:,.3g}{suffix}"
    return f"{value:,.3g}"


class _PlainLogFormatter(LogFormatter):
    """Log-axis tick labels as plain text (100 k, 1 M, 0.05): the default labels are math
    markup, which draws as raw code once math parsing is off."""

    def _num_to_string(self, x, vmin, vmax):
        return _money(x)


class _PlainLinearFormatter(ScalarFormatter):
    """Linear tick labels written out (2,000,000), with no offset or power of ten at the
    axis end that a reader may miss."""

    def __init__(self):
        super().__init__(useOffset=False)
        self.set_scientific(False)

    def __call__(self, x, pos=None):
        whole = abs(x) >= 1e3 and x == round(x)
        return f"{x:,.0f}" if whole else super().__call__(x, pos)


def _plain_ticks(axis, log: bool) -> None:
    """Plain tick labels on an input axis (call after the scale is set: it resets them)."""
    if log:
        axis.set_major_formatter(_PlainLogFormatter())
        axis.set_minor_formatter(_PlainLogFormatter(labelOnlyBase=False))
    else:
        axis.set_major_formatter(_PlainLinearFormatter())


def _wrap(text: str, width_in: float, fontsize: float = 12.0) -> str:
    """Break ``text`` into lines that fit ``width_in`` inches at ``fontsize`` points."""
    # 0.6 em is a generous mean glyph width for the default sans-serif font
    chars = max(12, int(width_in * 72 / (0.6 * fontsize)))
    return "\n".join(textwrap.wrap(text, chars)) or text


def _figure(width: float = 8.0, height: float = 4.8) -> tuple[Figure, plt.Axes]:
    fig = Figure(figsize=(width, height), layout="constrained")
    return fig, fig.add_subplot()


def _title(fig: Figure, text: str) -> None:
    # a figure title, wrapped to the figure's width, so it never runs off the edge
    fig.suptitle(_wrap(text, fig.get_figwidth() - 0.4, 12))


def _key_row(fig: Figure, gridspec, row) -> plt.Axes:
    """An empty axes row under the plots to hold a legend: constrained layout then makes
    room for it, so it covers no data and stays clear of the footer."""
    key = fig.add_subplot(gridspec[row, :])
    key.axis("off")
    return key


def mark_invented(fig: Figure) -> None:
    """Say on the figure that its data are invented (the shipped demos say so in their
    titles); a user's own figures carry no such claim."""
    fig.text(0.99, 0.005, "demo data invented", fontsize=7, color="0.4", ha="right", va="bottom")


FOOTER_INCHES = 0.22  # strip for the caution line: fixed, so short figures keep room for it


def _footer(fig: Figure) -> None:
    # keep a strip at the bottom free of axes for the caution line
    strip = FOOTER_INCHES / fig.get_figheight()
    fig.get_layout_engine().set(rect=(0, strip, 1, 1 - strip))
    fig.text(0.01, 0.005, CAUTION, fontsize=7, color="0.4", ha="left", va="bottom")


@literal_text
def comparison_figure(comparison: Comparison, currency: str = "", words: str = "profit") -> Figure:
    """Stacked bars: cost per good unit of each option's winner, by component (``words``
    names the objective: "profit", or "net present value", whose costs are averages
    over the life's units)."""
    table = comparison.table[np.isfinite(comparison.table["profit"].to_numpy(dtype=float))]
    fig, ax = _figure(max(6.0, 1.4 * len(table) + 3), 5.0)
    x = np.arange(len(table))
    bottom = np.zeros(len(table))
    colors = plt.get_cmap("tab10")
    for i, component in enumerate(comparison.components):
        values = table[f"cost_{component}"].to_numpy(dtype=float)
        if not np.any(np.abs(values) > 1e-12):
            continue
        ax.bar(
            x,
            values,
            bottom=bottom,
            color=colors(i % 10),
            label=COMPONENT_LABELS.get(component, component),
        )
        bottom += values
    for xi, total in zip(x, table["cost_per_good_unit"], strict=True):
        ax.annotate(
            f"{total:,.2f}",
            (xi, total),
            ha="center",
            va="bottom",
            fontsize=8,
            xytext=(0, 2),
            textcoords="offset points",
        )
    ax.margins(y=0.1)  # room above the tallest bar for its total
    # wrapped to the bar pitch (1.4 in) rather than slanted, so neighbours never touch
    ax.set_xticks(x, [_wrap(str(o), 1.2, 9) for o in table["option"]], fontsize=9)
    over_life = words != "profit"
    ax.set_ylabel(
        f"cost per good unit{' over the life' if over_life else ''}"
        f"{f' ({currency})' if currency else ''}"
    )
    _title(
        fig,
        "Life optimum of each option: cost per good unit over the life's units, by component"
        if over_life
        else "Winning design of each option: cost per good unit by component",
    )
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _footer(fig)
    return fig


@literal_text
def sweep_figure(sweep: SweepResult, currency: str = "", words: str = "profit") -> Figure:
    """1-D: profit of the best design of each winning kind (top) and how far each is
    behind the optimum (bottom), crossovers dashed; 2-D: map of the winning kind, shaded
    by its profit. ``words`` names the objective ("net present value" for a life)."""
    if len(sweep.axes) == 2:
        return winner_map_figure(sweep, currency, words)
    axis = sweep.axes[0]
    fig = Figure(figsize=(9.0, 6.4), layout="constrained")
    ax, behind = fig.subplots(2, 1, sharex=True, height_ratios=(2, 1))
    x = sweep.points[axis.path.text].to_numpy(dtype=float)
    best = sweep.points["profit"].to_numpy(dtype=float)
    unit = f" ({currency})" if currency else ""
    gaps = []
    if sweep.curves is not None:
        grid = sweep.curves.iloc[:, 0].to_numpy(dtype=float)
        for kind in sweep.curves.columns[1:]:
            values = sweep.curves[kind].to_numpy(dtype=float)
            line = ax.plot(grid, values, label=_wrap(kind, 2.0, 8), lw=1.6)[0]
            gap = values - best
            gaps.append(gap)
            behind.plot(grid, gap, lw=1.4, color=line.get_color())
    ax.plot(x, best, "k.", ms=4, label="optimum at grid point")
    if axis.log:
        ax.set_xscale("log")
    _plain_ticks(ax.xaxis, axis.log)
    _crossover_marks(ax, behind, sweep)
    for a in (ax, behind):
        a.yaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_ylabel(f"{words}{unit}")
    _title(fig, f"{words.capitalize()} of the best design of each kind; crossovers dashed")
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _finite_limits(ax, sweep)
    # two lines: the lower panel is too short for the label on one
    behind.set_ylabel("behind the optimum" + (f"\n{unit.strip()}" if unit else ""))
    behind.set_xlabel(axis_label(axis.path))
    finite = np.concatenate(gaps) if gaps else np.zeros(1)
    finite = finite[np.isfinite(finite) & (finite < 0)]
    if finite.size:
        # the closest competitors matter; very distant ones are cut off
        behind.set_ylim(1.3 * np.percentile(finite, 50), -0.05 * np.percentile(finite, 50))
    else:
        # one kind wins everywhere: a zero line on the profit panel's money scale
        lo, hi = ax.get_ylim()
        behind.set_ylim(-0.1 * (hi - lo), 0.02 * (hi - lo))
    _footer(fig)
    return fig


def _crossover_marks(ax: plt.Axes, behind: plt.Axes, sweep: SweepResult) -> None:
    """Dashed lines at the crossovers; a value label on each unless it would touch the
    previous label (crossovers closer than a label's width share the first one's)."""
    axis = sweep.axes[0]
    to_u = math.log if axis.log else (lambda v: v)
    span = to_u(axis.high) - to_u(axis.low)
    last = -math.inf
    wheres = []
    for _, row in sweep.crossovers.iterrows():
        wheres.append(row["crossing"] if math.isfinite(row["crossing"]) else row["grid_high"])
    for where in sorted(wheres):
        for a in (ax, behind):
            a.axvline(where, color="0.3", ls="--", lw=0.9)
        at = (to_u(where) - to_u(axis.low)) / span if span > 0 else 0.0
        if at - last < 0.035:
            continue
        last = at
        ax.annotate(
            plain_number(where),
            (where, 1.0),
            xycoords=("data", "axes fraction"),
            xytext=(-2, -3),
            textcoords="offset points",
            rotation=90,
            va="top",
            ha="right",
            fontsize=8,
            color="0.3",
        )


def _finite_limits(ax: plt.Axes, sweep: SweepResult) -> None:
    # Designs far from their sweet spot can lose orders of magnitude more than the
    # optimum makes; keep the optimum readable.
    best = sweep.points["profit"].to_numpy(dtype=float)
    lo, hi = np.nanmin(best), np.nanmax(best)
    span = max(hi - lo, abs(hi) * 0.05, 1.0)
    ax.set_ylim(lo - 0.15 * span, hi + 0.15 * span)


def _profit_norm(profit: np.ndarray) -> Normalize:
    """Scale of the profit shading: logarithmic when every profit is positive and they
    span two decades or more (else the smaller ones all look alike), linear otherwise."""
    finite = profit[np.isfinite(profit)]
    if finite.size == 0:
        return Normalize(0.0, 1.0)
    lo, hi = float(finite.min()), float(finite.max())
    if lo > 0 and hi / lo >= 100:
        return LogNorm(lo, hi)
    if hi - lo <= 1e-9 * max(abs(hi), 1.0):
        pad = max(abs(hi) * 0.05, 1.0)
        lo, hi = lo - pad, hi + pad
    return Normalize(lo, hi)


SHADE_LOW = 0.3  # share of a winner's colour at the lowest profit (the rest is white)


def _shade(color, level: np.ndarray) -> np.ndarray:
    """``color`` mixed with white: ``level`` 0 (lowest profit) pale, 1 (highest) full."""
    mix = SHADE_LOW + (1 - SHADE_LOW) * np.clip(level, 0.0, 1.0)
    return 1.0 - mix[..., None] * (1.0 - np.asarray(to_rgb(color)))


@literal_text
def winner_map_figure(sweep: SweepResult, currency: str = "", words: str = "profit") -> Figure:
    """2-D sweep: the winning design kind at every grid point (hue), shaded by the
    winner's profit there (pale: low, full colour: high); the key on the right gives
    the profit of each shade for each winner, black lines part different winners."""
    ax_x, ax_y = sweep.axes
    points = sweep.points
    xs = np.unique(points[ax_x.path.text].to_numpy(dtype=float))
    ys = np.unique(points[ax_y.path.text].to_numpy(dtype=float))
    kinds = list(dict.fromkeys(points["design_kind"]))
    code = {k: i for i, k in enumerate(kinds)}
    grid = points["design_kind"].map(code).to_numpy().reshape(len(ys), len(xs))
    profit = points["profit"].to_numpy(dtype=float).reshape(len(ys), len(xs))
    norm = _profit_norm(profit)
    level = np.ma.filled(norm(np.where(np.isfinite(profit), profit, norm.vmin)), 0.0)
    hues = [plt.get_cmap("tab10")(i % 10) for i in range(len(kinds))]
    cells = np.empty(grid.shape + (3,))
    for i, hue in enumerate(hues):
        cells[grid == i] = _shade(hue, level[grid == i])
    cells[~np.isfinite(profit)] = 0.8  # no profit known: plain grey

    fig = Figure(figsize=(9.0, 6.4), layout="constrained")
    # the key's column: about a seventh of an inch per winner (the map is ~6.5 in wide)
    gs = fig.add_gridspec(2, 2, height_ratios=(1, 0.001), width_ratios=(1, 0.022 * len(kinds)))
    fig.get_layout_engine().set(wspace=0.03)  # air between the map and its key
    ax = fig.add_subplot(gs[0, 0])
    ex, ey = _edges(xs, ax_x.log), _edges(ys, ax_y.log)
    ax.pcolormesh(ex, ey, cells, shading="flat")
    ax.add_collection(LineCollection(_borders(grid, ex, ey), colors="k", linewidths=1.2))
    handles = [Patch(color=h, label=_wrap(k, 3.8, 8)) for h, k in zip(hues, kinds, strict=True)]
    if len(kinds) > 1:
        handles.append(Line2D([], [], color="k", lw=1.2, label="border between winners"))
    finite = profit[np.isfinite(profit)]
    if min(grid.shape) >= 2 and finite.size and finite.min() < 0 < finite.max():
        ax.contour(xs, ys, profit, levels=[0.0], colors="k", linestyles="--", linewidths=1.2)
        handles.append(Line2D([], [], color="k", ls="--", lw=1.2, label=f"{words} = 0"))
    if ax_x.log:
        ax.set_xscale("log")
    if ax_y.log:
        ax.set_yscale("log")
    _plain_ticks(ax.xaxis, ax_x.log)
    _plain_ticks(ax.yaxis, ax_y.log)
    ax.set_xlim(ex[0], ex[-1])
    ax.set_ylim(ey[0], ey[-1])
    ax.set_xlabel(axis_label(ax_x.path))
    ax.set_ylabel(axis_label(ax_y.path))
    _title(fig, f"Winning design kind at each point, shaded by its {words}")
    _profit_key(fig, fig.add_subplot(gs[0, 1]), norm, hues, currency, words)
    _key_row(fig, gs, 1).legend(
        handles=handles,
        fontsize=8,
        loc="upper center",
        bbox_to_anchor=(0.5, 1.0),
        ncols=1 if len(handles) < 3 else 2,
        frameon=False,
    )
    _footer(fig)
    return fig


def _borders(grid: np.ndarray, ex: np.ndarray, ey: np.ndarray) -> list:
    """Cell edges between neighbouring cells whose winners differ."""
    segments = []
    ny, nx = grid.shape
    for j in range(ny):
        for i in range(nx - 1):
            if grid[j, i] != grid[j, i + 1]:
                segments.append([(ex[i + 1], ey[j]), (ex[i + 1], ey[j + 1])])
    for j in range(ny - 1):
        for i in range(nx):
            if grid[j, i] != grid[j + 1, i]:
                segments.append([(ex[i], ey[j + 1]), (ex[i + 1], ey[j + 1])])
    return segments


def _profit_key(
    fig: Figure, cax: plt.Axes, norm: Normalize, hues: list, currency: str, words: str
) -> None:
    """A colour bar with one column per winner, each its colour from pale to full over
    the profit scale: reads a cell's profit off its shade."""
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap="Greys"), cax=cax)
    levels = norm.inverse(np.linspace(0.0, 1.0, 129))
    ramp = np.linspace(0.0, 1.0, 128)
    columns = np.stack([_shade(h, ramp) for h in hues], axis=1)
    bar.ax.pcolormesh(np.linspace(0.0, 1.0, len(hues) + 1), levels, columns, shading="flat")
    bar.ax.set_xlim(0.0, 1.0)
    bar.ax.xaxis.set_major_locator(NullLocator())
    if isinstance(norm, LogNorm):
        _plain_ticks(bar.ax.yaxis, log=True)
    else:
        bar.ax.yaxis.set_major_formatter(FuncFormatter(_money))
    bar.set_label(f"{words} of the winner{f' ({currency})' if currency else ''}")


def _edges(centres: np.ndarray, log: bool) -> np.ndarray:
    """Cell edges halfway between grid values (geometrically on a log axis); the outer
    edges are the grid's own ends, so the map never shows values outside the sweep (a
    negative defect density, say)."""
    c = np.log(centres) if log else centres.astype(float)
    if len(c) == 1:
        edges = np.array([c[0] - 0.5, c[0] + 0.5]) if log else c[0] * np.array([0.9, 1.1])
        if not log and c[0] == 0:
            edges = np.array([0.0, 1.0])
    else:
        mid = (c[1:] + c[:-1]) / 2
        edges = np.concatenate([[c[0]], mid, [c[-1]]])
    return np.exp(edges) if log else np.sort(edges)


@literal_text
def tornado_figure(sensitivity: Sensitivity, currency: str = "", words: str = "profit") -> Figure:
    """Change in the winner's profit (``words``: the objective) at the low and high end
    of each input's range."""
    table = sensitivity.table.iloc[::-1]  # largest swing on top
    fig, ax = _figure(9.0, max(3.2, 0.55 * len(table) + 2.0))
    y = np.arange(len(table))
    low = table["change_low"].to_numpy(dtype=float)
    high = table["change_high"].to_numpy(dtype=float)
    ax.barh(y, np.nan_to_num(low), color="tab:blue", label="input at low end")
    ax.barh(y, np.nan_to_num(high), color="tab:orange", alpha=0.85, label="input at high end")
    labels = [
        f"{row.input}\n[{plain_number(row.low)} .. {plain_number(row.high)}"
        f"{' ' + row.unit if row.unit else ''}]"
        for row in table.itertuples()
    ]
    ax.set_yticks(y, labels, fontsize=8)
    ax.axvline(0, color="k", lw=0.8)
    ax.xaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_xlabel(
        f"change in {words}{f' ({currency})' if currency else ''} from "
        f"{_money(sensitivity.base_profit)}"
    )
    _title(fig, f"Sensitivity of the winning design's {words} (design held fixed)")
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _footer(fig)
    return fig


@literal_text
def uncertainty_figure(result: Uncertainty, currency: str = "", words: str = "profit") -> Figure:
    """Histogram and empirical CDF of profit (``words``: the objective) for each design,
    P10/P50/P90 marked."""
    ranks = len(result.summary)
    # one legend line per rank plus up to two for its design, under the plots
    fig = Figure(figsize=(10.0, 4.8 + 0.42 * ranks), layout="constrained")
    gs = fig.add_gridspec(2, 2, height_ratios=(1, 0.001))
    hist_ax, cdf_ax = fig.add_subplot(gs[0, 0]), fig.add_subplot(gs[0, 1])
    colors = plt.get_cmap("tab10")
    finite = result.profit[np.isfinite(result.profit)]
    bins = np.linspace(finite.min(), finite.max(), 41) if finite.size else 10
    # the design itself under its kind: top designs often share one kind and differ
    # only late in the summary, so it is wrapped rather than cut short
    chars = int(8.6 * 72 / (0.6 * 7))
    for k, row in result.summary.iterrows():
        values = result.profit[:, k]
        values = np.sort(values[np.isfinite(values)])
        if values.size == 0:
            continue
        label = (
            f"rank {row['rank']}: {row['design_kind']} (best in {100 * row['prob_best']:.0f}%)\n"
            + "\n".join(textwrap.wrap(str(row["design"]), chars, max_lines=2, placeholder=" ..."))
        )
        color = colors(k % 10)
        hist_ax.hist(values, bins=bins, histtype="step", color=color, lw=1.4, label=label)
        cdf_ax.step(
            values,
            np.arange(1, values.size + 1) / values.size,
            where="post",
            color=color,
            lw=1.4,
        )
        for q in ("p10", "p50", "p90"):
            cdf_ax.plot(row[q], int(q[1:]) / 100, "o", color=color, ms=4)
    for ax in (hist_ax, cdf_ax):
        ax.xaxis.set_major_formatter(FuncFormatter(_money))
        ax.set_xlabel(f"{words}{f' ({currency})' if currency else ''}")
    hist_ax.set_ylabel("samples")
    cdf_ax.set_ylabel("fraction of samples at or below")
    cdf_ax.set_yticks([0, 0.1, 0.5, 0.9, 1.0])
    cdf_ax.grid(alpha=0.3)
    handles, labels = hist_ax.get_legend_handles_labels()
    _key_row(fig, gs, 1).legend(
        handles,
        labels,
        fontsize=7,
        loc="upper center",
        bbox_to_anchor=(0.5, 1.0),
        frameon=False,
    )
    _title(
        fig,
        f"{words.capitalize()} over {len(result.samples):,} samples (seed {result.seed}); "
        "dots: P10, P50, P90",
    )
    _footer(fig)
    return fig


OPTIMUM_COLOR = "tab:blue"
OTHER_COLOR = "0.68"
ROW_INCHES = 0.42  # height per row of the decision figure


@literal_text
def decision_figure(rows: list[dict], title: str, currency: str = "") -> Figure:
    """Best profit of each architecture as a horizontal bar, most profitable on top.

    Each row has "architecture", "profit" (None when no admissible design fills the
    row), "bound" (upper bound on the row's profit), "proven", "optimum" and "reason"
    (why the row is empty). The optimum is highlighted; an unproven row has a whisker
    from its profit out to its bound; an empty row says why in place of its bar. The
    right-hand labels give each row's profit (and bound) in money.
    """
    if not rows:
        raise ValueError("decision_figure needs at least one row")
    ordered = sorted(
        rows, key=lambda r: (r.get("profit") is None, -(r.get("profit") or 0.0))
    )  # stable: equal profits keep the caller's order
    n = len(ordered)
    names = [
        textwrap.wrap(str(r.get("architecture", "")), 42, max_lines=3, placeholder=" ...") or [""]
        for r in ordered
    ]
    # rows far enough apart for the longest name's lines
    pitch = max(ROW_INCHES, 0.15 * max(len(lines) for lines in names) + 0.08)
    fig = Figure(figsize=(10.0, 2.0 + pitch * max(n, 2)), layout="constrained")
    gs = fig.add_gridspec(2, 1, height_ratios=(1, 0.001))
    ax = fig.add_subplot(gs[0, 0])
    filled = [i for i, r in enumerate(ordered) if r.get("profit") is not None]
    profits = [float(ordered[i]["profit"]) for i in filled]
    colors = [OPTIMUM_COLOR if ordered[i].get("optimum") else OTHER_COLOR for i in filled]
    ax.barh(filled, profits, height=0.62, color=colors, zorder=2)

    whiskers = [
        (i, float(ordered[i]["profit"]), float(ordered[i]["bound"]))
        for i in filled
        if not ordered[i].get("proven")
        and ordered[i].get("bound") is not None
        and math.isfinite(float(ordered[i]["bound"]))
        and float(ordered[i]["bound"]) > float(ordered[i]["profit"])
    ]
    for i, start, bound in whiskers:
        ax.plot([start, bound], [i, i], color="0.15", lw=1.2, zorder=3)
        ax.plot([bound], [i], marker="|", ms=11, mew=1.4, color="0.15", zorder=3)
        ax.annotate(
            "bound",
            (bound, i),
            xytext=(4, 0),
            textcoords="offset points",
            ha="left",
            va="center",
            fontsize=7,
            color="0.15",
        )

    ends = [0.0, *profits, *(b for _, _, b in whiskers)]
    lo, hi = min(ends), max(ends)
    span = (hi - lo) or max(abs(hi), 1.0)
    # right pad: room for the "bound" notes
    ax.set_xlim(lo - 0.03 * span, hi + (0.1 if whiskers else 0.04) * span)
    ax.set_ylim(n - 0.5, -0.5)  # first row on top
    ax.axvline(0.0, color="k", lw=0.8, zorder=2)

    # an empty row: its reason from the left edge, wrapped to the axes' width
    left_edge = blended_transform_factory(ax.transAxes, ax.transData)
    for i, row in enumerate(ordered):
        if row.get("profit") is not None:
            continue
        why = f"no design: {row.get('reason') or 'no admissible design'}"
        lines = textwrap.wrap(why, 78, max_lines=2, placeholder=" ...")
        ax.text(
            0.01,
            i,
            "\n".join(lines),
            transform=left_edge,
            ha="left",
            va="center",
            fontsize=8,
            style="italic",
            color="0.3",
        )

    ax.set_yticks(range(n), ["\n".join(lines) for lines in names], fontsize=8.5)
    for i, label in enumerate(ax.get_yticklabels()):
        if ordered[i].get("optimum") and ordered[i].get("profit") is not None:
            label.set_fontweight("bold")
    ax.tick_params(axis="y", length=0)
    right = ax.secondary_yaxis("right")
    right.set_yticks(range(n), [_row_value(r) for r in ordered], fontsize=8)
    right.tick_params(length=0)

    ax.xaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_xlabel(f"profit [{currency}]" if currency else "profit")
    ax.set_axisbelow(True)
    ax.grid(axis="x", alpha=0.3)
    handles = [Patch(color=OPTIMUM_COLOR, label="optimum")]
    if any(not ordered[i].get("optimum") for i in filled):
        handles.append(Patch(color=OTHER_COLOR, label="best design of the row"))
    if whiskers:
        handles.append(
            Line2D([], [], color="0.15", lw=1.2, marker="|", ms=9, label="not proven: up to bound")
        )
    _key_row(fig, gs, 1).legend(
        handles=handles,
        fontsize=8,
        loc="upper center",
        bbox_to_anchor=(0.5, 1.0),
        ncols=len(handles),
        frameon=False,
    )
    _title(fig, title)
    _footer(fig)
    return fig


def _row_value(row: dict) -> str:
    """A row's right-hand label: its profit, whether it is the optimum, its bound."""
    profit = row.get("profit")
    if profit is None:
        return ""
    text = _money(float(profit))
    if row.get("optimum"):
        text += ", optimum"
    if not row.get("proven"):
        bound = row.get("bound")
        if bound is None or not math.isfinite(float(bound)):
            text += ", bound unknown"
        elif float(bound) > float(profit):
            text += f", bound {_money(float(bound))}"
        else:
            text += ", not proven"
    return text


@literal_text
def family_comparison_figure(comparison, currency: str = "") -> Figure:
    """Family profit of each option's family optimum beside the sum of its products
    optimised one by one (the gap between the two bars is the reuse premium)."""
    table = comparison.table[np.isfinite(comparison.table["profit"].to_numpy(dtype=float))]
    fig, ax = _figure(max(6.0, 1.6 * len(table) + 3), 5.0)
    x = np.arange(len(table))
    width = 0.38
    family = table["profit"].to_numpy(dtype=float)
    alone = table["alone_profit"].to_numpy(dtype=float)
    ax.bar(x - width / 2, family, width, color="tab:blue", label="family optimum")
    ax.bar(x + width / 2, alone, width, color="0.68", label="each product optimised alone")
    for xi, total, premium in zip(x, family, table["reuse_premium"], strict=True):
        ax.annotate(
            f"premium {_money(premium)}",
            (xi - width / 2, total),
            ha="center",
            va="bottom",
            fontsize=8,
            xytext=(0, 2),
            textcoords="offset points",
        )
    ax.margins(y=0.12)
    ax.axhline(0, color="k", lw=0.8)
    ax.set_xticks(x, [_wrap(str(o), 1.4, 9) for o in table["option"]], fontsize=9)
    ax.yaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_ylabel(f"family profit{f' ({currency})' if currency else ''}")
    _title(fig, "Family optimum of each option against its products designed one by one")
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _footer(fig)
    return fig
