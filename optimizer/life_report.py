"""Tables and JSON of a design priced over a life plan (the CLI prints these)."""

from __future__ import annotations

import csv
import io
import math

from rich.console import Group
from rich.table import Table
from rich.text import Text

from optimizer.report import cells, literal_table, money, percent


def life_table(value, currency: str) -> Table:
    table = literal_table(
        f"Design '{value.design}' over its life (money in {currency}; cash flows discounted "
        "at each period's end)"
    )
    for col in (
        "period",
        "volume",
        "unit price",
        "die yields",
        "cost/good unit",
        "cash flow",
        "discount",
        "cumulative",
    ):
        table.add_column(col, justify="left" if col in ("period", "die yields") else "right")
    for p in value.periods:
        yields = " / ".join(percent(d.die_yield, 1) for d in p.result.dies)
        table.add_row(
            *cells(
                p.label,
                f"{p.volume:,.0f}",
                f"{p.unit_price:,.2f}",
                yields,
                f"{p.result.manufacturing_cost_per_good_unit:,.2f}",
                money(p.cash_flow),
                f"{p.discount:.4f}",
                money(p.cumulative),
            )
        )
    return table


def life_view(value, currency: str) -> Group:
    payback = value.payback or "not within the life"
    return Group(
        life_table(value, currency),
        Text(
            f"net present value {money(value.npv, currency)}; one-time costs (NRE and "
            f"yield spend) {money(value.one_time, currency)} at discount "
            f"{value.one_time_discount:.4f}; pays back in {payback}"
        ),
    )


def life_dict(value) -> dict:
    return {
        "design": value.design,
        "npv": value.npv,
        "one_time": value.one_time,
        "one_time_discount": value.one_time_discount,
        "payback": value.payback,
        "periods": [
            {
                "period": p.label,
                "volume": p.volume,
                "unit_price": p.unit_price,
                "die_yields": [d.die_yield for d in p.result.dies],
                "manufacturing_cost_per_good_unit": p.result.manufacturing_cost_per_good_unit,
                "cash_flow": p.cash_flow,
                "discount": p.discount,
                "cumulative": p.cumulative,
            }
            for p in value.periods
        ],
    }


def solution_view(solution, currency: str) -> Group:
    """The life optimum: headline, proof, its periods, and the first period's best."""
    best = solution.best
    if solution.proven:
        status = "proven optimal over the stated choices"
    elif not math.isfinite(solution.npv_bound):
        status = "best found; no bound proven within the time limit"
    else:
        status = (
            f"best found; NPV bound {money(solution.npv_bound, currency)}, gap "
            f"{percent(solution.gap, 3)}"
        )
    parts = [
        Text.assemble(
            (f"Most net present value over the life: {money(best.npv, currency)}", "bold"),
            f"  ({status}, {solution.seconds:.2f} s)",
        ),
        Text(
            "What the answer covers: one design for the whole life, each period priced with "
            "its own numbers; cash flows discounted at each period's end, one-time costs "
            "at the plan's one-time point."
        ),
        Text(f"Design: {design_line(best.periods[0].result)}"),
        life_view(best, currency),
    ]
    if solution.rows:
        parts.append(table_view(solution.rows, currency))
    first = solution.first_period_best
    if first is not None:
        label = best.periods[0].label
        same = design_line(first.periods[0].result) == design_line(best.periods[0].result)
        if same:
            parts.append(Text(f"Picked on {label}'s numbers alone, the best design is the same."))
        else:
            parts.append(
                Text(
                    f"Picked on {label}'s numbers alone, the best design would be "
                    f"{design_line(first.periods[0].result)}; over the life it earns "
                    f"{money(first.npv, currency)}, {money(best.npv - first.npv, currency)} less."
                )
            )
    return Group(*parts)


def design_line(result) -> str:
    dies = " + ".join(
        f"{d.copies}x [{', '.join(f'{b} x{n}' for b, n in d.blocks.items())}] on {d.process}"
        for d in result.dies
    )
    return f"{dies}, {result.packaging}"


