"""A decoded document written back as TOML, for the run folder's problem.toml of a
problem given as a dict."""

from __future__ import annotations

import datetime as _dt
import math

from optimizer.errors import ProblemError
from optimizer.toml_quote import toml_key, toml_string


def _toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(float(value))
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, _dt.date | _dt.time):
        return value.isoformat()
    if isinstance(value, dict):
        items = ", ".join(f"{toml_key(k)} = {_toml_value(v)}" for k, v in value.items())
        return "{ " + items + " }" if items else "{}"
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(type(value).__name__)


def _is_table_list(value: object) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def toml_document(data: dict, source: str = "<problem>") -> str:
    """A decoded document written back as TOML: sections as tables, ``[[x]]`` lists as
    arrays of tables, anything deeper inline. Raises ProblemError if the text would not
    read back as ``data`` (a value TOML cannot hold)."""
    import tomllib

    lines = ["# written by dieplan from a document given as a dict"]
    try:
        for key, value in data.items():
            if not isinstance(value, dict) and not _is_table_list(value):
                lines.append(f"{toml_key(key)} = {_toml_value(value)}")
        for key, value in data.items():
            tables = [value] if isinstance(value, dict) else value if _is_table_list(value) else []
            head = f"[{toml_key(key)}]" if isinstance(value, dict) else f"[[{toml_key(key)}]]"
            for table in tables:
                lines += ["", head]
                lines += [f"{toml_key(k)} = {_toml_value(v)}" for k, v in table.items()]
        text = "\n".join(lines) + "\n"
        same = tomllib.loads(text) == data
    except (TypeError, ValueError):
        same = False
    if not same:
        raise ProblemError(
            source,
            "",
            "holds values TOML cannot write (only tables, lists, strings, numbers, booleans "
            "and dates), so the run folder's problem.toml cannot be made; give those values "
            "as TOML has them",
        )
    return text
