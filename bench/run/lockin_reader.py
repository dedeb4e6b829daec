"""The lock-in's reader thread: one polled reading per block, at dithered times.

Each reading is X, Y and the overload state (`drivers.instruments.lockin.LockIn.read`), the
reference frequency the lock-in is locked to, and the DC levels of the probe and reference
photodiodes on its auxiliary inputs (named ``probe`` and ``reference``, or ``probe_dc`` and
``reference_dc`` as the built-in profile has them, in the driver's ``aux_channels`` option). It becomes a one-sample block at the midpoint of the X, Y exchange
(``dt`` 0, ``first_index`` the request number, as the meter's: a missed reply is a gap), with
the channels `CHANNELS` and the request-to-reply spread.

The poll times are dithered: each wait is the mean poll period times a uniform number in
[0.5, 1.5). The output filter leaves a small ripple at the modulation frequency and its
harmonics; readings at a rate commensurate with the modulation would sample that ripple at
one phase and turn it into a constant offset (aliasing), while dithered times average it out
like noise (common practice, no source).
"""

from __future__ import annotations

import logging
import time

import numpy as np

from bench.errors import ConfigError
from bench.records import LOCKIN_X, LOCKIN_Y, OVERLOAD, PROBE, REFERENCE, REFERENCE_HZ, Block
from bench.run.readers import READ_SPREAD, Reader, instrument_clock_zero

log = logging.getLogger(__name__)

#: The channels of a lock-in block, in order.
CHANNELS = (LOCKIN_X, LOCKIN_Y, REFERENCE_HZ, PROBE, REFERENCE, OVERLOAD, READ_SPREAD)
#: The names the auxiliary inputs must have (`aux_channels` of the lock-in driver).
AUX_NAMES = (PROBE, REFERENCE)


def aux_inputs(lockin) -> dict[str, int]:
    """The auxiliary input numbers of the probe and reference levels; ConfigError naming the
    bench-file key when one is not configured."""
    out = {}
    for name in AUX_NAMES:
        number = lockin.aux_number(name)
        if number is None:
            number = lockin.aux_number(f"{name}_dc")
        if number is None:
            raise ConfigError(
                f"instruments.detector.options.aux_channels: a lock-in bench needs an auxiliary input "
                f'named "{name}" (the {name} photodiode\'s DC level), e.g. '
                f'aux_channels = {{ 1 = "probe", 2 = "reference" }}; has {dict(lockin.aux_names)}'
            )
        out[name] = number
    return out


class LockInReader(Reader):
    """Polls a lock-in amplifier (see the module doc)."""

    source = "detector"

    def __init__(self, lockin, out, clock, drops, stop, *, seed: int | None = None):
        super().__init__(out, clock, drops, stop)
        self.lockin = lockin
        self.aux = aux_inputs(lockin)
        #: Mean real s between the starts of two requests (the poll rate is in run-clock time).
        self.period = float(lockin.period_s) / clock.speed
        self.channels = CHANNELS
        self.t_start = 0.0
        self.requests = 0
        self._rng = np.random.default_rng(seed)
        self._next = time.monotonic()

    def start_acquisition(self) -> None:
        """Find where the lock-in's clock's zero lies on the run clock (for the simulator's truth
        rows), as the meter's reader does; without a clock query, the run's start."""
        self.t_start = instrument_clock_zero(
            self.clock, self.lockin, "lock-in", "truth times from the run start"
        )
        self._next = time.monotonic()

    def read_once(self) -> Block | None:
        now = time.monotonic()
        if now < self._next:
            self.stop_flag.wait(self._next - now)
            if self.stop_flag.is_set():
                return None
        wait = self.period * float(self._rng.uniform(0.5, 1.5))
        self._next = max(self._next + wait, time.monotonic())
        index = self.requests
        self.requests += 1  # counted before the exchange: a failed one leaves a gap
        reading = self.lockin.read(self.clock.now)
        freq = self.lockin.reference_frequency()
        probe = self.lockin.read_aux(self.aux[PROBE])
        reference = self.lockin.read_aux(self.aux[REFERENCE])
        over = float("nan") if reading.overload is None else float(reading.overload)
        row = np.array([[reading.x, reading.y, freq, probe, reference, over, reading.spread]])
        block = Block(self.source, self.seq, reading.t, 0.0, index, self.channels, row)
        self.seq += 1
        return block

    def idle_wait(self) -> float:
        return 0.0

    def reconnect(self) -> None:
        try:
            self.lockin.session.reconnect()
        except Exception as exc:
            log.info("lock-in reconnect failed: %s", exc)
