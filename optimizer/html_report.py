"""report.html: one self-contained page per run folder, built from the folder's own files.

:func:`write_report` reads what a command wrote into a run folder — its JSON payload (or,
where a command writes none for a table, its CSV), the copy of the problem file and its
SVG figures — and renders it with the jinja2 templates in ``optimizer/templates/``: one
per kind of run, on a shared base. Every number on the page is read back from those
files, so it is the number the run wrote. The figures are inlined; the page has no
script and loads nothing (style sheet, font, image), so it reads offline and prints.
"""

from __future__ import annotations

import csv
import functools
import json
import math
import re
import tomllib
from html.parser import HTMLParser
from pathlib import Path

REPORT_NAME = "report.html"

CAUTION = (
    "Figures are estimates for comparing options early in a design. Real decisions need "
    "the foundry's and the assembly house's own yield and cost data."
)

# what each figure a command writes shows
FIGURE_CAPTIONS = {
    "architectures.svg": "Profit of the best design of each architecture (packaging, die "
    "count); a row not proven within its time shows a whisker to its bound.",
    "cumulative_value.svg": "Cumulative discounted value over the product life.",
    "profit.svg": "Profit of the best design of each winning kind along the swept input; "
    "crossovers dashed.",
    "npv.svg": "Net present value of the best design of each winning kind along the swept "
    "input; crossovers dashed.",
    "winner_map.svg": "Winning design kind over the two swept inputs.",
    "profit_curve.svg": "Profit and cost per good unit of the winner against its yield target.",
    "cost_by_component.svg": "Cost per good unit of each option's best design, by component.",
    "family_profit.svg": "Family profit of each option.",
    "tornado.svg": "Profit of the fixed winner with each input at the low and the high end "
    "of its range (others as in the file).",
    "profit_distribution.svg": "Profit of the fixed designs over the samples (histograms and "
    "cumulative distributions).",
}

COMPONENTS = (
    ("silicon", "silicon (wafer cost of the dies)"),
    ("interface", "die-to-die interface area"),
    ("sort_test", "wafer sort and repair test"),
    ("die_scrap", "yield loss: dies failed at sort"),
    ("carrier", "substrate or interposer"),
    ("assembly", "assembly (bonds and package)"),
    ("final_test", "final test"),
    ("package_scrap", "yield loss: failed packages"),
    ("nre_per_unit", "one-time costs (NRE) per unit"),
    ("improvement_per_unit", "yield-improvement spend per unit"),
)
COMPONENT_LABELS = dict(COMPONENTS)
# for table cells where the long labels would crowd the row
SHORT_LABELS = {k: k.replace("_", " ") for k, _ in COMPONENTS} | {
    "nre_per_unit": "NRE",
    "improvement_per_unit": "yield improvement",
}


# ---------------------------------------------------------------- number formats
# Each returns text for one table cell; None (JSON null: not defined) prints as a dash.
NONE = "—"


def _fixed(value: float, decimals: int) -> str:
    text = f"{value:,.{decimals}f}"
    return "0" + text[2:] if text.startswith("-0") and float(text.replace(",", "")) == 0 else text


def amount(value) -> str:
    """Money totals: whole units from 1,000 on, cents below."""
    if value is None:
        return NONE
    return _fixed(value, 0 if abs(value) >= 1000 else 2)


def unit_cost(value) -> str:
    """Money per unit: cents; four decimals for amounts under 0.1."""
    if value is None:
        return NONE
    return _fixed(value, 4 if 0 < abs(value) < 0.1 else 2)


def mega(value) -> str:
    """Millions with two decimals (the header says M)."""
    return NONE if value is None else _fixed(value / 1e6, 2)


def percent(value) -> str:
    """A fraction as a percentage with two decimals (the header or cell says %)."""
    return NONE if value is None else _fixed(100 * value, 2)


