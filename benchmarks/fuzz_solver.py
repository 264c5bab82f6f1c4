"""Fuzz the proven solver against the exhaustive reference on feature-rich random problems.

On demand, not in CI. Each seed draws a small problem from ``tests/random_problems.py``
(invented data combining salvage bins, spares, repair, defect-reduction curves, margins,
critical-area options, low fault coverage, twin and near-tied options, ...), solves it
with ``method="milp"`` and ``method="exhaustive"`` (both with ``refine=False``, so both
answer over the same stated levels) and compares:

* the milp answer must be proven and its best profit equal the exhaustive best to 1e-9
  relative (of |profit|, at least 1: the solver's own tie tolerance);
* the milp best profit must not exceed its own profit bound;
* with ``--top K`` the K best profits must agree too.

Two worker processes (``--workers``) take seeds one at a time; a seed that runs past
``--timeout`` seconds has its worker killed and replaced, so one hung case does not stop
the run. The summary lists every disagreement with its features, and the seeds where the
solver is slowest relative to the exhaustive reference.

With ``--minimise DIR`` every disagreeing problem is shrunk greedily (drop a block,
process, packaging, option, constraint ... while the same disagreement remains) and
written as TOML to DIR.

Run:  python benchmarks/fuzz_solver.py [--seeds 500] [--start 0] [--timeout 120]
          [--time-limit S] [--top 1] [--refine] [--knob salvage=1]...
          [--json out.json] [--minimise DIR]
"""

from __future__ import annotations

import argparse
import copy
import json
import math
import multiprocessing
import os
import sys
import time
from multiprocessing.connection import wait
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

REL_TOL = 1e-9
# outcomes worth minimising (timeouts and crashes are reported, not shrunk)
FAILURES = (
    "milp_worse",
    "milp_better",
    "bound_below_profit",
    "ranking_differs",
    "feasibility_differs",
    "refine_lost",
)

# ------------------------------------------------------------------ one comparison


def _scale(profit: float) -> float:
    # the solver's tie tolerance: 1e-9 of |profit|, never below 1e-9 money
    return max(abs(profit), 1.0)


def compare(
    data: dict,
    top: int = 1,
    time_limit: float | None = None,
    report=None,
    refine: bool = False,
) -> dict:
    """Solve ``data`` both ways and classify the outcome.

    ``report`` (optional) receives the exhaustive half first, so that a caller that kills
    a hung solver still knows it. With ``refine`` the milp answer with its targets refined
    continuously must be no worse than the exhaustive optimum at the listed levels.
    """
    from optimizer.problem import ProblemError, parse_problem
    from optimizer.solver import solve

    problem = parse_problem(data)
    revenue = problem.market.unit_price * problem.market.volume
    out: dict = {"status": None, "revenue": revenue}
    t0 = time.perf_counter()
    try:
        brute = solve(problem, top=top, method="exhaustive", refine=False, architectures=True)
        out["exhaustive_rows"] = _rows(brute)
        out["exhaustive"] = [d.profit for d in brute.designs]
        out["exhaustive_best"] = _describe(brute.best)
        out["designs_priced"] = brute.stats.get("designs_priced")
    except ProblemError as exc:
        out["exhaustive"] = None
        out["exhaustive_error"] = exc.line()
    out["t_exhaustive"] = time.perf_counter() - t0
    if report is not None:
        report(dict(out))
    t0 = time.perf_counter()
    try:
        ours = solve(
            problem,
            top=top,
            method="milp",
            refine=False,
            time_limit=time_limit,
            architectures=True,
            table_time=None,
        )
        out["milp_rows"] = _rows(ours)
        out["milp"] = [d.profit for d in ours.designs]
        out["milp_best"] = _describe(ours.best)
        out["proven"] = ours.proven_optimal
        out["profit_bound"] = ours.profit_bound
        out["milp_stats"] = {k: v for k, v in ours.stats.items() if isinstance(v, int | float)}
    except ProblemError as exc:
        out["milp"] = None
        out["milp_error"] = exc.line()
    out["t_milp"] = time.perf_counter() - t0
    out["status"], out["shortfall"] = classify(out)
    if out["status"] == "agree" and out.get("exhaustive_rows") != out.get("milp_rows"):
        theirs, mine = out["exhaustive_rows"], out["milp_rows"]

        def wrong(a, b) -> bool:
            """A row that contradicts brute force: a proven row off its best, any row
            above it, or a bound below it (an open row may miss designs; with a time
            limit a row may also be left empty)."""
            if a is None:
                return b is not None
            if b is None:
                return time_limit is None
            tol = REL_TOL * _scale(a[0])
            if b[1] and abs(a[0] - b[0]) > tol:
                return True
            return b[0] > a[0] + tol or b[2] < a[0] - tol or (time_limit is None and not b[1])

        if set(theirs) != set(mine) or any(wrong(theirs[k], mine[k]) for k in theirs):
            out["status"] = "architecture_differs"
    if refine and out["status"] == "agree" and out["exhaustive"] is not None:
        refined = solve(problem, top=1, method="milp", refine=True, time_limit=time_limit)
        out["milp_refined"] = refined.best.profit
        if refined.best.profit < out["exhaustive"][0] - REL_TOL * _scale(out["exhaustive"][0]):
            out["status"] = "refine_lost"
    return out


