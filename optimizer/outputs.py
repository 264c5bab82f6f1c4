"""Run folders under results/: written whole or not at all; strict JSON; stable figures.

Files are first written into a hidden temporary folder beside the destination, which is
then renamed into place in one step, so an interrupted run leaves no half-written folder.
A run killed outright (SIGKILL, power loss) can leave its temporary folder behind; the
next run removes such leftovers when their writer is gone.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import re
import shutil
import socket
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from optimizer.errors import ProblemError

Writer = Callable[[Path], None]

# A leftover of a crashed run is removed once it is this old even if its writer's pid
# now belongs to another process (pids are reused).
STALE_SECONDS = 3600.0
_TMP = re.compile(r"^\.(?P<final>.+)\.tmp-(?P<host>[A-Za-z0-9-]*)-(?P<pid>\d+)-[A-Za-z0-9_]+$")


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()[:40] or "run"


def short(value: object, limit: int = 40) -> str:
    """A user-supplied value cut to ``limit`` characters for one-line messages."""
    text = str(value).replace("\n", " ").replace("\r", " ")
    return text if len(text) <= limit else text[: limit - 1] + "…"


# ---------------------------------------------------------------- JSON
def clean(value: object) -> object:
    """JSON-safe values: NaN and infinities become null; numpy scalars plain numbers."""
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [clean(v) for v in value]
    if hasattr(value, "tolist") and hasattr(value, "dtype"):  # numpy scalars and arrays
        return clean(value.tolist())
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def json_text(payload: object, indent: int | None = 2) -> str:
    """Strict JSON text: non-finite numbers as null, and a check that none slipped through."""
    return json.dumps(clean(payload), indent=indent, allow_nan=False)


def json_writer(payload: object) -> Writer:
    return text_writer(json_text(payload) + "\n")


# ---------------------------------------------------------------- figures
def _freeze_layout(figure) -> None:
    """Settle a layout engine's result once, with axes positions rounded: the engine's
    last bits vary from run to run, and SVG clip ids hash them."""
    if figure.get_layout_engine() is None:
        return
    figure.draw_without_rendering()
    positions = [ax.get_position().bounds for ax in figure.axes]
    figure.set_layout_engine("none")
    for ax, bounds in zip(figure.axes, positions, strict=True):
        ax.set_position([round(v, 5) for v in bounds])


def figure_writer(figure, **options) -> Writer:
    """Write a matplotlib figure (format from the file suffix) byte-identically each run."""

    def write(path: Path) -> None:
        import matplotlib

        from optimizer import __version__

        fmt = path.suffix.lstrip(".").lower()
        # no date, no random ids, no plotting-library version: same inputs, same bytes
        made_by = f"dieplan {__version__}"
        metadata = {
            "svg": {"Date": None, "Creator": made_by},
            "png": {"Software": made_by},
        }.get(fmt, {})
        # tick labels are made while saving: keep them plain text as well
        with matplotlib.rc_context({"svg.hashsalt": "dieplan", "text.parse_math": False}):
            _freeze_layout(figure)
            figure.savefig(path, format=fmt, metadata=metadata, **options)

    return write


# ---------------------------------------------------------------- run folders
def check_results_dir(results_dir: Path, option: str = "--results") -> None:
    """Fail now, before any work, if a run folder could not be created under ``results_dir``.

    Nothing is created: the folder (and missing parents) appear only when a run succeeds.
    """
    path = Path(results_dir)
    probe = path
    while not probe.exists():
        if probe.is_symlink():
            raise ProblemError(option, short(path), "is a broken link; give a folder path")
        if probe.parent == probe:
            break
        probe = probe.parent
    if not probe.is_dir():
        what = "is a file, not a folder" if probe == path else f"lies under the file {probe}"
        raise ProblemError(
            option, short(path), f"{what}; give a folder path (it is created if missing)"
        )
    if not os.access(probe, os.W_OK | os.X_OK):
        raise ProblemError(
            option,
            short(path),
            f"cannot create files in {short(probe)} (no permission); give a writable folder",
        )


def _host() -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", socket.gethostname())[:30]


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # someone else's live process
    return True


def remove_stale(results_dir: Path, now: float | None = None) -> list[Path]:
    """Remove temporary folders that crashed runs left in ``results_dir``.

    Only folders named by :func:`write_run_folder`'s own pattern are touched, and only if
    their writer process on this host is gone, or they are older than STALE_SECONDS.
    """
    now = time.time() if now is None else now
    removed = []
    try:
        entries = list(Path(results_dir).iterdir())
    except OSError:
        return removed
    host = _host()
    for entry in entries:
        match = _TMP.match(entry.name)
        if not match or entry.is_symlink() or not entry.is_dir():
            continue
        pid = int(match["pid"])
        if pid == os.getpid() and match["host"] == host:
            continue
        try:
            age = now - entry.stat().st_mtime
        except OSError:
            continue
        dead = match["host"] == host and not _alive(pid)
        if dead or age > STALE_SECONDS:
            shutil.rmtree(entry, ignore_errors=True)
            removed.append(entry)
    return removed


def write_run_folder(results_dir: Path, command: str, label: str, files: dict[str, Writer]) -> Path:
    """Create ``results_dir/<time>-<command>-<label>/`` holding ``files`` atomically.

    ``files`` maps a file name to a function that writes that file at the given path.
    ``report.html`` is then built from the files written (see :mod:`optimizer.html_report`)
    unless ``files`` has its own. Raises ProblemError (option --results) if the folder
    cannot be written, and InvariantViolation if the report cannot be built.
    """
    results_dir = Path(results_dir)
    check_results_dir(results_dir)
    try:
        results_dir.mkdir(parents=True, exist_ok=True)
        remove_stale(results_dir)
        stamp = _dt.datetime.now().strftime("%Y%m%d-%H%M%S-%f")
        final = results_dir / f"{stamp}-{command}-{_slug(label)}"
        # writer's host and pid in the name: a later run can tell a crashed writer's leftovers
        prefix = f".{final.name}.tmp-{_host()}-{os.getpid()}-"
        tmp = Path(tempfile.mkdtemp(prefix=prefix, dir=results_dir))
    except OSError as exc:
        raise ProblemError(
            "--results",
            short(results_dir),
            f"cannot create the run folder ({exc.strerror or exc}); give a writable folder",
        ) from None
    try:
        for name, write in files.items():
            write(tmp / name)
        # the report reads the files just written: its numbers are the run's by construction
        from optimizer.html_report import REPORT_NAME, write_report

        if REPORT_NAME not in files:
            write_report(tmp, command)
        n = 1
        while final.exists():  # two runs in one microsecond
            n += 1
            final = results_dir / f"{stamp}-{command}-{_slug(label)}-{n}"
        os.replace(tmp, final)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise ProblemError(
            "--results",
            short(results_dir),
            f"cannot write the run folder ({exc.strerror or exc}); free space or give "
            "another folder",
        ) from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def text_writer(text: str) -> Writer:
    return lambda path: path.write_text(text, encoding="utf-8")


def copy_writer(source: Path) -> Writer:
    return lambda path: shutil.copyfile(source, path)
