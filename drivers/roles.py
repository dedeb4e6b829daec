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

DETECTOR: dict[str, Operation] = {
    "set_rate": _op(True, ("value",), kind="frequency"),
    "rate": _query(_NUMBER_REPLIES, kind="frequency"),
    "set_channels": _op(True, ("channels",)),
    "set_range": _op(False, ("value",), kind="voltage"),
    "range": _query(_NUMBER_REPLIES, kind="voltage"),
    "format_binary": _op(),
    "format_ascii": _op(),
    "start": _op(True, idempotent=False),
    "stop": _op(True),
    "position": _query(("int",), required=True),
    "fetch": _query(
        ("block_f32le", "block_f32be", "block_f64le", "block_i16le", "block_i16be", "csv_floats"),
        required=True,
        kind="voltage",
        placeholders=("count",),
        idempotent=False,
    ),
    "fetch_ascii": _query(("csv_floats",), kind="voltage", placeholders=("count",), idempotent=False),
    "lost": _query(("int",)),
    "clock": _query(("float",), kind="time"),
    "sim_truth": _query(("csv_floats",)),
    "sim_fault": _op(False, ("spec",), idempotent=False),
}

#: A lock-in amplifier referenced to the pump modulation (driver ``lockin``, role ``detector``):
#: one demodulated reading per exchange, X and Y in V rms. A profile for it says
#: ``driver = "lockin"`` in its ``[profile]`` table (see `DRIVER_OPERATIONS`).
LOCKIN: dict[str, Operation] = {
    "read_xy": _query(("csv_floats",), required=True, kind="voltage", idempotent=True),
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
    "set_modulation_frequency": _op(False, ("value",), kind="frequency"),
    "modulation_frequency": _query(("float",), kind="frequency"),
    "modulation_on": _op(),
    "modulation_off": _op(),
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
        "detector": DETECTOR,
        "pump": PUMP,
        "shutter": SHUTTER,
        "wavelength": WAVELENGTH,
    }.items()
}

#: Driver name -> its own operations, for drivers whose role's table does not fit them (a
#: detector that is not a ring-buffer digitiser). A profile naming ``driver`` in its
#: ``[profile]`` table is checked against this table (common operations included) instead of
#: its role's.
DRIVER_OPERATIONS: dict[str, tuple[str, dict[str, Operation]]] = {
    "lockin": ("detector", {**COMMON, **LOCKIN}),
}


def operations(role: str, driver: str | None = None) -> dict[str, Operation]:
    """The operations a profile for ``role`` (and, if given, ``driver``) may and must define."""
    if driver:
        return DRIVER_OPERATIONS[driver][1]
    return ROLES[role]


#: Placeholder name -> a sample value used to check a command's format specification.
PLACEHOLDER_SAMPLES: dict[str, object] = {
    "value": 1.25,
    "channels": "1,2",
    "count": 1000,
    "n": 1,
    "hz": 10.0,
    "spec": "drop",
}
