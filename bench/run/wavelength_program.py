"""The probe wavelengths of a spectrum run: ``--wavelengths`` parsed, checked against the tunable
source's range, and the order a run visits them in (the bench wavelength first and last).

``--wavelengths`` is ``START:STOP:STEP`` (``1010nm:1050nm:2nm``, both ends included when the
step divides the span) or a comma list (``1020nm,1030nm,1040nm``). Without it: the bench
wavelength -/+ `DEFAULT_HALF_SPAN` in steps of `DEFAULT_STEP`.
"""

from __future__ import annotations

import math

from bench.errors import ConfigError

DEFAULT_HALF_SPAN = 20e-9  # m
DEFAULT_STEP = 4e-9  # m
MAX_STEPS = 500
EXAMPLE = "expected START:STOP:STEP such as 1010nm:1050nm:2nm, or a list such as 1020nm,1030nm"


def _length(item: str, text: str) -> float:
    from bench.units import parse_quantity

    item = item.strip()
    if not item:
        raise ConfigError(f"--wavelengths: empty item in {text!r}; {EXAMPLE}")
    value = parse_quantity(item, "length", "--wavelengths")
    if not (math.isfinite(value) and value > 0):
        raise ConfigError(f"--wavelengths: {item!r} is not a positive wavelength; {EXAMPLE}")
    return float(value)


def parse_wavelengths(text: str | None, bench_wavelength: float) -> tuple[float, ...]:
    """The wavelengths (m) of ``--wavelengths``, in the order given; ConfigError naming the flag."""
    if text is None:
        n = int(round(2 * DEFAULT_HALF_SPAN / DEFAULT_STEP))
        return tuple(bench_wavelength - DEFAULT_HALF_SPAN + k * DEFAULT_STEP for k in range(n + 1))
    if ":" in text:
        parts = text.split(":")
        if len(parts) != 3 or "," in text:
            raise ConfigError(f"--wavelengths: {text!r} is not START:STOP:STEP; {EXAMPLE}")
        start, stop, step = (_length(p, text) for p in parts)
        if not stop > start:
            raise ConfigError(f"--wavelengths: {text!r}: STOP must be longer than START; {EXAMPLE}")
        n = math.floor((stop - start) / step + 1e-9)
        if n + 1 > MAX_STEPS:
            raise ConfigError(f"--wavelengths: {text!r} gives {n + 1} wavelengths, more than {MAX_STEPS}")
        if n < 1:
            raise ConfigError(f"--wavelengths: {text!r}: STEP is larger than STOP - START; {EXAMPLE}")
        return tuple(start + k * step for k in range(n + 1))
    out = tuple(_length(p, text) for p in text.split(","))
    if len(out) > MAX_STEPS:
        raise ConfigError(f"--wavelengths: {len(out)} wavelengths, more than {MAX_STEPS}")
    if len(set(out)) != len(out):
        raise ConfigError(f"--wavelengths: {text!r} names a wavelength twice")
    return out


def check_in_range(wavelengths: tuple[float, ...], tuning: tuple[float, float], text: str | None) -> None:
    """ConfigError naming the first wavelength outside the source's tuning range."""
    lo, hi = tuning
    for lam in wavelengths:
        if not lo - 1e-15 <= lam <= hi + 1e-15:
            raise ConfigError(
                f"--wavelengths: {lam * 1e9:.6g} nm is outside the tunable source's range "
                f"{lo * 1e9:.6g} ... {hi * 1e9:.6g} nm" + (f" (from {text!r})" if text else "")
            )


def visiting_order(wavelengths: tuple[float, ...], bench_wavelength: float) -> tuple[float, ...]:
    """The bench wavelength (the anchor: its cross-sections are the bench file's), the scan,
    and the bench wavelength again (so a linear drift of the unpumped level can be taken out)."""
    return (bench_wavelength, *wavelengths, bench_wavelength)
