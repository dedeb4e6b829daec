"""The operations of each instrument role: what a command profile must and may define.

One table per role, keyed by operation name. Each entry says whether the profile must define
the operation, which placeholders its command text may use, which reply formats make sense,
what kind of quantity its value is (so a profile ``unit`` can be checked and converted to SI)
and whether sending it twice does no harm (so the session may resend it after a timeout).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Operation:
    """One operation a role's driver performs through its profile."""

    required: bool
    placeholders: frozenset[str] = frozenset()
    #: Allowed reply formats; ``None`` in the set means "no reply expected" is allowed.
    replies: frozenset[str | None] = frozenset({None, "ok"})
    #: Quantity kind of the ``{value}`` sent or the number read (a key of drivers.units.SI_UNITS).
    kind: str | None = None
    #: Whether sending it again after a lost reply is harmless.
    idempotent: bool = True
    #: Whether it changes the instrument's state (the error queue is drained after it).
    sets: bool = True


def _op(
    required: bool = False,
    placeholders: tuple[str, ...] = (),
    replies: tuple[str | None, ...] = (None, "ok"),
    kind: str | None = None,
    idempotent: bool = True,
    sets: bool = True,
) -> Operation:
    return Operation(required, frozenset(placeholders), frozenset(replies), kind, idempotent, sets)


def _query(
    replies: tuple[str, ...],
    required: bool = False,
    kind: str | None = None,
    placeholders: tuple[str, ...] = (),
    idempotent: bool = True,
) -> Operation:
    return _op(required, placeholders, replies, kind, idempotent, sets=False)


_NUMBER_REPLIES = ("float", "int")
_BOOL_REPLIES = ("bool", "enum")
_IDENTITY = _query(("idn", "text"), required=True)

#: Operations every role may define.
COMMON: dict[str, Operation] = {
    "identify": _IDENTITY,
    "reset": _op(idempotent=False),
    "clear_errors": _op(),
}

#: The detector role's operations: those of every detector driver (a digitiser read from its
#: ring buffer, a polled meter here; a lock-in's in `LOCKIN`, a scope's in `SCOPE`). Which of
#: them a profile must define depends on the driver that uses it: see `DRIVER_NEEDS`.
DETECTOR: dict[str, Operation] = {
    # digitiser (ring buffer of sample sets)
    "set_rate": _op(False, ("value",), kind="frequency"),
    "rate": _query(_NUMBER_REPLIES, kind="frequency"),
    "set_channels": _op(False, ("channels",)),
    "set_range": _op(False, ("value",), kind="voltage"),
    "range": _query(_NUMBER_REPLIES, kind="voltage"),
    "format_binary": _op(),
    "format_ascii": _op(),
    "start": _op(False, idempotent=False),
    "stop": _op(False),
    "position": _query(("int",)),
    "fetch": _query(
        ("block_f32le", "block_f32be", "block_f64le", "block_i16le", "block_i16be", "csv_floats"),
        kind="voltage",
        placeholders=("count",),
        idempotent=False,
    ),
    "fetch_ascii": _query(("csv_floats",), kind="voltage", placeholders=("count",), idempotent=False),
    "lost": _query(("int",)),
    "clock": _query(("float",), kind="time"),
    # polled meter (one reading of every channel per exchange)
    "read_all": _query(("csv_floats",), kind="voltage"),
    "read_channel": _query(("float",), kind="voltage", placeholders=("n",)),
    "set_averages": _op(False, ("value",)),
    "averages": _query(_NUMBER_REPLIES),
    # simulated bench only
    "sim_truth": _query(("csv_floats",)),
    "sim_fault": _op(False, ("spec",), idempotent=False),
}

