"""The one exact evaluator: prices dies and assembled products.

Two vectorised steps:

* :func:`price_dies` prices a batch of candidate dies (any mix of processes, block
  contents, spare units and array repair) in one call: area, gross dies per wafer,
  hard and soft yield, Williams-Brown test outcome, cost per passed die and NRE.
* :func:`assemble` prices many products at once, each a few die designs with copy
  counts on one packaging option: known-good-die package yield, carrier (substrate or
  interposer), assembly and test costs, the cost breakdown per good unit, NRE and profit.

Everything the tool reports is computed here; the solver only decides what to price.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from optimizer.formulas import (
    assembly,
    defect_mixture,
    fault_coverage,
    parametric,
    wafer,
)
from optimizer.problem import Packaging, Problem, Process
from optimizer.tables import BlockTable, LinkTable, block_table, link_table

MM2_PER_CM2 = 100.0


@dataclass(frozen=True)
class DieBatch:
    """Candidate dies to price; every array has the batch length n in front.

    instances, spares and repairs are (n, B) integer arrays over the problem's blocks:
    block instances carried, spare instances added, and array repairs per instance.
    The optional per-die choices default to the process as stated: its base defect
    density and wafer cost, no design margin (no parametric loss) and no critical-area
    reduction.
    """

    process: np.ndarray
    instances: np.ndarray
    spares: np.ndarray
    repairs: np.ndarray
    interface_area_mm2: np.ndarray
    defect_density_per_cm2: np.ndarray | None = None  # chosen defect-density target
    wafer_cost_adder: np.ndarray | None = None  # per-wafer cost of reaching that target
    improvement_one_time: np.ndarray | None = None  # one-time cost of that target (per process)
    sigma_margin: np.ndarray | None = None  # design margin [sigma]; inf = no parametric loss
    margin_overhead: np.ndarray | None = None  # block-area fraction the margin costs
    sensitivity_factor: np.ndarray | None = None  # critical-area reduction option
    critical_overhead: np.ndarray | None = None  # block-area fraction that option costs

    def __len__(self) -> int:
        return int(self.process.shape[0])

    def column(self, name: str, default: float) -> np.ndarray:
        value = getattr(self, name)
        return np.full(len(self), default, dtype=float) if value is None else value


@dataclass(frozen=True)
class DiePrices:
    """Everything known about each priced die (arrays of the batch length)."""

    process: np.ndarray
    area_mm2: np.ndarray
    width_mm: np.ndarray
    height_mm: np.ndarray
    interface_area_mm2: np.ndarray
    fits_reticle: np.ndarray
    gross_dies_per_wafer: np.ndarray
    defect_density_per_cm2: np.ndarray
    sigma_margin: np.ndarray
    log_hard_yield: np.ndarray
    log_soft_yield: np.ndarray
    log_die_yield: np.ndarray
    die_yield: np.ndarray
    pass_fraction: np.ndarray
    defect_level: np.ndarray
    log1m_defect_level: np.ndarray
    raw_cost: np.ndarray
    sort_cost: np.ndarray
    cost_per_passed_die: np.ndarray
    nre: np.ndarray
    improvement_one_time: np.ndarray
    salvage_per_good: np.ndarray  # (n, bins): salvage-bin dies per full-spec die

    def take(self, index: np.ndarray) -> DiePrices:
        return DiePrices(**{k: getattr(self, k)[index] for k in self.__dataclass_fields__})


class Evaluator:
    """Prices dies and products of one problem; holds the problem's array tables."""

    def __init__(self, problem: Problem):
        self.problem = problem
        self.blocks: BlockTable = block_table(problem)
        self.links: LinkTable = link_table(problem)

    # ------------------------------------------------------------------ die level
    def interface_area_mm2(self, instances: np.ndarray, packaging: Packaging) -> np.ndarray:
        """Die-to-die interface (PHY) area of dies holding ``instances`` [mm^2].

        Traffic of a link is spread evenly over the instances of its two blocks, so a die
        holding a fraction f_a of block a and f_b of block b cuts
        bandwidth x (f_a (1 - f_b) + f_b (1 - f_a)) of it; that bandwidth costs
        bandwidth / interface density of area, plus a fixed port area per cut link.
        """
        instances = np.atleast_2d(instances)
        n = instances.shape[0]
        if packaging.kind == "single_die" or len(self.links.bandwidth_gbps) == 0:
            return np.zeros(n)
        share = instances / self.blocks.count[None, :]
        fa = share[:, self.links.ends[:, 0]]
        fb = share[:, self.links.ends[:, 1]]
        cut = self.links.bandwidth_gbps[None, :] * (fa * (1 - fb) + fb * (1 - fa))
        density = packaging.interface_density_gbps_per_mm2
        ports = (cut > 1e-12).sum(axis=1)
        return cut.sum(axis=1) / density + ports * packaging.port_area_mm2

    def price_dies(self, batch: DieBatch) -> DiePrices:
        """Price every die of ``batch`` exactly (see module docstring)."""
        n = len(batch)
        blocks = self.blocks
        bins = self.problem.market.salvage_bin
        out = {name: np.empty(n) for name in DiePrices.__dataclass_fields__}
        out["fits_reticle"] = np.empty(n, dtype=bool)
        out["process"] = np.asarray(batch.process, dtype=np.int64)
        out["salvage_per_good"] = np.zeros((n, len(bins)))
        density_all = batch.column("defect_density_per_cm2", np.nan)
        adder_all = batch.column("wafer_cost_adder", 0.0)
        one_time_all = batch.column("improvement_one_time", 0.0)
        sigma_all = batch.column("sigma_margin", np.inf)
        growth_all = (1 + batch.column("margin_overhead", 0.0)) * (
            1 + batch.column("critical_overhead", 0.0)
        )
        sens_all = batch.column("sensitivity_factor", 1.0)
        for p_index, process in enumerate(self.problem.process):
            rows = np.flatnonzero(batch.process == p_index)
            if rows.size == 0:
                continue
            q = batch.instances[rows]
            s = batch.spares[rows]
            r = batch.repairs[rows]
            growth = growth_all[rows]
            density = np.where(
                np.isnan(density_all[rows]), process.defect_density_per_cm2, density_all[rows]
            )
            interface = batch.interface_area_mm2[rows]
            area = self._die_area(p_index, q, s, r, growth, interface)
            width, height = die_shape_mm(area, process)
            gross = gross_dies(process, width, height)
            fits = _fits_field(width, height, process)
            # critical area of one unit of each block on each die [cm^2]
            unit_crit = (
                (blocks.area_mm2 * blocks.scale[p_index] * blocks.defect_sensitivity)[None, :]
                * (growth * sens_all[rows])[:, None]
                / MM2_PER_CM2
            )
            log_hard, salvage = self._log_hard_yield(
                process, q, s, r, interface, unit_crit, density
            )
            two_sided = process.margin.two_sided if process.margin is not None else True
            log_soft = parametric.log_parametric_yield(sigma_all[rows], two_sided=two_sided)
            log_y = log_hard + log_soft
            coverage = process.fault_coverage
            raw = _per_die(process.wafer_cost + adder_all[rows], gross)
            repair_test = ((q * (r > 0)) > 0).astype(float) @ blocks.repair_test_cost
            sort = process.sort_cost_per_die + repair_test
            log_pass = fault_coverage.log_pass_fraction(log_y, coverage)
            out["area_mm2"][rows] = area
            out["width_mm"][rows] = width
            out["height_mm"][rows] = height
            out["interface_area_mm2"][rows] = interface
            out["fits_reticle"][rows] = fits
            out["gross_dies_per_wafer"][rows] = gross
            out["defect_density_per_cm2"][rows] = density
            out["sigma_margin"][rows] = sigma_all[rows]
            out["log_hard_yield"][rows] = log_hard
            out["log_soft_yield"][rows] = log_soft
            out["log_die_yield"][rows] = log_y
            out["die_yield"][rows] = np.exp(log_y)
            out["pass_fraction"][rows] = np.exp(log_pass)
            out["log1m_defect_level"][rows] = fault_coverage.log1m_defect_level_from_log(
                log_y, coverage
            )
            out["defect_level"][rows] = -np.expm1(out["log1m_defect_level"][rows])
            out["raw_cost"][rows] = raw
            out["sort_cost"][rows] = sort
            with np.errstate(over="ignore"):
                out["cost_per_passed_die"][rows] = (raw + sort) * np.exp(-log_pass)
            design = self.problem.design_cost
            out["nre"][rows] = process.mask_set_cost + design.per_die_design + design.per_mm2 * area
            out["improvement_one_time"][rows] = one_time_all[rows]
            out["salvage_per_good"][rows] = salvage
        return DiePrices(**out)

    def _die_area(self, p_index, q, s, r, growth, interface) -> np.ndarray:
        """Die area [mm^2]: blocks with spares and repair, grown by the margin and
        critical-area options, plus the die-to-die interface."""
        blocks = self.blocks
        unit_area = blocks.area_mm2 * blocks.scale[p_index]  # (B,)
        block_area = (q + s) * unit_area + q * r * blocks.area_per_repair_mm2
        return block_area.sum(axis=1) * growth + interface

    def die_area_mm2(self, batch: DieBatch) -> np.ndarray:
        """Areas of a batch without pricing it (cheap pre-screening)."""
        growth = (1 + batch.column("margin_overhead", 0.0)) * (
            1 + batch.column("critical_overhead", 0.0)
        )
        area = np.empty(len(batch))
        for p_index in range(len(self.problem.process)):
            rows = np.flatnonzero(batch.process == p_index)
            area[rows] = self._die_area(
                p_index,
                batch.instances[rows],
                batch.spares[rows],
                batch.repairs[rows],
                growth[rows],
                batch.interface_area_mm2[rows],
            )
        return area

    def _log_hard_yield(
        self,
        process: Process,
        q: np.ndarray,
        s: np.ndarray,
        r: np.ndarray,
        interface_mm2: np.ndarray,
        unit_crit: np.ndarray,
        density: np.ndarray,
    ) -> tuple[np.ndarray, np.ndarray]:
        """log of systematic x defect-limited yield, clustering through the D mixture.

        Dies without redundancy take the model's closed form; dies with spare units or
        array repair take the exact mixture of
        :func:`~optimizer.formulas.defect_mixture.log_redundant_yield` (one mixture over
        D for the whole die: its blocks share the density). Also returns, per salvage
        bin, the dies that fall in that bin per full-spec die, each band computed
        directly as "between m_lo and m_hi - 1 good units" (no difference of yields).
        """
        blocks = self.blocks
        redundant = (s > 0) | ((r > 0) & (q > 0))
        plain_cm2 = (q * ~redundant * unit_crit).sum(axis=1) + interface_mm2 / MM2_PER_CM2
        log_y = np.empty(q.shape[0])
        simple = ~redundant.any(axis=1)
        if simple.any():
            log_y[simple] = defect_mixture.log_mixed_yield(
                process.yield_model,
                density[simple],
                plain_cm2[simple],
                None,
                clustering_alpha=process.clustering_alpha,
                critical_layers=process.critical_layers,
            )
        complex_rows = np.flatnonzero(~simple)
        if complex_rows.size:
            log_y[complex_rows] = self._log_redundant_yield(
                process, q, s, r, redundant, interface_mm2, unit_crit, density, complex_rows
            )
        salvage = np.zeros((q.shape[0], len(self.problem.market.salvage_bin)))
        for j, b_lo, m_lo, m_hi in self._salvage_bands():
            # dies with every instance of the bin's block (one-die products)
            rows = np.flatnonzero((q[:, b_lo] == blocks.count[b_lo]) & (q[:, b_lo] > m_lo))
            if rows.size == 0:
                continue
            upper = q[rows, b_lo] if m_hi is None else np.minimum(m_hi, q[rows, b_lo])
            log_band = self._log_redundant_yield(
                process,
                q,
                s,
                r,
                redundant,
                interface_mm2,
                unit_crit,
                density,
                rows,
                band=(b_lo, np.full(rows.size, m_lo), upper - 1),
            )
            with np.errstate(invalid="ignore"):
                salvage[rows, j] = np.exp(log_band - log_y[rows])
        return log_y + np.log(process.systematic_yield), salvage

    def _log_redundant_yield(
        self,
        process: Process,
        q: np.ndarray,
        s: np.ndarray,
        r: np.ndarray,
        redundant: np.ndarray,
        interface_mm2: np.ndarray,
        unit_crit: np.ndarray,
        density: np.ndarray,
        rows: np.ndarray,
        band: tuple[int, np.ndarray, np.ndarray] | None = None,
    ) -> np.ndarray:
        """Exact mixed log yield of dies ``rows`` with their redundant blocks.

        A redundant block carries q + s units that must keep q good; a unit's yield
        includes array repair when the die carries repair for that block. ``band``
        (block, lowest, highest good count) replaces one block's requirement by a
        salvage band; that block is then counted unit by unit even without redundancy.
        """
        qc, sc, rc = q[rows], s[rows], r[rows]
        red = redundant[rows].copy()
        if band is not None:
            red[:, band[0]] = True
        crit = unit_crit[rows]
        plain = (qc * ~red * crit).sum(axis=1) + interface_mm2[rows] / MM2_PER_CM2
        cols = np.flatnonzero(red.any(axis=0))
        on = red[:, cols]
        units = np.where(on, (qc + sc)[:, cols], 0)
        low = np.where(on, qc[:, cols], 0)
        high = units.copy()
        if band is not None:
            at = int(np.flatnonzero(cols == band[0])[0])
            low[:, at] = band[1]
            high[:, at] = band[2]
        repairs = np.where((rc[:, cols] > 0) & (qc[:, cols] > 0), rc[:, cols], 0)
        spec = defect_mixture.RedundantBlocks(
            unit_area_cm2=crit[:, cols],
            total_units=units,
            min_good=low,
            max_good=high,
            max_repairs=repairs,
            repairable_fraction=np.broadcast_to(self.blocks.repairable_fraction[cols], on.shape),
        )
        return defect_mixture.log_redundant_yield(
            process.yield_model,
            density[rows],
            plain,
            spec,
            clustering_alpha=process.clustering_alpha,
            critical_layers=process.critical_layers,
        )

    def _salvage_bands(self) -> list[tuple[int, int, int, int | None]]:
        """(bin index, block index, lowest good units, first count of the bin above).

        Bins on one block are nested by min_good: a die falls in the best bin it meets.
        """
        bands = []
        bins = self.problem.market.salvage_bin
        for j, sbin in enumerate(bins):
            b = self.problem.block_index(sbin.block)
            higher = [
                o.min_good for o in bins if o.block == sbin.block and o.min_good > sbin.min_good
            ]
            bands.append((j, b, sbin.min_good, min(higher) if higher else None))
        return bands

    # ------------------------------------------------------------------ carrier
    def carrier_cost(self, packaging: Packaging, total_die_area_mm2: np.ndarray) -> CarrierPrice:
        """Cost per good carrier (substrate or interposer) for the given total die area."""
        total = np.asarray(total_die_area_mm2, dtype=float)
        if packaging.kind != "silicon_interposer":
            cost = np.full(total.shape, packaging.carrier_cost)
            return CarrierPrice(cost, np.zeros(total.shape), np.ones(total.shape, dtype=bool))
        process = self.problem.process[self.problem.process_index(packaging.interposer_process)]
        area = packaging.interposer_area_factor * total + packaging.interposer_extra_area_mm2
        side = np.sqrt(area)
        gross = gross_dies(process, side, side)
        crit_cm2 = area * packaging.interposer_defect_sensitivity / MM2_PER_CM2
        log_y = defect_mixture.log_mixed_yield(
            process.yield_model,
            process.defect_density_per_cm2,
            crit_cm2,
            None,
            clustering_alpha=process.clustering_alpha,
            critical_layers=process.critical_layers,
        ) + np.log(process.systematic_yield)
        per_good = _per_die(process.wafer_cost, gross) * np.exp(-log_y)
        feasible = (area <= packaging.interposer_max_area_mm2) & (gross > 0)
        return CarrierPrice(per_good + packaging.carrier_cost, area, feasible)

    # ------------------------------------------------------------------ product level
    def assemble(
        self, packaging_index: int, prices: DiePrices, slot_die: np.ndarray, slot_copies: np.ndarray
    ) -> ProductPrices:
        """Price K products on one packaging option.

        slot_die (K, S) indexes ``prices``; slot_copies (K, S) gives copies of each slot's
        die design (0 for an empty slot). Each slot is a distinct die design, paying NRE.
        """
        packaging = self.problem.packaging[packaging_index]
        slot_die = np.atleast_2d(slot_die)
        copies = np.atleast_2d(slot_copies).astype(float)
        used = copies > 0
        idx = np.where(used, slot_die, 0)
        pick = prices.take(idx)
        n_dies = copies.sum(axis=1)
        total_area = (copies * pick.area_mm2).sum(axis=1)
        carrier = self.carrier_cost(packaging, total_area)
        log1m_dl = np.where(used, pick.log1m_defect_level, 0.0)
        log_p = assembly.log_package_yield(
            log1m_dl, copies, packaging.bond_yield, packaging.carrier_yield, packaging.package_yield
        )
        dies_cost = (copies * np.where(used, pick.cost_per_passed_die, 0.0)).sum(axis=1)
        bond = n_dies * packaging.bond_cost_per_die
        before_scrap = dies_cost + carrier.cost + bond + packaging.package_cost
        before_scrap = before_scrap + packaging.final_test_cost
        with np.errstate(over="ignore", invalid="ignore"):
            per_good = before_scrap * np.exp(-log_p)

        raw = copies * np.where(used, pick.raw_cost, 0.0)
        interface_share = np.where(used, pick.interface_area_mm2 / pick.area_mm2, 0.0)
        silicon = (raw * (1 - interface_share)).sum(axis=1)
        interface = (raw * interface_share).sum(axis=1)
        sort = (copies * np.where(used, pick.sort_cost, 0.0)).sum(axis=1)
        die_scrap = dies_cost - silicon - interface - sort
        with np.errstate(invalid="ignore"):
            package_scrap = per_good - before_scrap
        nre = (np.where(used, pick.nre, 0.0)).sum(axis=1) + packaging.design_cost
        spend, consistent = self._improvement_spend(pick, used)
        market = self.problem.market
        salvage_units, salvage_revenue = self._salvage(packaging, pick, used, n_dies)
        revenue = market.unit_price * market.volume
        feasible = carrier.feasible & consistent
        profit = revenue + salvage_revenue - market.volume * per_good - nre - spend
        return ProductPrices(
            packaging_index=packaging_index,
            slot_die=slot_die,
            slot_copies=np.atleast_2d(slot_copies),
            n_dies=n_dies,
            total_die_area_mm2=total_area,
            carrier_area_mm2=carrier.area_mm2,
            carrier_feasible=feasible,
            targets_consistent=consistent,
            log_package_yield=log_p,
            package_yield=np.exp(log_p),
            manufacturing_cost_per_good_unit=per_good,
            silicon=silicon,
            interface=interface,
            sort_test=sort,
            die_scrap=die_scrap,
            carrier=carrier.cost,
            assembly=bond + packaging.package_cost,
            final_test=np.full(n_dies.shape, packaging.final_test_cost),
            package_scrap=package_scrap,
            nre=nre,
            nre_per_unit=nre / market.volume,
            improvement_spend=spend,
            improvement_per_unit=spend / market.volume,
            cost_per_good_unit=per_good + (nre + spend) / market.volume,
            revenue=np.full(n_dies.shape, revenue),
            salvage_units=salvage_units,
            salvage_revenue=salvage_revenue,
            profit=np.where(feasible, profit, -np.inf),
        )

    def _improvement_spend(
        self, pick: DiePrices, used: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """One-time yield-improvement spend per product, and whether targets agree.

        A process has one defect-density target per product (one fab line): its one-time
        cost is paid once, and two dies on one process with different targets are not a
        valid product.
        """
        spend = np.zeros(used.shape[0])
        consistent = np.ones(used.shape[0], dtype=bool)
        for p in range(len(self.problem.process)):
            on_p = used & (pick.process == p)
            if not on_p.any():
                continue
            d_hi = np.where(on_p, pick.defect_density_per_cm2, -np.inf).max(axis=1)
            d_lo = np.where(on_p, pick.defect_density_per_cm2, np.inf).min(axis=1)
            consistent &= ~on_p.any(axis=1) | (d_hi - d_lo <= 1e-12 * np.abs(d_hi))
            spend += np.where(on_p, pick.improvement_one_time, 0.0).max(axis=1, initial=0.0)
        return spend, consistent

    def _salvage(
        self, packaging: Packaging, pick: DiePrices, used: np.ndarray, n_dies: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Units sold in salvage bins and their net revenue (one-die products only).

        Each bin takes the dies of its band, up to its demand; a salvage unit still pays
        its package, carrier, bond and final test, scrapped packages included.
        """
        bins = self.problem.market.salvage_bin
        k = used.shape[0]
        units = np.zeros((k, len(bins)))
        if not bins:
            return units, np.zeros(k)
        market = self.problem.market
        one_die = n_dies == 1
        ratio = np.where(used[:, :, None], pick.salvage_per_good, 0.0).sum(axis=1)
        demand = np.array([b.demand for b in bins])
        units = np.where(one_die[:, None], np.minimum(market.volume * ratio, demand), 0.0)
        unit_cost = (
            packaging.package_cost
            + packaging.final_test_cost
            + packaging.bond_cost_per_die
            + packaging.carrier_cost
        ) / (packaging.package_yield * packaging.carrier_yield * packaging.bond_yield)
        prices = np.array([b.unit_price for b in bins])
        revenue = (units * np.maximum(prices - unit_cost, 0.0)).sum(axis=1)
        return units, revenue


@dataclass(frozen=True)
class CarrierPrice:
    """Substrate or interposer: cost per good one, interposer area, whether it fits."""

    cost: np.ndarray
    area_mm2: np.ndarray
    feasible: np.ndarray


@dataclass(frozen=True)
class ProductPrices:
    """Vectorised product-level results (arrays of length K).

    Cost components are per good unit and add up to ``manufacturing_cost_per_good_unit``:
    silicon + interface + sort_test + die_scrap + carrier + assembly + final_test +
    package_scrap. ``cost_per_good_unit`` adds the NRE and yield-improvement shares
    (one-time costs / volume). Profit = revenue + salvage revenue - volume x
    manufacturing cost - NRE - improvement spend (minus infinity for an invalid product).
    """

    packaging_index: int
    slot_die: np.ndarray
    slot_copies: np.ndarray
    n_dies: np.ndarray
    total_die_area_mm2: np.ndarray
    carrier_area_mm2: np.ndarray
    carrier_feasible: np.ndarray
    targets_consistent: np.ndarray
    log_package_yield: np.ndarray
    package_yield: np.ndarray
    manufacturing_cost_per_good_unit: np.ndarray
    silicon: np.ndarray
    interface: np.ndarray
    sort_test: np.ndarray
    die_scrap: np.ndarray
    carrier: np.ndarray
    assembly: np.ndarray
    final_test: np.ndarray
    package_scrap: np.ndarray
    nre: np.ndarray
    nre_per_unit: np.ndarray
    improvement_spend: np.ndarray
    improvement_per_unit: np.ndarray
    cost_per_good_unit: np.ndarray
    revenue: np.ndarray
    salvage_units: np.ndarray
    salvage_revenue: np.ndarray
    profit: np.ndarray


COST_COMPONENTS = (
    "silicon",
    "interface",
    "sort_test",
    "die_scrap",
    "carrier",
    "assembly",
    "final_test",
    "package_scrap",
    "nre_per_unit",
    "improvement_per_unit",
)


def _per_die(wafer_cost: float, gross: np.ndarray) -> np.ndarray:
    """Wafer cost shared by the gross dies; infinite where no die fits."""
    return np.divide(wafer_cost, gross, out=np.full(gross.shape, np.inf), where=gross > 0)


def gross_dies(process: Process, width_mm: np.ndarray, height_mm: np.ndarray) -> np.ndarray:
    """Gross dies per wafer by the process's counting rule (float array)."""
    radius = wafer.usable_radius_mm(process.wafer_diameter_mm, process.edge_exclusion_mm)
    site_w = np.asarray(width_mm, dtype=float) + process.scribe_width_mm
    site_h = np.asarray(height_mm, dtype=float) + process.scribe_width_mm
    if process.die_count == "exact":
        return wafer.gross_dies_exact_many(radius, site_w, site_h).astype(float)
    if process.die_count == "formula":
        return np.maximum(np.floor(wafer.gross_dies_classic(2 * radius, site_w * site_h)), 0.0)
    return np.pi * radius**2 / (site_w * site_h)


def die_shape_mm(area_mm2: np.ndarray, process: Process) -> tuple[np.ndarray, np.ndarray]:
    """Die width and height [mm]: the process's aspect ratio, or square by default.

    By default a die too large for a square inside the reticle field is stretched to the
    field's short side, the least elongated shape that still fits.
    """
    area = np.asarray(area_mm2, dtype=float)
    if process.die_aspect_ratio is not None:
        return wafer.die_shape_mm(area, process.die_aspect_ratio)
    short = min(process.reticle_width_mm, process.reticle_height_mm)
    side = np.sqrt(area)
    width = np.minimum(side, short)
    return width, area / width


def _fits_field(width: np.ndarray, height: np.ndarray, process: Process) -> np.ndarray:
    """Whether a die fits the process's reticle field in either orientation."""
    rw, rh = process.reticle_width_mm, process.reticle_height_mm
    tol = 1e-9
    upright = (width <= rw + tol) & (height <= rh + tol)
    turned = (width <= rh + tol) & (height <= rw + tol)
    return upright | turned
