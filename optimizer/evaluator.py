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

import atexit
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from optimizer.formulas import assembly, defect_mixture, fault_coverage, redundancy, wafer
from optimizer.problem import Packaging, Problem, Process
from optimizer.tables import BlockTable, LinkTable, block_table, link_table

MM2_PER_CM2 = 100.0


@dataclass(frozen=True)
class DieBatch:
    """Candidate dies to price; every array has the batch length n in front.

    instances, spares and repairs are (n, B) integer arrays over the problem's blocks:
    block instances carried, spare instances added, and array repairs per instance.
    """

    process: np.ndarray
    instances: np.ndarray
    spares: np.ndarray
    repairs: np.ndarray
    interface_area_mm2: np.ndarray
    sigma_margin: np.ndarray | None = None  # design margin per die; None means no soft loss

    def __len__(self) -> int:
        return int(self.process.shape[0])


@dataclass(frozen=True)
class DiePrices:
    """Everything known about each priced die (arrays of the batch length)."""

    area_mm2: np.ndarray
    width_mm: np.ndarray
    height_mm: np.ndarray
    interface_area_mm2: np.ndarray
    fits_reticle: np.ndarray
    gross_dies_per_wafer: np.ndarray
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
        out = {name: np.empty(n) for name in DiePrices.__dataclass_fields__}
        out["fits_reticle"] = np.empty(n, dtype=bool)
        for p_index, process in enumerate(self.problem.process):
            rows = np.flatnonzero(batch.process == p_index)
            if rows.size == 0:
                continue
            q = batch.instances[rows]
            s = batch.spares[rows]
            r = batch.repairs[rows]
            unit_area = blocks.area_mm2 * blocks.scale[p_index]  # (B,)
            block_area = (q + s) * unit_area + q * r * blocks.area_per_repair_mm2
            interface = batch.interface_area_mm2[rows]
            area = block_area.sum(axis=1) + interface
            width, height = die_shape_mm(area, process)
            gross = gross_dies(process, width, height)
            fits = _fits_field(width, height, process)
            log_hard = self._log_hard_yield(process, p_index, q, s, r, interface)
            if batch.sigma_margin is None:
                log_soft = np.zeros(rows.size)
            else:
                log_soft = _log_soft_yield(batch.sigma_margin[rows])
            log_y = log_hard + log_soft
            coverage = process.fault_coverage
            raw = _per_die(process.wafer_cost, gross)
            repair_test = ((q * (r > 0)) > 0).astype(float) @ blocks.repair_test_cost
            sort = process.sort_cost_per_die + repair_test
            out["area_mm2"][rows] = area
            out["width_mm"][rows] = width
            out["height_mm"][rows] = height
            out["interface_area_mm2"][rows] = interface
            out["fits_reticle"][rows] = fits
            out["gross_dies_per_wafer"][rows] = gross
            out["log_hard_yield"][rows] = log_hard
            out["log_soft_yield"][rows] = log_soft
            out["log_die_yield"][rows] = log_y
            out["die_yield"][rows] = np.exp(log_y)
            out["pass_fraction"][rows] = np.exp(fault_coverage.log_pass_fraction(log_y, coverage))
            out["log1m_defect_level"][rows] = fault_coverage.log1m_defect_level_from_log(
                log_y, coverage
            )
            out["defect_level"][rows] = -np.expm1(out["log1m_defect_level"][rows])
            out["raw_cost"][rows] = raw
            out["sort_cost"][rows] = sort
            out["cost_per_passed_die"][rows] = (raw + sort) * np.exp(
                -fault_coverage.log_pass_fraction(log_y, coverage)
            )
            design = self.problem.design_cost
            out["nre"][rows] = process.mask_set_cost + design.per_die_design + design.per_mm2 * area
        return DiePrices(**out)

    def _log_hard_yield(
        self,
        process: Process,
        p_index: int,
        q: np.ndarray,
        s: np.ndarray,
        r: np.ndarray,
        interface_mm2: np.ndarray,
    ) -> np.ndarray:
        """log of systematic x defect-limited yield, clustering through the D mixture."""
        blocks = self.blocks
        unit_crit_cm2 = blocks.area_mm2 * blocks.scale[p_index] * blocks.defect_sensitivity
        unit_crit_cm2 = unit_crit_cm2 / MM2_PER_CM2  # (B,)
        redundant = (s > 0) | ((r > 0) & (q > 0))
        plain_cm2 = (q * ~redundant) @ unit_crit_cm2 + interface_mm2 / MM2_PER_CM2
        d0 = process.defect_density_per_cm2
        params = dict(
            clustering_alpha=process.clustering_alpha, critical_layers=process.critical_layers
        )
        log_y = np.empty(q.shape[0])
        simple = ~redundant.any(axis=1)
        if simple.any():
            log_y[simple] = defect_mixture.log_mixed_yield(
                process.yield_model, d0, plain_cm2[simple], None, **params
            )
        complex_rows = np.flatnonzero(~simple)
        if complex_rows.size:
            qc, sc, rc = q[complex_rows], s[complex_rows], r[complex_rows]
            red_rows = redundant[complex_rows]
            red_blocks = np.flatnonzero(red_rows.any(axis=0))
            fraction = blocks.repairable_fraction

            def log_factor(d: np.ndarray) -> np.ndarray:
                # d: (m, nodes) or (nodes,). Each redundant block: k-of-n over units whose own yield
                # includes array repair when the die carries repair for that block.
                total = np.zeros(np.broadcast_shapes(d.shape, (len(qc), 1)))
                for b in red_blocks:
                    needed = qc[:, b][:, None]
                    spare = sc[:, b][:, None]
                    repairs = rc[:, b][:, None]
                    a = unit_crit_cm2[b]
                    log_unit = np.where(
                        repairs > 0,
                        redundancy.log_array_repair_factor(a, d, fraction[b], repairs),
                        -a * d,
                    )
                    # a unit of yield y behaves as one with exp(-a D) = y, i.e. a D = -log y
                    factor_b = redundancy.log_spare_unit_factor(-log_unit, 1.0, needed, spare)
                    # blocks without redundancy on this die are already in the plain area
                    total += np.where(red_rows[:, b][:, None], factor_b, 0.0)
                return total

            log_y[complex_rows] = defect_mixture.log_mixed_yield(
                process.yield_model, d0, plain_cm2[complex_rows], log_factor, **params
            )
        return log_y + np.log(process.systematic_yield)

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
        per_good = before_scrap * np.exp(-log_p)

        raw = copies * np.where(used, pick.raw_cost, 0.0)
        interface_share = np.where(used, pick.interface_area_mm2 / pick.area_mm2, 0.0)
        silicon = (raw * (1 - interface_share)).sum(axis=1)
        interface = (raw * interface_share).sum(axis=1)
        sort = (copies * np.where(used, pick.sort_cost, 0.0)).sum(axis=1)
        die_scrap = dies_cost - silicon - interface - sort
        package_scrap = per_good - before_scrap
        nre = (np.where(used, pick.nre, 0.0)).sum(axis=1) + packaging.design_cost
        market = self.problem.market
        revenue = market.unit_price * market.volume
        profit = revenue - market.volume * per_good - nre
        return ProductPrices(
            packaging_index=packaging_index,
            slot_die=slot_die,
            slot_copies=np.atleast_2d(slot_copies),
            n_dies=n_dies,
            total_die_area_mm2=total_area,
            carrier_area_mm2=carrier.area_mm2,
            carrier_feasible=carrier.feasible,
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
            cost_per_good_unit=per_good + nre / market.volume,
            revenue=np.full(n_dies.shape, revenue),
            profit=profit,
        )


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
    package_scrap. ``cost_per_good_unit`` adds the NRE share (nre / volume).
    """

    packaging_index: int
    slot_die: np.ndarray
    slot_copies: np.ndarray
    n_dies: np.ndarray
    total_die_area_mm2: np.ndarray
    carrier_area_mm2: np.ndarray
    carrier_feasible: np.ndarray
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
    cost_per_good_unit: np.ndarray
    revenue: np.ndarray
    profit: np.ndarray
    extras: dict = field(default_factory=dict)


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
)


_COUNT_POOL: ProcessPoolExecutor | None = None


def _count_pool_map():
    """A process-pool map for counting many new footprints, or None to count in-process.

    DIEPLAN_COUNT_WORKERS sets the number of worker processes (1 disables the pool);
    processes that may not have children (daemons, e.g. some cluster workers) count
    in-process.
    """
    global _COUNT_POOL
    workers = int(os.environ.get("DIEPLAN_COUNT_WORKERS", os.cpu_count() or 1))
    if workers <= 1 or multiprocessing.current_process().daemon:
        return None
    if _COUNT_POOL is None:
        context = multiprocessing.get_context("fork" if os.name == "posix" else "spawn")
        _COUNT_POOL = ProcessPoolExecutor(max_workers=workers, mp_context=context)
        atexit.register(_COUNT_POOL.shutdown)
    return _COUNT_POOL.map


def _per_die(wafer_cost: float, gross: np.ndarray) -> np.ndarray:
    """Wafer cost shared by the gross dies; infinite where no die fits."""
    return np.divide(wafer_cost, gross, out=np.full(gross.shape, np.inf), where=gross > 0)


def gross_dies(process: Process, width_mm: np.ndarray, height_mm: np.ndarray) -> np.ndarray:
    """Gross dies per wafer by the process's counting rule (float array)."""
    radius = wafer.usable_radius_mm(process.wafer_diameter_mm, process.edge_exclusion_mm)
    site_w = np.asarray(width_mm, dtype=float) + process.scribe_width_mm
    site_h = np.asarray(height_mm, dtype=float) + process.scribe_width_mm
    if process.die_count == "exact":
        return wafer.gross_dies_exact_many(
            radius, site_w, site_h, map_chunks=_count_pool_map()
        ).astype(float)
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


def _log_soft_yield(sigma_margin: np.ndarray) -> np.ndarray:
    from optimizer.formulas import parametric

    return parametric.log_parametric_yield(sigma_margin, two_sided=True)
