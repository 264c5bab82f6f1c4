"""Product families as the user sees them: tables, JSON and CSV of a family solve,
family designs priced, and what a family check understood.

Like :mod:`optimizer.report`, functions return rich renderables or text and never print.
Only rich loads at import; the solver's types are named for type checking only.
"""

from __future__ import annotations

import csv
import io
import math
from typing import TYPE_CHECKING

from rich.console import Group
from rich.table import Table
from rich.text import Text

from optimizer.report import cells, literal_table, money, percent, short_design

if TYPE_CHECKING:
    from optimizer.designs import DesignResult
    from optimizer.family import Family
    from optimizer.solver.family import FamilySolution, LibraryDie

PROOF = (
    "one design per product over each product's stated choices; a die design (process, "
    "blocks, spares, repair, margin, critical-area option, area) is paid for once however "
    "many products use it, and a process has one defect-density target for the family"
)


# ---------------------------------------------------------------- the die library
def library_of(names: list[str], designs: list[DesignResult]) -> list[LibraryDie]:
    """The distinct die designs of one design per product, shared ones first (the
    order :func:`optimizer.solver.family.solve_family` lists its library in)."""
    from optimizer.solver.family import LibraryDie, die_key

    out: dict[tuple, LibraryDie] = {}
    for name, design in zip(names, designs, strict=True):
        for die in design.dies:
            key = die_key(die)
            if key not in out:
                out[key] = LibraryDie(key, die.process, dict(die.blocks), die.area_mm2, die.nre, {})
            out[key].users[name] = out[key].users.get(name, 0) + die.copies
    return sorted(out.values(), key=lambda d: (-len(d.users), -d.nre))


def labels(library: list[LibraryDie]) -> dict[tuple, str]:
    """Die key -> its short name in the library table (D1, D2, ...)."""
    return {die.key: f"D{i}" for i, die in enumerate(library, start=1)}


def _extras(key: tuple) -> str:
    """Spares, repair, margin and critical-area option held in a die key."""
    _, _, spares, repair, sigma, option, _ = key
    parts = [f"+{v} spare {k}" for k, v in spares]
    parts += [f"{v} repairs {k}" for k, v in repair]
    if sigma is not None and math.isfinite(sigma):
        parts.append(f"margin {sigma:g} sigma")
    if option:
        parts.append(f"critical-area option {option}")
    return ", ".join(parts) or "-"


def _blocks(blocks: dict[str, int]) -> str:
    return ", ".join(f"{n} x{c}" if c > 1 else n for n, c in blocks.items())


def _users(die: LibraryDie) -> str:
    return ", ".join(f"{p} ({c}/unit)" for p, c in die.users.items())


def library_table(library: list[LibraryDie], currency: str) -> Table:
    table = literal_table(f"Die library: each die design paid for once (money in {currency})")
    for col in ("die", "process", "blocks", "options", "area mm^2", "NRE", "used by (copies)"):
        table.add_column(col, justify="right" if col in ("area mm^2", "NRE") else "left")
    for label, die in zip(labels(library).values(), library, strict=True):
        table.add_row(
            *cells(
                label,
                die.process,
                _blocks(die.blocks),
                _extras(die.key),
                f"{die.area_mm2:.1f}",
                money(die.nre),
                _users(die),
            )
        )
    return table


def _made_of(design: DesignResult, names: dict[tuple, str]) -> str:
    from optimizer.solver.family import die_key

    dies = " + ".join(f"{die.copies}x {names[die_key(die)]}" for die in design.dies)
    return f"{dies} on {design.packaging}"


# ---------------------------------------------------------------- P&L
def manufacturing_cost(design: DesignResult) -> float:
    """Manufacturing cost of the whole volume (NRE and one-time spend excluded)."""
    return design.volume * design.manufacturing_cost_per_good_unit


