"""Designs held fixed while inputs change, priced by the evaluator.

A :class:`FixedDesign` keeps what the architect decides (which blocks on which die,
process per die, copies, spares, repairs, margins, packaging) and re-prices it under
other inputs with :func:`optimizer.designs.evaluate_specs`. A die whose defect density
was the process's base density follows the process when the base changes; a die with a
bought defect-density target keeps that target while it is below the new base, and
follows the base once the base is lower (no improvement is bought for nothing).

:class:`ScenarioPricer` prices several fixed designs over many scenarios. When every
changed input is a number in [market] (price, volume) the dies are priced once and only
the product step is repeated per scenario; it checks itself against the full path first
and uses the full path if the two ever disagree.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from optimizer.designs import DesignResult, DieSpec, design_text, die_batch, evaluate_specs
from optimizer.evaluator import Evaluator
from optimizer.explore.paths import FieldPath, parse_path, problem_with
from optimizer.problem import Market, Problem, ProblemError


def design_kind(result: DesignResult) -> str:
    """Stable label of a design's kind: packaging, die count and processes used.

    Example: ``"organic_multichip, 3 dies: 2x leading + 1x legacy"``.
    """
    per_process: dict[str, int] = {}
    for die in result.dies:
        per_process[die.process] = per_process.get(die.process, 0) + die.copies
    n = result.n_dies
    parts = " + ".join(f"{count}x {name}" for name, count in sorted(per_process.items()))
    return f"{result.packaging}, {n} {'die' if n == 1 else 'dies'}: {parts}"


def design_summary(result: DesignResult) -> str:
    """The design's one text (see :func:`optimizer.designs.design_text`)."""
    return design_text(result)


@dataclass(frozen=True)
class FixedDesign:
    """A design to re-price: packaging, die specs, and its kind label and summary."""

    packaging: str
    specs: tuple[DieSpec, ...]
    kind: str
    summary: str

    @classmethod
    def from_result(cls, result: DesignResult, problem: Problem) -> FixedDesign:
        """Keep a priced design's decisions (``problem`` is the one it was priced on)."""
        specs = []
        for die in result.dies:
            base = problem.process[problem.process_index(die.process)].defect_density_per_cm2
            target = die.defect_density_per_cm2
            bought = target is not None and math.isfinite(target) and target < base * (1 - 1e-12)
            specs.append(
                DieSpec(
                    process=die.process,
                    blocks=dict(die.blocks),
                    spares=dict(die.spares),
                    repair=dict(die.repair),
                    copies=die.copies,
                    name=die.name,
                    defect_density_per_cm2=target if bought else None,
                    sigma_margin=die.sigma_margin if math.isfinite(die.sigma_margin) else None,
                    critical_area_option=die.critical_area_option,
                )
            )
        return cls(result.packaging, tuple(specs), design_kind(result), design_summary(result))

    def key(self) -> tuple:
        """Identity of the design (die specs in a fixed order, packaging)."""
        return (self.packaging, tuple(sorted((s.key(), s.copies) for s in self.specs)))

    def specs_for(self, problem: Problem) -> list[DieSpec]:
        """Die specs for ``problem``: targets at or above its base density are dropped."""
        out = []
        for spec in self.specs:
            target = spec.defect_density_per_cm2
            if target is not None:
                base = problem.process[problem.process_index(spec.process)].defect_density_per_cm2
                if target >= base * (1 - 1e-12):
                    target = None
            out.append(
                DieSpec(
                    process=spec.process,
                    blocks=spec.blocks,
                    spares=spec.spares,
                    repair=spec.repair,
                    copies=spec.copies,
                    name=spec.name,
                    defect_density_per_cm2=target,
                    sigma_margin=spec.sigma_margin,
                    critical_area_option=spec.critical_area_option,
                )
            )
        return out

    def evaluate(
        self,
        problem: Problem,
        source: str = "<problem>",
        name: str = "fixed",
        evaluator: Evaluator | None = None,
    ) -> DesignResult:
        """Price this design on ``problem`` (raises ProblemError if it cannot be built)."""
        evaluator = evaluator if evaluator is not None else Evaluator(problem)
        return evaluate_specs(evaluator, self.specs_for(problem), self.packaging, name, source)


@dataclass(frozen=True)
class ScenarioPrices:
    """Profit and cost per good unit of K designs in n scenarios; NaN where unbuildable."""

    profit: np.ndarray  # (n, K)
    cost_per_good_unit: np.ndarray  # (n, K)
    buildable: np.ndarray  # (n, K) bool


