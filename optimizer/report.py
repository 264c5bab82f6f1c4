"""Rich renderings of results: the only module besides the CLI that formats output.

Functions return rich renderables; the CLI decides where they go. Rich drops colour and
styles by itself when the output is not a terminal, so piped output stays plain. Every
name from a problem file goes in as a Text object, so brackets and colons in names are
printed as written instead of being read as console markup.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from rich.console import Group
from rich.table import Table
from rich.text import Text

if TYPE_CHECKING:  # the command line imports CAUTION for --help: no numpy, numba, pint
    from optimizer.designs import DesignResult
    from optimizer.problem import Problem

CAUTION = (
    "Estimates for comparing options early; real decisions need the foundry's and the "
    "assembly house's own yield and cost data."
)

COMPONENT_LABELS = {
    "silicon": "silicon (wafer cost of the dies)",
    "interface": "die-to-die interface area",
    "sort_test": "wafer sort and repair test",
    "die_scrap": "yield loss: dies failed at sort",
    "carrier": "substrate or interposer",
    "assembly": "assembly (bonds and package)",
    "final_test": "final test",
    "package_scrap": "yield loss: failed packages (all their dies scrapped)",
    "nre_per_unit": "one-time costs (NRE) per unit",
    "improvement_per_unit": "yield-improvement spend per unit",
}


BREAKS_RULES = "BREAKS RULES"


def cells(*values: object) -> list:
    """Table cells taken literally (no console markup, no emoji codes)."""
    return [v if isinstance(v, Text) else Text(str(v)) for v in values]


def literal_table(title: str, **options) -> Table:
    return Table(title=Text(title), title_justify="left", **options)


def by_rules_then_profit(results: list[DesignResult]) -> list[DesignResult]:
    """Designs that keep every rule first, then those that break one; best profit first."""

    def key(r: DesignResult) -> tuple[bool, float]:
        profit = r.profit if r.profit == r.profit else -math.inf  # NaN last
        return (bool(r.violations), -profit)

    return sorted(results, key=key)


def money(value: float, currency: str = "") -> str:
    """Money in one style: thousands separated, M and bn for large sums, never "-0.00"."""
    suffix = f" {currency}" if currency else ""
    if not math.isfinite(value):
        return ("-inf" if value < 0 else "inf") + suffix
    size = abs(value)
    if size >= 1e9:
        text = f"{size / 1e9:,.3f} bn"
    elif size >= 1e6:
        text = f"{size / 1e6:,.2f} M"
    else:
        text = f"{size:,.2f}"
    # a value that rounds to zero carries no sign
    sign = "-" if value < 0 and any(c in "123456789" for c in text) else ""
    return f"{sign}{text}{suffix}"


def percent(value: float, digits: int = 2) -> str:
    text = f"{100 * abs(value):.{digits}f}"
    sign = "-" if value < 0 and any(c in "123456789" for c in text) else ""
    return f"{sign}{text}%"


def design_breakdown(result: DesignResult) -> Group:
    """Per-unit cost breakdown, per-die table and the profit summary of one design."""
    cur = result.currency
    head = Text.assemble(
        (f"{result.design}", "bold"),
        f"  on {result.packaging} ({result.packaging_kind}), {result.n_dies} die(s), "
        f"package yield {percent(result.package_yield)}",
    )
    if result.violations:
        head.append(f"  {BREAKS_RULES} ({len(result.violations)})", style="bold red")
    dies = literal_table("Dies", show_lines=False)
    for col in (
        "die",
        "process",
        "copies",
        "area mm^2",
        "gross/wafer",
        "hard yield",
        "soft yield",
        "defect level",
        "cost/passed die",
    ):
        dies.add_column(col, justify="left" if col in ("die", "process") else "right")
    for die in result.dies:
        dies.add_row(
            *cells(
                die.name,
                die.process,
                str(die.copies),
                f"{die.area_mm2:.1f}",
                f"{die.gross_dies_per_wafer:,.0f}",
                percent(die.hard_yield),
                percent(die.soft_yield),
                f"{die.defect_level * 1e6:.0f} ppm",
                money(die.cost_per_passed_die),
            )
        )
    costs = literal_table(f"Cost per good unit ({cur})")
    costs.add_column("component")
    costs.add_column("per unit", justify="right")
    costs.add_column("share", justify="right")
    total = result.cost_per_good_unit
    for name, value in result.breakdown.items():
        costs.add_row(*cells(COMPONENT_LABELS[name], money(value), percent(value / total, 1)))
    costs.add_row(Text("total", style="bold"), Text(money(total), style="bold"), "100.0%")
    summary = Table.grid(padding=(0, 2))
    summary.add_column()
    summary.add_column(justify="right")
    rows = [
        ("unit price", money(result.unit_price, cur)),
        ("volume (good units)", f"{result.volume:,.0f}"),
        ("manufacturing cost / good unit", money(result.manufacturing_cost_per_good_unit, cur)),
        ("NRE (one-time)", money(result.nre, cur)),
    ]
    if result.improvement_spend:
        rows.append(("yield-improvement spend (one-time)", money(result.improvement_spend, cur)))
    rows.append(("revenue", money(result.revenue, cur)))
    for name, units in result.salvage_units.items():
        rows.append((f"salvage bin {name} (units)", f"{units:,.0f}"))
    if result.salvage_revenue:
        rows.append(("salvage revenue (net)", money(result.salvage_revenue, cur)))
    for row in rows:
        summary.add_row(*cells(*row))
    summary.add_row(Text("profit", style="bold"), Text(money(result.profit, cur), style="bold"))
    summary.add_row(*cells("profit margin", percent(result.profit_margin, 1)))
    breakeven = result.breakeven_volume
    summary.add_row(
        *cells(
            "breakeven volume",
            f"{breakeven:,.0f}" if math.isfinite(breakeven) else "never (cost above price)",
        )
    )
    parts: list = [head, dies, costs, summary]
    for violation in result.violations:
        parts.append(Text(f"breaks rule: {violation}", style="red"))
    return Group(*parts)


def designs_overview(results: list[DesignResult]) -> Table:
    """One line per design: those keeping every rule by profit, then the rule-breakers."""
    table = literal_table("Designs by profit (designs that break a rule last)")
    for col in (
        "design",
        "packaging",
        "dies",
        "cost/good unit",
        "package yield",
        "NRE",
        "profit",
        "profit margin",
        "rules",
    ):
        table.add_column(
            col, justify="left" if col in ("design", "packaging", "rules") else "right"
        )
    for r in by_rules_then_profit(results):
        rules = (
            Text(f"{BREAKS_RULES}: " + ", ".join(v.split(":")[0] for v in r.violations), "red")
            if r.violations
            else Text("kept")
        )
        table.add_row(
            *cells(
                r.design,
                r.packaging,
                str(r.n_dies),
                money(r.cost_per_good_unit),
                percent(r.package_yield),
                money(r.nre),
                money(r.profit),
                percent(r.profit_margin, 1),
                rules,
            )
        )
    return table


def _model_text(p) -> str:
    if p.yield_model == "negative_binomial":
        return f"negative_binomial (alpha {p.clustering_alpha:g})"
    if p.yield_model == "bose_einstein":
        return f"bose_einstein ({p.critical_layers} layers)"
    return p.yield_model


def _choices_summary(problem: Problem) -> list:
    """The priced choices and rules beyond processes and blocks, as check understood them."""
    lines: list[str] = []
    for p in problem.process:
        curve = p.defect_reduction
        if curve is not None:
            targets = ", ".join(f"{d:.4g}" for d, _, _ in p.defect_targets())
            if curve.form == "log_ratio":
                lines.append(
                    f"defect targets on {p.name}: any D in [{curve.floor_per_cm2:g}, "
                    f"{p.defect_density_per_cm2:g}] /cm^2 for {money(curve.one_time_per_log)} "
                    f"once + {money(curve.per_wafer_per_log)} per wafer per ln(D_base/D); "
                    f"levels tried {targets}"
                )
            else:
                lines.append(f"defect targets on {p.name}: table, D = {targets} /cm^2")
        if p.margin is not None:
            sides = "two-sided" if p.margin.two_sided else "one-sided"
            pairs = ", ".join(
                f"{k:g} sigma (+{100 * o:g}% area)"
                for k, o in zip(p.margin.sigma, p.margin.area_overhead, strict=True)
            )
            lines.append(f"design margins on {p.name} ({sides}): {pairs}")
    if problem.critical_area_reduction is not None:
        options = problem.critical_area_reduction.options()
        lines.append(
            "critical-area options: "
            + ", ".join(
                f"{i}: sensitivity x{f:g}, +{100 * o:g}% area" for i, (f, o) in enumerate(options)
            )
        )
    for sbin in problem.market.salvage_bin:
        lines.append(
            f"salvage bin {sbin.name}: one-die units with at least {sbin.min_good} good "
            f"{sbin.block}, {money(sbin.unit_price)} each, demand {sbin.demand:,.0f}"
        )
    limits = problem.constraints
    for group in limits.keep_together:
        lines.append(f"keep together (same die, same share of each): {', '.join(group)}")
    for group in limits.keep_apart:
        lines.append(f"keep apart (never on one die): {', '.join(group)}")
    need = problem.requirements
    mandates = [
        f"die yield at least {need.min_die_yield:g}" if need.min_die_yield is not None else "",
        f"margin at least {need.min_sigma_margin:g} sigma"
        if need.min_sigma_margin is not None
        else "",
        f"defect level at most {need.max_defect_level:g}"
        if need.max_defect_level is not None
        else "",
    ]
    if need.any():
        lines.append(
            "requirements (priced against the optimum): " + "; ".join(m for m in mandates if m)
        )
    for entry in problem.uncertain:
        lines.append(f"uncertain: {entry.path} ({entry.distribution})")
    return [Text(line) for line in lines]


def problem_summary(problem: Problem, source: str) -> Group:
    """What the loader understood, in base units."""
    m = problem.market
    parts: list = [
        Text.assemble((problem.title, "bold"), f"  ({source})"),
        Text(
            f"market: {m.unit_price:,.2f} {m.currency} per unit, volume {m.volume:,.0f}; "
            f"die area {problem.constraints.min_die_area_mm2:g} to "
            f"{problem.constraints.max_die_area_mm2:g} mm^2, at most "
            f"{problem.constraints.max_dies} dies"
        ),
    ]
    procs = literal_table("Processes (base units)")
    procs.add_column("field")
    for p in problem.process:
        procs.add_column(Text(p.name), justify="right")
    rows = {
        "wafer diameter mm": [f"{p.wafer_diameter_mm:g}" for p in problem.process],
        "edge exclusion mm": [f"{p.edge_exclusion_mm:g}" for p in problem.process],
        "scribe width mm": [f"{p.scribe_width_mm:g}" for p in problem.process],
        "wafer cost": [money(p.wafer_cost) for p in problem.process],
        "defect density /cm^2": [f"{p.defect_density_per_cm2:g}" for p in problem.process],
        "yield model": [_model_text(p) for p in problem.process],
        "systematic yield": [f"{p.systematic_yield:g}" for p in problem.process],
        "reticle field mm": [
            f"{p.reticle_width_mm:g} x {p.reticle_height_mm:g}" for p in problem.process
        ],
        "mask set cost": [money(p.mask_set_cost) for p in problem.process],
        "sort cost per die": [money(p.sort_cost_per_die) for p in problem.process],
        "fault coverage": [f"{p.fault_coverage:g}" for p in problem.process],
        "die count": [p.die_count for p in problem.process],
        "area scale logic/memory/analog/io": [
            "/".join(f"{p.area_scale.of(k):g}" for k in ("logic", "memory", "analog", "io"))
            for p in problem.process
        ],
    }
    for name, values in rows.items():
        procs.add_row(*cells(name, *values))
    packs = literal_table("Packaging (base units)")
    packs.add_column("field")
    for g in problem.packaging:
        packs.add_column(Text(g.name), justify="right")
    prow = {
        "kind": [g.kind for g in problem.packaging],
        "max dies": [str(g.max_dies) for g in problem.packaging],
        "bond cost / yield": [
            f"{money(g.bond_cost_per_die)} / {g.bond_yield:g}" for g in problem.packaging
        ],
        "carrier cost / yield": [
            f"{money(g.carrier_cost)} / {g.carrier_yield:g}" for g in problem.packaging
        ],
        "interposer": [
            f"on {g.interposer_process}, {g.interposer_area_factor:g} x dies + "
            f"{g.interposer_extra_area_mm2:g} mm^2, max {g.interposer_max_area_mm2:g} mm^2"
            if g.kind == "silicon_interposer"
            else "-"
            for g in problem.packaging
        ],
        "package cost / yield": [
            f"{money(g.package_cost)} / {g.package_yield:g}" for g in problem.packaging
        ],
        "final test cost": [money(g.final_test_cost) for g in problem.packaging],
        "interface GB/s per mm^2": [
            f"{g.interface_density_gbps_per_mm2:g}" if g.interface_density_gbps_per_mm2 else "-"
            for g in problem.packaging
        ],
        "port area mm^2": [f"{g.port_area_mm2:g}" for g in problem.packaging],
        "package design NRE": [money(g.design_cost) for g in problem.packaging],
    }
    for name, values in prow.items():
        packs.add_row(*cells(name, *values))
    blocks = literal_table("Blocks (base units)")
    for col in ("name", "kind", "area mm^2", "count", "sensitivity", "spares", "repair"):
        blocks.add_column(col)
    for b in problem.block:
        repair = (
            f"f={b.repair.repairable_fraction:g}, choices {b.repair.repair_choices}"
            if b.repair
            else "-"
        )
        blocks.add_row(
            *cells(
                b.name,
                b.kind,
                f"{b.area_mm2:g}",
                str(b.count),
                f"{b.defect_sensitivity:g}",
                str(b.spare_choices),
                repair,
            )
        )
    links = literal_table("Links")
    links.add_column("blocks")
    links.add_column("GB/s", justify="right")
    for link in problem.link:
        links.add_row(*cells(" - ".join(link.blocks), f"{link.bandwidth_gbps:g}"))
    parts += [procs, packs, blocks, links, *_choices_summary(problem)]
    parts.append(
        Text(
            f"design cost: {money(problem.design_cost.per_die_design)} per die design + "
            f"{money(problem.design_cost.per_mm2)} per mm^2; explicit designs: "
            + (", ".join(d.name for d in problem.design) or "none")
        )
    )
    return Group(*parts)


def solution_view(solution) -> Group:
    """The winner in full, the ranked list, the proof and why the winner wins."""
    best = solution.best
    cur = best.currency
    if solution.proven_optimal:
        status = "proven optimal over the stated choices"
    elif math.isfinite(solution.profit_bound):
        status = (
            f"best found; proven profit bound {money(solution.profit_bound, cur)}, "
            f"gap {percent(solution.gap, 3)} on profit, {percent(solution.cost_gap, 3)} on "
            "total cost"
        )
    else:
        status = "best found; no bound proven yet"
    parts: list = [
        Text.assemble(
            ("Most profitable design", "bold"),
            f"  ({solution.method}, {status}, {solution.seconds:.2f} s)",
        ),
        Text(f"What the answer covers: {solution.proof}.") if solution.proof else Text(""),
        die_contents(best),
        design_breakdown(best),
    ]
    if len(solution.designs) > 1:
        ranked = literal_table("Ranked designs")
        for col in ("rank", "dies", "packaging", "cost/good unit", "profit", "behind best"):
            ranked.add_column(col, justify="right" if col not in ("dies", "packaging") else "left")
        for i, d in enumerate(solution.designs, start=1):
            ranked.add_row(
                *cells(
                    str(i),
                    short_design(d),
                    d.packaging,
                    money(d.cost_per_good_unit),
                    money(d.profit),
                    money(best.profit - d.profit),
                )
            )
        parts.append(ranked)
    if solution.difference:
        diff = literal_table("Why the winner beats the runner-up (per good unit)")
        for col in ("component", "winner", "runner-up", "winner saves"):
            diff.add_column(col, justify="left" if col == "component" else "right")
        for row in solution.difference:
            diff.add_row(
                *cells(
                    COMPONENT_LABELS[row["component"]],
                    money(row["winner"]),
                    money(row["runner_up"]),
                    money(row["advantage"]),
                )
            )
        parts.append(diff)
    return Group(*parts)


def short_design(result: DesignResult) -> str:
    """The design's one text (see :func:`optimizer.designs.design_text`)."""
    from optimizer.designs import design_text

    return design_text(result)


