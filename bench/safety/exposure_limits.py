"""Ocular maximum permissible exposure (MPE) and the optical density laser eyewear needs.

Pure computation, no I/O. For one CW (or long-pulse) beam viewed directly (intrabeam viewing
of a point source, apparent source angle below 1.5 mrad so that C_E = 1), above 400 nm up to
2600 nm, exposures from the shortest duration listed below up to 3e4 s (one working day).

Edition used: the *older* limits, those of EU Directive 2006/25/EC, Annex II [1]_, which
follows ICNIRP (1996) [2]_ and its revision ICNIRP (2000) [3]_. Every value below (limits,
correction factors, apertures, band edges) follows the Directive; ANSI Z136.1-2007 [4]_
(Table 5a) and IEC 60825-1:2007 [5]_ (Annex A, Table A.1) give the same limits within rounding
(the table numbers of [4]_ and [5]_ are from memory), but differ in the aperture break point
(0.35 s, see below). The newer editions, ICNIRP (2013) [6]_ and IEC 60825-1:2014, differ more:
above 1250 nm they raise C_C (C_C = 8 + 10^(0.04 (lambda - 1250)), from memory) and they change
the short-pulse retinal limits. Those newer values are NOT implemented; every result says which
edition it used.

Limits implemented (t in s, lambda in nm; 1 mJ/cm^2 = 10 J/m^2, 1 mW/cm^2 = 10 W/m^2).
Table numbers are those of 2006/25/EC Annex II [1]_: Table 2.2 (eye, exposure < 10 s), Table
2.3 (eye, exposure >= 10 s), Table 2.5 (correction factors and other parameters), Table 2.6
(repetitive exposure, with its T_min column). The text of Tables 2.2, 2.3 and 2.6 could not be
consulted for this module: their rows below are from memory. Table 2.5 was checked against its
published text, as reproduced in the Norwegian regulation [8]_ (C_A, C_B, C_C and the cone
angle gamma rows).

=================  =============================  =====================================
row of the tables  t < 10 s (Table 2.2)           t >= 10 s (Table 2.3)
=================  =============================  =====================================
400 < l <= 700     H = 18 t^0.75 J/m^2,           retinal thermal E = 10 W/m^2;
                   18 us - 10 s                   400 < l <= 600 also retinal
                                                  photochemical: H = 100 C_B J/m^2 for
                                                  10 s - 100 s, E = 1 C_B W/m^2 for
                                                  100 s - 3e4 s; the lower one governs
700 < l <= 1050    H = 18 C_A t^0.75 J/m^2,       E = 10 C_A C_C W/m^2 (C_C = 1 here)
                   18 us - 10 s
1050 < l <= 1400   H = 90 C_C t^0.75 J/m^2,       E = 10 C_A C_C W/m^2 (C_A = 5)
                   50 us - 10 s
1400 < l <= 1500   H = 5600 t^0.25 J/m^2,         E = 1000 W/m^2
                   1 ms - 10 s
1500 < l <= 1800   H = 1e4 J/m^2, 1 ns - 10 s     E = 1000 W/m^2
                   in the table; implemented
                   from 1 ms only
1800 < l <= 2600   H = 5600 t^0.25 J/m^2,         E = 1000 W/m^2
                   1 ms - 10 s
=================  =============================  =====================================

The photochemical row of Table 2.3 is the ICNIRP (2000) form [3]_: from 100 s on the limit is an
irradiance, 1 C_B W/m^2, averaged over a field of view gamma that grows with t (Table 2.5:
gamma = 11 mrad up to 100 s, 1.1 t^0.5 mrad from 100 s to 1e4 s, 110 mrad beyond, checked);
for a point source the whole beam lies inside gamma. The older small-source form (100 C_B J/m^2
up to 1e4 s, then 0.01 C_B W/m^2; ICNIRP 1996 [2]_) is up to 100 times (2 OD) lower beyond
100 s and is not used.

Correction factors (Table 2.5, checked): C_A = 1 below 700 nm, 10^(0.002 (lambda - 700)) for
700-1050 nm, 5 for 1050-1400 nm; C_B = 1 for 400-450 nm, 10^(0.02 (lambda - 450)) for
450-700 nm; C_C = 1 for 700-1150 nm, 10^(0.018 (lambda - 1150)) for 1150-1200 nm, 8 for
1200-1400 nm. C_E = 1 (point source, alpha < alpha_min = 1.5 mrad). T_1 and T_2 of Table 2.5
only matter for extended sources and are not used.

Band edges. Table 2.6 writes its wavelength intervals as "400 < lambda <= 1050" (from memory);
this module reads every interval of Tables 2.2, 2.3 and 2.5 the same way, so a wavelength on an
edge belongs to the interval *below* it: 1050 nm uses the 700-1050 nm row and C_A = 10^0.7 =
5.01; 1200 nm uses C_C = 10^0.9 = 7.94; 1400 nm uses the retinal 1050-1400 nm row (E = 400 W/m^2
over 7 mm from 10 s, not the corneal 1000 W/m^2 over 3.5 mm); 1500 nm the 1400-1500 nm row and
1800 nm the 1500-1800 nm row. 400 nm itself is the upper edge of the 315-400 nm (UV) rows, which
are not implemented: the implemented range is 400 nm < lambda <= 2600 nm. Where the standard is
continuous (700 nm, 1150 nm, 450 nm) the reading makes no difference; at 1050 nm and 1200 nm it
is within the standard's rounding (5.01 against 5, 7.94 against 8); at 1400, 1500 and 1800 nm the
rows differ strongly, and a laser specified on such an edge may lie on either side of it.

Shortest durations. Each row starts where Table 2.2's t^0.75 or t^0.25 form starts: 18 us for
400-1050 nm, 50 us for 1050-1400 nm, 1 ms for 1400-1500 nm and 1800-2600 nm. In 1500-1800 nm the
constant 1e4 J/m^2 holds from 1 ns to 10 s; this module starts that row at 1 ms too, a choice of
this module (consistency with its neighbours), not of the table. The T_min column of Table 2.6
(from memory) agrees with 18 us, 50 us and 1 ms, but not for 1500-1800 nm, where T_min is 10 s:
there, pulses shorter than 10 s add up.

At 10 s the short and long forms meet within the standard's rounding (18 * 10^0.75 = 101 J/m^2
against 10 W/m^2 * 10 s; 5600 * 10^0.25 = 9958 J/m^2 against 1000 W/m^2 * 10 s; 1e4 J/m^2
exactly).

Limiting apertures (the circle the exposure is averaged over; aperture column of Tables 2.2
and 2.3 of [1]_, from memory): 7 mm for 400 < lambda <= 1400 nm; above 1400 nm, 1 mm for
t < 0.3 s, 1.5 t^0.375 mm for 0.3 s <= t < 10 s, 3.5 mm from 10 s. The break point 0.3 s is the
Directive's; IEC 60825-1:2007 [5]_ (and ANSI Z136.1) put it at 0.35 s (from memory), where
1.5 t^0.375 meets 1 mm; with 0.3 s the aperture steps down from 1 mm to 0.955 mm, which makes
the result stricter (or equal), never laxer.

Exposure of a Gaussian beam of 1/e^2 diameter d through an aperture of diameter D: the power
fraction 1 - exp(-2 (D/d)^2) passes, averaged over the aperture area pi D^2 / 4. The optical
density needed is OD = log10(exposure / MPE) (H = E t when the MPE is a radiant exposure, which
gives the same figure); eyewear must have at least the next whole number.

References
----------
.. [1] Directive 2006/25/EC of the European Parliament and of the Council of 5 April 2006 on
   the minimum health and safety requirements regarding the exposure of workers to risks
   arising from physical agents (artificial optical radiation), Annex II "Laser optical
   radiation". Official Journal of the European Union L 114, 27.4.2006, p. 38.
.. [2] ICNIRP, "Guidelines on limits of exposure to laser radiation of wavelengths between
   180 nm and 1,000 um", Health Physics 71(5), 804-819 (1996).
.. [3] ICNIRP, "Revision of guidelines on limits of exposure to laser radiation of wavelengths
   between 400 nm and 1.4 um", Health Physics 79(4), 431-440 (2000).
.. [4] ANSI Z136.1-2007, American National Standard for Safe Use of Lasers, Laser Institute
   of America (2007).
.. [5] IEC 60825-1:2007, Safety of laser products - Part 1: Equipment classification and
   requirements, International Electrotechnical Commission (2007).
.. [6] ICNIRP, "ICNIRP guidelines on limits of exposure to laser radiation of wavelengths
   between 180 nm and 1,000 um", Health Physics 105(3), 271-295 (2013).
.. [7] EN 207, Personal eye-protection equipment - Filters and eye-protectors against laser
   radiation (laser eye-protectors), CEN.
.. [8] Norwegian Labour Inspection Authority, Regulations concerning action and limit values,
   section 11-5 (laser exposure limits and correction factors after ICNIRP / 2006/25/EC).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from bench.safety.exposure_bands import (  # noqa: F401 - the tables' public names are this module's too
    IRRADIANCE,
    RADIANT_EXPOSURE,
    OutOfRangeError,
    _band,
    _edge_note,
    _positive,
    _time,
    _wavelength_nm,
    correction_c_a,
    correction_c_b,
    correction_c_c,
)

#: Implemented wavelength range, m: WAVELENGTH_MIN < wavelength <= WAVELENGTH_MAX (400 nm itself
#: belongs to the 315-400 nm rows of the tables, which are not implemented).
WAVELENGTH_MIN = 400e-9
WAVELENGTH_MAX = 2600e-9
#: Exposures from this duration on use the long-exposure limits (Table 2.3 of 2006/25/EC), s.
LONG_EXPOSURE_FROM = 10.0
#: Above 1400 nm, the 1 mm limiting aperture holds below this exposure (2006/25/EC Table 2.2), s.
APERTURE_BREAK = 0.3
#: Longest exposure the limits cover (one working day, 2006/25/EC Table 2.3), s.
LONGEST_EXPOSURE = 3.0e4
#: Default exposure in the visible: the aversion response (blink), s (IEC 60825-1, ANSI Z136.1).
AVERSION_EXPOSURE = 0.25
#: Default exposure outside the visible, where no aversion response protects the eye, s.
NON_VISIBLE_EXPOSURE = 10.0

#: Which edition of the limits this module uses, stated with every result.
EDITION = (
    "older edition, used on purpose: the same limits as ICNIRP (2000), ANSI Z136.1-2007 and "
    "IEC 60825-1:2007 (limiting aperture as in 2006/25/EC, break point 0.3 s rather than their "
    "0.35 s); the newer ICNIRP (2013) / IEC 60825-1:2014 limits differ, notably above 1250 nm"
)

_CAUTION = (
    "CAUTION: this is a calculation aid only. It never replaces a hardware interlock, your "
    "laser safety officer (LSO), the eyewear rules of ANSI Z136.1 / IEC 60825-1 / EN 207, or "
    "local rules. Confirm the rating printed on the eyewear itself (OD at this wavelength, and "
    "the EN 207 L-rating where it applies) and check with your LSO before relying on it. "
    "Diffuse reflections, several wavelengths at once and pulsed operation need a separate "
    "evaluation; use the smallest beam diameter a person could meet."
)


@dataclass(frozen=True)
class ExposureLimit:
    """An ocular MPE for one wavelength and exposure duration, in both forms.

    ``irradiance`` (W/m^2) and ``radiant_exposure`` (J/m^2) describe the same limit
    (``radiant_exposure = irradiance * exposure_time``); ``defined_as`` says in which form the
    standard states it.
    """

    wavelength: float
    exposure_time: float
    irradiance: float
    radiant_exposure: float
    defined_as: str
    formula: str
    table: str

    @property
    def value(self) -> float:
        """The limit in the form the standard states it (J/m^2 or W/m^2)."""
        return self.radiant_exposure if self.defined_as == RADIANT_EXPOSURE else self.irradiance

    @property
    def unit(self) -> str:
        return "J/m^2" if self.defined_as == RADIANT_EXPOSURE else "W/m^2"


@dataclass(frozen=True)
class EyewearRequirement:
    """The optical density eyewear needs against one beam, with how it was found.

    All quantities SI: wavelength, beam_diameter and aperture_diameter in m, power in W,
    exposure_time in s, mpe_irradiance and exposure_irradiance in W/m^2,
    mpe_radiant_exposure in J/m^2.
    """

    wavelength: float
    power: float
    beam_diameter: float
    exposure_time: float
    mpe_irradiance: float
    mpe_radiant_exposure: float
    mpe_defined_as: str
    aperture_diameter: float
    aperture_fraction: float
    exposure_irradiance: float
    od_exact: float
    od_required: int
    standard: str
    formula: str
    caution: str

    @property
    def exposure_radiant_exposure(self) -> float:
        """The exposure as radiant exposure H = E t, J/m^2."""
        return self.exposure_irradiance * self.exposure_time


# --------------------------------------------------------------------------- public functions


def default_exposure(wavelength: float) -> float:
    """Default exposure duration, s: 0.25 s below 700 nm (aversion response), else 10 s.

    700 nm itself gets 10 s: its limit is the same in both neighbouring rows, and the 10 s
    exposure gives the lower MPE (10 W/m^2 against 25.5 W/m^2 at 0.25 s), the stricter choice.

    The 0.25 s assumes an accidental glimpse of a visible beam; deliberate viewing (for
    example during alignment) needs a longer exposure. Common practice of IEC 60825-1 and
    ANSI Z136.1 (from memory).
    """
    nm = _wavelength_nm(wavelength)
    return AVERSION_EXPOSURE if nm < 700.0 else NON_VISIBLE_EXPOSURE


def mpe(wavelength: float, exposure_time: float) -> ExposureLimit:
    """Ocular MPE for intrabeam viewing of a point source, older edition (see module notes).

    Parameters
    ----------
    wavelength : float
        Wavelength in m, above 400e-9 up to 2600e-9.
    exposure_time : float
        Exposure duration in s, from the band's shortest implemented duration (18 us in
        400-1050 nm, 50 us in 1050-1400 nm, 1 ms above) up to 3e4 s.

    Returns
    -------
    ExposureLimit
        The limit as irradiance (W/m^2) and radiant exposure (J/m^2), the form the standard
        uses, the formula and the table.

    Raises
    ------
    ValueError
        (`OutOfRangeError`) naming ``wavelength`` or ``exposure_time``.

    References
    ----------
    .. [1] Directive 2006/25/EC, Annex II, Tables 2.2, 2.3 and 2.5, OJ L 114, 27.4.2006, p. 38.
    .. [2] ICNIRP, Health Physics 79(4), 431-440 (2000).
    """
    nm = _wavelength_nm(wavelength)
    t = _time("exposure_time", exposure_time)
    band = _band(nm)
    if t < band.shortest:
        raise OutOfRangeError(
            "exposure_time",
            f"{t:g} s is outside the implemented range for {band.label} "
            f"({band.shortest:g} s to {LONGEST_EXPOSURE:g} s); this tool is for CW and "
            "long-pulse pump and probe lasers, short pulses need a separate evaluation",
        )
    if t > LONGEST_EXPOSURE:
        raise OutOfRangeError(
            "exposure_time",
            f"{t:g} s is outside the implemented range for {band.label} "
            f"({band.shortest:g} s to {LONGEST_EXPOSURE:g} s, one working day)",
        )
    if t < LONG_EXPOSURE_FROM:
        irradiance, defined_as, text = band.short(float(wavelength), nm, t)
        table = f"Table 2.2 (exposure < 10 s), row {band.label}"
    else:
        irradiance, defined_as, text = band.long(float(wavelength), nm, t)
        table = f"Table 2.3 (exposure >= 10 s), row {band.label}"
    return ExposureLimit(
        wavelength=float(wavelength),
        exposure_time=t,
        irradiance=irradiance,
        radiant_exposure=irradiance * t,
        defined_as=defined_as,
        formula=f"{text}; {band.label}{_edge_note(nm, band)}",
        table=f"EU Directive 2006/25/EC Annex II {table}, correction factors Table 2.5",
    )


def limiting_aperture(wavelength: float, exposure_time: float) -> float:
    """Diameter of the limiting aperture, m, for ocular exposure.

    Aperture column of 2006/25/EC Annex II Tables 2.2 and 2.3 (from memory): 7 mm for
    400 < lambda <= 1400 nm; above 1400 nm, 1 mm for t < 0.3 s, 1.5 t^0.375 mm for
    0.3 s <= t < 10 s, 3.5 mm from 10 s. The break point 0.3 s is the Directive's (IEC 60825-1
    and ANSI Z136.1 use 0.35 s, from memory); at 0.3 s the rule steps from 1 mm down to
    0.955 mm, at 10 s from 3.557 mm down to 3.5 mm.
    """
    nm = _wavelength_nm(wavelength)
    t = _time("exposure_time", exposure_time)
    if nm <= 1400.0:
        return 7e-3
    if t < APERTURE_BREAK:
        return 1e-3
    if t < LONG_EXPOSURE_FROM:
        return 1.5e-3 * t**0.375
    return 3.5e-3


def aperture_fraction(beam_diameter: float, aperture_diameter: float) -> float:
    """Fraction of a Gaussian beam's power through a centred circular aperture.

    ``1 - exp(-2 (D/d)^2)`` for a beam of 1/e^2 diameter ``d`` and an aperture of diameter
    ``D`` (both m).

    References
    ----------
    .. [1] A. E. Siegman, Lasers, University Science Books (1986), ch. 17 (Gaussian beam
       power within a radius).
    """
    d = _positive("beam_diameter", beam_diameter, "m")
    aperture = _positive("aperture_diameter", aperture_diameter, "m")
    return -math.expm1(-2.0 * (aperture / d) ** 2)


def required_od(
    wavelength: float,
    power: float,
    beam_diameter: float,
    exposure_time: float | None = None,
) -> EyewearRequirement:
    """Optical density eyewear needs against one CW Gaussian beam viewed directly.

    Parameters
    ----------
    wavelength : float
        m, above 400e-9 up to 2600e-9.
    power : float
        Beam power, W (> 0).
    beam_diameter : float
        1/e^2 diameter of the beam where a person could meet it, m (> 0).
    exposure_time : float, optional
        s; `default_exposure` when None (0.25 s in the visible, 10 s elsewhere).

    Returns
    -------
    EyewearRequirement
        ``od_exact = log10(exposure / MPE)`` with the exposure averaged over the limiting
        aperture, and ``od_required``: the next whole number up, 0 when the exposure does not
        exceed the MPE.

    Raises
    ------
    ValueError
        (`OutOfRangeError`) naming the argument.

    References
    ----------
    .. [1] Directive 2006/25/EC, Annex II, OJ L 114, 27.4.2006, p. 38.
    .. [2] ANSI Z136.1-2007, optical density of protective eyewear, OD = log10(H0 / MPE)
       (from memory).
    """
    _wavelength_nm(wavelength)
    p = _positive("power", power, "W")
    d = _positive("beam_diameter", beam_diameter, "m")
    t = default_exposure(wavelength) if exposure_time is None else _time("exposure_time", exposure_time)
    limit = mpe(wavelength, t)
    aperture = limiting_aperture(wavelength, t)
    fraction = aperture_fraction(d, aperture)
    exposure = p * fraction / (math.pi * aperture**2 / 4.0)
    od_exact = math.log10(exposure / limit.irradiance)
    od_required = 0 if exposure <= limit.irradiance else math.ceil(od_exact)
    if limit.defined_as == RADIANT_EXPOSURE:
        comparison = "OD = log10(H / MPE) with H = E t"
    else:
        comparison = "OD = log10(E / MPE)"
    formula = (
        f"MPE: {limit.formula}; exposure over the aperture: "
        "E = P (1 - exp(-2 (D/d)^2)) / (pi D^2 / 4); "
        f"{comparison}"
    )
    return EyewearRequirement(
        wavelength=float(wavelength),
        power=p,
        beam_diameter=d,
        exposure_time=t,
        mpe_irradiance=limit.irradiance,
        mpe_radiant_exposure=limit.radiant_exposure,
        mpe_defined_as=limit.defined_as,
        aperture_diameter=aperture,
        aperture_fraction=fraction,
        exposure_irradiance=exposure,
        od_exact=od_exact,
        od_required=od_required,
        standard=f"{limit.table}; {EDITION}",
        formula=formula,
        caution=caution_text(),
    )


def caution_text() -> str:
    """The caution shown with every eyewear figure."""
    return _CAUTION
