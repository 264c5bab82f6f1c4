"""Start-up time of the `dieplan` command line: each command as a whole new process.

Every run starts a fresh interpreter (as a user's shell does), so module imports are
paid each time; the OS file cache stays warm, so this is "cold-ish". Prints the median
and maximum wall time per command, and the import time of ``optimizer.cli`` as reported
by ``python -X importtime``. A benchmark, not a test: it always exits 0.

With PYTHONDONTWRITEBYTECODE set, every run recompiles the project's sources; a second
table then shows the same commands with compiled bytecode kept (in a temporary
PYTHONPYCACHEPREFIX, nothing written to the tree), as an installed copy runs.

Targets (2-core machine): --help, --version and every command's --help at most 0.3 s;
``check`` of a demo file at most 1 s.

Run:  python benchmarks/bench_startup.py [--runs 7]
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

COMMANDS = [
    ("--version",),
    ("--help",),
    ("solve", "--help"),
    ("check", "problems/server_processor.toml"),
    ("check", "problems/edge_accelerator.toml"),
]
TARGETS = {"check": 1.0}  # seconds; anything else (help, version) 0.3 s
HELP_TARGET = 0.3


def dieplan() -> list[str]:
    """The installed script beside this interpreter, else the same entry point via -c."""
    script = Path(sys.executable).parent / "dieplan"
    if script.exists():
        return [str(script)]
    found = shutil.which("dieplan")
    if found:
        return [found]
    return [sys.executable, "-c", "from optimizer.cli import app; app()"]


def wall_times(argv: list[str], runs: int, env: dict[str, str]) -> tuple[list[float], int]:
    times, code = [], 0
    for _ in range(runs):
        start = time.perf_counter()
        done = subprocess.run(argv, cwd=ROOT, capture_output=True, env=env)
        times.append(time.perf_counter() - start)
        code = done.returncode
    return times, code


def import_time() -> float | None:
    """Cumulative import time [s] of optimizer.cli from -X importtime (its last line)."""
    done = subprocess.run(
        [sys.executable, "-X", "importtime", "-c", "import optimizer.cli"],
        cwd=ROOT,
        capture_output=True,
        text=True,
    )
    for line in reversed(done.stderr.splitlines()):
        parts = [p.strip() for p in line.split("|")]
        if len(parts) == 3 and parts[2] == "optimizer.cli":
            return int(parts[1]) / 1e6
    return None


def table(title: str, runs: int, env: dict[str, str]) -> None:
    base = dieplan()
    print(title)
    print(f"{'command':<48} {'median s':>9} {'max s':>7} {'target':>7}  exit")
    for command in COMMANDS:
        target = TARGETS.get(command[0], HELP_TARGET)
        subprocess.run([*base, *command], cwd=ROOT, capture_output=True, env=env)  # warm-up
        times, code = wall_times([*base, *command], runs, env)
        median, worst = statistics.median(times), max(times)
        flag = "" if median <= target else "  over target"
        label = " ".join(("dieplan", *command))
        print(f"{label:<48} {median:>9.3f} {worst:>7.3f} {target:>7.1f}  {code}{flag}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7, help="Processes per command.")
    args = parser.parse_args()
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(
        f"dieplan start-up: {args.runs} fresh processes per command, {os.cpu_count()} CPU(s), "
        f"load average {load:.2f} at start"
    )
    env = dict(os.environ)
    no_bytecode = bool(env.get("PYTHONDONTWRITEBYTECODE"))
    as_is = "sources recompiled each run" if no_bytecode else "bytecode as the environment keeps it"
    table(f"\nenvironment as is ({as_is})", args.runs, env)
    if no_bytecode:
        with tempfile.TemporaryDirectory(prefix="dieplan-pyc-") as cache:
            kept = {k: v for k, v in env.items() if k != "PYTHONDONTWRITEBYTECODE"}
            kept["PYTHONPYCACHEPREFIX"] = cache
            table("\nbytecode kept (as an installed copy runs)", args.runs, kept)
    seconds = import_time()
    shown = "unknown" if seconds is None else f"{seconds:.3f} s"
    print(f"\nimport optimizer.cli (python -X importtime, cumulative): {shown}")


if __name__ == "__main__":
    main()
    sys.exit(0)
