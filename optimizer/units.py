"""Unit parsing: every physical quantity in a problem file is a string with a unit.

Strings are parsed once, at load time, with pint and converted to the internal base:
millimetres, square millimetres, defects per square centimetre, GB/s and GB/s per mm^2.
A quantity of the wrong dimension is rejected, which rules out the classic 10^4 slip
between mm^2 and cm^2.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import pint

_REGISTRY = pint.UnitRegistry()


@dataclass(frozen=True)
class QuantityKind:
    """A physical quantity the problem file accepts, with its internal unit."""

    name: str
    base_unit: str
    example: str
    needs_data_unit: bool = False  # bandwidths must name bytes or bits, not bare 1/s


LENGTH = QuantityKind("length", "mm", "80 um")
AREA = QuantityKind("area", "mm**2", "120 mm^2")
DEFECT_DENSITY = QuantityKind("defect density", "1/cm**2", "0.09 /cm^2")
BANDWIDTH = QuantityKind("bandwidth", "GB/s", "256 GB/s", needs_data_unit=True)
INTERFACE_DENSITY = QuantityKind(
    "interface density", "GB/s/mm**2", "200 GB/s/mm^2", needs_data_unit=True
)


def _article(noun: str) -> str:
    return ("an " if noun[0] in "aeiou" else "a ") + noun


class UnitError(ValueError):
    """A quantity string that cannot be read as the expected kind of quantity."""


@lru_cache(maxsize=4096)
def _parse(text: str) -> pint.Quantity:
    return _REGISTRY.Quantity(text)


def to_base(value: object, kind: QuantityKind) -> float:
    """Convert a quantity string such as ``"120 mm^2"`` to a float in ``kind.base_unit``."""
    if isinstance(value, bool) or not isinstance(value, str):
        raise UnitError(
            f"expected {_article(kind.name)} written with its unit as a string, "
            f'e.g. "{kind.example}"'
        )
    try:
        quantity = _parse(value.strip())
    except Exception as exc:  # pint raises several error types for unreadable text
        raise UnitError(
            f'cannot read {value!r} as {_article(kind.name)}; write it like "{kind.example}"'
        ) from exc
    if not isinstance(quantity, pint.Quantity) or quantity.unitless:
        raise UnitError(
            f'{value!r} has no unit; write the {kind.name} with its unit, e.g. "{kind.example}"'
        )
    if kind.needs_data_unit:
        unit_text = str(quantity.units)
        if "byte" not in unit_text and "bit" not in unit_text:
            raise UnitError(
                f'{value!r} is not {_article(kind.name)}; name bytes or bits, e.g. "{kind.example}"'
            )
    try:
        return float(quantity.to(kind.base_unit).magnitude)
    except pint.DimensionalityError as exc:
        raise UnitError(
            f"{value!r} has the wrong dimension for {_article(kind.name)} "
            f'({quantity.dimensionality}); write it like "{kind.example}"'
        ) from exc
