"""The rows of 2006/25/EC Annex II Tables 2.2 and 2.3 (ocular MPE of CW laser radiation) and
their correction factors C_A, C_B, C_C, with the checks of the arguments; `bench.safety.exposure_limits`
builds the MPE, limiting aperture and eyewear OD on them (its docstring gives the sources).

A calculation aid only: it never replaces a hardware interlock, the laser safety officer,
ANSI Z136.1 / IEC 60825-1 / EN 207 or local rules.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

RADIANT_EXPOSURE = "radiant exposure"
IRRADIANCE = "irradiance"


class OutOfRangeError(ValueError):
    """An argument outside what this module implements.

    ``argument`` names the argument, ``detail`` says what is wrong with it.
    """

    def __init__(self, argument: str, detail: str) -> None:
        super().__init__(f"{argument}: {detail}")
        self.argument = argument
        self.detail = detail


# --------------------------------------------------------------------------- validation


def _real(argument: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise OutOfRangeError(argument, f"{value!r} is not a number")
    x = float(value)
    if not math.isfinite(x):
        raise OutOfRangeError(argument, f"{value!r} is not a finite number")
    return x


def _positive(argument: str, value: object, unit: str) -> float:
    x = _real(argument, value)
    if x <= 0.0:
        raise OutOfRangeError(argument, f"must be positive, got {x:g} {unit}")
    return x


def _wavelength_nm(wavelength: object) -> float:
    """The wavelength in nm, rounded so that 976e-9 m gives exactly 976 nm."""
    x = _real("wavelength", wavelength)
    nm = round(x * 1e9, 6)
    if nm == 400.0:
        raise OutOfRangeError(
            "wavelength",
            "400 nm is the upper edge of the 315-400 nm (UV) rows of 2006/25/EC Annex II Tables "
            "2.2 and 2.3 (intervals 315 < lambda <= 400 nm), which are not implemented; the "
            "implemented range is above 400 nm up to 2600 nm",
        )
    if not 400.0 < nm <= 2600.0:
        hint = ""
        if 400.0 <= x <= 2600.0:
            hint = f" (the wavelength is in metres: {x:g} nm is {x * 1e-9:g} m)"
        raise OutOfRangeError(
            "wavelength",
            f"{x:g} m ({nm:g} nm) is outside the implemented range, above 400 nm up to 2600 nm{hint}",
        )
    return nm


def _time(argument: str, value: object) -> float:
    return _positive(argument, value, "s")


# --------------------------------------------------------------------------- correction factors


def correction_c_a(wavelength: float) -> float:
    """C_A of 2006/25/EC Table 2.5 (400-1400 nm): 1, 10^(0.002 (lambda - 700)), then 5.

    Rows "lambda < 700: 1.0", "700 - 1050: 10^(0.002 (lambda - 700))", "1050 - 1400: 5.0"
    (checked). Intervals read as a < lambda <= b (see the module notes): the formula holds up
    to and including 1050 nm (10^0.7 = 5.01 there); above, C_A = 5.
    """
    nm = _wavelength_nm(wavelength)
    if nm > 1400.0:
        raise OutOfRangeError("wavelength", f"C_A is defined for 400 nm to 1400 nm, not {nm:g} nm")
    if nm < 700.0:
        return 1.0
    if nm <= 1050.0:
        return 10.0 ** (0.002 * (nm - 700.0))
    return 5.0


def correction_c_b(wavelength: float) -> float:
    """C_B of 2006/25/EC Table 2.5 (400-700 nm): 1 up to 450 nm, then 10^(0.02 (lambda - 450)).

    Rows "400 - 450: 1.0" and "450 - 700: 10^(0.02 (lambda - 450))" (checked); continuous at
    450 nm.
    """
    nm = _wavelength_nm(wavelength)
    if nm > 700.0:
        raise OutOfRangeError("wavelength", f"C_B is defined for 400 nm to 700 nm, not {nm:g} nm")
    if nm <= 450.0:
        return 1.0
    return 10.0 ** (0.02 * (nm - 450.0))


def correction_c_c(wavelength: float) -> float:
    """C_C of 2006/25/EC Table 2.5 (700-1400 nm): 1, 10^(0.018 (lambda - 1150)), then 8.

    Rows "700 - 1150: 1.0", "1150 - 1200: 10^(0.018 (lambda - 1150))", "1200 - 1400: 8.0"
    (checked). Intervals read as a < lambda <= b: the formula holds up to and including
    1200 nm (10^0.9 = 7.94 there); above, C_C = 8. Older edition (ICNIRP 2000); ICNIRP 2013
    raises C_C above 1250 nm (not implemented).
    """
    nm = _wavelength_nm(wavelength)
    if not 700.0 <= nm <= 1400.0:
        raise OutOfRangeError("wavelength", f"C_C is defined for 700 nm to 1400 nm, not {nm:g} nm")
    if nm < 1150.0:
        return 1.0
    if nm <= 1200.0:
        return 10.0 ** (0.018 * (nm - 1150.0))
    return 8.0


# --------------------------------------------------------------------------- the band table

# Each limit function takes (wavelength in m, nm, t in s) and returns
# (irradiance W/m^2, defined_as, formula text).
_Limit = Callable[[float, float, float], tuple[float, str, str]]


def _h(h: float, t: float, text: str) -> tuple[float, str, str]:
    return h / t, RADIANT_EXPOSURE, text


def _visible_short(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    return _h(18.0 * t**0.75, t, "H = 18 t^0.75 J/m^2 (1.8 t^0.75 mJ/cm^2), retinal thermal")


def _nir_short(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    ca = correction_c_a(wl)
    return _h(
        18.0 * ca * t**0.75,
        t,
        f"H = 18 C_A t^0.75 J/m^2 (1.8 C_A t^0.75 mJ/cm^2), C_A = {ca:.4g}, retinal thermal",
    )


def _nir_b_short(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    cc = correction_c_c(wl)
    return _h(
        90.0 * cc * t**0.75,
        t,
        f"H = 90 C_C t^0.75 J/m^2 (9 C_C t^0.75 mJ/cm^2), C_C = {cc:.4g}, retinal thermal",
    )


def _ir_quarter_power_short(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    return _h(5600.0 * t**0.25, t, "H = 5600 t^0.25 J/m^2 (0.56 t^0.25 J/cm^2), corneal thermal")


def _ir_1500_short(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    return _h(1.0e4, t, "H = 1e4 J/m^2 (1.0 J/cm^2), corneal thermal")


def _visible_long(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    # Table 2.3, row 400-700 nm, retinal thermal, t >= 10 s: E = 10 W/m^2 (from memory).
    thermal = 10.0
    thermal_text = "E = 10 W/m^2 (1 mW/cm^2), retinal thermal"
    if nm > 600.0:
        return thermal, IRRADIANCE, thermal_text
    # Table 2.3, row 400-600 nm, retinal photochemical (from memory), ICNIRP (2000) form:
    # H = 100 C_B J/m^2 for 10 s - 100 s, then E = 1 C_B W/m^2 for 100 s - 3e4 s.
    cb = correction_c_b(wl)
    if t <= 100.0:
        photo = 100.0 * cb / t
        photo_defined, photo_text = RADIANT_EXPOSURE, f"H = 100 C_B J/m^2, C_B = {cb:.4g}"
    else:
        photo = cb
        photo_defined, photo_text = IRRADIANCE, f"E = 1 C_B W/m^2, C_B = {cb:.4g}"
    if photo < thermal:
        return (
            photo,
            photo_defined,
            (f"{photo_text}, retinal photochemical (lower than the thermal limit {thermal_text})"),
        )
    return thermal, IRRADIANCE, (f"{thermal_text} (lower than the photochemical limit {photo_text})")


def _nir_long(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    ca = correction_c_a(wl)
    return (
        10.0 * ca,
        IRRADIANCE,
        (f"E = 10 C_A C_C W/m^2 (1 C_A C_C mW/cm^2), C_A = {ca:.4g}, C_C = 1, retinal thermal"),
    )


def _nir_b_long(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    cc = correction_c_c(wl)
    return (
        50.0 * cc,
        IRRADIANCE,
        (f"E = 10 C_A C_C W/m^2 (1 C_A C_C mW/cm^2), C_A = 5, C_C = {cc:.4g}, retinal thermal"),
    )


def _ir_long(wl: float, nm: float, t: float) -> tuple[float, str, str]:
    return 1000.0, IRRADIANCE, "E = 1000 W/m^2 (100 mW/cm^2), corneal thermal"


@dataclass(frozen=True)
class _Band:
    """One row of Tables 2.2/2.3: low_nm < lambda <= high_nm."""

    low_nm: float
    high_nm: float
    shortest: float  # s, shortest exposure implemented
    short: _Limit
    long: _Limit

    @property
    def label(self) -> str:
        return f"{self.low_nm:g} < lambda <= {self.high_nm:g} nm"


#: Rows of 2006/25/EC Annex II Tables 2.2/2.3 in order; a wavelength on an edge belongs to the
#: row below it (intervals a < lambda <= b, as Table 2.6 writes them).
_BANDS = (
    _Band(400.0, 700.0, 18e-6, _visible_short, _visible_long),
    _Band(700.0, 1050.0, 18e-6, _nir_short, _nir_long),
    _Band(1050.0, 1400.0, 50e-6, _nir_b_short, _nir_b_long),
    _Band(1400.0, 1500.0, 1e-3, _ir_quarter_power_short, _ir_long),
    _Band(1500.0, 1800.0, 1e-3, _ir_1500_short, _ir_long),
    _Band(1800.0, 2600.0, 1e-3, _ir_quarter_power_short, _ir_long),
)


def _band(nm: float) -> _Band:
    for band in _BANDS:
        if band.low_nm < nm <= band.high_nm:
            return band
    raise AssertionError(f"{nm} nm passed validation but lies in no row")  # pragma: no cover


#: Edges where the rows on either side differ strongly (retina to cornea at 1400 nm; the
#: t^0.25 rows against the constant 1e4 J/m^2 at 1500 nm and 1800 nm).
_STEP_EDGES = (1400.0, 1500.0, 1800.0)


def _edge_note(nm: float, band: _Band) -> str:
    if nm != band.high_nm or nm not in _STEP_EDGES:
        return ""
    return (
        f" ({nm:g} nm is this row's upper edge; the row above it gives a different limit, "
        "so check a laser whose wavelength may lie on either side)"
    )
