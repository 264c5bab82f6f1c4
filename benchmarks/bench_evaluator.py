"""Throughput of the evaluator: full die pricings per second on one core.

Prices a large batch of candidate dies of the invented server demo (random block
contents on random processes, interface area included) in one call, twice: without
redundancy and salvage bins (exact gross-die count + negative binomial / Murphy yield +
test + NRE) and with spare units, array repair and the demo's salvage bins (priced
through the defect-density mixture).
Dies of one footprint share one exact count (cached), as in the solver.

A last row times the exact gross-die count alone on many distinct footprints of one
chain (die areas 20-800 mm^2, capped at a 26 mm reticle short side, 0.1 mm scribe,
300 mm wafer, 3 mm edge exclusion): counting every footprint against bisection along
the chain, each from an empty cache.

Run:  python benchmarks/bench_evaluator.py [--dies 200000] [--footprints 500000]
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("DIEPLAN_COUNT_WORKERS", "1")  # exact counts on one thread too

import numpy as np  # noqa: E402

from optimizer.evaluator import DieBatch, Evaluator  # noqa: E402
from optimizer.formulas import wafer  # noqa: E402
from optimizer.problem import load_problem  # noqa: E402
from optimizer.solver.candidates import enumerate_contents  # noqa: E402


def batch(ev: Evaluator, contents: np.ndarray, n: int, redundancy: bool, seed: int) -> DieBatch:
    rng = np.random.default_rng(seed)
    pick = contents[rng.integers(0, len(contents), n)]
    spares = np.zeros_like(pick)
    repairs = np.zeros_like(pick)
    if redundancy:
        core, cache = (
            ev.problem.block_index("compute_cluster"),
            ev.problem.block_index("cache_slice"),
        )
        spares[:, core] = np.where(pick[:, core] > 0, rng.integers(1, 3, n), 0)
        repairs[:, cache] = np.where(pick[:, cache] > 0, 8, 0)
    packaging = ev.problem.packaging[1]
    return DieBatch(
        process=rng.integers(0, len(ev.problem.process), n),
        instances=pick,
        spares=spares,
        repairs=repairs,
        interface_area_mm2=ev.interface_area_mm2(pick, packaging),
    )


def bench_exact_many(n: int, seed: int = 2) -> None:
    """Cold `gross_dies_exact_many` on `n` distinct chain footprints: per-footprint path
    against bisection; checks that both give the same counts."""
    rng = np.random.default_rng(seed)
    area = rng.uniform(20.0, 800.0, n)  # shuffled order, as the solver passes them
    width = np.minimum(np.sqrt(area), 26.0)  # stretched once a square no longer fits
    site_w, site_h = width + 0.1, area / width + 0.1
    radius = wafer.usable_radius_mm(300.0, 3.0)
    distinct = len(np.unique(np.round(site_w, 9) + 1j * np.round(site_h, 9)))
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    old = wafer._exact_many(radius, site_w, site_h, bisect=False)
    t_old = time.perf_counter() - t0
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    new = wafer.gross_dies_exact_many(radius, site_w, site_h)
    t_new = time.perf_counter() - t0
    wafer.clear_count_cache()
    if not np.array_equal(old, new):
        raise SystemExit("bisection and per-footprint counts differ")
    print(
        f"{'exact count, chain':28s}: {distinct} distinct footprints, "
        f"{len(np.unique(new))} distinct counts: per footprint {t_old:.2f} s, "
        f"bisection {t_new:.2f} s, {t_old / t_new:.1f}x"
    )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--dies", type=int, default=200_000)
    parser.add_argument("--footprints", type=int, default=500_000)
    args = parser.parse_args()
    problem = load_problem("problems/server_processor.toml")
    # the demo's salvage bins price partly good dies through the mixture too: drop them
    # for the closed-form row
    plain = problem.model_copy(
        update={"market": problem.market.model_copy(update={"salvage_bin": []})}
    )
    ev = Evaluator(plain)
    contents = enumerate_contents(ev)
    print(f"{len(contents)} distinct block contents; batch of {args.dies} dies, one process")
    for redundancy in (False, True):
        ev = Evaluator(problem if redundancy else plain)
        b = batch(ev, contents, args.dies, redundancy, seed=1)
        wafer.clear_count_cache()
        t0 = time.perf_counter()
        prices = ev.price_dies(b)
        cold = time.perf_counter() - t0
        t0 = time.perf_counter()
        ev.price_dies(b)
        warm = time.perf_counter() - t0
        footprints = len(np.unique(np.round(prices.area_mm2, 9)))
        label = "spares + repair (mixture)" if redundancy else "no redundancy (closed form)"
        print(
            f"{label:28s}: {args.dies / cold:>10,.0f} dies/s first call "
            f"({footprints} footprints counted exactly), {args.dies / warm:>10,.0f} dies/s "
            "with counts cached"
        )
    bench_exact_many(args.footprints)


if __name__ == "__main__":
    main()