def ppm(value) -> str:
    """A fraction in parts per million, one decimal."""
    return NONE if value is None else _fixed(1e6 * value, 1)


def sig(value) -> str:
    """Any number: every integer digit and at least four significant ones."""
    if value is None:
        return NONE
    if isinstance(value, bool):
        return "yes" if value else "no"
    if not isinstance(value, int | float):
        return str(value)
    if value == 0:
        return "0"
    if not math.isfinite(value):
        return str(value)
    decimals = max(0, 3 - math.floor(math.log10(abs(value))))
    text = _fixed(value, decimals)
    return text.rstrip("0").rstrip(".") if "." in text else text


def raw(value) -> str:
    """A value as written in the problem file: text as is, numbers without exponents."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e16:
        return f"{int(value):,}"
    if isinstance(value, int | float):
        return sig(value)
    if isinstance(value, list):
        return "[" + ", ".join(raw(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {raw(v)}" for k, v in value.items()) + "}"
    return NONE if value is None else str(value)


def yes_no(value) -> str:
    return NONE if value is None else ("yes" if value else "no")


FILTERS = {
    "amount": amount,
    "unit_cost": unit_cost,
    "mega": mega,
    "percent": percent,
    "ppm": ppm,
    "sig": sig,
    "raw": raw,
    "yes_no": yes_no,
}


# ---------------------------------------------------------------- reading the folder
def _number(text: str):
    """A CSV cell as the value pandas wrote: number, bool, None for empty, else text."""
    if text == "":
        return None
    if text in ("True", "False"):
        return text == "True"
    try:
        return int(text) if re.fullmatch(r"-?\d+", text) else float(text)
    except ValueError:
        return text


def read_csv(path: Path) -> list[dict]:
    with path.open(encoding="utf-8", newline="") as handle:
        return [{k: _number(v) for k, v in row.items()} for row in csv.DictReader(handle)]


def as_profit(rows: list[dict]) -> tuple[list[dict], str]:
    """Rows whose objective is a life's net present value name it ``npv`` (``npv_low``,
    ...): read them under the profit names the pages use, and say which objective it is."""
    keys = rows[0].keys() if rows else ()
    if rows and not any("profit" in k for k in keys) and any("npv" in k for k in keys):
        return [{k.replace("npv", "profit"): v for k, v in r.items()} for r in rows], "NPV"
    return rows, "profit"


def short(value: object, limit: int) -> str:
    text = " ".join(str(value).split())
    return text if len(text) <= limit else text[: limit - 1] + "…"


def read_json(path: Path):
    return json.loads(path.read_text(encoding="utf-8"))


def _problem_files(folder: Path) -> list[Path]:
    single = folder / "problem.toml"
    if single.is_file():
        return [single]
    return sorted(folder.glob("problem-*.toml"))


def problem_summary(path: Path) -> dict:
    """The inputs that matter, as written in the run's copy of a problem file."""
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return {"file": path.name, "title": None}
    market = data.get("market", {})
    products = [
        {
            "name": p.get("name"),
            "unit_price": p.get("market", {}).get("unit_price"),
            "volume": p.get("market", {}).get("volume"),
            "currency": p.get("market", {}).get("currency"),
        }
        for p in data.get("product", [])
    ]
    keys = ("wafer_diameter", "wafer_cost", "defect_density", "yield_model", "mask_set_cost")
    return {
        "file": path.name,
        "title": data.get("title"),
        "note": data.get("note"),
        "currency": market.get("currency", products[0]["currency"] if products else "USD"),
        "unit_price": market.get("unit_price"),
        "volume": market.get("volume"),
        "salvage_bins": market.get("salvage_bin", []),
        "products": products,
        "processes": [
            {"name": p.get("name"), **{k: p.get(k) for k in keys}} for p in data.get("process", [])
        ],
        "packaging": [
            {"name": p.get("name"), "kind": p.get("kind"), "max_dies": p.get("max_dies", 1)}
            for p in data.get("packaging", [])
        ],
        "blocks": [
            {
                "name": b.get("name"),
                "kind": b.get("kind", "logic"),
                "area": b.get("area"),
                "count": b.get("count", 1),
            }
            for b in data.get("block", [])
        ],
        "requirements": {k: v for k, v in data.get("requirements", {}).items()},
        "life": data.get("life"),
    }