def _rows(solution) -> dict:
    """Architecture -> (profit, proven) of its best design, or None when it has none."""
    return {
        f"{row.packaging}/{row.n_dies}": (row.profit, row.proven, row.profit_bound)
        if row.design
        else None
        for row in solution.architectures
    }


def classify(out: dict) -> tuple[str, float]:
    """Outcome label and relative shortfall of the milp best (positive = milp worse)."""
    brute, ours = out["exhaustive"], out["milp"]
    if brute is None and ours is None:
        return "agree_infeasible", 0.0
    if brute is None or ours is None:
        if ours is None and "time limit" in out.get("milp_error", ""):
            return "unproven", math.nan
        return "feasibility_differs", math.nan
    scale = _scale(brute[0])
    shortfall = (brute[0] - ours[0]) / scale
    if not out["proven"]:
        return "unproven", shortfall
    if shortfall > REL_TOL:
        return "milp_worse", shortfall
    if shortfall < -REL_TOL:
        return "milp_better", shortfall
    if ours[0] > out["profit_bound"] + REL_TOL * scale:
        return "bound_below_profit", shortfall
    k = min(len(brute), len(ours))
    if len(brute) != len(ours) or any(
        abs(a - b) > REL_TOL * _scale(a) for a, b in zip(brute[:k], ours[:k], strict=True)
    ):
        return "ranking_differs", shortfall
    return "agree", shortfall


def _describe(design) -> str:
    dies = "; ".join(
        f"{d.copies}x[{' '.join(f'{k}={v}' for k, v in d.blocks.items())}] on {d.process}"
        + (f" spares {dict(d.spares)}" if d.spares else "")
        + (f" repair {dict(d.repair)}" if d.repair else "")
        for d in design.dies
    )
    return f"{design.packaging}: {dies}"


# ------------------------------------------------------------------ minimising


def _drop_block(data: dict, name: str) -> dict:
    d = copy.deepcopy(data)
    d["block"] = [b for b in d["block"] if b["name"] != name]
    d["link"] = [lk for lk in d.get("link", []) if name not in lk["blocks"]]
    cons = d.get("constraints", {})
    for key in ("keep_together", "keep_apart"):
        if key in cons:
            groups = [[n for n in g if n != name] for g in cons[key]]
            cons[key] = [g for g in groups if len(g) >= 2]
            if not cons[key]:
                del cons[key]
    bins = d["market"].get("salvage_bin")
    if bins is not None:
        d["market"]["salvage_bin"] = [b for b in bins if b["block"] != name]
    return d