#: A lock-in amplifier referenced to the pump modulation (driver ``lockin``, role ``detector``):
#: one demodulated reading per exchange, X and Y in V rms (``read_xy`` is what `DRIVER_NEEDS`
#: asks of a lock-in profile). Part of the detector role's operations.
LOCKIN: dict[str, Operation] = {
    "read_xy": _query(("csv_floats",), kind="voltage", idempotent=True),
    # R in V rms and theta in the unit of the driver's option phase_unit (degrees by default):
    # one reply holds two kinds of quantity, so it takes no profile unit
    "read_r_theta": _query(("csv_floats",)),
    "set_time_constant": _op(False, ("value",), kind="time"),
    "time_constant": _query(_NUMBER_REPLIES, kind="time"),
    "set_filter_order": _op(False, ("value",)),
    "filter_order": _query(("int",)),
    "set_sensitivity": _op(False, ("value",), kind="voltage"),
    "sensitivity": _query(_NUMBER_REPLIES, kind="voltage"),
    "reference_frequency": _query(("float",), kind="frequency"),
    "read_aux": _query(("float",), kind="voltage", placeholders=("n",)),
    "overload": _query(_BOOL_REPLIES),
    "clock": _query(("float",), kind="time"),
    "sim_truth": _query(("csv_floats",)),
    "sim_fault": _op(False, ("spec",), idempotent=False),
}

#: A triggered oscilloscope (driver ``scope``, role ``detector``): an acquisition armed on the
#: pump's trigger, one trigger (``single``) or the mean of several (``set_averages``), waited
#: for (``complete``: a status query, or ``*OPC?`` on an instrument that answers it once the
#: acquisition is done), then read channel by channel as integer codes with their scaling.
#: Part of the detector role's operations (``set_averages`` and ``averages`` are the meter's).
SCOPE: dict[str, Operation] = {
    # arming again would throw away a capture that may already have triggered
    "arm": _op(False, idempotent=False),
    "single": _op(False),
    "complete": _query(_BOOL_REPLIES),
    # codes of channel {n}; reading the record again gives the same codes
    "fetch_waveform": _query(("block_i8", "block_i16le", "block_i16be"), placeholders=("n",)),
    # x_increment (s), x_origin (s), y_scale (V per code), y_offset (V) of channel {n}: one
    # reply holds two kinds of quantity, so it takes no profile unit (SI values)
    "waveform_scaling": _query(("csv_floats",), placeholders=("n",)),
    "record_length": _query(("int",), placeholders=("n",)),
    # simulated bench only: the latest pump pulse as the simulated medium knows it
    "sim_pulse_truth": _query(("csv_floats",)),
}

PUMP: dict[str, Operation] = {
    "set_current": _op(True, ("value",), kind="current"),
    "current_setpoint": _query(("float",), required=True, kind="current"),
    "measured_current": _query(("float",), required=True, kind="current"),
    "set_current_limit": _op(False, ("value",), kind="current"),
    "current_limit": _query(("float",), kind="current"),
    "output_on": _op(True),
    "output_off": _op(True),
    "output_state": _query(_BOOL_REPLIES, required=True),
    "interlock": _query(_BOOL_REPLIES, required=True),
    "mount_temperature": _query(("float",), kind="temperature"),
    "set_mount_temperature": _op(False, ("value",), kind="temperature"),
    "mount_temperature_setpoint": _query(("float",), kind="temperature"),
    # a second temperature input: the sample or its mount (gainbench corrects for its heating)
    "sample_temperature": _query(("float",), kind="temperature"),
    "set_modulation_frequency": _op(False, ("value",), kind="frequency"),
    "modulation_frequency": _query(("float",), kind="frequency"),
    "modulation_on": _op(),
    "modulation_off": _op(),
    # pulsed output: width and period of the pulses, pulsing on and off (with the output on)
    "set_pulse_width": _op(False, ("value",), kind="time"),
    "pulse_width": _query(("float",), kind="time"),
    "set_pulse_period": _op(False, ("value",), kind="time"),
    "pulse_period": _query(("float",), kind="time"),
    "pulse_on": _op(),
    "pulse_off": _op(),
    "pulse_state": _query(_BOOL_REPLIES),
    "power": _query(("float",), kind="power"),
}

