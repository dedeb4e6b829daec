"""Quantities at the edge: text with units -> SI floats, bad text -> ConfigError, never a hang.

Conversion factors are checked against scipy.constants (CODATA) where they apply."""

from __future__ import annotations

import pytest
import scipy.constants as sc
from hypothesis import given, settings
from hypothesis import strategies as st

from bench.errors import ConfigError
from bench.units import parse_quantity, parse_relative


@pytest.mark.parametrize(
    ("text", "kind", "si"),
    [
        ("5 mm", "length", 5e-3),
        ("2.1e-20 cm^2", "area", 2.1e-24),
        ("1.4e20 cm^-3", "density", 1.4e26),
        ("940 nm", "length", 940e-9),
        ("25 degC", "temperature", 25 + sc.zero_Celsius),  # scipy.constants: 0 degC = 273.15 K
        ("0.6 ms", "time", 6e-4),
        ("1 eV", "energy", sc.electron_volt),  # CODATA via scipy.constants
        ("100 kHz", "frequency", 1e5),
        ("1.05 W/A", "slope", 1.05),
        ("3 kW/cm^2", "intensity", 3e7),
        ("0.67 J/cm^2", "fluence", 6.7e3),
        ("2 µm", "length", 2e-6),
    ],
)
def test_units_convert_to_si(text, kind, si):
    assert parse_quantity(text, kind, "x") == pytest.approx(si, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "kind", "message"),
    [
        ("5 kg", "length", '"5 kg" is not a length'),
        (5, "length", "5 has no unit"),
        ("", "length", "is not a length"),
        ("9**9**9 m", "length", "unit powers may only be small whole numbers"),  # would hang pint
        ("10**400 cm^2", "area", "is not an area"),
        ("1e400 m", "length", "is not a finite number"),
        ("nan m", "length", "is not a finite number"),
        (True, "length", "is not a length"),
    ],
)
def test_bad_quantities_are_config_errors(text, kind, message):
    with pytest.raises(ConfigError, match="^key: ") as info:
        parse_quantity(text, kind, "key")
    assert message in str(info.value)


def test_relative():
    assert parse_relative("5 %", "k") == pytest.approx(0.05)
    assert parse_relative(0.05, "k") == pytest.approx(0.05)
    with pytest.raises(ConfigError, match="k: "):
        parse_relative("five", "k")


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=40))
def test_any_text_gives_a_float_or_a_config_error(text):
    try:
        value = parse_quantity(text, "length", "k")
    except ConfigError as exc:
        assert str(exc).startswith("k: ")
    else:
        assert isinstance(value, float)
