"""Run many independent scenario tasks in this process, on local processes, or on Dask.

:class:`Runner` maps a module-level function over a list of tasks and returns the
results in task order, whichever executor ran them, so results do not depend on it:

* ``workers == 1`` and no scheduler: in this process, one task after another;
* ``workers > 1``: a :class:`concurrent.futures.ProcessPoolExecutor` of fresh (spawned)
  processes; each sets ``DIEPLAN_COUNT_WORKERS=1`` so the gross-die counting does not
  start threads of its own inside a worker;
* ``scheduler="tcp://host:port"``: an existing Dask cluster through
  ``dask.distributed.Client(address)``; its workers need dieplan installed.

Each worker process keeps one candidate-die cache (:func:`worker_cache`) for solves that
differ only in the market section, and one lock so that threads of one Dask worker never
run two solves at once (the modelling layer is not thread-safe).

A task's ProblemError travels back as plain fields and is raised again here, so a bad
input stops the run with the usual one-line message whatever executor ran it.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

from optimizer.problem import ProblemError

Progress = Callable[[int, int], None]  # (tasks done, tasks in all)

# Solves cached per worker process; more entries than this means scenarios differ in
# more than the market, where a cache only costs memory.
_CACHE_LIMIT = 4
_CANDIDATE_CACHE: dict = {}
_SOLVE_LOCK = threading.Lock()


def worker_cache() -> dict:
    """This process's candidate-die cache for :func:`optimizer.solver.solve`."""
    if len(_CANDIDATE_CACHE) > _CACHE_LIMIT:
        _CANDIDATE_CACHE.clear()
    return _CANDIDATE_CACHE


def solve_lock() -> threading.Lock:
    """The lock every task holds while it solves or prices in this process."""
    return _SOLVE_LOCK


def _init_worker() -> None:
    os.environ["DIEPLAN_COUNT_WORKERS"] = "1"


@dataclass(frozen=True)
class _Failure:
    source: str
    field: str
    message: str


def _guarded(fn: Callable[[Any], Any], task: Any) -> Any:
    # A child process (pool worker, Dask nanny worker) counts gross dies on one thread:
    # the cores are already shared among workers; the user's process keeps its setting.
    if multiprocessing.parent_process() is not None:
        os.environ["DIEPLAN_COUNT_WORKERS"] = "1"
    try:
        with _SOLVE_LOCK:
            return fn(task)
    except ProblemError as error:
        return _Failure(error.source, error.field, error.message)


class Runner:
    """Where scenario tasks run: ``workers`` local processes or a Dask ``scheduler``.

    Worker processes (or the Dask client) are started by the first :meth:`map` and kept
    for the rest of a :meth:`session`, so the phases of one study share them; outside a
    session each :meth:`map` starts and stops its own.
    """

    def __init__(self, workers: int = 1, scheduler: str | None = None):
        if workers < 1:
            raise ProblemError("--workers", "", f"must be at least 1 (got {workers})")
        self.workers = int(workers)
        self.scheduler = scheduler or None
        self._pool: ProcessPoolExecutor | None = None
        self._client = None
        self._depth = 0

    @property
    def description(self) -> str:
        if self.scheduler:
            return f"dask cluster at {self.scheduler}"
        if self.workers == 1:
            return "this process"
        return f"{self.workers} local processes"

    @contextmanager
    def session(self) -> Iterator[Runner]:
        """Keep workers (or the Dask client) alive across several :meth:`map` calls."""
        self._depth += 1
        try:
            yield self
        finally:
            self._depth -= 1
            if self._depth == 0:
                self.close()

    def close(self) -> None:
        """Stop the worker processes and the Dask client, if any."""
        if self._pool is not None:
            self._pool.shutdown()
            self._pool = None
        if self._client is not None:
            self._client.close()
            self._client = None

    def map(
        self,
        fn: Callable[[Any], Any],
        tasks: Sequence[Any],
        progress: Progress | None = None,
    ) -> list[Any]:
        """``[fn(t) for t in tasks]``, run where this runner says, in task order.

        ``fn`` must be a module-level function and tasks picklable.
        """
        tasks = list(tasks)
        if not tasks:
            return []
        with self.session():
            if self.scheduler:
                results = self._dask(fn, tasks, progress)
            elif self.workers == 1:
                results = []
                for done, task in enumerate(tasks, start=1):
                    results.append(_guarded(fn, task))
                    if progress is not None:
                        progress(done, len(tasks))
            else:
                results = self._processes(fn, tasks, progress)
        for result in results:
            if isinstance(result, _Failure):
                raise ProblemError(result.source, result.field, result.message)
        return results

    def _processes(self, fn, tasks, progress) -> list[Any]:
        if self._pool is None:
            # spawn: workers start clean, with no threads or pools inherited from here
            self._pool = ProcessPoolExecutor(
                max_workers=self.workers,
                mp_context=multiprocessing.get_context("spawn"),
                initializer=_init_worker,
            )
        results: list[Any] = [None] * len(tasks)
        futures = {self._pool.submit(_guarded, fn, task): i for i, task in enumerate(tasks)}
        for done, future in enumerate(as_completed(futures), start=1):
            results[futures[future]] = future.result()
            if progress is not None:
                progress(done, len(tasks))
        return results

    def _connect(self):
        from dask.distributed import Client

        if self._client is None:
            try:
                self._client = Client(self.scheduler, timeout="10s", set_as_default=False)
            except (OSError, TimeoutError, ValueError) as exc:
                raise ProblemError(
                    "--scheduler",
                    str(self.scheduler),
                    f"cannot reach a Dask scheduler there ({exc}); check the address "
                    "(tcp://HOST:PORT) or run without --scheduler",
                ) from None
        return self._client

    def _dask(self, fn, tasks, progress) -> list[Any]:
        client = self._connect()
        futures = client.map(_guarded, [fn] * len(tasks), tasks, pure=False)
        results: list[Any] = []
        # collected in task order; the cluster runs them in whatever order it likes
        for done, future in enumerate(futures, start=1):
            results.append(future.result())
            if progress is not None:
                progress(done, len(tasks))
        return results


def chunks(n: int, parts: int) -> list[range]:
    """Split ``range(n)`` into at most ``parts`` contiguous, nearly equal ranges."""
    parts = max(1, min(parts, n))
    edges = [round(i * n / parts) for i in range(parts + 1)]
    return [range(edges[i], edges[i + 1]) for i in range(parts) if edges[i + 1] > edges[i]]
