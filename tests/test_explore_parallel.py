"""Executors: a Dask cluster and local processes give the in-process results, in order."""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd
import pytest

from optimizer.explore.parallel import Runner, chunks
from optimizer.explore.paths import study_from_data
from optimizer.explore.sweep import make_axis, run_sweep
from optimizer.explore.uncertainty import run_uncertainty
from optimizer.problem import ProblemError
from tests.conftest import TINY_PROBLEM

UNCERTAIN = [
    {
        "path": "process.cheap.defect_density",
        "distribution": "lognormal",
        "median": 0.08,
        "sigma_log": 0.3,
    },
    {"path": "market.unit_price", "distribution": "uniform", "low": 450.0, "high": 560.0},
]


def _study():
    return study_from_data({**tomllib.loads(TINY_PROBLEM), "uncertain": UNCERTAIN}, "tiny")


def test_dask_cluster_equals_local_run():
    # source: the in-process run of the same study (results must not depend on where
    # tasks ran). A small in-process cluster: one worker thread, no dashboard.
    from dask.distributed import LocalCluster

    study = _study()
    axes = [make_axis("process.cheap.wafer_cost", 2000, 12000, 4)]
    local_sweep = run_sweep(study, axes)
    local_mc = run_uncertainty(study, samples=40, seed=5, top=2)
    with LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        runner = Runner(scheduler=cluster.scheduler_address)
        with runner.session():
            remote_sweep = run_sweep(study, axes, runner=runner)
            remote_mc = run_uncertainty(study, samples=40, seed=5, top=2, runner=runner)
    pd.testing.assert_frame_equal(local_sweep.points, remote_sweep.points)
    pd.testing.assert_frame_equal(local_sweep.crossovers, remote_sweep.crossovers)
    np.testing.assert_array_equal(local_mc.profit, remote_mc.profit)
    pd.testing.assert_frame_equal(local_mc.summary, remote_mc.summary)


@pytest.fixture(scope="module")
def pool():
    """Two local worker processes shared by this module's tests (they take a while to start)."""
    runner = Runner(workers=2)
    with runner.session():
        yield runner


def test_local_processes_equal_in_process_sweep(pool):
    # source: the in-process run of the same grid
    study = _study()
    axes = [make_axis("market.volume", 2e4, 2e6, 4, log=True)]
    here = run_sweep(study, axes, runner=Runner(workers=1))
    pooled = run_sweep(study, axes, runner=pool)
    pd.testing.assert_frame_equal(here.points, pooled.points)
    pd.testing.assert_frame_equal(here.crossovers, pooled.crossovers)
    pd.testing.assert_frame_equal(here.curves, pooled.curves)


def test_local_processes_equal_in_process_monte_carlo(pool):
    # source: the in-process run (same seed, same samples, same order)
    study = _study()
    here = run_uncertainty(study, samples=30, seed=2, top=2, runner=Runner(workers=1))
    pooled = run_uncertainty(study, samples=30, seed=2, top=2, runner=pool)
    np.testing.assert_array_equal(here.profit, pooled.profit)


def test_worker_errors_come_back_as_one_line_problems(pool):
    # no design fits a 50 mm^2 die limit: the solve in a worker process fails, and the
    # error travels back with the scenario named instead of as a traceback
    axes = [make_axis("constraints.max_die_area", 50, 800, 2)]
    with pytest.raises(ProblemError) as info:
        run_sweep(_study(), axes, runner=pool)
    assert info.value.source == "tiny at constraints.max_die_area = 50"
    assert info.value.field == "constraints"
    with pytest.raises(ProblemError, match="at least 1"):
        Runner(workers=0)


def test_chunks_cover_every_index_once():
    # source: by hand — 10 items in 3 nearly equal contiguous parts
    assert [list(r) for r in chunks(10, 3)] == [[0, 1, 2], [3, 4, 5, 6], [7, 8, 9]]
    assert [list(r) for r in chunks(2, 8)] == [[0], [1]]
