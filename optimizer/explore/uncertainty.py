"""Seeded Monte Carlo over the file's uncertain inputs, for the top designs of one solve.

The problem is solved once at the values written in the file for the ``top`` designs.
Those designs are held fixed (see :mod:`optimizer.explore.fixed`) and re-priced by the
evaluator in every sample, all ``[[uncertain]]`` inputs drawn together (independently)
from :func:`numpy.random.default_rng` (seed): the same seed gives the same samples and
the same results, whichever executor priced them. When only [market] numbers are
uncertain the dies are priced once and each sample only repeats the product step.

Per design: mean, standard deviation, P10/P50/P90 of profit (``numpy.percentile``,
linear interpolation) and the probability of being the most profitable of the set.
A design that cannot be built in a sample (a die grown past the reticle field, an
interposer past its limit) has no profit there; such samples are counted, left out of
its percentiles, and it does not win them.

On a file with a [life] plan the objective is the NPV (columns keep their names; see
:mod:`optimizer.explore.objective`): the designs are the life optimum and, when it is
another design, the one picked on the first period's numbers alone.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from optimizer.designs import DesignResult
from optimizer.explore.fixed import FixedDesign, PriceTask
from optimizer.explore.objective import Objective, objective_of
from optimizer.explore.parallel import Progress, Runner, chunks
from optimizer.explore.paths import FieldPath, PathError, Study
from optimizer.problem import ProblemError, UncertainInput

PERCENTILES = (10, 50, 90)


def sample_inputs(
    entries: list[UncertainInput], paths: list[FieldPath], n: int, seed: int
) -> np.ndarray:
    """Draw ``n`` samples of every input (columns in file order) from one seeded stream.

    Integer fields are rounded to the nearest whole number.
    """
    rng = np.random.default_rng(seed)
    out = np.empty((n, len(entries)))
    for j, entry in enumerate(entries):
        if entry.distribution == "normal":
            column = rng.normal(entry.mean, entry.std, n)
        elif entry.distribution == "lognormal":
            column = rng.lognormal(math.log(entry.median), entry.sigma_log, n)
        elif entry.distribution == "uniform":
            column = rng.uniform(entry.low, entry.high, n)
        else:
            column = rng.triangular(entry.low, entry.mode, entry.high, n)
        out[:, j] = np.round(column) if paths[j].integer else column
    return out


@dataclass(frozen=True)
class Uncertainty:
    """A finished Monte Carlo study.

    Attributes
    ----------
    designs
        The fixed designs (solver rank order), and ``results`` their prices at the file's
        values.
    inputs
        The uncertain inputs (columns of ``samples``).
    samples
        (n, inputs) drawn values in base units.
    profit, cost_per_good_unit
        (n, designs), NaN where a design cannot be built.
    summary
        Per design: rank, kind, design, profit at the file's values, mean, std, P10,
        P50, P90, probability of being the most profitable, unbuildable samples.
    """

    designs: tuple[FixedDesign, ...]
    results: tuple[DesignResult, ...]
    inputs: tuple[FieldPath, ...]
    samples: np.ndarray
    profit: np.ndarray
    cost_per_good_unit: np.ndarray
    summary: pd.DataFrame
    seed: int
    objective: str = "profit"
    labels: tuple[str, ...] = ()

    def samples_frame(self) -> pd.DataFrame:
        """One row per sample: input values, then profit of each design by rank."""
        frame = pd.DataFrame(self.samples, columns=[p.text for p in self.inputs])
        for k in range(len(self.designs)):
            frame[f"profit_rank{k + 1}"] = self.profit[:, k]
        frame.insert(0, "sample", np.arange(len(frame)))
        return frame


def best_index(profit: np.ndarray) -> np.ndarray:
    """Index of the most profitable design per sample (-1 if none can be built)."""
    masked = np.where(np.isfinite(profit), profit, -np.inf)
    best = masked.argmax(axis=1)
    return np.where(np.isfinite(masked.max(axis=1)), best, -1)


def summarise(profit: np.ndarray) -> pd.DataFrame:
    """Mean, std, P10/P50/P90 and probability of being best, per design column."""
    n, k = profit.shape
    best = best_index(profit)
    rows = []
    for j in range(k):
        column = profit[:, j]
        ok = np.isfinite(column)
        values = column[ok]
        have = values.size > 0
        p10, p50, p90 = np.percentile(values, PERCENTILES) if have else (np.nan, np.nan, np.nan)
        rows.append(
            {
                "mean": float(values.mean()) if have else np.nan,
                "std": float(values.std(ddof=1)) if values.size > 1 else np.nan,
                "p10": float(p10),
                "p50": float(p50),
                "p90": float(p90),
                "prob_best": float(np.mean(best == j)),
                "unbuildable_samples": int((~ok).sum()),
            }
        )
    return pd.DataFrame(rows)


def run_uncertainty(
    study: Study,
    samples: int = 1000,
    seed: int = 0,
    top: int = 3,
    runner: Runner | None = None,
    method: str = "milp",
    time_limit: float | None = None,
    progress: Progress | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> Uncertainty:
    """Solve for the top designs, draw the inputs and price the designs in every sample."""
    objective = objective_of(study)
    if not study.uncertain:
        raise ProblemError(
            study.source,
            "uncertain",
            "the file has no [[uncertain]] inputs; add entries such as "
            '{ path = "market.volume", distribution = "lognormal", median = 1e6, '
            "sigma_log = 0.3 } (see README, Exploration)",
        )
    if samples < 2:
        raise ProblemError("--samples", "", f"needs at least 2 samples (got {samples})")
    runner = runner or Runner()
    if stage:
        stage("solving at the file's values", 1)
    winners = objective.winners(study, top, method, time_limit)
    if progress:
        progress(1, 1)
    results = tuple(w.result for w in winners)
    designs = tuple(w.design for w in winners)
    paths = list(study.uncertain_paths)
    drawn = sample_inputs(list(study.uncertain), paths, samples, seed)
    _check_extremes(study, paths, drawn, objective)
    workers = 8 if runner.scheduler else runner.workers
    parts = chunks(samples, max(10, 4 * workers))
    tasks = [
        PriceTask(
            study.data,
            study.source,
            designs,
            tuple(p.text for p in paths),
            tuple(tuple(float(v) for v in drawn[i]) for i in part),
        )
        for part in parts
    ]
    if stage:
        stage("pricing the designs in every sample", len(tasks))
    try:
        with runner.session():
            priced = runner.map(objective.price_scenarios, tasks, progress)
    except ProblemError as err:
        raise ProblemError(
            err.source,
            err.field,
            f"{err.message} (a drawn sample; narrow the distribution or use a lognormal "
            "for a quantity that must stay positive)",
        ) from None
    profit = np.vstack([p for p, _ in priced])
    cost = np.vstack([c for _, c in priced])
    summary = summarise(profit)
    summary.insert(0, "rank", np.arange(1, len(designs) + 1))
    summary.insert(1, "design_kind", [d.kind for d in designs])
    summary.insert(2, "design", [d.summary for d in designs])
    summary.insert(3, "profit_at_file_values", [w.value for w in winners])
    return Uncertainty(
        designs,
        results,
        tuple(paths),
        drawn,
        profit,
        cost,
        summary,
        seed,
        objective.name,
        tuple(w.label for w in winners),
    )


def _check_extremes(
    study: Study, paths: list[FieldPath], drawn: np.ndarray, objective: Objective
) -> None:
    """Each input's smallest and largest draw must give a valid problem.

    Checked before any pricing, so a distribution that strays outside a field's allowed
    values (a negative density from a wide normal, a density under a defect-reduction
    floor) stops the run at once with the entry named.
    """
    for j, path in enumerate(paths):
        for value in (drawn[:, j].min(), drawn[:, j].max()):
            try:
                objective.validate(study.data, [(path, float(value))], study.source)
            except PathError as exc:
                raise ProblemError(
                    study.source,
                    f"uncertain[{j}] ({path.text})",
                    f"a drawn value {value:.6g} does not fit: {exc}; narrow the distribution, "
                    "or use a lognormal for a quantity that must stay positive",
                ) from None
            except ProblemError as err:
                raise ProblemError(
                    study.source,
                    f"uncertain[{j}] ({path.text})",
                    f"a drawn value {value:.6g} makes the problem invalid "
                    f"({err.field}: {err.message}); narrow the distribution, or use a "
                    "lognormal for a quantity that must stay positive",
                ) from None