def inline_svg(text: str, prefix: str) -> str:
    """An SVG file made fit to sit inside the page.

    The XML prolog, comments and metadata go (the metadata names RDF vocabularies by URL);
    the root keeps its viewBox but not its fixed size, so CSS sizes it; and every id is
    prefixed so that two figures on one page cannot share an id.
    """
    text = text[text.index("<svg") :]
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, flags=re.S)
    end = text.index(">")
    root = re.sub(r'\s(?:xmlns(?::\w+)?|width|height|version)="[^"]*"', "", text[:end])
    text = f'{root} id="{prefix}" class="figure" role="img"{text[end:]}'
    text = re.sub(r'(\sid=")(?!' + prefix + r'")([^"]+)"', rf'\1{prefix}-\2"', text)
    text = re.sub(r'((?:xlink:)?href=")#([^"]+)"', rf'\1#{prefix}-\2"', text)
    text = re.sub(r"url\(#([^)]+)\)", rf"url(#{prefix}-\1)", text)
    # matplotlib's one style rule would otherwise reach the whole page
    return text.replace('<style type="text/css">*{', f"<style>#{prefix} *{{")


def figures(folder: Path, order: tuple[str, ...] = ()) -> list[dict]:
    from markupsafe import Markup

    names = sorted(p.name for p in folder.glob("*.svg"))
    names.sort(key=lambda n: order.index(n) if n in order else len(order))
    return [
        {
            "name": name,
            "caption": FIGURE_CAPTIONS.get(name, name),
            # our own matplotlib output; the page is checked for anything it could fetch
            "svg": Markup(inline_svg((folder / name).read_text(encoding="utf-8"), f"fig{i}")),
        }
        for i, name in enumerate(names, start=1)
    ]


# ---------------------------------------------------------------- one design
def die_text(die: dict) -> str:
    blocks = ", ".join(f"{k} x{v}" if v != 1 else k for k, v in die["blocks"].items())
    extras = [f"+{v} spare {k}" for k, v in die.get("spares", {}).items()]
    extras += [f"{v} repairs {k}" for k, v in die.get("repair", {}).items()]
    if die.get("critical_area_option"):
        extras.append(f"critical-area option {die['critical_area_option']}")
    return blocks + (f"; {', '.join(extras)}" if extras else "")


def design_summary(design: dict) -> str:
    return " + ".join(f"{d['copies']}x {d['process']} [{die_text(d)}]" for d in design["dies"])


def design_view(design: dict) -> dict:
    """The tables of one priced design (an evaluator result as JSON)."""
    cost = design["cost_per_good_unit"]
    breakdown = [
        {
            "key": key,
            "label": COMPONENT_LABELS.get(key, key),
            "value": value,
            "share": None if not cost or value is None else value / cost,
        }
        for key, value in design["breakdown"].items()
    ]
    volume = design["volume"]
    per_good = design["manufacturing_cost_per_good_unit"]
    pnl = [
        ("revenue (unit price x volume)", design["revenue"]),
        ("salvage revenue (lower bins)", design["salvage_revenue"]),
        (
            "manufacturing cost (volume x cost per good unit without NRE)",
            None if per_good is None else -volume * per_good,
        ),
        ("one-time costs (NRE)", -design["nre"]),
        ("yield-improvement spend", -design["improvement_spend"]),
    ]
    return {
        "design": design,
        "architecture": architecture_label(design),
        "summary": design_summary(design),
        "dies": [{**d, "contents": die_text(d)} for d in design["dies"]],
        "breakdown": breakdown,
        "pnl": [{"label": label, "value": value} for label, value in pnl],
    }


