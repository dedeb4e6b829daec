"""Faults the simulated bench can be told to suffer, and their spec syntax.

A fault spec reads ``KIND[:ROLE][@TIME][+DURATION]``, e.g. ``interlock@3s`` (the hardware
interlock opens 3 s after the bench starts), ``interlock@3s+2s`` (and closes again 2 s later),
``garble:detector@2s+500ms``. TIME is simulated seconds since the bench started (default 0, at
once); TIME and DURATION are numbers with an optional unit ``s`` or ``ms``.

=========  ===============  ==========================================================
kind       roles (default)  what happens
=========  ===============  ==========================================================
interlock  pump             the interlock input opens (+DURATION: closes again after)
overtemp   pump             the mount's TEC fails: the mount sits at 46 °C, above the
                            driver's 45 °C trip (+DURATION: the TEC recovers after)
saturate   detector         stray light drives the probe input past full scale
                            (+DURATION: only for that long)
drop       any (required)   the instrument's server closes its client connections once
garble     any (required)   replies are corrupted (+DURATION: for that long; else one)
slow       any (required)   replies are held back `SLOW_REPLY_DELAY` s of real time
                            (+DURATION: for that long; else one reply)
error      SCPI (pump)      the instrument pushes error 300,"Device fault"
=========  ===============  ==========================================================
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from simulated_instruments.setup_config import SimulatorSetupError

ROLES = ("detector", "pump", "shutter", "wavelength")
SCPI_ROLES = ("detector", "pump", "wavelength")

#: Real seconds a "slow" reply is held back: well past a 1 s client timeout.
SLOW_REPLY_DELAY = 3.0

#: kind -> (roles allowed, default role or None if the role must be named, takes a duration)
KINDS: dict[str, tuple[tuple[str, ...], str | None, bool]] = {
    "interlock": (("pump",), "pump", True),
    "overtemp": (("pump",), "pump", True),
    "saturate": (("detector",), "detector", True),
    "drop": (ROLES, None, False),
    "garble": (ROLES, None, True),
    "slow": (ROLES, None, True),
    "error": (SCPI_ROLES, "pump", False),
}

#: Kinds the physics model handles (the others belong to the servers and error queues).
MODEL_KINDS = ("interlock", "overtemp", "saturate")

SYNTAX = "KIND[:ROLE][@TIME][+DURATION], e.g. interlock@3s or garble:detector@2s+0.5s"

_SPEC = re.compile(r"^(?P<kind>[a-z]+)(?::(?P<role>[a-z]+))?(?:@(?P<time>[^+@]+))?(?:\+(?P<duration>.+))?$")
_TIME = re.compile(r"^(?P<value>[0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*(?P<unit>s|ms)?$")


@dataclass(frozen=True)
class Fault:
    """One fault: what, on which instrument, when (simulated s since start), for how long."""

    kind: str
    role: str
    time: float | None = None  # None: now
    duration: float | None = None  # None: see the table in the module docstring

    @property
    def end(self) -> float:
        if self.duration is None:
            return math.inf
        return (self.time or 0.0) + self.duration

    def spec(self) -> str:
        text = f"{self.kind}:{self.role}"
        if self.time is not None:
            text += f"@{self.time:g}s"
        if self.duration is not None:
            text += f"+{self.duration:g}s"
        return text


def _seconds(text: str, spec: str, what: str) -> float:
    m = _TIME.match(text.strip())
    if not m:
        raise SimulatorSetupError(
            f"fault {spec!r}: {what} {text!r} is not a time; expected a number with an optional unit "
            f"s or ms (3s, 500ms); syntax {SYNTAX}"
        )
    value = float(m.group("value"))
    if m.group("unit") == "ms":
        value /= 1000.0
    if not math.isfinite(value):
        raise SimulatorSetupError(f"fault {spec!r}: {what} {text!r} is not finite")
    return value


def parse_fault(spec: str) -> Fault:
    """Read a fault spec (see the module docstring); a bad one raises SimulatorSetupError naming it."""
    if not isinstance(spec, str):
        raise SimulatorSetupError(f"fault {spec!r}: expected text of the form {SYNTAX}")
    text = spec.strip().lower()
    m = _SPEC.match(text)
    if not m:
        raise SimulatorSetupError(f"fault {spec!r}: not understood; expected {SYNTAX}")
    kind = m.group("kind")
    if kind not in KINDS:
        raise SimulatorSetupError(
            f"fault {spec!r}: unknown kind {kind!r}; expected one of: {', '.join(KINDS)}"
        )
    allowed, default, takes_duration = KINDS[kind]
    role = m.group("role") or default
    if role is None:
        raise SimulatorSetupError(
            f"fault {spec!r}: {kind} needs the instrument's role, e.g. {kind}:pump@3s "
            f"(one of: {', '.join(allowed)})"
        )
    if role not in allowed:
        raise SimulatorSetupError(
            f"fault {spec!r}: {kind} cannot apply to {role!r}; expected one of: {', '.join(allowed)}"
        )
    time = _seconds(m.group("time"), spec, "time") if m.group("time") is not None else None
    duration = None
    if m.group("duration") is not None:
        if not takes_duration:
            raise SimulatorSetupError(
                f"fault {spec!r}: {kind} takes no +DURATION; expected {kind}:{role}@TIME"
            )
        duration = _seconds(m.group("duration"), spec, "duration")
        if duration <= 0:
            raise SimulatorSetupError(f"fault {spec!r}: the duration must be positive")
    return Fault(kind=kind, role=role, time=time, duration=duration)


def as_fault(fault: Fault | str) -> Fault:
    """A `Fault` as given, or parsed from its spec."""
    return fault if isinstance(fault, Fault) else parse_fault(fault)