def pnl_table(
    names: list[str],
    designs: list[DesignResult],
    library: list[LibraryDie],
    alone: list[DesignResult] | None = None,
) -> Table:
    """Each product's design and its profit and loss as if it were made alone (paying
    every die's NRE itself), with the column sums."""
    cur = designs[0].currency
    key_names = labels(library)
    salvage = any(d.salvage_revenue for d in designs)
    spend = any(d.improvement_spend for d in designs)
    table = literal_table(
        f"Products, each priced alone: paying its own NRE (money in {cur})", show_lines=True
    )
    cols = ["product", "design", "revenue"]
    if salvage:
        cols.append("salvage (net)")
    cols += ["manufacturing cost", "NRE alone"]
    if spend:
        cols.append("yield spend")
    cols.append("profit alone-priced")
    if alone is not None:
        cols.append("own optimum alone")
    for col in cols:
        table.add_column(col, justify="left" if col in ("product", "design") else "right")

    def row(label: str, text: str, ds: list[DesignResult], own: list[DesignResult] | None):
        values = [label, text, money(sum(d.revenue for d in ds))]
        if salvage:
            values.append(money(sum(d.salvage_revenue for d in ds)))
        values += [money(sum(manufacturing_cost(d) for d in ds)), money(sum(d.nre for d in ds))]
        if spend:
            values.append(money(sum(d.improvement_spend for d in ds)))
        values.append(money(sum(d.profit for d in ds)))
        if own is not None:
            values.append(money(sum(d.profit for d in own)))
        return cells(*values)

    for i, (name, design) in enumerate(zip(names, designs, strict=True)):
        own = [alone[i]] if alone is not None else None
        text = _made_of(design, key_names)
        if design.violations:
            text += f"\nBREAKS RULES: {'; '.join(design.violations)}"
        table.add_row(*row(name, text, [design], own))
    total = row("all products", "", designs, alone)
    table.add_row(*[Text(str(c), style="bold") for c in total])
    return table


def _totals(profit: float, shared_nre: float, shared_targets: float, alone_sum: float, cur: str):
    grid = Table.grid(padding=(0, 2))
    grid.add_column()
    grid.add_column(justify="right")
    grid.add_row(*cells("sum of the products' profits, each priced alone", money(alone_sum, cur)))
    grid.add_row(*cells("+ NRE paid once instead of per product", money(shared_nre, cur)))
    if shared_targets:
        grid.add_row(
            *cells("+ defect-target spend paid once per process", money(shared_targets, cur))
        )
    grid.add_row(Text("family profit", style="bold"), Text(money(profit, cur), style="bold"))
    return grid


def premium_text(solution: FamilySolution) -> Text:
    """The reuse premium and where it comes from, in words."""
    cur = solution.designs[0].currency
    given_up = solution.alone_profit - sum(d.profit for d in solution.designs)
    premium = solution.reuse_premium
    scale = max(abs(solution.profit), 1.0)
    head = (
        f"Reuse premium: {money(premium, cur)} = the family optimum "
        f"{money(solution.profit, cur)} minus {money(solution.alone_profit, cur)}, the sum of "
        "the products each optimised alone."
    )
    if abs(premium) <= 1e-9 * scale:
        why = (
            " Sharing earns nothing here: the products' own optima share no die design worth "
            "the change, so the family makes each product as it would alone."
        )
    else:
        why = (
            f" It comes from paying each shared die design's NRE (mask set and design) once "
            f"instead of once per product: {money(solution.shared_nre, cur)}"
        )
        if solution.shared_targets:
            why += (
                f", and the one-time spend on a shared process's defect-density target "
                f"once: {money(solution.shared_targets, cur)}"
            )
        if given_up > 1e-9 * scale:
            who = [
                f"{name} {money(own.profit - design.profit)}"
                for name, design, own in zip(
                    solution.names, solution.designs, solution.alone, strict=True
                )
                if own.profit - design.profit > 1e-9 * scale
            ]
            why += (
                f"; less {money(given_up, cur)} of profit given up by products that take a "
                f"design other than their own optimum in order to share dies ({', '.join(who)})"
            )
        why += "."
    return Text(head + why)


