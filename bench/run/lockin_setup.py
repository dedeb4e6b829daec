"""A lock-in run's modulation frequencies and the lock-in's output filter for them.

The default frequency is a tenth of the medium's pump-off corner ``k_off / (2 pi)`` (rounded
down to a sensible value): there the response correction of `bench.estimator.modes.lockin` is
a few parts in a thousand, so a 5 % error in the lifetime moves ln R by a few parts in 1e5.

The output filter: four poles (24 dB/octave) unless the bench file sets ``filter_order``, and
the shortest time constant at which the ripple left at twice the lowest modulation frequency
is below `RIPPLE` of the signal, ``(1 + (4 pi f tc)^2)^(-n/2) <= RIPPLE``, unless the bench
file sets ``time_constant``. What the lock-in then reports is what the run uses (an
instrument rounds a time constant to one it has). A filter that leaves more than
`RIPPLE_REFUSED` is refused before the run, with the figures.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from bench.errors import ConfigError
from bench.estimator.params import EstimatorParams
from bench.estimator.timing import NICE_STEPS

#: Largest ripple (relative) at twice the modulation frequency the chosen filter leaves.
RIPPLE = 1e-5
#: A filter that leaves more ripple than this at the lowest frequency is refused.
RIPPLE_REFUSED = 1e-3
#: Poles of the output filter a run asks for.
ORDER = 4


def default_frequency(params: EstimatorParams) -> float:
    """A tenth of ``(1/tau + W_s) / (2 pi)``, rounded down to ``m 10^n`` (m in NICE_STEPS), Hz."""
    corner = (1.0 / params.tau + params.probe_rate) / (2.0 * math.pi)
    x = corner / 10.0
    e = math.floor(math.log10(x))
    best = 10.0 ** (e - 1)
    for n in (e - 1, e):
        for m in NICE_STEPS:
            v = m * 10.0**n
            if v <= x * (1 + 1e-12):
                best = max(best, v)
    return float(f"{best:.12g}")


def ripple(frequency: float, time_constant: float, order: int) -> float:
    """Ripple left at ``2 frequency`` by ``order`` RC poles of ``time_constant`` (relative)."""
    return (1.0 + (4.0 * math.pi * frequency * time_constant) ** 2) ** (-order / 2.0)


def time_constant_for(frequency: float, order: int) -> float:
    """The shortest time constant (s) leaving at most `RIPPLE` at ``2 frequency``."""
    return math.sqrt(RIPPLE ** (-2.0 / order) - 1.0) / (4.0 * math.pi * frequency)


def bench_default_mode(cfg) -> str:
    """The mode a run starts in when none is named: lockin on a bench whose detector is a
    lock-in amplifier, pulsed on one whose detector is a triggered scope (the only modes their
    readings serve), watch otherwise."""
    inst = cfg.instruments.get("detector")
    driver = inst.driver if inst is not None else ""
    return {"lockin": "lockin", "scope": "pulsed"}.get(driver, "watch")


#: The highest modulation frequency accepted, as a multiple of the medium's corner 1/(2 pi tau).
HIGHEST_OVER_CORNER = 20.0


def parse_frequencies(text: str | None, params: EstimatorParams) -> tuple[float, ...]:
    """``--frequencies`` ("20Hz,50Hz,...", or None for the default) as Hz; ConfigError naming
    the flag and the item otherwise."""
    from bench.units import parse_quantity

    if text is None:
        return (default_frequency(params),)
    out = []
    for item in text.split(","):
        item = item.strip()
        if not item:
            raise ConfigError(f"--frequencies: empty item in {text!r}; expected e.g. 20Hz,50Hz,100Hz")
        f = parse_quantity(item, "frequency", "--frequencies")
        if not (math.isfinite(f) and 0.1 <= f <= 1e5):
            raise ConfigError(f"--frequencies: {item!r} is not a modulation frequency of 0.1 Hz ... 100 kHz")
        out.append(float(f))
    top = HIGHEST_OVER_CORNER / (2.0 * math.pi * params.tau)
    for item, f in zip(text.split(","), out):
        if f > top:
            raise ConfigError(
                f"--frequencies: {item.strip()!r} is above {top:.4g} Hz, {HIGHEST_OVER_CORNER:g} x the "
                f"medium's corner 1/(2 pi tau) at tau = {params.tau * 1e3:.4g} ms: the response there is "
                f"under {100 / HIGHEST_OVER_CORNER:.0f} % of its low-frequency size and carries no lifetime"
            )
    if len(set(out)) != len(out):
        raise ConfigError(f"--frequencies: {text!r} names a frequency twice")
    return tuple(out)


def configure_filter(lockin, frequencies: Sequence[float]) -> dict[str, float]:
    """Set the lock-in's output filter for ``frequencies`` (see the module doc) and return the
    settings the lock-in mode needs: ``lockin_time_constant`` and ``lockin_filter_order`` as the
    instrument reports them. ConfigError when the filter leaves too much ripple."""
    session = lockin.session
    order = lockin.filter_order_n
    if order is None:
        order = ORDER
        if session.has("set_filter_order"):
            lockin.set_filter_order(order)
    if session.has("filter_order"):
        order = lockin.filter_order()
    f_low = min(frequencies)
    tc = lockin.time_constant_s
    if tc is None:
        tc = time_constant_for(f_low, order)
        if session.has("set_time_constant"):
            lockin.set_time_constant(tc)
    if session.has("time_constant"):
        tc = lockin.time_constant()
    left = ripple(f_low, tc, order)
    if left > RIPPLE_REFUSED:
        raise ConfigError(
            f"instruments.detector.options: the lock-in's output filter ({order} poles, time constant "
            f"{tc:g} s) leaves {left:.1e} of the signal as ripple at {2 * f_low:g} Hz (twice the lowest "
            f"modulation frequency); allowed {RIPPLE_REFUSED:g}: set a time constant of at least "
            f"{time_constant_for(f_low, order):.3g} s or more poles"
        )
    return {"lockin_time_constant": float(tc), "lockin_filter_order": int(order)}
