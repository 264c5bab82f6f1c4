"""Figures drawn on the demo problems: no text touches another or leaves the figure.

Every figure function is drawn with the Agg renderer exactly as the CLI saves it (math
parsing off, demo mark added); each text actually drawn is collected and their window
extents compared. Sweeps are small so the whole file stays fast.
"""

from __future__ import annotations

import itertools
from contextlib import contextmanager
from pathlib import Path

import matplotlib
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure
from matplotlib.text import Text

from optimizer.explore.compare import compare, process_options
from optimizer.explore.paths import load_study
from optimizer.explore.plots import (
    _money,
    _shade,
    comparison_figure,
    decision_figure,
    mark_invented,
    sweep_figure,
    tornado_figure,
    uncertainty_figure,
    winner_map_figure,
)
from optimizer.explore.sensitivity import ranges_from_study, run_sensitivity
from optimizer.explore.sweep import make_axis, run_sweep
from optimizer.explore.uncertainty import run_uncertainty

PROBLEMS = Path(__file__).resolve().parent.parent / "problems"
SLACK = 0.5  # pixels: antialiasing may make touching boxes share a fraction of a pixel


@contextmanager
def _drawn_texts():
    """Record every Text that really draws (visible, non-empty, tick labels in view)."""
    drawn: list[Text] = []
    draw = Text.draw

    def spy(self, renderer):
        if self.get_visible() and self.get_text().strip():
            drawn.append(self)
        return draw(self, renderer)

    Text.draw = spy
    try:
        yield drawn
    finally:
        Text.draw = draw


def text_collisions(fig: Figure) -> list[str]:
    """Pairs of drawn texts whose boxes overlap, and texts outside the figure (empty
    when the figure is clean). Draws as the CLI saves: Agg, math parsing off."""
    FigureCanvasAgg(fig)
    with matplotlib.rc_context({"text.parse_math": False}), _drawn_texts() as drawn:
        fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    boxes = [(t, t.get_window_extent(renderer)) for t in dict.fromkeys(drawn)]
    page = fig.bbox
    problems = []
    for text, box in boxes:
        if (
            box.x0 < page.x0 - SLACK
            or box.y0 < page.y0 - SLACK
            or box.x1 > page.x1 + SLACK
            or box.y1 > page.y1 + SLACK
        ):
            problems.append(f"outside the figure: {text.get_text()!r} {box.bounds}")
    for (a, box_a), (b, box_b) in itertools.combinations(boxes, 2):
        width = min(box_a.x1, box_b.x1) - max(box_a.x0, box_b.x0)
        height = min(box_a.y1, box_b.y1) - max(box_a.y0, box_b.y0)
        if width > SLACK and height > SLACK:
            problems.append(f"overlap: {a.get_text()!r} and {b.get_text()!r}")
    return problems


def _check(fig: Figure) -> Figure:
    mark_invented(fig)  # the CLI adds it to the demos' figures
    assert text_collisions(fig) == []
    return fig


@pytest.fixture(scope="module")
def edge():
    return load_study(PROBLEMS / "edge_accelerator.toml")


@pytest.fixture(scope="module")
def server():
    return load_study(PROBLEMS / "server_processor.toml")


@pytest.fixture(scope="module")
def map_sweep(edge):
    # two winners (cheap fine wafers win at high volume) and losses at low volume
    axes = [
        make_axis("market.volume", 1e4, 1e7, 4, log=True),
        make_axis("process.fine.wafer_cost", 6000, 20000, 3, option="--vary2"),
    ]
    return run_sweep(edge, axes)


# ---------------------------------------------------------------- the check itself
def test_the_check_finds_overlaps_and_text_outside():
    fig = Figure(figsize=(4, 3))
    ax = fig.add_subplot()
    ax.set_title("a title")
    fig.text(0.5, 0.97, "over the title", ha="center", va="top")
    fig.text(0.9, 0.5, "running off the right edge")
    problems = text_collisions(fig)
    assert any("over the title" in p and "a title" in p for p in problems)
    assert any(p.startswith("outside the figure: 'running off") for p in problems)


# ---------------------------------------------------------------- every figure, demo data
def test_comparison_figure_is_clean(edge, server):
    _check(comparison_figure(compare(process_options(edge)), "USD"))


def test_one_dimensional_sweep_figure_is_clean(edge):
    sweep = run_sweep(edge, [make_axis("process.fine.wafer_cost", 6000, 20000, 4)])
    assert len(sweep.crossovers) >= 1  # a labelled crossover is drawn
    _check(sweep_figure(sweep, "USD"))


def test_log_axis_ticks_are_plain_text(edge):
    sweep = run_sweep(edge, [make_axis("market.volume", 1e5, 1e8, 3, log=True)])
    fig = _check(sweep_figure(sweep, "USD"))
    labels = [t.get_text() for t in fig.axes[1].get_xticklabels() if t.get_text()]
    assert "1 M" in labels and not any("$" in t or "mathdefault" in t for t in labels)


def test_winner_map_figure_is_clean(map_sweep):
    _check(sweep_figure(map_sweep, "USD"))


def test_tornado_figure_is_clean(server):
    _check(tornado_figure(run_sensitivity(server, ranges_from_study(server)), "USD"))


def test_uncertainty_figure_is_clean(server):
    _check(uncertainty_figure(run_uncertainty(server, samples=40, top=3), "USD"))


