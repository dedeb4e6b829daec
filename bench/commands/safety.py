"""`gainbench safety`: the optical density laser eyewear needs against one beam.

A calculation aid only (see `bench.safety.exposure_limits`): it never replaces a hardware interlock, the
laser safety officer, ANSI Z136.1 / IEC 60825-1 / EN 207 or local rules.
"""

from __future__ import annotations

import argparse
import json

from bench.errors import ConfigError
from bench.safety import exposure_limits as laser_safety
from bench.units import parse_quantity

NAME = "safety"
HELP = (
    "Eyewear optical density for one CW beam viewed directly (ocular MPE, older edition: "
    "2006/25/EC / ICNIRP 2000); a calculation aid that never replaces your LSO or interlocks."
)

#: Argument names of `bench.safety.exposure_limits` -> the option that sets them.
_OPTION_OF = {
    "wavelength": "--wavelength",
    "power": "--power",
    "beam_diameter": "--beam-diameter",
    "exposure_time": "--exposure",
}


#: Beam diameters the calculation takes, m: no free-space beam at these wavelengths focuses
#: below 1 um (diffraction), and none a person meets on a bench is a metre wide (common
#: practice, no source).
BEAM_DIAMETER_RANGE = (1e-6, 1.0)
#: CW powers, W: no laser on a lab bench emits a megawatt CW (common practice, no source).
POWER_MAX = 1e6


def _within(option: str, value: float, lo: float, hi: float, unit: str, text: str) -> float:
    if not lo <= value <= hi:
        raise ConfigError(
            f"{option}: {text!r} is outside {lo:g} {unit} ... {hi:g} {unit}, the range this calculation takes"
        )
    return value


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--wavelength",
        required=True,
        metavar="QUANTITY",
        help='laser wavelength, above 400 nm up to 2600 nm, e.g. "976nm"',
    )
    parser.add_argument(
        "--power", required=True, metavar="QUANTITY", help='CW beam power, e.g. "10W" or "250 mW"'
    )
    parser.add_argument(
        "--beam-diameter",
        required=True,
        metavar="QUANTITY",
        help='1/e^2 beam diameter where a person could meet the beam, e.g. "2mm" (use the smallest)',
    )
    parser.add_argument(
        "--exposure",
        metavar="QUANTITY",
        default=None,
        help="exposure duration (default 0.25 s for 400-700 nm, the aversion response; 10 s elsewhere)",
    )
    parser.add_argument("--json", action="store_true", help="print the result as JSON")


def run(args: argparse.Namespace) -> int:
    wavelength = parse_quantity(args.wavelength, "length", "--wavelength")
    power = parse_quantity(args.power, "power", "--power")
    if power > POWER_MAX:
        raise ConfigError(
            f"--power: {args.power!r} is above {POWER_MAX:g} W, more than any CW laser on a bench"
        )
    beam_diameter = _within(
        "--beam-diameter",
        parse_quantity(args.beam_diameter, "length", "--beam-diameter"),
        *BEAM_DIAMETER_RANGE,
        "m",
        args.beam_diameter,
    )
    exposure = None if args.exposure is None else parse_quantity(args.exposure, "time", "--exposure")
    try:
        result = laser_safety.required_od(wavelength, power, beam_diameter, exposure)
    except laser_safety.OutOfRangeError as exc:
        option = _OPTION_OF.get(exc.argument, exc.argument)
        raise ConfigError(f"{option}: {exc.detail}") from None
    except ArithmeticError:  # a combination the bounds above let through and the formulas cannot take
        raise ConfigError(
            f"the eyewear OD for --wavelength {args.wavelength} --power {args.power} --beam-diameter "
            f"{args.beam_diameter} cannot be computed (the numbers overflow); check them"
        ) from None
    if args.json:
        print(json.dumps(as_json(result), indent=2))
    else:
        print(as_text(result, default_exposure=exposure is None))
    return 0


def as_json(r: laser_safety.EyewearRequirement) -> dict[str, object]:
    """The result with SI keys (the keys named in the command's documentation)."""
    return {
        "wavelength_m": r.wavelength,
        "power_w": r.power,
        "beam_diameter_m": r.beam_diameter,
        "exposure_s": r.exposure_time,
        "mpe_w_per_m2": r.mpe_irradiance,
        "mpe_j_per_m2": r.mpe_radiant_exposure,
        "aperture_diameter_m": r.aperture_diameter,
        "aperture_fraction": r.aperture_fraction,
        "exposure_w_per_m2": r.exposure_irradiance,
        "od_exact": r.od_exact,
        "od_required": r.od_required,
        "standard": r.standard,
        "formula": r.formula,
        "caution": r.caution,
    }


def as_text(r: laser_safety.EyewearRequirement, *, default_exposure: bool) -> str:
    """A plain report for the terminal."""
    if default_exposure:
        why = (
            "default: aversion response to visible light"
            if r.wavelength < 700e-9
            else "default: no aversion response outside 400-700 nm"
        )
        exposure = f"{r.exposure_time:g} s ({why})"
    else:
        exposure = f"{r.exposure_time:g} s"
    mpe = f"{r.mpe_irradiance:.4g} W/m^2 ({r.mpe_irradiance * 0.1:.4g} mW/cm^2)"
    if r.mpe_defined_as == laser_safety.RADIANT_EXPOSURE:
        mpe += (
            f"; stated as radiant exposure {r.mpe_radiant_exposure:.4g} J/m^2 "
            f"({r.mpe_radiant_exposure * 0.1:.4g} mJ/cm^2)"
        )
    exposure_line = f"{r.exposure_irradiance:.4g} W/m^2 ({r.exposure_irradiance * 0.1:.4g} mW/cm^2)"
    if r.mpe_defined_as == laser_safety.RADIANT_EXPOSURE:
        exposure_line += f"; H = E t = {r.exposure_radiant_exposure:.4g} J/m^2"
    if r.od_required == 0:
        verdict = "exposure does not exceed the MPE: no OD needed by this calculation (OD 0)"
    else:
        verdict = f"OD {r.od_required} or more at {r.wavelength * 1e9:g} nm"
    lines = [
        "Laser eyewear: ocular MPE, direct viewing of one CW beam (point source)",
        f"  wavelength           {r.wavelength * 1e9:g} nm",
        f"  power                {r.power:g} W",
        f"  beam diameter        {r.beam_diameter * 1e3:g} mm (1/e^2, Gaussian)",
        f"  exposure             {exposure}",
        f"  MPE                  {mpe}",
        f"  limiting aperture    {r.aperture_diameter * 1e3:.3g} mm "
        f"({r.aperture_fraction * 100:.4g} % of the power passes)",
        f"  exposure over it     {exposure_line}",
        f"  optical density      {r.od_exact:.2f} exact; required: {verdict}",
        f"  standard             {r.standard}",
        f"  formula              {r.formula}",
        "",
        r.caution,
    ]
    return "\n".join(lines)
