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

Local workers end with their parent: on Linux the kernel signals them when the parent
dies (``PR_SET_PDEATHSIG``), elsewhere a watchdog thread notices the parent is gone. They
ignore Ctrl-C, which the parent handles by stopping them; an interrupted or failed
:meth:`Runner.session` terminates its workers instead of waiting for them.
"""

from __future__ import annotations

import asyncio
import ctypes
import gc
import multiprocessing
import os
import signal
import sys
import threading
import time
import warnings
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

from optimizer.outputs import short as _short
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


# Seconds to reach a Dask scheduler before giving up with one line.
CONNECT_TIMEOUT = 10.0
_PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>


def max_workers() -> int:
    """More local processes than this only slows a run down (and can exhaust memory)."""
    return 4 * (os.cpu_count() or 1)


def _end_with_parent(parent_pid: int) -> None:
    """Make this worker process end when ``parent_pid`` does."""
    if sys.platform.startswith("linux"):
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, signal.SIGTERM, 0, 0, 0)
        except (OSError, AttributeError):
            pass  # the watchdog below still covers it
    if os.getppid() != parent_pid:  # the parent died before the line above took effect
        os._exit(1)

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(1.0)
        os._exit(1)

    threading.Thread(target=watch, name="dieplan-parent-watch", daemon=True).start()


# Workers stopped on purpose (Ctrl-C, SIGTERM) leave their queues' semaphores to the
# resource tracker, which unlinks them but also warns on stderr after our one-line
# message; the tracker takes its warning filters from sys.warnoptions when it starts.
_TRACKER_FILTER = "ignore:resource_tracker:UserWarning"


def _quiet_resource_tracker() -> None:
    if _TRACKER_FILTER not in sys.warnoptions:
        sys.warnoptions.append(_TRACKER_FILTER)


def _init_worker(parent_pid: int | None = None) -> None:
    os.environ["DIEPLAN_COUNT_WORKERS"] = "1"
    # Ctrl-C reaches the whole process group; the parent alone decides and stops us
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # our stderr is the user's terminal, where only the parent's one line may appear
    warnings.simplefilter("ignore")
    if parent_pid is not None:
        _end_with_parent(parent_pid)


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

    def __init__(
        self,
        workers: int = 1,
        scheduler: str | None = None,
        connect_timeout: float | None = None,
    ):
        if workers < 1:
            raise ProblemError(
                "--workers", "", f"must be at least 1 (got {workers}); give 1 or more processes"
            )
        if workers > max_workers():
            raise ProblemError(
                "--workers",
                "",
                f"{workers} is more than 4 per CPU core ({max_workers()} here); "
                "give at most that many",
            )
        self.workers = int(workers)
        self.scheduler = check_scheduler_address(scheduler) if scheduler else None
        self.connect_timeout = CONNECT_TIMEOUT if connect_timeout is None else connect_timeout
        self._pool: ProcessPoolExecutor | None = None
        self._client = None
        self._depth = 0

    @property
    def description(self) -> str:
        if self.scheduler:
            return f"dask cluster at {self.scheduler}"
        if self.workers == 1:
            return "one worker (this command)"
        return f"{self.workers} local workers"

    @contextmanager
    def session(self) -> Iterator[Runner]:
        """Keep workers (or the Dask client) alive across several :meth:`map` calls."""
        self._depth += 1
        try:
            yield self
        except BaseException:
            # interrupted or failed: stop the workers now rather than wait for their tasks
            self._depth -= 1
            if self._depth == 0:
                self.close(abort=True)
            raise
        else:
            self._depth -= 1
            if self._depth == 0:
                self.close()

    def start(self) -> Runner:
        """Reach the Dask scheduler now (raises the one-line ProblemError if it cannot)."""
        if self.scheduler:
            self._connect()
        return self

    def close(self, abort: bool = False) -> None:
        """Stop the worker processes and the Dask client, if any.

        ``abort`` drops queued tasks and terminates running workers instead of waiting.
        """
        pool, self._pool = self._pool, None
        if pool is not None:
            if abort:
                processes = list(getattr(pool, "_processes", {}).values())
                pool.shutdown(wait=False, cancel_futures=True)
                for process in processes:
                    if process.is_alive():
                        process.terminate()
                for process in processes:
                    process.join(timeout=5)
                # let the pool's manager thread see its workers gone and release its
                # queues, so that no semaphore is left for the resource tracker to report
                manager = getattr(pool, "_executor_manager_thread", None)
                if manager is not None:
                    manager.join(timeout=5)
                del pool
                gc.collect()
            else:
                pool.shutdown()
        client, self._client = self._client, None
        if client is not None:
            client.close()

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
            _quiet_resource_tracker()
            self._pool = ProcessPoolExecutor(
                max_workers=self.workers,
                mp_context=multiprocessing.get_context("spawn"),
                initializer=_init_worker,
                initargs=(os.getpid(),),
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
            timeout = self.connect_timeout
            _probe_scheduler(self.scheduler, timeout)
            try:
                self._client = Client(self.scheduler, timeout=f"{timeout}s", set_as_default=False)
            except (OSError, TimeoutError, ValueError) as exc:
                raise _unreachable(self.scheduler, _reason(exc)) from None
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


def _unreachable(address: str, reason: str) -> ProblemError:
    return ProblemError(
        "--scheduler",
        _short(address),
        f"cannot reach a Dask scheduler there ({reason}); check that it runs and the "
        "address, or run without --scheduler",
    )


def _reason(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return _short(text, 80)


def check_scheduler_address(address: str) -> str:
    """The address if Dask can use it (``tcp://HOST:PORT``, ``HOST:PORT`` and the other
    protocols Dask knows); otherwise the one-line ProblemError naming --scheduler."""
    from distributed.comm.addressing import parse_address, parse_host_port
    from distributed.comm.registry import backends

    text = str(address).strip()
    fix = "write tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786"
    try:
        protocol, location = parse_address(text)
    except ValueError:
        raise ProblemError("--scheduler", _short(text), f"is not an address; {fix}") from None
    if protocol not in backends:
        raise ProblemError(
            "--scheduler",
            _short(text),
            f"unknown protocol '{_short(protocol, 12)}'; use one of "
            f"{sorted(b for b in backends if b != 'inproc')}; {fix}",
        )
    if protocol != "inproc":
        try:
            host, port = parse_host_port(location)
        except ValueError:
            raise ProblemError(
                "--scheduler", _short(text), f"needs a host and a port; {fix}"
            ) from None
        if not host or not 0 < int(port) < 65536:
            raise ProblemError(
                "--scheduler", _short(text), f"needs a host and a port from 1 to 65535; {fix}"
            )
    return text


def _probe_scheduler(address: str, timeout: float) -> None:
    """Ask whoever listens at ``address`` who it is, within ``timeout`` seconds.

    The Dask client can wait far past its own timeout on a port that accepts connections
    but never answers, so the first contact is made here with a hard limit.
    """
    from distributed.comm import connect
    from distributed.comm.addressing import parse_address

    if parse_address(address)[0] == "inproc":
        return  # in this process: nothing to reach
    try:
        asyncio.get_running_loop()
        return  # inside someone's event loop: leave it to the client
    except RuntimeError:
        pass

    async def identity() -> object:
        comm = await connect(address, timeout=timeout)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    async def limited() -> object:
        return await asyncio.wait_for(identity(), timeout)

    try:
        reply = asyncio.run(limited())
    except TimeoutError:
        raise _unreachable(address, f"no answer within {timeout:g} s") from None
    except Exception as exc:  # any failure to talk to it means it cannot be used
        raise _unreachable(address, _reason(exc)) from None
    if not isinstance(reply, dict) or reply.get("type") != "Scheduler":
        raise ProblemError(
            "--scheduler",
            _short(address),
            "something answers there but it is not a Dask scheduler; check the port",
        )


def chunks(n: int, parts: int) -> list[range]:
    """Split ``range(n)`` into at most ``parts`` contiguous, nearly equal ranges."""
    parts = max(1, min(parts, n))
    edges = [round(i * n / parts) for i in range(parts + 1)]
    return [range(edges[i], edges[i + 1]) for i in range(parts) if edges[i + 1] > edges[i]]
