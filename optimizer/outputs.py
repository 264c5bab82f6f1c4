"""Run folders under results/: written whole or not at all.

Files are first written into a hidden temporary folder beside the destination, which is
then renamed into place in one step, so an interrupted run leaves no half-written folder.
"""

from __future__ import annotations

import datetime as _dt
import os
import re
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path

Writer = Callable[[Path], None]


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()[:40] or "run"


def write_run_folder(results_dir: Path, command: str, label: str, files: dict[str, Writer]) -> Path:
    """Create ``results_dir/<time>-<command>-<label>/`` holding ``files`` atomically.

    ``files`` maps a file name to a function that writes that file at the given path.
    """
    results_dir.mkdir(parents=True, exist_ok=True)
    stamp = _dt.datetime.now().strftime("%Y%m%d-%H%M%S-%f")
    final = results_dir / f"{stamp}-{command}-{_slug(label)}"
    tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=results_dir))
    try:
        for name, write in files.items():
            write(tmp / name)
        os.replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def text_writer(text: str) -> Writer:
    return lambda path: path.write_text(text, encoding="utf-8")


def copy_writer(source: Path) -> Writer:
    return lambda path: shutil.copyfile(source, path)
