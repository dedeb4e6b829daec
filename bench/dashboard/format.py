"""Plain text for the dashboard's panels: numbers with units, guard states, ages, sizes.

Pure functions of plain values, so the panels stay small and the wording is tested apart from
any widget. Temperatures arrive in K (SI inside the code) and are shown in °C for the bench.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from bench.records import Quantity

#: Celsius zero in K.
ZERO_CELSIUS = 273.15


@dataclass(frozen=True)
class GuardLook:
    """How one guard state is shown: a word, a symbol and a sentence (never colour alone)."""

    word: str
    symbol: str
    meaning: str
    css_class: str


GUARD_LOOKS = {
    "safe": GuardLook("SAFE", "○", "pump off, not armed", "guard-safe"),
    "armed": GuardLook("ARMED", "◇", "checklist passed, pump still off", "guard-armed"),
    "emitting": GuardLook("EMITTING", "✱", "PUMP ON: laser radiation", "guard-emitting"),
    "tripped": GuardLook("TRIPPED", "✖", "pump forced off; acknowledge (k)", "guard-tripped"),
}

_UNKNOWN = GuardLook("UNKNOWN", "?", "no guard state known yet", "guard-unknown")


def guard_look(state: str | None) -> GuardLook:
    """The look of guard ``state`` (``safe``, ``armed``, ``emitting``, ``tripped``)."""
    if state is None:
        return _UNKNOWN
    return GUARD_LOOKS.get(state, GuardLook(state.upper(), "?", "as recorded", "guard-unknown"))


def finite(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def quantity(q: Quantity | None, digits: int = 4, scale: float = 1.0, unit: str = "") -> str:
    """``"0.3005 ± 0.017"``; a dash when there is no finite value."""
    if q is None or not finite(q.value):
        return "—"
    value = q.value * scale
    sigma = q.sigma * scale if finite(q.sigma) else math.nan
    text = f"{value:.{digits}g} ± {sigma:.2g}" if finite(sigma) else f"{value:.{digits}g} ± ?"
    return f"{text} {unit}".rstrip()


def sigma(q: Quantity | None, scale: float = 1.0, unit: str = "") -> str:
    """The standard uncertainty alone: ``"0.017"``; a dash when unknown."""
    if q is None or not finite(q.sigma):
        return "—"
    return f"{q.sigma * scale:.2g} {unit}".rstrip()


def fixed(value: float | None, decimals: int, sign: bool = False) -> str:
    """A number with a fixed number of decimals for large digits (``"+2.507"``), or ``"-.---"``."""
    if value is None or not finite(value):
        return (" -." if sign else "-.") + "-" * decimals
    return f"{value:+.{decimals}f}" if sign else f"{value:.{decimals}f}"


def celsius(kelvin: float | None) -> str:
    if kelvin is None or not finite(kelvin):
        return "— °C"
    return f"{kelvin - ZERO_CELSIUS:.1f} °C"


def amps(current: float | None) -> str:
    return "— A" if current is None or not finite(current) else f"{current:.2f} A"


def watts(power: float | None) -> str:
    if power is None or not finite(power):
        return "— W"
    return f"{power:.2f} W" if power >= 0.1 else f"{power * 1e3:.1f} mW"


def size(n_bytes: int | None) -> str:
    """``"1.2 MB"`` (decimal prefixes)."""
    if n_bytes is None:
        return "—"
    value = float(n_bytes)
    for unit in ("B", "kB", "MB", "GB"):
        if value < 1000 or unit == "GB":
            return f"{value:.0f} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1000
    return f"{value:.1f} GB"  # not reached


def duration(seconds: float | None) -> str:
    """``"0:42"``, ``"12:05"``, ``"1:02:03"`` (h:mm:ss from an hour)."""
    if seconds is None or not finite(seconds) or seconds < 0:
        return "—"
    s = int(seconds)
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m}:{sec:02d}"


def age(seconds: float | None) -> str:
    """``"<1 s"``, ``"3 s"``, ``"2:05"`` (whole seconds: a display that changes less often); ``"never"``."""
    if seconds is None or not finite(seconds):
        return "never"
    if seconds < 1:
        return "<1 s"
    return f"{seconds:.0f} s" if seconds < 100 else duration(seconds)


def flag_words(flags) -> str:
    """Estimator flags as words: ``"low snr, no dark"``; ``"none"`` when there are none."""
    if not flags:
        return "none"
    return ", ".join(f.replace("_", " ") for f in sorted(flags))