def _drop_process(data: dict, name: str) -> dict:
    d = copy.deepcopy(data)
    d["process"] = [p for p in d["process"] if p["name"] != name]
    d["packaging"] = [p for p in d["packaging"] if p.get("interposer_process") != name]
    return d


def _edit(data: dict, fn) -> dict:
    d = copy.deepcopy(data)
    fn(d)
    return d


def simplifications(data: dict):
    """(label, smaller problem) candidates, biggest cuts first."""
    for blk in data["block"]:
        if len(data["block"]) > 1:
            yield f"drop block {blk['name']}", _drop_block(data, blk["name"])
    for proc in data["process"]:
        if len(data["process"]) > 1:
            yield f"drop process {proc['name']}", _drop_process(data, proc["name"])
    for i, pack in enumerate(data["packaging"]):
        if len(data["packaging"]) > 1:
            yield (
                f"drop packaging {pack['name']}",
                _edit(data, lambda d, i=i: d["packaging"].pop(i)),
            )
    for i in range(len(data["market"].get("salvage_bin", []))):
        yield f"drop salvage bin {i}", _edit(data, lambda d, i=i: d["market"]["salvage_bin"].pop(i))
    for i in range(len(data.get("link", []))):
        yield f"drop link {i}", _edit(data, lambda d, i=i: d["link"].pop(i))
    for key in list(data.get("constraints", {})):
        yield f"drop constraint {key}", _edit(data, lambda d, k=key: d["constraints"].pop(k))
    for key in ("requirements", "critical_area_reduction"):
        if key in data:
            yield f"drop {key}", _edit(data, lambda d, k=key: d.pop(k))
    crit = data.get("critical_area_reduction")
    if crit is not None and len(crit["area_overhead"]) > 1:
        for i in range(len(crit["area_overhead"])):

            def drop_option(d, i=i):
                for key in ("sensitivity_factor", "area_overhead"):
                    d["critical_area_reduction"][key].pop(i)

            yield f"drop critical-area option {i}", _edit(data, drop_option)
    for i, blk in enumerate(data["block"]):
        for key in ("spare_choices", "repair"):
            if key in blk:
                yield (
                    f"block {blk['name']}: drop {key}",
                    _edit(data, lambda d, i=i, k=key: d["block"][i].pop(k)),
                )
        if len(set(blk.get("spare_choices", [0])) | {0}) > 2:
            yield (
                f"block {blk['name']}: spares [0, 1]",
                _edit(data, lambda d, i=i: d["block"][i].update(spare_choices=[0, 1])),
            )
        if "repair" in blk and len(blk["repair"]["repair_choices"]) > 1:
            for c in blk["repair"]["repair_choices"]:
                yield (
                    f"block {blk['name']}: repair choices [{c}]",
                    _edit(
                        data, lambda d, i=i, c=c: d["block"][i]["repair"].update(repair_choices=[c])
                    ),
                )
        floor = max(
            (
                b["min_good"]
                for b in data["market"].get("salvage_bin", [])
                if b["block"] == blk["name"]
            ),
            default=0,
        )
        if blk["count"] > max(1, floor + 1):
            yield (
                f"block {blk['name']}: count {blk['count'] - 1}",
                _edit(data, lambda d, i=i: d["block"][i].update(count=d["block"][i]["count"] - 1)),
            )
        if blk.get("kind") != "logic" and "repair" not in blk:
            yield (
                f"block {blk['name']}: kind logic",
                _edit(data, lambda d, i=i: d["block"][i].update(kind="logic")),
            )
    for i, proc in enumerate(data["process"]):
        tag = f"process {proc['name']}"
        for key in (
            "defect_reduction",
            "margin",
            "area_scale",
            "die_count",
            "die_aspect_ratio",
            "systematic_yield",
            "sort_cost_per_die",
            "mask_set_cost",
        ):
            if key in proc:
                yield (
                    f"{tag}: drop {key}",
                    _edit(data, lambda d, i=i, k=key: d["process"][i].pop(k)),
                )
        if proc.get("fault_coverage", 1.0) < 1.0:
            yield (
                f"{tag}: fault coverage 1",
                _edit(data, lambda d, i=i: d["process"][i].update(fault_coverage=1.0)),
            )
        if proc.get("yield_model") != "poisson":

            def to_poisson(d, i=i):
                p = d["process"][i]
                layers = p.pop("critical_layers", None)
                p.pop("clustering_alpha", None)
                if layers is not None:
                    value, unit = p["defect_density"].split(maxsplit=1)
                    p["defect_density"] = f"{float(value) * layers:.6g} {unit}"
                    p.pop("defect_reduction", None)
                p["yield_model"] = "poisson"

            yield f"{tag}: poisson yield", _edit(data, to_poisson)
        margin = proc.get("margin")
        if margin is not None and len(margin["sigma"]) > 1:
            for j in range(len(margin["sigma"])):

                def one_margin(d, i=i, j=j):
                    m = d["process"][i]["margin"]
                    m["sigma"], m["area_overhead"] = [m["sigma"][j]], [m["area_overhead"][j]]

                yield f"{tag}: margin option {j} only", _edit(data, one_margin)
        curve = proc.get("defect_reduction")
        if curve is not None and curve["form"] == "log_ratio" and curve.get("levels", 4) > 2:
            yield (
                f"{tag}: 2 levels",
                _edit(data, lambda d, i=i: d["process"][i]["defect_reduction"].update(levels=2)),
            )
        if curve is not None and curve["form"] == "table" and len(curve["points"]) > 1:
            for j in range(len(curve["points"])):
                yield (
                    f"{tag}: table point {j} only",
                    _edit(
                        data,
                        lambda d, i=i, j=j: d["process"][i]["defect_reduction"].update(
                            points=[d["process"][i]["defect_reduction"]["points"][j]]
                        ),
                    ),
                )
    for i, pack in enumerate(data["packaging"]):
        for key in ("design_cost", "port_area", "bond_cost_per_die", "carrier_cost"):
            if pack.get(key):
                yield (
                    f"packaging {pack['name']}: drop {key}",
                    _edit(data, lambda d, i=i, k=key: d["packaging"][i].pop(k)),
                )
        if pack.get("max_dies", 1) > 2:
            yield (
                f"packaging {pack['name']}: max_dies {pack['max_dies'] - 1}",
                _edit(
                    data,
                    lambda d, i=i: d["packaging"][i].update(
                        max_dies=d["packaging"][i]["max_dies"] - 1
                    ),
                ),
            )
    for key in ("per_die_design", "per_mm2"):
        if data.get("design_cost", {}).get(key):
            yield f"design_cost: drop {key}", _edit(data, lambda d, k=key: d["design_cost"].pop(k))