def die_contents(result: DesignResult) -> Table:
    table = literal_table("Die designs")
    for col in (
        "die",
        "copies",
        "process",
        "D target /cm^2",
        "design margin",
        "blocks",
        "spares / repair / options",
    ):
        table.add_column(col)
    for die in result.dies:
        options = (
            ", ".join(
                [f"{k} +{v} spare" for k, v in die.spares.items()]
                + [f"{k} {v} repairs" for k, v in die.repair.items()]
                + (
                    [f"critical-area option {die.critical_area_option}"]
                    if die.critical_area_option
                    else []
                )
            )
            or "-"
        )
        margin = f"{die.sigma_margin:g} sigma" if math.isfinite(die.sigma_margin) else "-"
        table.add_row(
            *cells(
                die.name,
                str(die.copies),
                die.process,
                f"{die.defect_density_per_cm2:.4g}",
                margin,
                ", ".join(f"{n} x{c}" for n, c in die.blocks.items()),
                options,
            )
        )
    return table


def mandate_view(priced) -> Group:
    """What a mandated target costs: the optimum with and without it."""
    cur = priced.free.best.currency
    table = literal_table("Mandated targets priced")
    table.add_column("")
    table.add_column("design")
    table.add_column("profit", justify="right")
    table.add_row(
        *cells(
            "without the mandate",
            short_design(priced.free.best),
            money(priced.free.best.profit, cur),
        )
    )
    table.add_row(
        *cells(
            "under the mandate",
            short_design(priced.mandated.best),
            money(priced.mandated.best.profit, cur),
        )
    )
    need = {k: v for k, v in priced.requirements.model_dump().items() if v is not None}
    text = Text(
        f"The mandate {need} costs {money(priced.profit_lost, cur)} of profit "
        f"({percent(priced.profit_lost / abs(priced.free.best.profit))} of the optimum)."
    )
    return Group(table, text)


