"""TOML strings and keys written by hand (the standard library reads TOML, never writes
it); light, so the command line can use it at start-up."""

from __future__ import annotations

import re


def toml_string(text: str) -> str:
    """A TOML basic string; names are printable (validated), but quote and escape anyway."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_key(key: object) -> str:
    # bare keys read better; anything else is quoted
    text = str(key)
    return text if re.fullmatch(r"[A-Za-z0-9_-]+", text) else toml_string(text)
