"""Executors: a Dask cluster and local processes give the in-process results, in order."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import textwrap
import threading
import time
import tomllib
from pathlib import Path

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
    # tasks ran). A small in-process cluster reached over TCP, as a remote one would be
    # (so the first contact checks who answers): one worker thread, no dashboard.
    from dask.distributed import LocalCluster

    study = _study()
    axes = [make_axis("process.cheap.wafer_cost", 2000, 12000, 4)]
    local_sweep = run_sweep(study, axes)
    local_mc = run_uncertainty(study, samples=40, seed=5, top=2)
    with LocalCluster(
        n_workers=1,
        threads_per_worker=1,
        processes=False,
        protocol="tcp",
        dashboard_address=None,
    ) as cluster:
        assert cluster.scheduler_address.startswith("tcp://")
        runner = Runner(scheduler=cluster.scheduler_address)
        with runner.session():
            runner.start()
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


# ---------------------------------------------------------------- ending cleanly
ROOT = Path(__file__).resolve().parents[1]


def _gone(pid: int) -> bool:
    """True once ``pid`` has exited (a zombie waiting for its reaper counts as exited)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except (FileNotFoundError, ProcessLookupError):
        return True
    return stat.rpartition(")")[2].split()[0] in ("Z", "X")


def _wait_gone(pids, seconds: float) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if all(_gone(p) for p in pids):
            return True
        time.sleep(0.1)
    return all(_gone(p) for p in pids)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_workers_end_when_their_parent_is_killed():
    # SIGKILL leaves the parent no chance to clean up, and busy workers do not read
    # their task pipe (left alone they would sleep out their 60 s): they must notice
    script = textwrap.dedent(
        """
        import time
        from optimizer.explore.parallel import Runner
        runner = Runner(workers=2)
        with runner.session():
            runner.map(time.sleep, [0.2, 0.2])
            print(*runner._pool._processes, flush=True)
            runner.map(time.sleep, [60, 60])
        """
    )
    parent = subprocess.Popen(
        [sys.executable, "-c", script],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    workers: list[int] = []
    try:
        workers = [int(p) for p in parent.stdout.readline().split()]
        assert workers and not any(_gone(p) for p in workers)
        time.sleep(0.5)  # the long tasks have started
        parent.send_signal(signal.SIGKILL)
        parent.wait(timeout=10)
        assert _wait_gone(workers, 10), "worker processes outlived their parent"
    finally:
        parent.kill()
        parent.wait()
        for pid in workers:
            if not _gone(pid):
                os.kill(pid, signal.SIGKILL)  # only our own leftovers, by id


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_interrupted_session_stops_its_workers_at_once():
    # Ctrl-C while tasks of 60 s run: the workers are stopped, not waited for
    runner = Runner(workers=2)
    seen: list[int] = []

    def interrupt(done: int, total: int) -> None:
        seen.extend(runner._pool._processes)
        raise KeyboardInterrupt

    start = time.monotonic()
    with pytest.raises(KeyboardInterrupt), runner.session():
        runner.map(time.sleep, [0.1, 60, 60], progress=interrupt)
    assert time.monotonic() - start < 30
    assert seen and _wait_gone(seen, 5)
    assert runner._pool is None


def test_scheduler_that_never_answers_is_one_line_within_the_timeout():
    # a port that accepts connections but never speaks the scheduler's protocol
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(4)
    held = []
    threading.Thread(target=lambda: held.append(server.accept()), daemon=True).start()
    address = f"tcp://127.0.0.1:{server.getsockname()[1]}"
    start = time.monotonic()
    try:
        with pytest.raises(ProblemError) as info:
            Runner(scheduler=address, connect_timeout=0.5).start()
    finally:
        server.close()
    assert time.monotonic() - start < 5
    assert info.value.source == "--scheduler"
    assert "no answer within 0.5 s" in info.value.message


@pytest.mark.parametrize(
    ("address", "words"),
    [
        ("notanaddress", "needs a host and a port"),
        ("tcp://host", "needs a host and a port"),
        ("ftp://host:21", "unknown protocol 'ftp'"),
        ("tcp://host:70000", "from 1 to 65535"),
    ],
)
def test_unusable_scheduler_addresses_fail_before_any_work(address, words):
    with pytest.raises(ProblemError, match=words):
        Runner(scheduler=address)


def test_worker_count_has_a_ceiling():
    # source: by hand - more than 4 processes per core only adds start-up and memory
    limit = 4 * (os.cpu_count() or 1)
    assert Runner(workers=limit).workers == limit
    with pytest.raises(ProblemError, match="per CPU core"):
        Runner(workers=limit + 1)
