"""Quantities with units at the edge: text such as ``"5 mm"`` becomes an SI float.

The unit registry, the quantity kinds and `parse_quantity` are the drivers' (`drivers.units`),
so that bench files, command-line options, command profiles and driver options share one pint
registry; a bad quantity raises `bench.errors.ConfigError` (the drivers' configuration error).
Everything past the edge is plain float64 in SI units (m, m², m⁻³, s, W, K, A, J, Hz).
"""

from __future__ import annotations

from bench.errors import ConfigError
from drivers.units import KIND_WORDS, SI_UNITS, clean_unit_text, odd_numeral, parse_quantity, registry

__all__ = [
    "KIND_WORDS",
    "SI_UNITS",
    "clean_unit_text",
    "odd_numeral",
    "parse_quantity",
    "parse_relative",
    "registry",
]


def parse_relative(text: object, where: str) -> float:
    """A relative uncertainty: ``"5 %"`` or ``0.05`` -> 0.05."""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    elif isinstance(text, str) and text.strip().endswith("%"):
        try:
            value = float(text.strip()[:-1]) / 100.0
        except ValueError:
            raise ConfigError(f'{where}: {text!r} is not a percentage such as "5 %"') from None
    else:
        raise ConfigError(f'{where}: {text!r} is not a relative uncertainty ("5 %" or 0.05)')
    if not 0.0 <= value < 1.0:
        raise ConfigError(f"{where}: {text!r} must be between 0 % and 100 %")
    return value
