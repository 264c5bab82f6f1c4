"""Figures of exploration results (matplotlib, Agg backend); the CLI writes them.

Every function returns a :class:`matplotlib.figure.Figure` and draws nothing on screen.
Money axes are in the problem's currency, scaled to thousands, millions or billions.
Names from problem files are drawn as written: a '$' in a name does not start math.
"""

from __future__ import annotations

import functools
import math

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.colors import ListedColormap  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import FuncFormatter  # noqa: E402

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
    size = abs(value)
    for scale, suffix in ((1e9, " bn"), (1e6, " M"), (1e3, " k")):
        if size >= scale:
            return f"{value / scale:,.3g}{suffix}"
    return f"{value:,.3g}"


def _figure(width: float = 8.0, height: float = 4.8) -> tuple[Figure, plt.Axes]:
    fig = Figure(figsize=(width, height), layout="constrained")
    return fig, fig.add_subplot()


def mark_invented(fig: Figure) -> None:
    """Say on the figure that its data are invented (the shipped demos say so in their
    titles); a user's own figures carry no such claim."""
    fig.text(0.99, 0.005, "demo data invented", fontsize=7, color="0.4", ha="right", va="bottom")


def _footer(fig: Figure) -> None:
    # keep a strip at the bottom free of axes for the caution line
    fig.get_layout_engine().set(rect=(0, 0.035, 1, 0.965))
    fig.text(0.01, 0.005, CAUTION, fontsize=7, color="0.4", ha="left", va="bottom")


@literal_text
def comparison_figure(comparison: Comparison, currency: str = "") -> Figure:
    """Stacked bars: cost per good unit of each option's winner, by component."""
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
    ax.set_xticks(x, [str(o) for o in table["option"]], rotation=15, ha="right")
    ax.set_ylabel(f"cost per good unit{f' ({currency})' if currency else ''}")
    ax.set_title("Winning design of each option: cost per good unit by component")
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _footer(fig)
    return fig


@literal_text
def sweep_figure(sweep: SweepResult, currency: str = "") -> Figure:
    """1-D: profit of the best design of each winning kind (top) and how far each is
    behind the optimum (bottom), crossovers dashed; 2-D: map of the winning kind."""
    if len(sweep.axes) == 2:
        return winner_map_figure(sweep)
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
            line = ax.plot(grid, values, label=kind, lw=1.6)[0]
            gap = values - best
            gaps.append(gap)
            behind.plot(grid, gap, lw=1.4, color=line.get_color())
    ax.plot(x, best, "k.", ms=4, label="optimum at grid point")
    for _, row in sweep.crossovers.iterrows():
        where = row["crossing"] if math.isfinite(row["crossing"]) else row["grid_high"]
        for a in (ax, behind):
            a.axvline(where, color="0.3", ls="--", lw=0.9)
        ax.annotate(
            plain_number(where),
            (where, 1.0),
            xycoords=("data", "axes fraction"),
            rotation=90,
            va="top",
            ha="right",
            fontsize=8,
            color="0.3",
        )
    if axis.log:
        ax.set_xscale("log")
    for a in (ax, behind):
        a.yaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_ylabel(f"profit{unit}")
    ax.set_title("Profit of the best design of each kind; crossovers dashed")
    ax.legend(fontsize=8)
    _finite_limits(ax, sweep)
    behind.set_ylabel(f"behind the optimum{unit}")
    behind.set_xlabel(axis_label(axis.path))
    finite = np.concatenate(gaps) if gaps else np.zeros(1)
    finite = finite[np.isfinite(finite) & (finite < 0)]
    if finite.size:
        # the closest competitors matter; very distant ones are cut off
        behind.set_ylim(1.3 * np.percentile(finite, 50), -0.05 * np.percentile(finite, 50))
    _footer(fig)
    return fig


def _finite_limits(ax: plt.Axes, sweep: SweepResult) -> None:
    # Designs far from their sweet spot can lose orders of magnitude more than the
    # optimum makes; keep the optimum readable.
    best = sweep.points["profit"].to_numpy(dtype=float)
    lo, hi = np.nanmin(best), np.nanmax(best)
    span = max(hi - lo, abs(hi) * 0.05, 1.0)
    ax.set_ylim(lo - 0.15 * span, hi + 0.15 * span)