def architecture_label(design: dict) -> str:
    n = design["n_dies"]
    mix: dict[str, int] = {}
    for die in design["dies"]:
        mix[die["process"]] = mix.get(die["process"], 0) + die["copies"]
    processes = " + ".join(f"{c}x {p}" for p, c in mix.items())
    return f"{design['packaging']}, {n} {'die' if n == 1 else 'dies'}: {processes}"


def die_yields(design: dict | None) -> str:
    if design is None:
        return NONE
    return ", ".join(percent(d["die_yield"]) for d in design["dies"])


# ---------------------------------------------------------------- per kind of run
def _solve(folder: Path) -> dict:
    run = read_json(folder / "solution.json")
    best = run["best"]
    rows = []
    for row in run.get("architectures", []):
        rows.append(_architecture_row(row, best["profit"], held=False))
        rows.extend(_architecture_row(m, best["profit"], held=True) for m in row.get("mixes", []))
    return {
        "run": run,
        "best": design_view(best),
        "ranked": [
            {"design": d, "architecture": architecture_label(d), "summary": design_summary(d)}
            for d in run["ranked"]
        ],
        "decision": rows,
        "flips": run.get("flips", {}).get("challengers", []),
        "mandate": run.get("mandate"),
        "unconstrained": run.get("unconstrained_best"),
    }


def _architecture_row(row: dict, best_profit: float, held: bool) -> dict:
    design = row["design"]
    profit = None if design is None else design["profit"]
    parts = sorted(row.get("gap_components", {}).items(), key=lambda kv: -abs(kv[1]))
    return {
        "row": row,
        "held": held,
        "profit": profit,
        "behind": None if profit is None else best_profit - profit,
        "cost": None if design is None else design["cost_per_good_unit"],
        "die_yields": die_yields(design),
        "package_yield": None if design is None else design["package_yield"],
        "nre": None if design is None else design["nre"],
        "largest_gaps": [(SHORT_LABELS.get(k, k), v) for k, v in parts[:2] if v],
    }


def _family(folder: Path) -> dict:
    run = read_json(folder / "family.json")
    return {
        "run": run,
        "library": [{**die, "contents": die_text(die)} for die in run["library"]],
        "designs": [{**design_view(d), "product": d["product"]} for d in run["designs"]],
        "alone": {d["product"]: d for d in run.get("alone", [])},
        "tables": run.get("architectures", {}),
    }


def _life(folder: Path) -> dict:
    run = read_json(folder / "life.json")
    return {"run": run, "first": design_view(run["design"]), "lives": run["life"]}