GAP_WORDS = {
    "silicon": "silicon",
    "interface": "interface",
    "sort_test": "sort test",
    "die_scrap": "sort scrap",
    "carrier": "carrier",
    "assembly": "assembly",
    "final_test": "final test",
    "package_scrap": "package scrap",
    "nre_per_unit": "NRE",
    "improvement_per_unit": "yield spend",
    "salvage": "salvage revenue",
}


def gap_reasons(parts: dict[str, float], most: int = 3) -> str:
    """The largest parts of a profit gap: "+" where the optimum gains, "-" where it loses."""
    if not parts:
        return ""
    order = sorted(parts.items(), key=lambda item: -abs(item[1]))
    scale = max(abs(v) for v in parts.values())
    shown = [
        f"{GAP_WORDS[name]} {'+' if value > 0 else '-'}{money(abs(value))}"
        for name, value in order[:most]
        if abs(value) > 1e-6 * max(scale, 1.0)
    ]
    return ", ".join(shown)


def die_yields(result: DesignResult) -> str:
    """Die yield of each die design, in the design's order."""
    return " / ".join(percent(die.die_yield, 1) for die in result.dies)


def plain(value: float) -> str:
    """A number as a reader writes it: 3,000,000 rather than 3e+06."""
    if math.isfinite(value) and 1e4 <= abs(value) < 1e15:
        return f"{value:,.0f}"
    return f"{value:.4g}"