def periods_csv(values: dict) -> str:
    """Per design and period: cash flow and cumulative discounted value."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(
        ["design", "period", "volume", "unit_price", "cash_flow", "discount", "cumulative"]
    )
    for name, value in values.items():
        for p in value.periods:
            writer.writerow(
                [
                    name,
                    p.label,
                    repr(p.volume),
                    repr(p.unit_price),
                    repr(p.cash_flow),
                    repr(p.discount),
                    repr(p.cumulative),
                ]
            )
    return out.getvalue()


def crossovers(optimum: list[float], other: list[float]) -> list[int]:
    """Indices k (0-based) where ``other``'s cumulative value passes ``optimum``'s between
    period k-1 and period k (either way)."""
    out = []
    for k in range(1, len(optimum)):
        before, after = other[k - 1] - optimum[k - 1], other[k] - optimum[k]
        if before * after < 0 or (before > 0 and after == 0):
            out.append(k)
    return out


def cumulative_figure(values: dict, currency: str, title: str):
    """Cumulative discounted value per period of each design (the first is the optimum);
    where another design's curve crosses the optimum's, the crossing is marked."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    figure, axes = plt.subplots(figsize=(9.0, 4.8))
    colours = plt.get_cmap("tab20").colors
    series = {}
    for index, (name, value) in enumerate(values.items()):
        x = list(range(1, len(value.periods) + 1))
        y = [p.cumulative / 1e6 for p in value.periods]
        series[name] = y
        axes.plot(
            x,
            y,
            marker="o" if index == 0 else ".",
            linewidth=2.2 if index == 0 else 1.2,
            label=name,
            color=colours[(2 * index) % 20 + (index // 10) % 2],
            zorder=3 if index == 0 else 2,
        )
    names = list(series)
    marked = False
    for name in names[1:]:
        for k in crossovers(series[names[0]], series[name]):
            # the crossing point of the two straight segments between periods k and k+1
            a0, a1 = series[names[0]][k - 1], series[names[0]][k]
            b0, b1 = series[name][k - 1], series[name][k]
            t = (b0 - a0) / ((b0 - a0) - (b1 - a1))
            axes.plot(
                [k + t],
                [a0 + t * (a1 - a0)],
                marker="X",
                markersize=10,
                color="black",
                linestyle="none",
                label=None if marked else "crossover",
                zorder=4,
            )
            marked = True
    labels = [p.label for p in next(iter(values.values())).periods]
    step = max(1, len(labels) // 12)
    axes.set_xticks(range(1, len(labels) + 1, step), labels[::step])
    axes.axhline(0.0, color="black", linewidth=0.6)
    axes.set_xlabel("period")
    axes.set_ylabel(f"cumulative discounted value [M {currency}]")
    axes.set_title(title, fontsize=10)
    # beside the axes: a dozen curves would hide each other's ends under a legend
    axes.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    figure.tight_layout()
    return figure


def row_status(row) -> str:
    if row.value is None:
        return row.reason
    if row.proven:
        return "proven"
    if not math.isfinite(row.npv_bound):
        return "open, no bound within the time"
    return f"open, gap {percent(row.gap, 2)}"


def table_view(rows, currency: str) -> Table:
    """The decision table over the life: each architecture's design with the most NPV."""
    optimum = next((r for r in rows if r.optimum), None)
    table = literal_table(f"Best design of each architecture over the life (money in {currency})")
    for col in ("architecture", "NPV", "vs optimum", "pays back", "status", "design"):
        table.add_column(col, justify="right" if col in ("NPV", "vs optimum") else "left")
    for row in rows:
        if row.value is None:
            table.add_row(*cells(row.label, "-", "-", "-", row_status(row), ""))
            continue
        behind = "optimum" if row.optimum else money(row.npv - optimum.npv)
        table.add_row(
            *cells(
                row.label,
                money(row.npv),
                behind,
                row.value.payback or "not within the life",
                row_status(row),
                design_line(row.value.periods[0].result),
            )
        )
    return table


def row_dict(row) -> dict:
    return {
        "architecture": row.label,
        "packaging": row.packaging,
        "n_dies": row.n_dies,
        "optimum": row.optimum,
        "npv": row.npv if row.value is not None else None,
        "proven": row.proven,
        "npv_bound": row.npv_bound,
        "gap": row.gap if row.value is not None else None,
        "payback": row.value.payback if row.value is not None else None,
        "design": design_line(row.value.periods[0].result) if row.value is not None else None,
        "reason": row.reason,
    }


def curves(solution, first_label: str) -> dict:
    """The designs drawn over the life: the optimum, the first period's pick, and the
    best design of each other architecture (each design once)."""
    values = {"life optimum": solution.best}
    seen = {design_line(solution.best.periods[0].result)}
    first = solution.first_period_best
    if first is not None and design_line(first.periods[0].result) not in seen:
        values[f"picked on {first_label} alone"] = first
        seen.add(design_line(first.periods[0].result))
    for row in solution.rows:
        if row.value is None or row.optimum:
            continue
        line = design_line(row.value.periods[0].result)
        if line not in seen:
            values[f"best {row.label}"] = row.value
            seen.add(line)
    return values