# ---------------------------------------------------------------- winner map shading
def test_winner_map_shades_each_cell_by_the_winners_profit(map_sweep):
    points = map_sweep.points
    assert points["design_kind"].nunique() >= 2
    assert points["profit"].min() < 0 < points["profit"].max()
    fig = winner_map_figure(map_sweep, "USD")
    ax = fig.axes[0]
    cells = np.asarray(ax.collections[0].get_array()).reshape(-1, 3)  # rows of y, x fastest
    kinds = list(dict.fromkeys(points["design_kind"]))
    hues = [np.array(to_rgb(matplotlib.colormaps["tab10"](i))) for i in range(len(kinds))]
    for cell, kind in zip(cells, points["design_kind"], strict=True):
        # every cell is its winner's colour mixed with white
        hue = hues[kinds.index(kind)]
        share = (1 - cell) @ (1 - hue) / ((1 - hue) @ (1 - hue))
        assert 0 < share <= 1 and np.allclose(cell, 1 - share * (1 - hue), atol=1e-9)
    for kind in kinds:
        mine = points["design_kind"].to_numpy() == kind
        darkness = (1 - cells[mine]).sum(axis=1)
        # more profit, more colour
        assert np.all(np.diff(darkness[np.argsort(points["profit"].to_numpy()[mine])]) >= -1e-12)
    # the key says what a shade is worth, in the problem's currency
    key = fig.axes[1]
    assert key.get_ylabel() == "profit of the winner (USD)"
    assert any(t.get_text().endswith((" M", " bn")) for t in key.get_yticklabels())
    legend = fig.axes[2].get_legend()
    assert {t.get_text() for t in legend.get_texts()} >= {"profit = 0", "border between winners"}


def test_shade_runs_from_pale_to_full_colour():
    low, high = _shade("tab:green", np.array([0.0, 1.0]))
    assert np.allclose(high, to_rgb("tab:green"))
    assert np.all(low > high)  # paler, yet not white
    assert not np.allclose(low, 1.0)


# ---------------------------------------------------------------- decision table
def _rows(n: int) -> list[dict]:
    rows = []
    for k in range(n):
        profit = 4.0e8 - 1.1e8 * k  # the later rows lose money
        rows.append(
            {
                "architecture": f"organic substrate, {k + 1} dies: {k + 1}x leading"
                + (" + 1x mature interface die with a long name" if k % 3 == 2 else ""),
                "profit": profit,
                "bound": profit + (0.0 if k % 2 == 0 else 6.0e7),
                "proven": k % 2 == 0,
                "optimum": k == 0,
                "reason": "",
            }
        )
    rows.append(
        {
            "architecture": "silicon interposer, 6 dies",
            "profit": None,
            "bound": float("-inf"),
            "proven": True,
            "optimum": False,
            "reason": "the interposer cannot hold 6 dies of this size within the reticle "
            "limit; a larger interposer or fewer dies would be needed for this architecture",
        }
    )
    return rows


@pytest.mark.parametrize("n", [1, 5, 30])
def test_decision_figure_bars_are_the_profits(n):
    rows = _rows(n)
    shuffled = rows[::-1]  # the figure orders them itself
    fig = _check(decision_figure(shuffled, "Best design of each architecture (invented)", "USD"))
    ax = fig.axes[0]
    bars = ax.patches
    assert len(bars) == sum(r["profit"] is not None for r in rows)
    widths = [b.get_width() for b in sorted(bars, key=lambda b: b.get_y())]
    # first row on top (inverted y), most profitable first
    assert widths == [r["profit"] for r in rows if r["profit"] is not None]
    assert ax.get_xlabel() == "profit [USD]"
    assert ax.get_ylim()[0] > ax.get_ylim()[1]
    texts = [t.get_text() for t in ax.texts]
    assert any(t.startswith("no design: the interposer") for t in texts)
    assert texts.count("bound") == sum(1 for r in rows[:n] if not r["proven"])
    optimum = next(b for b in bars if b.get_width() == rows[0]["profit"])
    others = [b for b in bars if b is not optimum]
    assert all(b.get_facecolor() != optimum.get_facecolor() for b in others)


def test_decision_figure_negative_only_and_empty_only():
    losing = [
        {
            "architecture": "wire bond, 1 die",
            "profit": -2.0e6,
            "bound": -1.0e6,
            "proven": False,
            "optimum": True,
            "reason": "",
        },
        {
            "architecture": "flip chip, 1 die",
            "profit": -5.0e6,
            "bound": -5.0e6,
            "proven": True,
            "optimum": False,
            "reason": "",
        },
    ]
    fig = _check(decision_figure(losing, "All lose money", "EUR"))
    ax = fig.axes[0]
    assert sorted(b.get_width() for b in ax.patches) == [-5.0e6, -2.0e6]
    lo, hi = ax.get_xlim()
    assert lo < -5.0e6 and hi >= 0.0
    empty = [{**losing[1], "profit": None, "reason": "too large for the reticle"}]
    fig = _check(decision_figure(empty, "Nothing fits"))
    assert len(fig.axes[0].patches) == 0 and fig.axes[0].get_xlabel() == "profit"


def test_money_labels_round_before_choosing_the_unit():
    assert _money(999_960) == "1 M" and _money(-2.5e9) == "-2.5 bn" and _money(12.5) == "12.5"