def family_view(solution: FamilySolution, title: str) -> Group:
    """A family solve: headline, library, products' P&L, total and the reuse premium."""
    cur = solution.designs[0].currency
    if solution.proven:
        status = "proven optimal over the stated choices"
    elif math.isfinite(solution.profit_bound):
        status = (
            f"best found; proven profit bound {money(solution.profit_bound, cur)}, "
            f"gap {percent(solution.gap, 3)} on profit"
        )
    else:
        status = "best found; no bound proven yet"
    return Group(
        Text.assemble(
            (f"Most profitable family design: {money(solution.profit, cur)}", "bold"),
            f"  ({title}; {len(solution.names)} products; {status}, {solution.seconds:.2f} s)",
        ),
        Text(f"What the answer covers: {PROOF}."),
        library_table(solution.library, cur),
        pnl_table(solution.names, solution.designs, solution.library, solution.alone),
        _totals(
            solution.profit,
            solution.shared_nre,
            solution.shared_targets,
            sum(d.profit for d in solution.designs),
            cur,
        ),
        premium_text(solution),
    )


def family_design_view(
    name: str,
    names: list[str],
    designs: list[DesignResult],
    total: tuple[float, float, float],
    conflict: str | None,
) -> Group:
    """One explicit family design (a [[product.design]] name) priced."""
    cur = designs[0].currency
    library = library_of(names, designs)
    profit, shared_nre, shared_targets = total
    parts: list = [
        Text.assemble((f"Family design {name}", "bold"), f"  ({len(names)} products)"),
        library_table(library, cur),
        pnl_table(names, designs, library),
    ]
    if conflict is not None:
        parts.append(Text(f"cannot be made together: {conflict}", style="bold red"))
    else:
        parts.append(
            _totals(profit, shared_nre, shared_targets, sum(d.profit for d in designs), cur)
        )
    return Group(*parts)


def designs_overview(rows: list[tuple[str, float | None, bool]], currency: str) -> Table:
    """Family designs by family profit."""
    table = literal_table(f"Family designs by family profit ({currency})")
    table.add_column("family design")
    table.add_column("family profit", justify="right")
    table.add_column("rules")
    for name, profit, breaks in rows:
        table.add_row(
            *cells(
                name,
                "cannot be made" if profit is None else money(profit),
                Text("BREAKS RULES", "red") if breaks else "kept",
            )
        )
    return table


def target_conflict(names: list[str], designs: list[DesignResult]) -> str | None:
    """Two products holding one process to different defect-density targets, in words
    (None when they agree)."""
    held: dict[str, tuple[float, str]] = {}
    for name, design in zip(names, designs, strict=True):
        for die in design.dies:
            density = die.defect_density_per_cm2
            if die.process in held:
                other, who = held[die.process]
                if abs(other - density) > 1e-12 * abs(density):
                    return (
                        f"products '{who}' and '{name}' hold process '{die.process}' to "
                        f"different defect-density targets ({other:.4g} and {density:.4g} "
                        "/cm^2); one fab line has one target, so give both designs one"
                    )
            else:
                held[die.process] = (density, name)
    return None


# ---------------------------------------------------------------- check
def family_summary(family: Family, source: str) -> Group:
    """What a family check understood: the shared tables in brief, one row per product."""
    first = family.members[0].problem
    limits = first.constraints
    cur = first.market.currency
    parts: list = [
        Text.assemble((family.title, "bold"), f"  ({source}; family of {len(family.members)})"),
        Text(
            "shared: processes "
            + ", ".join(p.name for p in first.process)
            + f"; die area {limits.min_die_area_mm2:g} to {limits.max_die_area_mm2:g} mm^2; "
            f"design cost {money(first.design_cost.per_die_design)} per die design + "
            f"{money(first.design_cost.per_mm2)} per mm^2"
        ),
    ]
    table = literal_table(f"Products (base units; money in {cur})")
    for col in (
        "product",
        "unit price",
        "volume",
        "blocks (instances)",
        "packaging",
        "max dies",
        "salvage bins, requirements",
        "designs",
    ):
        table.add_column(col, justify="right" if col in ("unit price", "volume") else "left")
    for member in family.members:
        p = member.problem
        need = [f"{k} {v:g}" for k, v in p.requirements.model_dump().items() if v is not None]
        bins = [f"bin {b.name}" for b in p.market.salvage_bin]
        table.add_row(
            *cells(
                member.name,
                money(p.market.unit_price),
                f"{p.market.volume:,.0f}",
                ", ".join(f"{b.name} x{b.count}" for b in p.block),
                ", ".join(g.name for g in p.packaging),
                str(p.constraints.max_dies),
                ", ".join(bins + need) or "-",
                ", ".join(d.name for d in p.design) or "-",
            )
        )
    parts.append(table)
    return Group(*parts)