class ScenarioPricer:
    """Prices fixed designs under scenarios that set ``paths`` to given values.

    Parameters
    ----------
    data
        The decoded TOML document of the base problem.
    source
        File name for messages.
    designs
        The fixed designs.
    paths
        The inputs each scenario sets, in the order of the value columns.
    """

    def __init__(
        self, data: dict, source: str, designs: Sequence[FixedDesign], paths: Sequence[FieldPath]
    ):
        self.data = data
        self.source = source
        self.designs = list(designs)
        self.paths = list(paths)
        self._fast: list | None = None
        self._base: Problem | None = None
        if self.paths and all(p.market_scalar for p in self.paths):
            self._prepare_market_path()

    # -------------------------------------------------------------- full path
    def _full(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        problem = problem_with(self.data, list(zip(self.paths, values, strict=True)), self.source)
        evaluator = Evaluator(problem)
        k = len(self.designs)
        profit, cost = np.full(k, np.nan), np.full(k, np.nan)
        for j, design in enumerate(self.designs):
            try:
                result = design.evaluate(problem, self.source, f"fixed{j + 1}", evaluator)
            except ProblemError:
                continue  # this design cannot be built under these inputs
            profit[j], cost[j] = result.profit, result.cost_per_good_unit
        return profit, cost

    # -------------------------------------------------------------- market-only path
    def _prepare_market_path(self) -> None:
        base = problem_with(self.data, [], self.source)
        evaluator = Evaluator(base)
        fast = []
        for design in self.designs:
            g = base.packaging_index(design.packaging)
            specs = design.specs_for(base)
            try:
                design.evaluate(base, self.source, "check", evaluator)
            except ProblemError:
                fast.append(None)
                continue
            prices = evaluator.price_dies(die_batch(evaluator, specs, g))
            copies = np.array([[s.copies for s in specs]])
            fast.append((g, prices, np.arange(len(specs))[None, :], copies))
        self._base, self._fast = base, fast
        # Dies do not depend on the market today; if that ever changes, the full path
        # keeps results right. Check a scenario away from the base values.
        probe = np.array([1.37 * _market_value(base, p) for p in self.paths])
        quick = self._market(probe)
        slow = self._full(probe)
        if not all(
            np.allclose(a, b, rtol=1e-9, atol=1e-6, equal_nan=True)
            for a, b in zip(quick, slow, strict=True)
        ):
            self._fast = None

    def _market(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        base = self._base
        fields = base.market.model_dump(by_alias=True)
        for path, value in zip(self.paths, values, strict=True):
            fields[path.steps[-1].key] = path.encode(value)
        try:
            market = Market.model_validate(fields)
        except Exception:
            # an invalid value: let the full path raise the usual one-line error
            return self._full(values)
        evaluator = Evaluator(base.model_copy(update={"market": market}))
        k = len(self.designs)
        profit, cost = np.full(k, np.nan), np.full(k, np.nan)
        for j, item in enumerate(self._fast):
            if item is None:
                continue
            g, prices, slots, copies = item
            product = evaluator.assemble(g, prices, slots, copies)
            profit[j] = float(product.profit[0])
            cost[j] = float(product.cost_per_good_unit[0])
        return profit, cost

    # -------------------------------------------------------------- public
    @property
    def market_only(self) -> bool:
        """Whether the dies are priced once (every changed input is a market number)."""
        return self._fast is not None

    def price(self, values: np.ndarray) -> ScenarioPrices:
        """Price every design in every scenario; ``values`` is (n, len(paths))."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        n, k = values.shape[0], len(self.designs)
        profit, cost = np.full((n, k), np.nan), np.full((n, k), np.nan)
        for i in range(n):
            row = values[i]
            profit[i], cost[i] = self._market(row) if self._fast is not None else self._full(row)
        return ScenarioPrices(profit, cost, np.isfinite(profit))


def _market_value(problem: Problem, path: FieldPath) -> float:
    return float(getattr(problem.market, path.steps[-1].attribute))


@dataclass(frozen=True)
class PriceTask:
    """Price fixed designs at a block of scenarios (picklable)."""

    data: dict
    source: str
    designs: tuple[FixedDesign, ...]
    paths: tuple[str, ...]
    values: tuple[tuple[float, ...], ...]


def price_scenarios(task: PriceTask) -> tuple[np.ndarray, np.ndarray]:
    """(profit, cost per good unit), each (scenarios, designs); NaN where unbuildable."""
    paths = [parse_path(p) for p in task.paths]
    pricer = ScenarioPricer(task.data, task.source, task.designs, paths)
    prices = pricer.price(np.array(task.values, dtype=float).reshape(len(task.values), len(paths)))
    return prices.profit, prices.cost_per_good_unit