def minimise(
    data: dict, top: int, status: str, time_limit: float, deadline: float
) -> tuple[dict, list[str], dict]:
    """Greedy shrink of ``data`` while :func:`compare` still reports ``status``."""
    from optimizer.problem import ProblemError

    refine = status == "refine_lost"
    steps: list[str] = []
    best = data
    last = compare(data, top, time_limit, refine=refine)
    changed = True
    while changed and time.perf_counter() < deadline:
        changed = False
        for label, trial in simplifications(best):
            if time.perf_counter() > deadline:
                break
            try:
                result = compare(trial, top, time_limit, refine=refine)
            except ProblemError:
                continue
            if result["status"] == status:
                best, last = trial, result
                steps.append(label)
                changed = True
                break
    return best, steps, last


# ------------------------------------------------------------------ TOML out


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"cannot write {type(value).__name__} as TOML")


def _is_table_list(value) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def to_toml(data: dict, header: str = "") -> str:
    """TOML text of a problem dict: top-level tables as sections, lists of tables as
    [[arrays]], deeper tables inline (the schema nests no further)."""
    lines = [f"# {line}" if line else "#" for line in header.splitlines()]

    def table(path: str, tbl: dict) -> None:
        lines.extend(f"{k} = {_toml_value(v)}" for k, v in tbl.items() if not _is_table_list(v))
        for key, items in tbl.items():
            if _is_table_list(items):
                for item in items:
                    lines.extend(["", f"[[{path}.{key}]]"])
                    table(f"{path}.{key}", item)

    lines.extend(
        f"{k} = {_toml_value(v)}"
        for k, v in data.items()
        if not isinstance(v, dict) and not _is_table_list(v)
    )
    for key, value in data.items():
        if isinstance(value, dict):
            lines.extend(["", f"[{key}]"])
            table(key, value)
        elif _is_table_list(value):
            for item in value:
                lines.extend(["", f"[[{key}]]"])
                table(key, item)
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------ workers