@literal_text
def winner_map_figure(sweep: SweepResult) -> Figure:
    """2-D sweep: the winning design kind at every grid point."""
    ax_x, ax_y = sweep.axes
    points = sweep.points
    xs = np.unique(points[ax_x.path.text].to_numpy(dtype=float))
    ys = np.unique(points[ax_y.path.text].to_numpy(dtype=float))
    kinds = list(dict.fromkeys(points["design_kind"]))
    code = {k: i for i, k in enumerate(kinds)}
    grid = points["design_kind"].map(code).to_numpy().reshape(len(ys), len(xs))
    fig, ax = _figure(9.0, 5.6)
    colors = plt.get_cmap("tab10")
    cmap = ListedColormap([colors(i % 10) for i in range(len(kinds))])
    ax.pcolormesh(
        _edges(xs, ax_x.log),
        _edges(ys, ax_y.log),
        grid,
        cmap=cmap,
        vmin=-0.5,
        vmax=len(kinds) - 0.5,
        shading="flat",
    )
    if ax_x.log:
        ax.set_xscale("log")
    if ax_y.log:
        ax.set_yscale("log")
    ax.set_xlabel(axis_label(ax_x.path))
    ax.set_ylabel(axis_label(ax_y.path))
    ax.set_title("Winning design kind")
    handles = [Patch(color=colors(i % 10), label=k) for i, k in enumerate(kinds)]
    ax.legend(handles=handles, fontsize=8, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _footer(fig)
    return fig


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
def tornado_figure(sensitivity: Sensitivity, currency: str = "") -> Figure:
    """Change in the winner's profit at the low and high end of each input's range."""
    table = sensitivity.table.iloc[::-1]  # largest swing on top
    fig, ax = _figure(9.0, max(3.0, 0.55 * len(table) + 1.8))
    y = np.arange(len(table))
    low = table["change_low"].to_numpy(dtype=float)
    high = table["change_high"].to_numpy(dtype=float)
    ax.barh(y, np.nan_to_num(low), color="tab:blue", label="input at low end")
    ax.barh(y, np.nan_to_num(high), color="tab:orange", alpha=0.85, label="input at high end")
    labels = [
        f"{row.input}\n[{_num(row.low)} .. {_num(row.high)}{' ' + row.unit if row.unit else ''}]"
        for row in table.itertuples()
    ]
    ax.set_yticks(y, labels, fontsize=8)
    ax.axvline(0, color="k", lw=0.8)
    ax.xaxis.set_major_formatter(FuncFormatter(_money))
    ax.set_xlabel(
        f"change in profit{f' ({currency})' if currency else ''} from "
        f"{_money(sensitivity.base_profit)}"
    )
    ax.set_title("Sensitivity of the winning design's profit (design held fixed)")
    ax.legend(fontsize=8)
    _footer(fig)
    return fig


def _num(value: float) -> str:
    return f"{value:.4g}"


@literal_text
def uncertainty_figure(result: Uncertainty, currency: str = "") -> Figure:
    """Histogram and empirical CDF of profit for each design, P10/P50/P90 marked."""
    fig = Figure(figsize=(10.0, 4.8), layout="constrained")
    hist_ax, cdf_ax = fig.subplots(1, 2)
    colors = plt.get_cmap("tab10")
    finite = result.profit[np.isfinite(result.profit)]
    bins = np.linspace(finite.min(), finite.max(), 41) if finite.size else 10
    for k, row in result.summary.iterrows():
        values = result.profit[:, k]
        values = np.sort(values[np.isfinite(values)])
        if values.size == 0:
            continue
        label = f"rank {row['rank']}: {row['design_kind']} (best in {100 * row['prob_best']:.0f}%)"
        color = colors(k % 10)
        hist_ax.hist(values, bins=bins, histtype="step", color=color, lw=1.4, label=label)
        cdf_ax.step(
            values,
            np.arange(1, values.size + 1) / values.size,
            where="post",
            color=color,
            lw=1.4,
            label=label,
        )
        for q in ("p10", "p50", "p90"):
            cdf_ax.plot(row[q], int(q[1:]) / 100, "o", color=color, ms=4)
    for ax in (hist_ax, cdf_ax):
        ax.xaxis.set_major_formatter(FuncFormatter(_money))
        ax.set_xlabel(f"profit{f' ({currency})' if currency else ''}")
    hist_ax.set_ylabel("samples")
    cdf_ax.set_ylabel("fraction of samples at or below")
    cdf_ax.set_yticks([0, 0.1, 0.5, 0.9, 1.0])
    cdf_ax.grid(alpha=0.3)
    hist_ax.legend(fontsize=7)
    fig.suptitle(
        f"Profit over {len(result.samples):,} samples (seed {result.seed}); dots: P10, P50, P90"
    )
    _footer(fig)
    return fig
