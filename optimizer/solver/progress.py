"""How far a solve has got, told to whoever listens while it runs.

The solver reports what it already knows at the places it knows it: the stage it is in,
candidate dies priced, the best profit found and the proven profit bound. A listener is
set for the current context with :func:`reporting`; without one every report is a single
context-variable look-up and nothing else. Reports are only read by the listener, never
by the search, so a solve gives the same answer with or without one.
"""

from __future__ import annotations

import contextvars
import math
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace

import numpy as np

# at most this many pushes per second to a listener (the final one always goes)
UPDATES_PER_SECOND = 10


@dataclass(frozen=True)
class ProgressEvent:
    """What is known at one moment of a solve."""

    stage: str
    candidates_priced: int  # candidate dies priced so far (every variant, before pruning)
    best_profit: float | None  # the most profitable design found so far; None: none yet
    profit_bound: float | None  # no design earns more; None: no bound proven yet
    gap: float | None  # (bound - best) / |best|, as the solution reports it
    seconds: float  # since the listener was set
    final: bool = False  # the solve is done: best and bound are the solution's


def relative_gap(best: float | None, bound: float | None) -> float | None:
    """The gap between a profit found and a profit bound, relative to the profit."""
    if best is None or bound is None:
        return None
    return max(0.0, (bound - best) / max(abs(best), 1e-12))


class Progress:
    """The state of one listened-to solve (or several in a row), pushed to ``listener``
    at most ``1 / interval`` times a second; :meth:`latest` can be read at any time, from
    any thread (each report swaps in a new immutable event)."""

    def __init__(
        self,
        listener: Callable[[ProgressEvent], None] | None = None,
        interval: float = 1.0 / UPDATES_PER_SECOND,
        clock: Callable[[], float] = time.perf_counter,
    ) -> None:
        self._listener = listener
        self._interval = interval
        self._clock = clock
        self._start = clock()
        self._pushed_at = -math.inf
        # best and bound stop following the searches once the answer is known: the
        # decision table's searches, one architecture each, come after that
        self._settled = False
        self._event = ProgressEvent("starting", 0, None, None, None, 0.0)

    def latest(self) -> ProgressEvent:
        return self._event

    def _update(self, force: bool = False, **changes) -> None:
        now = self._clock()
        self._event = replace(self._event, seconds=now - self._start, **changes)
        if self._listener is not None and (force or now - self._pushed_at >= self._interval):
            self._pushed_at = now
            self._listener(self._event)

    def begin(self) -> None:
        """A new solve: its best and bound are not known yet (dies priced keep counting)."""
        self._settled = False
        self._update(stage="starting", best_profit=None, profit_bound=None, gap=None, final=False)

    def stage(self, text: str) -> None:
        if text != self._event.stage:
            self._update(stage=text)

    def priced(self, count: int) -> None:
        if count > 0:
            self._update(candidates_priced=self._event.candidates_priced + int(count))

    def found(self, profits) -> None:
        if self._settled:
            return
        values = np.asarray(profits, dtype=float).ravel()
        values = values[np.isfinite(values)]
        if values.size == 0:
            return
        best = float(values.max())
        if self._event.best_profit is not None and best <= self._event.best_profit:
            return
        bound = self._event.profit_bound
        self._update(best_profit=best, gap=relative_gap(best, bound))

    def bounded(self, profit: float) -> None:
        """A proven profit bound; the tightest one reported is kept."""
        # an infinite bound (a part of the search not bounded yet) says nothing
        if self._settled or not math.isfinite(profit):
            return
        bound = self._event.profit_bound
        if bound is not None and profit >= bound:
            return
        self._update(profit_bound=profit, gap=relative_gap(self._event.best_profit, profit))

    def settle(self, best: float, bound: float, gap: float) -> None:
        """The solve's answer: its best profit, bound and gap, kept from now on."""
        self._update(
            force=True,
            best_profit=best if math.isfinite(best) else None,
            profit_bound=bound if math.isfinite(bound) else None,
            gap=gap if math.isfinite(gap) else None,
        )
        self._settled = True

    def finish(self) -> None:
        """The solve is done: one last push, marked final."""
        self._update(force=True, final=True)


_current: contextvars.ContextVar[Progress | None] = contextvars.ContextVar(
    "dieplan_progress", default=None
)


@contextmanager
def reporting(progress: Progress | None) -> Iterator[Progress | None]:
    """Solves run inside this block report to ``progress`` (None: to no one)."""
    token = _current.set(progress)
    try:
        yield progress
    finally:
        _current.reset(token)


def listening() -> bool:
    """Whether anyone listens (for a report that costs something to compute)."""
    return _current.get() is not None


def begin() -> None:
    progress = _current.get()
    if progress is not None:
        progress.begin()


def stage(text: str) -> None:
    progress = _current.get()
    if progress is not None:
        progress.stage(text)


def priced(count: int) -> None:
    """``count`` more candidate dies priced."""
    progress = _current.get()
    if progress is not None:
        progress.priced(count)


def found(profits) -> None:
    """Designs priced exactly: their profits (one or an array; non-finite ones ignored)."""
    progress = _current.get()
    if progress is not None:
        progress.found(profits)


def bounded(profit: float) -> None:
    progress = _current.get()
    if progress is not None:
        progress.bounded(profit)


def settle(best: float, bound: float, gap: float) -> None:
    progress = _current.get()
    if progress is not None:
        progress.settle(best, bound, gap)


def finish() -> None:
    progress = _current.get()
    if progress is not None:
        progress.finish()


class _DiesOnly:
    """A listener for searches inside a larger solve: their dies priced count, their
    profits and bounds do not (they are not the objective being told)."""

    def __init__(self, outer: Progress):
        self._outer = outer

    def priced(self, count: int) -> None:
        self._outer.priced(count)

    def __getattr__(self, name: str):
        return lambda *args, **kwargs: None


@contextmanager
def inner_searches() -> Iterator[None]:
    """Searches run inside this block report only the candidate dies they price (a
    life's per-period problems, a family's products: their profits are not the
    objective the listener is shown)."""
    outer = _current.get()
    if outer is None:
        yield
        return
    token = _current.set(_DiesOnly(outer))  # type: ignore[arg-type]
    try:
        yield
    finally:
        _current.reset(token)


class _Silent:
    """Stands in for a listener when no one listens."""

    def __getattr__(self, name: str):
        return lambda *args, **kwargs: None


def current() -> Progress | _Silent:
    """The listener of this context, or a stand-in that ignores every report: a solve
    made of inner searches keeps it to tell its own objective while the inner searches
    run under :func:`inner_searches`."""
    found = _current.get()
    return found if found is not None else _Silent()
