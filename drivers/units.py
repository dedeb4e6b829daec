"""Quantities with units at the edge: text such as ``"5 mm"`` becomes an SI float.

pint is used here and only here (command profiles and driver options; gainbench's bench files
and command-line options through ``bench.units``, which builds on this module, so there is one
unit registry); everything past this module is plain float64 in SI units (m, m², m⁻³, s, W, K,
A, J, Hz).
"""

from __future__ import annotations

import math
import re
from functools import lru_cache

import pint

from drivers.errors import DriverConfigError

#: Name of each kind of quantity -> the SI unit it is converted to.
SI_UNITS: dict[str, str] = {
    "length": "m",
    "area": "m**2",
    "density": "m**-3",
    "time": "s",
    "power": "W",
    "energy": "J",
    "fluence": "J/m**2",
    "intensity": "W/m**2",
    "temperature": "K",
    "current": "A",
    "voltage": "V",
    "frequency": "Hz",
    "slope": "W/A",
    "volts_per_watt": "V/W",
    "kelvin_per_amp": "K/A",
    "kelvin_per_watt": "K/W",
    "per_kelvin": "1/K",
    "dimensionless": "dimensionless",
}

#: How each kind is named in error messages.
KIND_WORDS = {
    "length": "a length",
    "area": "an area (cross-section)",
    "density": "a number density",
    "time": "a time",
    "power": "a power",
    "energy": "an energy",
    "fluence": "a fluence",
    "intensity": "an intensity",
    "temperature": "a temperature",
    "current": "a current",
    "voltage": "a voltage",
    "frequency": "a frequency",
    "slope": "a slope efficiency (power per current)",
    "volts_per_watt": "a responsivity (volts per watt)",
    "kelvin_per_amp": "a heating coefficient (kelvin per ampere)",
    "kelvin_per_watt": "a heating coefficient (kelvin per watt)",
    "per_kelvin": "a temperature coefficient (relative change per kelvin, e.g. 1 %/K)",
    "dimensionless": "a plain number",
}


#: Text whose every power (``**``) is a small whole number, never a power of a power.
_SAFE_EXPONENTS = re.compile(r"(?:(?!\*\*)[^*]|\*(?!\*)|\*\*\s*\(?-?\d{1,2}\)?(?!\s*\*\*))*")


#: A digit, an underscore and a digit: Python's and pint's numerals allow it, people misread it.
_UNDERSCORE_IN_NUMBER = re.compile(r"\d_+\d")


def odd_numeral(text: str) -> str:
    """Why ``text`` holds a numeral a person would misread ("" when it holds none).

    Python's ``float`` (and pint, which uses it) reads ``"5_0"`` as 50 and digits of other
    scripts (``"٥"``, fullwidth ``"５"``) as ASCII ones; a value typed on a bench must say what
    it looks like, so both are refused.
    """
    if _UNDERSCORE_IN_NUMBER.search(text):
        return "has an underscore inside a number; write the digits without it (5_0 is not 5.0)"
    if any(ch.isdecimal() and not ch.isascii() for ch in text):
        return "has digits other than 0-9; write the number with ASCII digits"
    return ""


def clean_unit_text(text: str) -> str | None:
    """``text`` as pint should read it (``^`` as ``**``, ``µ`` as ``u``), or None when pint must not.

    None for text longer than 60 characters or with a power that is not a small whole number:
    pint evaluates powers exactly, and ``"9**9**9 A"`` would never return.
    """
    cleaned = text.strip().replace("^", "**").replace("µ", "u").replace("μ", "u")
    if len(cleaned) > 60 or not _SAFE_EXPONENTS.fullmatch(cleaned):
        return None
    return cleaned


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The one unit registry (temperatures in °C are converted as offsets, not deltas)."""
    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    return ureg


def parse_quantity(text: object, kind: str, where: str) -> float:
    """Parse ``text`` (``"5 mm"``, ``"2.1e-20 cm^2"``, ``"25 degC"``) into an SI float.

    Parameters
    ----------
    text : str or number
        The quantity as written. A bare number is accepted only for ``kind="dimensionless"``.
    kind : str
        One of `SI_UNITS`.
    where : str
        What names the value in an error, e.g. ``"bench.toml: sample.length"``.

    Raises
    ------
    DriverConfigError
        ``where: "5 kg" is not a length (expected units such as m)``.
    """
    if kind not in SI_UNITS:
        raise ValueError(f"kind: unknown quantity kind {kind!r}")
    target = SI_UNITS[kind]
    if isinstance(text, bool):
        raise DriverConfigError(f"{where}: {text!r} is not {KIND_WORDS[kind]}")
    if isinstance(text, (int, float)):
        if kind == "dimensionless":
            return float(text)
        raise DriverConfigError(
            f'{where}: {text!r} has no unit; write it with one, e.g. "{text} {_example_unit(kind)}"'
        )
    if not isinstance(text, str) or not text.strip():
        raise DriverConfigError(f"{where}: {text!r} is not {KIND_WORDS[kind]}")
    ureg = registry()
    odd = odd_numeral(text)
    if odd:
        raise DriverConfigError(f'{where}: "{text}" {odd}')
    cleaned = clean_unit_text(text)
    if cleaned is None:
        # pint evaluates powers exactly: "9**9**9 m" would never return
        raise DriverConfigError(
            f'{where}: "{text}" is not {KIND_WORDS[kind]} (write a number and a unit, e.g. '
            f'"5 {_example_unit(kind)}"; unit powers may only be small whole numbers)'
        )
    try:
        q = ureg.Quantity(cleaned)
    except Exception:  # pint raises several unrelated types for unparsable text
        raise DriverConfigError(
            f'{where}: "{text}" is not {KIND_WORDS[kind]} (could not read it as a number with a unit)'
        ) from None
    if not isinstance(q, pint.Quantity):  # a bare number
        q = ureg.Quantity(float(q), "dimensionless")
    try:
        value = float(q.to(target).magnitude)
    except (pint.DimensionalityError, ArithmeticError):
        raise DriverConfigError(
            f'{where}: "{text}" is not {KIND_WORDS[kind]} (expected units such as {_example_unit(kind)})'
        ) from None
    if not math.isfinite(value):
        raise DriverConfigError(f'{where}: "{text}" is not a finite number')
    return value


def _example_unit(kind: str) -> str:
    return {
        "length": "mm",
        "area": "cm^2",
        "density": "cm^-3",
        "time": "ms",
        "power": "W",
        "energy": "mJ",
        "fluence": "J/cm^2",
        "intensity": "W/cm^2",
        "temperature": "K or degC",
        "current": "A",
        "voltage": "V",
        "frequency": "kHz",
        "slope": "W/A",
        "volts_per_watt": "V/W",
        "kelvin_per_amp": "K/A",
        "kelvin_per_watt": "K/W",
        "per_kelvin": "%/K",
        "dimensionless": "(none)",
    }[kind]