def _worker(conn, draw: dict) -> None:
    # one thread each for the gross-die counts: two workers share two cores
    os.environ["DIEPLAN_COUNT_WORKERS"] = "1"
    from tests.random_problems import features_of, random_problem

    # start-up (imports, compiled kernels, the first program) outside every timing
    warm = random_problem(0, **draw)
    try:
        compare(warm)
    except Exception:  # noqa: BLE001 - a failing warm-up only costs its time
        pass
    conn.send(("ready", None))
    while True:
        task = conn.recv()
        if task is None:
            return
        kind, payload = task
        try:
            if kind == "check":
                seed, top, refine, limit = payload
                data = random_problem(seed, **draw)
                result = compare(
                    data,
                    top,
                    limit,
                    report=lambda part: conn.send(("partial", part)),
                    refine=refine,
                )
                result.update(seed=seed, features=features_of(data))
                conn.send(("done", result))
            else:  # minimise
                seed, top, status, limit, seconds = payload
                data = random_problem(seed, **draw)
                small, steps, last = minimise(
                    data, top, status, limit, time.perf_counter() + seconds
                )
                conn.send(
                    (
                        "done",
                        {
                            "seed": seed,
                            "data": small,
                            "steps": steps,
                            "result": last,
                            "features": features_of(small),
                        },
                    )
                )
        except Exception as exc:  # noqa: BLE001 - reported, the run goes on
            conn.send(("done", {"seed": payload[0], "status": "error", "error": repr(exc)}))


class Pool:
    """Worker processes with a deadline per task; a late worker is killed and replaced."""

    def __init__(self, workers: int, draw: dict):
        self.ctx = multiprocessing.get_context("spawn")
        self.draw = draw
        self.slots = [self._start() for _ in range(workers)]

    def _start(self) -> dict:
        parent, child = self.ctx.Pipe()
        proc = self.ctx.Process(target=_worker, args=(child, self.draw), daemon=True)
        proc.start()
        child.close()
        return {"proc": proc, "conn": parent, "task": None, "ready": False}

    def run(self, tasks: list, timeout: float, on_done) -> None:
        queue = list(tasks)
        while queue or any(s["task"] is not None for s in self.slots):
            for slot in self.slots:
                if slot["ready"] and slot["task"] is None and queue:
                    task = queue.pop(0)
                    slot.update(task=task, started=time.perf_counter(), partial=None)
                    slot["conn"].send(task)
            busy = [s for s in self.slots if s["task"] is not None or not s["ready"]]
            waits = [
                s["started"] + timeout - time.perf_counter() for s in busy if s["task"] is not None
            ]
            ready = wait([s["conn"] for s in busy], timeout=max(min(waits, default=5.0), 0.01))
            for slot in busy:
                if slot["conn"] in ready:
                    try:
                        kind, payload = slot["conn"].recv()
                    except EOFError:
                        if slot["task"] is not None:
                            partial = slot.get("partial") or {}
                            on_done(slot["task"], {**partial, "status": "crashed"})
                        self._replace(slot)
                        continue
                    if kind == "ready":
                        slot["ready"] = True
                    elif kind == "partial":
                        slot["partial"] = payload
                    else:
                        task, slot["task"] = slot["task"], None
                        on_done(task, payload)
                elif slot["task"] is not None and time.perf_counter() - slot["started"] > timeout:
                    on_done(slot["task"], {**(slot.get("partial") or {}), "status": "timeout"})
                    self._replace(slot)

    def _replace(self, slot: dict) -> None:
        slot["proc"].kill()  # this worker was started here; only it is ended
        slot["proc"].join()
        slot["conn"].close()
        slot.update(self._start())

    def close(self) -> None:
        for slot in self.slots:
            try:
                slot["conn"].send(None)
            except OSError:
                pass
            slot["proc"].join(timeout=5)
            if slot["proc"].is_alive():
                slot["proc"].kill()