def decision_view(rows, currency: str, seconds: float | None = None) -> Group:
    """The best design of every architecture, side by side, with what proves it."""
    best = next((row for row in rows if row.optimum), None)
    table = literal_table(
        f"Best design of each architecture (packaging, die count; money in {currency})",
        show_lines=True,
    )
    width = max((len(row.label) for row in rows), default=12)
    table.add_column("architecture", justify="left", min_width=min(width, 40))
    for col, justify in (
        ("profit", "right"),
        ("behind", "right"),
        ("proof", "left"),
        ("cost/good unit", "right"),
        ("yields: dies | package", "right"),
        ("NRE", "right"),
        ("largest parts of the gap (+: optimum ahead)", "left"),
    ):
        table.add_column(col, justify=justify)
    open_rows = 0
    listed = []
    skipped = 0
    for row in rows:
        listed.append(row)
        # its process-mix rows right under it (the one matching its best is the row
        # itself); mixes the time did not reach are counted, not listed
        for sub in row.mixes:
            if sub.design is None and not sub.proven:
                skipped += 1
            elif sub.process_mix != row.process_mix:
                listed.append(sub)
    for row in listed:
        if row.mix:
            label = f"  same, held to {row.mix}"
        else:
            label = row.label
        if row.design is None:
            proof = "no design" if row.proven else "open"
            table.add_row(*cells(label, "", "", proof, "", "", "", row.reason))
            continue
        d = row.design
        if row.proven:
            proof = "optimum" if row.optimum and not row.mix else "proven"
        else:
            open_rows += 1
            proof = f"gap {percent(row.gap, 2)}"
        behind = "" if row.optimum or best is None else money(best.profit - row.profit)
        table.add_row(
            *cells(
                label if row.mix else f"{row.label}\n{row.process_mix}",
                money(d.profit),
                behind,
                proof,
                money(d.cost_per_good_unit),
                f"{die_yields(d)} | {percent(d.package_yield, 1)}",
                money(d.nre),
                gap_reasons(row.gap_components, most=2),
            )
        )
    parts: list = [table]
    note = (
        "Each row is the most profitable design with that packaging and die count; "
        "'held to' rows, the most profitable with that many dies on each process"
    )
    if open_rows:
        note += (
            f"; {open_rows} row(s) not proven within the table's time"
            + (f" ({seconds:g} s)" if seconds is not None else "")
            + ": their gap is to the row's own proven bound; raise --table-time to close them"
        )
    if skipped:
        note += f"; {skipped} process mix(es) not reached within the time"
    parts.append(Text(note + ".", style="dim"))
    return Group(*parts)


def flips_view(challenger: DesignResult, rows, currency: str) -> Group:
    """Where the choice flips between the optimum and one challenger, both held fixed."""
    from optimizer.explore.breakeven import FLIP, break_even_text

    table = literal_table(
        f"Where the optimum and the challenger trade places (both designs held fixed)\n"
        f"challenger: {challenger.packaging}, {challenger.n_dies} "
        f"{'die' if challenger.n_dies == 1 else 'dies'} ({short_design(challenger)})"
    )
    table.add_column("input")
    table.add_column("file value", justify="right")
    table.add_column("the challenger would win")
    flips = sorted(
        rows, key=lambda r: (r.status != FLIP, abs(math.log(r.ratio)) if r.status == FLIP else 0)
    )
    for row in flips:
        table.add_row(*cells(row.label, plain(row.file_value), break_even_text(row, currency)))
    return Group(
        table,
        Text(
            "Each input moved alone, the two designs kept as they are; `dieplan sweep` "
            "re-solves the whole problem at every value.",
            style="dim",
        ),
    )
