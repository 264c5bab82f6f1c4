"""Live progress of a solve on a terminal: stage, dies priced, best profit, bound, gap.

Shown in place while the solve runs and erased when it ends, so that the printed result
is the same as without it. Off for piped output and for JSON: nothing is written then.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager

from rich.console import Console, Group, RenderableType
from rich.live import Live
from rich.spinner import Spinner
from rich.table import Table
from rich.text import Text

from optimizer.solver.progress import Progress, ProgressEvent, reporting

# redraws per second; the solver's reports are only read, at this pace
REFRESH_PER_SECOND = 8


def money(value: float | None, currency: str) -> str:
    if value is None:
        return "none yet"
    return f"{value:,.0f} {currency}".rstrip()


def gap_text(gap: float | None) -> str:
    if gap is None:
        return "not known yet"
    return f"{gap:.3g} ({gap * 100:.3g} %)" if gap > 0 else "0 (best found meets the bound)"


def progress_view(
    event: ProgressEvent, currency: str, seconds: float, spinner=None, objective: str = "profit"
):
    """What the terminal shows for ``event`` after ``seconds`` of solving; ``objective``
    names what best and bound are ("profit", "family profit", "net present value")."""
    head = Table.grid(padding=(0, 1))
    head.add_column(no_wrap=True)
    head.add_column(no_wrap=True, overflow="ellipsis")
    head.add_column(no_wrap=True, justify="right")
    head.add_row(spinner or "", Text(event.stage, style="bold"), f"{seconds:.1f} s")
    facts = Table.grid(padding=(0, 2))
    facts.add_column(style="dim", no_wrap=True)
    facts.add_column(no_wrap=True)
    facts.add_row("candidate dies priced", f"{event.candidates_priced:,}")
    facts.add_row(f"best {objective} found", money(event.best_profit, currency))
    facts.add_row(f"proven {objective} bound", money(event.profit_bound, currency))
    facts.add_row("gap", gap_text(event.gap))
    return Group(head, facts)


@contextmanager
def live_progress(
    console: Console, enabled: bool = True, currency: str = "", objective: str = "profit"
) -> Iterator[Progress | None]:
    """Solves inside the block report to a live view on ``console``, erased at the end.

    Yields the :class:`Progress` they report to, or None (and shows nothing) unless
    ``enabled`` and the console is a real terminal.
    """
    if not (enabled and console.is_terminal and not console.is_dumb_terminal):
        yield None
        return
    progress = Progress()
    spinner = Spinner("dots")
    began = time.perf_counter()

    def view() -> RenderableType:
        seconds = time.perf_counter() - began
        return progress_view(progress.latest(), currency, seconds, spinner, objective)

    live = Live(
        console=console,
        transient=True,
        refresh_per_second=REFRESH_PER_SECOND,
        get_renderable=view,
        # warnings stay on stderr, where they go without the view
        redirect_stderr=False,
    )
    with live, reporting(progress):
        yield progress
