"""The records that flow through gainbench: blocks in, estimates and events out.

These small frozen types are the vocabulary shared by the drivers' readers, the pipeline, the
estimator, the guard, the run store and the dashboard. They carry plain SI floats and numpy
arrays; nothing here does I/O.

Times are seconds on the run clock: a monotonic clock whose zero is the start of the run
(replay uses the stored times, so live and replayed runs see the same numbers).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

#: Channel names used across the tool (a block may carry any subset, plus others).
PROBE = "probe"
REFERENCE = "reference"
PUMP_MONITOR = "pump_monitor"
PUMP_CURRENT = "pump_current"
PUMP_SETPOINT = "pump_setpoint"
PUMP_ON = "pump_on"
MOUNT_TEMP = "mount_temp"
#: The sample (or its mount) temperature, K, where an instrument reads it (the pump driver's
#: optional ``sample_temperature``).
SAMPLE_TEMP = "sample_temp"
INTERLOCK = "interlock"
WAVELENGTH = "probe_wavelength"
#: A lock-in's readings (`bench.run.lockin_reader`): in-phase and quadrature outputs (V rms),
#: the frequency of the reference it is locked to (Hz, 0: none) and its overload state (1/0);
#: its auxiliary inputs give ``probe`` and ``reference`` (the photodiodes' DC levels).
LOCKIN_X = "lockin_x"
LOCKIN_Y = "lockin_y"
REFERENCE_HZ = "reference_hz"
OVERLOAD = "overload"
#: A triggered scope's shots (`bench.run.scope_reader`): each sample's time from the trigger, s.
TRIGGER_TIME = "trigger_time"


@dataclass(frozen=True, eq=False)
class Block:
    """Timestamped samples of one or more channels from one read of one instrument.

    Attributes
    ----------
    source : str
        The role of the instrument that produced it (``"detector"``, ``"pump"``, ...).
    seq : int
        Sequence number of this block from this source, from 0, without gaps unless blocks
        were dropped (a gap is then also logged as an event).
    t0 : float
        Run-clock time (s) of the first sample.
    dt : float
        Sample interval (s); 0 for a single polled reading (``n == 1``).
    first_index : int
        The instrument's own index of the first sample (digitisers count sample sets since
        acquisition started, so lost samples show as a jump); -1 when the instrument has none.
    channels : tuple of str
        Column names of ``data``.
    data : ndarray, shape (n, len(channels)), float64
        The samples, in SI units (volts for detector channels, A, K, 0/1 for states).
    """

    source: str
    seq: int
    t0: float
    dt: float
    first_index: int
    channels: tuple[str, ...]
    data: np.ndarray

    def __post_init__(self) -> None:
        if self.data.ndim != 2 or self.data.shape[1] != len(self.channels):
            raise ValueError(
                f"data: shape {self.data.shape} does not match {len(self.channels)} channels {self.channels}"
            )
        if self.dt < 0:
            raise ValueError(f"dt: {self.dt} is negative")

    @property
    def n(self) -> int:
        return int(self.data.shape[0])

    @property
    def t_end(self) -> float:
        """Run-clock time of the last sample."""
        return self.t0 + self.dt * max(self.n - 1, 0)

    def column(self, name: str) -> np.ndarray:
        try:
            return self.data[:, self.channels.index(name)]
        except ValueError:
            raise KeyError(
                f"block from {self.source} has no channel {name!r} (has {', '.join(self.channels)})"
            ) from None

    def times(self) -> np.ndarray:
        return self.t0 + self.dt * np.arange(self.n)


@dataclass(frozen=True)
class Quantity:
    """A value with its standard uncertainty, split into noise and systematic parts.

    ``sigma`` is the combined standard uncertainty: the two parts added in quadrature.
    """

    value: float
    sigma: float
    sigma_noise: float = 0.0
    sigma_systematic: float = 0.0

    def as_dict(self) -> dict[str, float]:
        return {
            "value": self.value,
            "sigma": self.sigma,
            "sigma_noise": self.sigma_noise,
            "sigma_systematic": self.sigma_systematic,
        }


#: Names of the figures an estimate may carry (the keys of `Estimate.values`).
ESTIMATE_KEYS = (
    "ln_ratio",
    "gain_linear",
    "gain_db",
    "gain_coefficient_per_cm",
    "n2_per_m3",
    "beta",
    "tau_s",
)

#: Flags an estimate may raise.
FLAGS = (
    "probe_not_weak",
    "near_full_scale",
    "baseline_stale",
    "low_snr",
    "not_settled",
    "no_baseline",
    "no_dark",
    "overload",
    "phase_mismatch",
    "thick_sample",
    "background_high",
    "temperature_drift",
    "temperature_unknown",
    "heating_ripple",
)


@dataclass(frozen=True)
class Estimate:
    """One output of the estimator.

    Attributes
    ----------
    t : float
        Run-clock time (s) of the last sample it uses.
    mode : str
        ``watch``, ``chopped``, ``decay`` or ``sweep``.
    scope : str
        ``"window"`` for the latest stretch of data alone, ``"cumulative"`` for everything
        since the mode or setting last changed (the figure to report).
    values : mapping of str to Quantity
        Keys from `ESTIMATE_KEYS` (and mode-specific extras, e.g. sweep fit parameters).
    flags : frozenset of str
        From `FLAGS`.
    n_samples : int
        Samples behind it.
    extra : mapping
        Mode-specific details (sweep points, decay fit curve, ...), JSON-serialisable.
    """

    t: float
    mode: str
    scope: str
    values: Mapping[str, Quantity]
    flags: frozenset[str] = frozenset()
    n_samples: int = 0
    extra: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))


#: Kinds of event.
EVENT_KINDS = (
    "guard",  # a guard transition: data has from/to/reason
    "trip",  # the guard tripped: data has reason, condition, latency_s
    "fault",  # an instrument fault seen (timeout, reconnect, error reply)
    "drop",  # blocks dropped by a full queue, or samples lost by an instrument
    "gap",  # a gap in an instrument's sample index
    "note",  # the operator's note
    "setting",  # a mode or setting change (pump current, mode, chopping period)
    "procedure",  # dark or baseline captured
    "checklist",  # an arming checklist answer
    "run",  # run started / stopped
)


@dataclass(frozen=True)
class Event:
    """A timestamped record: guard transitions, notes, setting changes, faults, drops."""

    t: float
    kind: str
    text: str
    who: str = "gainbench"
    data: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))

    def __post_init__(self) -> None:
        if self.kind not in EVENT_KINDS:
            raise ValueError(f"kind: {self.kind!r} is not one of {', '.join(EVENT_KINDS)}")
