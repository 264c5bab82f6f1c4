"""Unit parsing: every physical quantity in a problem file is a string with a unit.

Strings are parsed once, at load time, and converted to the internal base: millimetres,
square millimetres, defects per square centimetre, GB/s and GB/s per mm^2. A quantity of
the wrong dimension is rejected, which rules out the classic 10^4 slip between mm^2 and
cm^2.

A quantity string is one number and one unit, nothing else: ``"120 mm^2"``,
``"0.09 /cm^2"``, ``"1/cm**2"``, ``"200 GB/s/mm^2"``, ``"80 um"``. The text is matched
against a grammar of our own before pint sees it, because pint evaluates arithmetic
("1e300*1e300 mm", "10**100000 mm"), which can overflow or run for minutes. Only the
unit part is handed to pint, and only when every name in it is a unit pint knows.
"""

from __future__ import annotations

import math
import re
import reprlib
import warnings
from dataclasses import dataclass
from functools import lru_cache

import pint

_REGISTRY = pint.UnitRegistry()

# Longer than any sensible quantity ("0.15000000000000002 GB/s/mm^2" is 29 characters).
MAX_QUANTITY_CHARS = 64

# A decimal number: at most 20 digits on each side of the point, an exponent of at most
# three digits (larger ones are outside every range anyway).
_NUMBER = r"[+-]?(?:[0-9]{1,20}(?:\.[0-9]{0,20})?|\.[0-9]{1,20})(?:[eE][+-]?[0-9]{1,3})?"
_NAME = r"[A-Za-z\u00b5\u03bc_]+"
# a unit name with an optional small integer power: mm^2, cm**-2
_TERM = rf"{_NAME}(?:\s*(?:\^|\*\*)\s*-?[1-4])?"
# terms joined by / or * or a space, optionally starting with / ("/cm^2")
_UNIT = rf"/?\s*{_TERM}(?:(?:\s*[*/]\s*|\s+){_TERM})*"
_QUANTITY = re.compile(rf"\s*(?P<number>{_NUMBER})\s*(?P<unit>{_UNIT})\s*")
_BARE_NUMBER = re.compile(rf"\s*{_NUMBER}\s*")
_NAMES = re.compile(_NAME)

_SHORT = reprlib.Repr()
_SHORT.maxstring = 44
_SHORT.maxother = 44
_SHORT.maxlevel = 2
_SHORT.maxlist = _SHORT.maxtuple = _SHORT.maxdict = _SHORT.maxset = 3


def shorten(value: object, limit: int = 40) -> str:
    """``repr(value)`` cut to about ``limit`` characters, for echoing input in messages.

    Bounded in time and length for any input (huge strings, deeply nested lists), and
    always one line: repr escapes line breaks and other unprintable characters.
    """
    if isinstance(value, str):
        return repr(value[:limit]) + ("..." if len(value) > limit else "")
    text = _SHORT.repr(value)
    return text if len(text) <= limit + 4 else text[:limit] + "..."


@dataclass(frozen=True)
class QuantityKind:
    """A physical quantity the problem file accepts, with its internal unit."""

    name: str
    base_unit: str
    base_text: str  # the base unit as written in messages and files
    example: str
    needs_data_unit: bool = False  # bandwidths must name bytes or bits, not bare 1/s


LENGTH = QuantityKind("length", "mm", "mm", "80 um")
AREA = QuantityKind("area", "mm**2", "mm^2", "120 mm^2")
DEFECT_DENSITY = QuantityKind("defect density", "1/cm**2", "/cm^2", "0.09 /cm^2")
BANDWIDTH = QuantityKind("bandwidth", "GB/s", "GB/s", "256 GB/s", needs_data_unit=True)
INTERFACE_DENSITY = QuantityKind(
    "interface density", "GB/s/mm**2", "GB/s/mm^2", "200 GB/s/mm^2", needs_data_unit=True
)


def _article(noun: str) -> str:
    return ("an " if noun[0] in "aeiou" else "a ") + noun


class UnitError(ValueError):
    """A quantity string that cannot be read as the expected kind of quantity."""


@lru_cache(maxsize=512)
def _unit(text: str) -> pint.Unit | None:
    """The pint unit of a unit expression whose names are all known units, else None."""
    for name in _NAMES.findall(text):
        if name not in _REGISTRY:
            return None
        # dimensionless names (pi, percent, ...) are numbers in disguise; bytes and bits
        # are dimensionless in pint but are the data units bandwidths need
        parsed = str(_REGISTRY.parse_units(name))
        if _REGISTRY.get_dimensionality(name) == {} and not ("byte" in parsed or "bit" in parsed):
            return None
    return _REGISTRY.parse_units("1" + text if text.startswith("/") else text)


@lru_cache(maxsize=512)
def _factor(unit_text: str, base_unit: str) -> float:
    """Base units per one ``unit_text`` (every unit dieplan reads is a pure scale), kept
    because re-reading a file for each scenario of a sweep converts the same units."""
    return float(_REGISTRY.Quantity(1.0, _unit(unit_text)).to(base_unit).magnitude)


def to_base(value: object, kind: QuantityKind) -> float:
    """Convert a quantity string such as ``"120 mm^2"`` to a finite float in ``kind.base_unit``.

    Raises
    ------
    UnitError
        With a message that quotes at most about 40 characters of the input and says how
        to write the quantity.
    """
    like = f'write it like "{kind.example}"'
    if isinstance(value, bool) or not isinstance(value, str):
        raise UnitError(
            f"expected {_article(kind.name)} written with its unit as a string (got "
            f"{shorten(value)}); {like}"
        )
    if len(value) > MAX_QUANTITY_CHARS:
        raise UnitError(
            f"{shorten(value)} is {len(value)} characters long, too long for "
            f"{_article(kind.name)}; {like}"
        )
    match = _QUANTITY.fullmatch(value)
    if match is None:
        if _BARE_NUMBER.fullmatch(value):
            raise UnitError(
                f"{shorten(value)} has no unit; write the {kind.name} with its unit, like "
                f'"{kind.example}"'
            )
        raise UnitError(
            f"cannot read {shorten(value)} as {_article(kind.name)}: write one plain number "
            f"and a unit, without arithmetic; {like}"
        )
    magnitude = float(match["number"])
    if not math.isfinite(magnitude):
        raise UnitError(f"{shorten(value)} is not a finite number; {like}")
    unit_text = match["unit"].strip()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            unit = _unit(unit_text)
    except Exception:  # pint raises several error types for unreadable unit text
        unit = None
    if unit is None:
        raise UnitError(f"{shorten(unit_text)} is not a unit dieplan knows; {like}")
    if kind.needs_data_unit:
        names = str(unit)
        if "byte" not in names and "bit" not in names:
            raise UnitError(
                f"{shorten(value)} is not {_article(kind.name)}; name bytes or bits, "
                f'e.g. "{kind.example}"'
            )
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # overflow is reported below, not warned
            result = magnitude * _factor(unit_text, kind.base_unit)
    except pint.DimensionalityError:
        raise UnitError(
            f"{shorten(value)} has the wrong dimension for {_article(kind.name)} "
            f"({_REGISTRY.get_dimensionality(unit)}); {like}"
        ) from None
    if not math.isfinite(result):
        raise UnitError(f"{shorten(value)} is too large for {_article(kind.name)}; {like}")
    return result