# ---------------------------------------------------------------- JSON and CSV
def _library_entry(label: str, die: LibraryDie) -> dict:
    _, _, spares, repair, sigma, option, _ = die.key
    return {
        "die": label,
        "process": die.process,
        "blocks": dict(die.blocks),
        "spares": dict(spares),
        "repair": dict(repair),
        "sigma_margin": sigma,
        "critical_area_option": option,
        "area_mm2": die.area_mm2,
        "nre": die.nre,
        "users": dict(die.users),
    }


def _product_entry(name: str, design: DesignResult, names: dict[tuple, str]) -> dict:
    from optimizer.solver.family import die_key

    dies: dict[str, int] = {}
    for die in design.dies:
        label = names[die_key(die)]
        dies[label] = dies.get(label, 0) + die.copies
    return {
        "product": name,
        "library_dies": dies,
        "manufacturing_cost": manufacturing_cost(design),
        **design.to_dict(),
    }


def family_dict(solution: FamilySolution, title: str) -> dict:
    """The family solution as one JSON-ready object."""
    names = labels(solution.library)
    given_up = solution.alone_profit - sum(d.profit for d in solution.designs)
    return {
        "family": title,
        "products": list(solution.names),
        "currency": solution.designs[0].currency,
        "profit": solution.profit,
        "proven": solution.proven,
        "profit_bound": solution.profit_bound,
        "gap": solution.gap,
        "proof": PROOF,
        "alone_profit": solution.alone_profit,
        "reuse_premium": solution.reuse_premium,
        "shared_nre": solution.shared_nre,
        "shared_targets": solution.shared_targets,
        "profit_given_up_to_share": given_up,
        "seconds": solution.seconds,
        "library": [_library_entry(names[d.key], d) for d in solution.library],
        "designs": [
            _product_entry(n, d, names)
            for n, d in zip(solution.names, solution.designs, strict=True)
        ],
        "alone": [
            {"product": n, **d.to_dict()}
            for n, d in zip(solution.names, solution.alone, strict=True)
        ],
        "stats": solution.stats,
    }


def _csv(rows: list[dict]) -> str:
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    return out.getvalue()


def library_csv(solution: FamilySolution) -> str:
    names = labels(solution.library)
    rows = []
    for die in solution.library:
        entry = _library_entry(names[die.key], die)
        rows.append(
            {
                "die": entry["die"],
                "process": die.process,
                "blocks": _blocks(die.blocks),
                "options": _extras(die.key),
                "area_mm2": die.area_mm2,
                "nre": die.nre,
                "n_products": len(die.users),
                # one column per product: copies per unit, 0 when it does not use the die
                **{f"copies_{p}": die.users.get(p, 0) for p in solution.names},
            }
        )
    return _csv(rows)


def products_csv(solution: FamilySolution) -> str:
    names = labels(solution.library)
    rows = []
    for name, design, own in zip(solution.names, solution.designs, solution.alone, strict=True):
        rows.append(
            {
                "product": name,
                "design": _made_of(design, names),
                "dies": short_design(design),
                "packaging": design.packaging,
                "n_dies": design.n_dies,
                "revenue": design.revenue,
                "salvage_revenue": design.salvage_revenue,
                "manufacturing_cost": manufacturing_cost(design),
                "nre_alone": design.nre,
                "improvement_spend": design.improvement_spend,
                "profit_alone_priced": design.profit,
                "own_optimum_profit": own.profit,
                "own_optimum_design": short_design(own),
            }
        )
    return _csv(rows)