# ------------------------------------------------------------------ report


def _fmt(x) -> str:
    return "-" if x is None else f"{x:.10g}"


def summarise(records: list[dict]) -> str:
    lines = []
    counts: dict[str, int] = {}
    for r in records:
        counts[r["status"]] = counts.get(r["status"], 0) + 1
    lines.append(
        f"{len(records)} seeds: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items()))
    )
    bad = [r for r in records if r["status"] not in ("agree", "agree_infeasible")]
    if bad:
        lines.append("")
        lines.append("disagreements and failures:")
        for r in sorted(bad, key=lambda r: (r["status"], r["seed"])):
            ex = (r.get("exhaustive") or [None])[0]
            ml = (r.get("milp") or [None])[0]
            short = r.get("shortfall")
            lines.append(
                f"  seed {r['seed']:5d} {r['status']:20s} exhaustive {_fmt(ex)} milp {_fmt(ml)}"
                f" shortfall {short if short is None else f'{short:.3g}'}"
                f" t_ex {r.get('t_exhaustive', math.nan):.2f}s"
                f" t_milp {r.get('t_milp', math.nan):.2f}s"
            )
            lines.append(f"      features: {' '.join(r.get('features', []))}")
            for key in ("exhaustive_best", "milp_best", "error", "milp_error", "exhaustive_error"):
                if r.get(key):
                    lines.append(f"      {key}: {r[key]}")
    timed = [r for r in records if r.get("t_milp") and r.get("t_exhaustive")]
    if timed:
        lines.append("")
        lines.append("slowest milp / exhaustive time ratios:")
        for r in sorted(timed, key=lambda r: -r["t_milp"] / max(r["t_exhaustive"], 1e-3))[:15]:
            lines.append(
                f"  seed {r['seed']:5d} milp {r['t_milp']:7.2f}s"
                f" exhaustive {r['t_exhaustive']:6.2f}s"
                f" ratio {r['t_milp'] / max(r['t_exhaustive'], 1e-3):7.1f}"
                f" rounds {r.get('milp_stats', {}).get('rounds', '-')}"
                f" designs priced {r.get('milp_stats', {}).get('designs_priced', '-')}"
                f" vs {r.get('designs_priced', '-')}"
            )
            lines.append(f"      features: {' '.join(r.get('features', []))}")
        t_m = sorted(r["t_milp"] for r in timed)
        t_e = sorted(r["t_exhaustive"] for r in timed)
        lines.append(
            f"milp time median {t_m[len(t_m) // 2]:.3f}s max {t_m[-1]:.2f}s total {sum(t_m):.0f}s;"
            f" exhaustive median {t_e[len(t_e) // 2]:.3f}s max {t_e[-1]:.2f}s total {sum(t_e):.0f}s"
        )
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=500)
    parser.add_argument("--start", type=int, default=0)
    parser.add_argument("--only", type=int, nargs="*", help="these seeds instead of a range")
    parser.add_argument("--timeout", type=float, default=120.0, help="seconds per seed")
    parser.add_argument(
        "--time-limit",
        type=float,
        default=None,
        help="the solver's own time limit (exercises its deadline paths; below --timeout)",
    )
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--top", type=int, default=1)
    parser.add_argument("--refine", action="store_true", help="also check the refined milp answer")
    parser.add_argument("--budget", type=int, default=None, help="exhaustive design cap")
    parser.add_argument(
        "--knob",
        action="append",
        default=[],
        metavar="NAME=P",
        help="feature probability for the generator, e.g. salvage=1 (repeatable)",
    )
    parser.add_argument("--json", type=Path, help="write every record here")
    parser.add_argument("--minimise", type=Path, metavar="DIR", help="shrink failures into DIR")
    parser.add_argument("--minimise-seconds", type=float, default=600.0)
    args = parser.parse_args()

    from tests.random_problems import DEFAULT_BUDGET, features_of, random_problem

    # generator arguments: the design budget and any feature probabilities
    draw: dict = {"budget": args.budget or DEFAULT_BUDGET}
    for item in args.knob:
        name, _, value = item.partition("=")
        draw[name] = float(value)
    random_problem(0, **draw)  # unknown knob names fail here, before any worker starts
    seeds = args.only if args.only else list(range(args.start, args.start + args.seeds))
    records: list[dict] = []
    pool = Pool(args.workers, draw)
    start = time.perf_counter()

    def done(task, payload):
        payload.setdefault("seed", task[1][0])
        if not payload.get("features"):
            # a killed worker sent none: draw the problem again here
            payload["features"] = features_of(random_problem(task[1][0], **draw))
        records.append(payload)
        if payload["status"] not in ("agree", "agree_infeasible"):
            print(f"seed {payload['seed']}: {payload['status']}", flush=True)
        if len(records) % 50 == 0:
            print(
                f"{len(records)} of {len(seeds)} seeds, {time.perf_counter() - start:.0f} s",
                flush=True,
            )

    try:
        pool.run(
            [("check", (s, args.top, args.refine, args.time_limit)) for s in seeds],
            args.timeout,
            done,
        )
        print()
        print(summarise(records))
        print(f"wall time {time.perf_counter() - start:.0f} s")
        failing = [
            r
            for r in records
            if r["status"]
            in (
                "milp_worse",
                "milp_better",
                "bound_below_profit",
                "ranking_differs",
                "feasibility_differs",
            )
        ]
        if args.minimise and failing:
            args.minimise.mkdir(parents=True, exist_ok=True)
            shrunk: list[dict] = []

            def done_min(task, payload):
                payload.setdefault("seed", task[1][0])
                shrunk.append(payload)

            by_seed = {r["seed"]: r for r in failing}
            pool.run(
                [
                    ("minimise", (r["seed"], args.top, r["status"], 60.0, args.minimise_seconds))
                    for r in failing
                ],
                args.minimise_seconds + 300,
                done_min,
            )
            print("\nminimised cases:")
            for item in sorted(shrunk, key=lambda x: x["seed"]):
                seed = item["seed"]
                if "data" not in item:
                    print(f"  seed {seed}: not minimised ({item.get('status')})")
                    continue
                res = item["result"]
                header = (
                    f"Invented data: random_problem({seed}, **{draw}), tests/random_problems.py,\n"
                    f"minimised; milp vs exhaustive: {res['status']}, relative shortfall "
                    f"{res['shortfall']:.3g}\n"
                    f"exhaustive best {_fmt(res['exhaustive'][0])}: {res.get('exhaustive_best')}\n"
                    f"milp best       {_fmt(res['milp'][0])}: {res.get('milp_best')}\n"
                    f"original features: {' '.join(by_seed[seed]['features'])}\n"
                    f"remaining features: {' '.join(item['features'])}"
                )
                path = args.minimise / f"seed{seed:05d}.toml"
                path.write_text(to_toml(item["data"], header), encoding="utf-8")
                print(
                    f"  {path}: {len(item['steps'])} steps, {res['status']} "
                    f"{res['shortfall']:.3g}; {' '.join(item['features'])}"
                )
        if args.json:
            args.json.write_text(json.dumps(records, indent=1, default=str), encoding="utf-8")
    finally:
        pool.close()


if __name__ == "__main__":
    main()