def _profit_curve(folder: Path) -> dict:
    rows = read_csv(folder / "profit_curve.csv")
    inside = [r for r in rows if not r["extrapolated"]] or rows
    best = max(inside, key=lambda r: r["profit"])
    # the file's own target is where the curve starts (its base density)
    marks = {id(inside[0]): "file value", id(best): "most profitable"}
    marks.setdefault(id(inside[-1]), "lowest density offered")
    step = max(1, len(rows) // 12)
    shown = [r for i, r in enumerate(rows) if i % step == 0 or id(r) in marks]
    return {
        "rows": [{**r, "mark": marks.get(id(r), "")} for r in shown],
        "n_rows": len(rows),
        "best": best,
        "base": inside[0],
        "extrapolated": sum(1 for r in rows if r["extrapolated"]),
    }


def _compare(folder: Path) -> dict:
    run = read_json(folder / "comparison.json")
    rows, objective = as_profit(run["comparison"])
    family = bool(run["options"].get("family"))
    valid = [r for r in rows if r.get("profit") is not None]
    best = max(valid, key=lambda r: r["profit"]) if valid else None
    components = [
        (key, label) for key, label in COMPONENTS if any(f"cost_{key}" in r for r in rows)
    ]
    return {
        "run": run,
        "rows": rows,
        "family": family,
        "best": best,
        "components": components,
        "objective": objective,
    }


def _sweep(folder: Path) -> dict:
    options = read_json(folder / "options.json")
    points, objective = as_profit(read_csv(folder / "points.csv"))
    axes = [a["path"] for a in options["axes"]]
    designs = read_json(folder / "designs.json")
    wins: dict[str, list[dict]] = {}
    for point in points:
        wins.setdefault(point["design_id"], []).append(point)
    winners = [
        {
            "id": key,
            "kind": designs.get(key, {}).get("kind", won[0].get("design_kind")),
            "summary": designs.get(key, {}).get("summary", won[0].get("design")),
            "points": len(won),
            "ranges": [
                (axis, min(p[axis] for p in won), max(p[axis] for p in won)) for axis in axes
            ],
        }
        for key, won in wins.items()
    ]
    crossings = folder / "crossovers.csv"
    crossovers = as_profit(read_csv(crossings))[0] if crossings.exists() else []
    best = max(
        (p for p in points if p["profit"] is not None), key=lambda p: p["profit"], default=None
    )
    return {
        "options": options,
        "axes": axes,
        "points": points,
        "winners": winners,
        "crossovers": crossovers,
        "best_point": best,
        "has_cost": bool(points) and "cost_per_good_unit" in points[0],
        "objective": objective,
    }


def _sensitivity(folder: Path) -> dict:
    options = read_json(folder / "options.json")
    rows, objective = as_profit(read_csv(folder / "sensitivity.csv"))
    winner = read_json(folder / "winner.json")
    single = "breakdown" in winner
    return {
        "options": options,
        "rows": rows,
        "winner": winner,
        "view": design_view(winner) if single else None,
        "family_designs": []
        if single
        else [design_view(d) | {"product": d["product"]} for d in winner.get("designs", [])],
        "base_profit": winner["profit"] if "profit" in winner else winner["npv"],
        "objective": objective,
        "top": max(rows, key=lambda r: r["swing"] or 0.0) if rows else None,
    }


def _uncertainty(folder: Path) -> dict:
    options = read_json(folder / "options.json")
    summary, objective = as_profit(read_csv(folder / "summary.csv"))
    designs = read_json(folder / "designs.json")
    likely = max(summary, key=lambda r: r["prob_best"] or 0.0) if summary else None
    return {
        "options": options,
        "summary": summary,
        "designs": designs,
        "likely": likely,
        "objective": objective,
    }


# command -> (payload file that marks the kind, kind); the first present wins
KINDS = {
    "solve": (("solution.json", "solve"), ("family.json", "family"), ("life.json", "life")),
    "profit-curve": (("profit_curve.csv", "profit_curve"),),
    "compare": (("comparison.json", "compare"),),
    "sweep": (("points.csv", "sweep"),),
    "sensitivity": (("sensitivity.csv", "sensitivity"),),
    "uncertainty": (("summary.csv", "uncertainty"),),
}
GATHER = {
    "solve": _solve,
    "family": _family,
    "life": _life,
    "profit_curve": _profit_curve,
    "compare": _compare,
    "sweep": _sweep,
    "sensitivity": _sensitivity,
    "uncertainty": _uncertainty,
    "generic": lambda folder: {},
}


def report_kind(folder: Path, command: str) -> str:
    for marker, kind in KINDS.get(command, ()):
        if (folder / marker).is_file():
            return kind
    return "generic"


# ---------------------------------------------------------------- rendering
@functools.cache
def _environment():
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("optimizer", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,  # a missing field is a bug, not an empty cell
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters.update(FILTERS)
    env.globals["component_label"] = lambda key: COMPONENT_LABELS.get(key, key)
    env.globals["architecture_of"] = architecture_label
    env.globals["summary_of"] = design_summary
    return env


def build_report(folder: Path, command: str, unread: str = "") -> str:
    """The page for the run folder ``folder`` written by ``command``.

    With ``unread`` (why the run's payload could not be read) the page is the plain one:
    the run's files and figures, and that reason.
    """
    from optimizer import __version__

    folder = Path(folder)
    kind = "generic" if unread else report_kind(folder, command)
    context = GATHER[kind](folder)
    problems = [problem_summary(p) for p in _problem_files(folder)]
    # the payload's own title where it carries one, else the problem file's
    run = context.get("run", {})
    title = run.get("family") or run.get("problem") if kind in ("family", "life") else None
    title = title or next((p["title"] for p in problems if p.get("title")), "dieplan run")
    template = _environment().get_template(f"{kind}.html.j2")
    html = template.render(
        command=command,
        kind=kind,
        title=title,
        problems=problems,
        figures=figures(folder, tuple(FIGURE_CAPTIONS)),
        files=sorted({p.name for p in folder.iterdir() if p.is_file()} | {REPORT_NAME}),
        caution=CAUTION,
        version=__version__,
        unread=unread,
        **context,
    )
    fetches = fetched_resources(html)
    if fetches:
        from optimizer.invariants import InvariantViolation

        raise InvariantViolation(f"report.html would load {fetches[0]}")
    return html


def write_report(folder: Path, command: str) -> Path:
    """Write ``folder/report.html``.

    A payload the page cannot read (a field it does not know) gives the plain page with
    the reason rather than costing the run its folder; a page that would load anything
    from elsewhere, or no page at all, is an InvariantViolation.
    """
    from optimizer.invariants import InvariantViolation

    path = Path(folder) / REPORT_NAME
    try:
        html = build_report(folder, command)
    except (InvariantViolation, OSError):
        raise
    except Exception as exc:  # any mismatch of payload and template
        reason = f"{type(exc).__name__}: {short(exc, 200)}"
        try:
            html = build_report(folder, command, unread=reason)
        except (InvariantViolation, OSError):
            raise
        except Exception as again:
            raise InvariantViolation(
                f"report.html could not be built ({type(again).__name__}: {short(again, 200)})"
            ) from again
    path.write_text(html, encoding="utf-8")
    return path


# ---------------------------------------------------------------- nothing to fetch
# attributes through which a page loads something; only a fragment (#id, this page) or
# inline data may stand in them
_LOADING = {"src", "href", "xlink:href", "srcset", "data", "poster", "action", "background"}
_ELEMENTS = {
    "script",
    "link",
    "iframe",
    "frame",
    "object",
    "embed",
    "img",
    "video",
    "audio",
    "source",
    "track",
    "base",
    "form",
}


class _FetchFinder(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.found: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        if tag in _ELEMENTS:
            self.found.append(f"a <{tag}> element")
        if tag == "style":
            self._in_style = True
        for name, value in attrs:
            value = (value or "").strip()
            if name in _LOADING and value and not value.startswith(("#", "data:")):
                self.found.append(f"{name}={value[:60]!r} on <{tag}>")
            if name == "style":
                self._style(value)
            if name == "http-equiv" and value.lower() == "refresh":
                self.found.append("a refresh <meta>")

    def handle_endtag(self, tag):
        if tag == "style":
            self._in_style = False

    def handle_data(self, data):
        if self._in_style:
            self._style(data)

    def _style(self, text: str) -> None:
        if "@import" in text.lower():
            self.found.append("an @import rule")
        for target in re.findall(r"url\(\s*['\"]?([^'\")\s]*)", text, flags=re.I):
            if not target.startswith(("#", "data:")):
                self.found.append(f"url({target[:60]})")


def fetched_resources(html: str) -> list[str]:
    """What the page would load from elsewhere (elements, attributes, CSS urls); [] if nothing."""
    finder = _FetchFinder()
    finder.feed(html)
    finder.close()
    return finder.found
