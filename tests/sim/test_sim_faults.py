"""Fault specs of the simulated bench: KIND[:ROLE][@TIME][+DURATION] (the simulator's own
syntax, simulated_instruments/COMMANDS.md); bad specs are SimulatorSetupErrors that name the spec."""

from __future__ import annotations

import pytest

from simulated_instruments.faults import Fault, parse_fault
from simulated_instruments.setup_config import SimulatorSetupError


@pytest.mark.parametrize(
    "spec, fault",
    [
        ("interlock@3s", Fault("interlock", "pump", 3.0, None)),
        ("interlock:pump@3s+2s", Fault("interlock", "pump", 3.0, 2.0)),
        ("overtemp@5", Fault("overtemp", "pump", 5.0, None)),
        ("saturate@2s+500ms", Fault("saturate", "detector", 2.0, 0.5)),
        ("drop:pump@4s", Fault("drop", "pump", 4.0, None)),
        ("garble:detector@2s+0.5s", Fault("garble", "detector", 2.0, 0.5)),
        ("slow:shutter@1.5e0s+1s", Fault("slow", "shutter", 1.5, 1.0)),
        ("error@2s", Fault("error", "pump", 2.0, None)),
        ("error:detector", Fault("error", "detector", None, None)),
        ("  Interlock@250ms ", Fault("interlock", "pump", 0.25, None)),
    ],
)
def test_good_specs(spec, fault):
    assert parse_fault(spec) == fault


@pytest.mark.parametrize(
    "spec, words",
    [
        ("meteor@3s", "unknown kind 'meteor'"),
        ("drop@4s", "needs the instrument's role"),
        ("interlock:detector@1s", "cannot apply to 'detector'"),
        ("error:shutter@1s", "cannot apply to 'shutter'"),
        ("interlock@soon", "time 'soon' is not a time"),
        ("interlock@3h", "is not a time"),
        ("drop:pump@4s+1s", "takes no +DURATION"),
        ("garble:pump@1s+0s", "duration must be positive"),
        ("", "not understood"),
        ("interlock@@3", "not understood"),
    ],
)
def test_bad_specs_name_the_spec(spec, words):
    with pytest.raises(SimulatorSetupError) as err:
        parse_fault(spec)
    message = str(err.value)
    assert f"fault {spec!r}" in message
    assert words in message


def test_round_trip_of_spec_text():
    f = parse_fault("garble:detector@2s+0.5s")
    assert parse_fault(f.spec()) == f