def designs_toml(family: Family, designs: list[DesignResult], name: str) -> str:
    """The family design as [[product.design]] tables, one per product, named ``name``:
    pasted under each product's [[product]] table, `dieplan evaluate --design NAME`
    prices it again."""
    from optimizer.designs import TOML_HEADER, design_toml

    chunks = [
        "# Written by dieplan. Paste each [[product.design]] below under its product's\n"
        "# [[product]] table (before the next [[product]]); `dieplan evaluate FILE --design "
        f"{name}`\n# then prices the family design to the figures the run reported.\n"
    ]
    for member, design in zip(family.members, designs, strict=True):
        body = design_toml(design, name, problem=member.problem).removeprefix(TOML_HEADER)
        lines = []
        for line in body.splitlines():
            if line == "[[design]]":
                line = "[[product.design]]"
            elif line == "[[design.die]]":
                line = "[[product.design.die]]"
            lines.append(line)
        chunks.append(f"# product '{member.name}'\n" + "\n".join(lines) + "\n")
    return "\n".join(chunks)


# ---------------------------------------------------------------- per-product tables
def _row_dies(design: DesignResult, names: dict[tuple, str]) -> str:
    """A row's dies, by library name where the optimum's library holds them."""
    from optimizer.solver.family import die_key

    parts = []
    for die in design.dies:
        label = names.get(die_key(die))
        text = label or f"new {die.process} die ({_blocks(die.blocks)})"
        parts.append(f"{die.copies}x {text}")
    return " + ".join(parts)


def _row_proof(row) -> str:
    if row.proven:
        return "optimum" if row.optimum else "proven"
    if row.design is None:
        return "open"
    gap = (row.profit_bound - row.family_profit) / max(abs(row.family_profit), 1.0)
    return f"gap {percent(max(gap, 0.0), 2)}"


def tables_view(tables: dict, library: list[LibraryDie], currency: str) -> Group:
    """Per product, the best design of each architecture with the others as in the
    family optimum: the family profit it would give and how far behind it is."""
    names = labels(library)
    parts = []
    for product, rows in tables.items():
        table = literal_table(
            f"Product {product}: best design of each architecture, the other products as in "
            f"the family optimum (money in {currency})"
        )
        for col in ("architecture", "family profit", "behind", "proof", "dies"):
            justify = "right" if col in ("family profit", "behind") else "left"
            table.add_column(col, justify=justify)
        for row in rows:
            if row.design is None:
                table.add_row(*cells(row.label, "", "", _row_proof(row), "no design"))
                continue
            table.add_row(
                *cells(
                    row.label,
                    money(row.family_profit),
                    "" if row.optimum else money(row.behind),
                    _row_proof(row),
                    _row_dies(row.design, names),
                )
            )
        parts.append(table)
    return Group(*parts)


def tables_dict(tables: dict) -> dict:
    return {
        product: [
            {
                "architecture": row.label,
                "packaging": row.packaging,
                "n_dies": row.n_dies,
                "family_profit": row.family_profit if row.design is not None else None,
                "behind": row.behind if row.design is not None else None,
                "proven": row.proven,
                "profit_bound": row.profit_bound,
                "optimum": row.optimum,
                "design": row.design.to_dict() if row.design is not None else None,
            }
            for row in rows
        ]
        for product, rows in tables.items()
    }


def tables_csv(tables: dict) -> str:
    rows = [
        {
            "product": product,
            "architecture": row.label,
            "family_profit": row.family_profit if row.design is not None else "",
            "behind": row.behind if row.design is not None else "",
            "proven": row.proven,
            "profit_bound": row.profit_bound,
            "optimum": row.optimum,
        }
        for product, rows_ in tables.items()
        for row in rows_
    ]
    return _csv(rows) if rows else ""
