"""Tables and JSON of a design priced over a life plan (the CLI prints these)."""

from __future__ import annotations

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
    lines = ["design,period,volume,unit_price,cash_flow,discount,cumulative"]
    for name, value in values.items():
        for p in value.periods:
            lines.append(
                f"{name},{p.label},{p.volume!r},{p.unit_price!r},{p.cash_flow!r},"
                f"{p.discount!r},{p.cumulative!r}"
            )
    return "\n".join(lines) + "\n"


def cumulative_figure(values: dict, currency: str, title: str):
    """Cumulative discounted value per period of each design, the crossover marked."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    figure, axes = plt.subplots(figsize=(7.5, 4.2))
    series = {}
    for name, value in values.items():
        x = list(range(1, len(value.periods) + 1))
        y = [p.cumulative / 1e6 for p in value.periods]
        series[name] = y
        axes.plot(x, y, marker="o", label=name)
    names = list(series)
    if len(names) == 2:
        a, b = series[names[0]], series[names[1]]
        for k in range(1, len(a)):
            if (a[k - 1] - b[k - 1]) * (a[k] - b[k]) < 0:
                axes.axvline(k + 0.5, color="grey", linestyle=":", label="crossover")
                break
    labels = [p.label for p in next(iter(values.values())).periods]
    axes.set_xticks(range(1, len(labels) + 1), labels)
    axes.axhline(0.0, color="black", linewidth=0.6)
    axes.set_xlabel("period")
    axes.set_ylabel(f"cumulative discounted value [M {currency}]")
    axes.set_title(title, fontsize=10)
    axes.legend(fontsize=8)
    figure.tight_layout()
    return figure