SHUTTER: dict[str, Operation] = {
    "open": _op(True, ("n",)),
    "close": _op(True, ("n",)),
    "state": _query(_BOOL_REPLIES, required=True, placeholders=("n",)),
    "chop": _op(False, ("n", "hz")),
}

WAVELENGTH: dict[str, Operation] = {
    "set_wavelength": _op(True, ("value",), kind="length"),
    "wavelength": _query(("float",), required=True, kind="length"),
    "settled": _query(_BOOL_REPLIES, required=True),
    "range": _query(("csv_floats",), kind="length"),
}

#: Role name -> its operations (common ones included).
ROLES: dict[str, dict[str, Operation]] = {
    role: {**COMMON, **ops}
    for role, ops in {
        "detector": {**DETECTOR, **LOCKIN, **SCOPE},
        "pump": PUMP,
        "shutter": SHUTTER,
        "wavelength": WAVELENGTH,
    }.items()
}


@dataclass(frozen=True)
class DriverNeeds:
    """What a profile must define for one driver, beyond its role's required operations."""

    #: Operations it must define, every one.
    all_of: tuple[str, ...] = ()
    #: Groups of operations of which it must define at least one each (alternatives).
    one_of: tuple[tuple[str, ...], ...] = ()

    def missing(self, defined) -> list[str]:
        """What is missing from the operations ``defined``: names, and ``"a or b"`` for a group."""
        out = [op for op in self.all_of if op not in defined]
        for group in self.one_of:
            if not any(op in defined for op in group):
                out.append(" or ".join(group))
        return out


#: Driver name -> the operations a profile used with it must define (beyond the role's
#: required ones). A role with one driver needs nothing here: its required operations are in
#: its table. A detector profile is checked against the driver named with it (the bench
#: file's ``driver``); loaded without one, it must serve at least one detector driver.
DRIVER_NEEDS: dict[str, DriverNeeds] = {
    "digitiser": DriverNeeds(all_of=("set_rate", "set_channels", "start", "stop", "position", "fetch")),
    "meter": DriverNeeds(one_of=(("read_all", "read_channel"),)),
    "lockin": DriverNeeds(all_of=("read_xy",)),
    "scope": DriverNeeds(all_of=("arm", "complete", "fetch_waveform", "waveform_scaling")),
}

#: Role -> the drivers of ``DRIVER_NEEDS`` that serve it.
ROLE_DRIVERS: dict[str, tuple[str, ...]] = {"detector": ("digitiser", "meter", "lockin", "scope")}


def missing_operations(role: str, defined, driver: str | None = None) -> tuple[str, list[str]]:
    """What a profile for ``role`` lacks: ``(driver it was checked for, missing operations)``.

    The role's required operations first, then what ``driver`` needs (`DRIVER_NEEDS`). With
    no driver (or one not in the table), a role with several drivers (`ROLE_DRIVERS`) is
    checked against the driver it fits best: nothing is missing when it serves any of them.
    """
    base = [op for op, spec in ROLES[role].items() if spec.required and op not in defined]
    if driver in DRIVER_NEEDS:
        return driver, base + DRIVER_NEEDS[driver].missing(defined)
    best: tuple[str, list[str]] = ("", base)
    for name in ROLE_DRIVERS.get(role, ()):
        lack = base + DRIVER_NEEDS[name].missing(defined)
        if not best[0] or len(lack) < len(best[1]):
            best = (name, lack)
        if not lack:
            return name, lack
    return best


#: Placeholder name -> a sample value used to check a command's format specification.
PLACEHOLDER_SAMPLES: dict[str, object] = {
    "value": 1.25,
    "channels": "1,2",
    "count": 1000,
    "n": 1,
    "hz": 10.0,
    "spec": "drop",
}
