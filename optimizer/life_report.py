"""Tables and JSON of a design priced over a life plan (the CLI prints these)."""

from __future__ import annotations

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
