"""Command profiles: the built-in ones load, and every mistake names the file and the key.

Unit conversions are checked against scipy.constants (CODATA; ``zero_Celsius`` = 273.15 K,
``milli``, ``nano``) as the outside reference.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy import constants

from drivers import codec
from drivers.errors import InstrumentReportedError, ProfileError, ReplyError
from drivers.profile import builtin_profiles, load_profile, parse_profile
from drivers.roles import ROLES

MINIMAL_PUMP = """
[profile]
name = "t"
role = "pump"

[errors]
query = "SYST:ERR?"

[commands]
identify = { send = "*IDN?", reply = "idn" }
set_current = { send = "SOUR:CURR {value:.6g}" }
current_setpoint = { send = "SOUR:CURR?", reply = "float" }
measured_current = { send = "MEAS:CURR?", reply = "float" }
output_on = "OUTP ON"
output_off = "OUTP OFF"
output_state = { send = "OUTP?", reply = "bool" }
interlock = { send = "OUTP:INTL?", reply = "bool" }
"""


def write(tmp_path, text: str, name: str = "p.toml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def with_line(extra: str, section: str = "[commands]") -> str:
    return MINIMAL_PUMP.replace(section, section + "\n" + extra, 1)


def test_builtin_profiles_load_and_cover_their_role():
    names = builtin_profiles()
    assert {"generic-digitiser", "generic-pump", "qs2-shutter", "generic-wavelength"} <= set(names)
    for name in names:
        prof = load_profile(name)
        required = {op for op, spec in ROLES[prof.role].items() if spec.required}
        assert required <= set(prof.commands), name


def test_minimal_profile_and_defaults(tmp_path):
    prof = load_profile(write(tmp_path, MINIMAL_PUMP))
    assert prof.role == "pump" and prof.transport.read_termination == b"\n"
    # setting commands drain the error queue by default when there is a query
    assert prof.command("set_current").check_errors
    assert not prof.command("current_setpoint").check_errors
    # setpoints and output on/off may be repeated
    assert prof.command("output_on").idempotent


def test_temperature_unit_converts_to_kelvin(tmp_path):
    prof = load_profile("generic-pump")
    cmd = prof.command("mount_temperature")
    value = codec.decode_line(cmd, b"25.00", prof.errors)
    assert value == pytest.approx(25.0 + constants.zero_Celsius)  # CODATA: 0 degC = 273.15 K
    out = codec.encode(prof.command("set_mount_temperature"), {"value": 300.0}, b"\n")
    assert out == f"SOUR:TEMP {300.0 - constants.zero_Celsius:.4f}\n".encode()


def test_milliamp_and_nanometre_units(tmp_path):
    text = MINIMAL_PUMP.replace(
        'set_current = { send = "SOUR:CURR {value:.6g}" }',
        'set_current = { send = "LAS:LDI {value:.6g}", unit = "mA" }',
    ).replace(
        'measured_current = { send = "MEAS:CURR?", reply = "float" }',
        'measured_current = { send = "LAS:LDI?", reply = "float", unit = "mA" }',
    )
    prof = load_profile(write(tmp_path, text))
    assert codec.encode(prof.command("set_current"), {"value": 1.5}, b"\n") == b"LAS:LDI 1500\n"
    got = codec.decode_line(prof.command("measured_current"), b"250.0", prof.errors)
    assert got == pytest.approx(250.0 * constants.milli)
    wl = load_profile("generic-wavelength")
    with open(wl.path, encoding="utf-8") as f:
        text = f.read().replace('{value:.9g}", unit = "m" }', '{value:.6f}", unit = "nm" }')
    nm = load_profile(write(tmp_path, text, "w.toml")).command("set_wavelength")
    wavelength_m = 1030e-9
    expected = f"SOUR:WAV {wavelength_m / constants.nano:.6f}\n".encode()  # CODATA prefix nano = 1e-9
    assert codec.encode(nm, {"value": wavelength_m}, b"\n") == expected


def test_escapes_in_literal_strings(tmp_path):
    text = MINIMAL_PUMP.replace(
        "[errors]", "[transport]\nread_termination = '\\r\\n'\nwrite_termination = '\\x0d'\n\n[errors]"
    )
    prof = load_profile(write(tmp_path, text))
    assert prof.transport.read_termination == b"\r\n"
    assert prof.transport.write_termination == b"\r"


def test_timeout_with_unit_and_number(tmp_path):
    text = MINIMAL_PUMP.replace("[errors]", '[transport]\ntimeout = "250 ms"\n\n[errors]')
    assert load_profile(write(tmp_path, text)).transport.timeout_s == pytest.approx(0.25)
    text = MINIMAL_PUMP.replace("[errors]", "[transport]\ntimeout = 3\n\n[errors]")
    assert load_profile(write(tmp_path, text)).transport.timeout_s == 3.0


# -- every validation error names file and key --------------------------------------------


@pytest.mark.parametrize(
    "text, key, words",
    [
        (
            with_line('power = { send = "MEAS:POW?", reply = "flaot" }'),
            "commands.power.reply",
            "unknown reply format",
        ),
        (with_line('laser_colour = "COL?"'), "commands.laser_colour", "not an operation of the 'pump' role"),
        (
            MINIMAL_PUMP.replace('interlock = { send = "OUTP:INTL?", reply = "bool" }', ""),
            "commands.interlock",
            "missing",
        ),
        (
            with_line('set_current_limit = { send = "LIM {amps}" }'),
            "commands.set_current_limit.send",
            "unknown placeholder {amps}",
        ),
        (
            with_line('set_current_limit = { send = "LIM 5" }'),
            "commands.set_current_limit.send",
            "lacks the placeholder",
        ),
        (
            with_line('set_current_limit = { send = "LIM {value:.6q}" }'),
            "commands.set_current_limit.send",
            "bad placeholder format",
        ),
        (
            with_line('set_current_limit = { send = "LIM {value" }'),
            "commands.set_current_limit.send",
            "bad placeholder",
        ),
        (
            with_line('power = { send = "MEAS:POW?", reply = "float", unit = "degC" }'),
            "commands.power.unit",
            "not a unit of power",
        ),
        (
            with_line('power = { send = "MEAS:POW?", reply = "float", unit = "blorps" }'),
            "commands.power.unit",
            "not a unit pint knows",
        ),
        (with_line('power = { send = "MEAS:POW?", repy = "float" }'), "commands.power.repy", "unknown key"),
        (with_line('power = { send = "MEAS:POW?", reply = "bool" }'), "commands.power.reply", "does not fit"),
        (
            with_line('modulation_on = { send = "MOD ON", reply = { YES = 1 } }'),
            "commands.modulation_on.reply",
            "does not fit",
        ),
        (MINIMAL_PUMP.replace('role = "pump"', 'role = "laser"'), "profile.role", "unknown role"),
        (MINIMAL_PUMP.replace('name = "t"\n', ""), "profile.name", "missing"),
        (MINIMAL_PUMP + "\n[extras]\nx = 1\n", "extras", "unknown section"),
        (
            MINIMAL_PUMP.replace("[errors]", "[transport]\nread_termination = '\\q'\n\n[errors]"),
            "transport.read_termination",
            "bad escape",
        ),
        # IEEE 488.2 message terminators are ASCII (LF, CR LF): a byte above 0x7f, or none at
        # all, is refused (found by the profile fuzzing in tests/reliability/test_reliability_fuzz.py)
        (
            MINIMAL_PUMP.replace("[errors]", "[transport]\nwrite_termination = '\\x80'\n\n[errors]"),
            "transport.write_termination",
            "ASCII",
        ),
        (
            MINIMAL_PUMP.replace("[errors]", "[transport]\nread_termination = ''\n\n[errors]"),
            "transport.read_termination",
            "ASCII",
        ),
        (
            MINIMAL_PUMP.replace("[errors]", '[transport]\ntimeout = "5 kg"\n\n[errors]'),
            "transport.timeout",
            "expected a time",
        ),
        (
            MINIMAL_PUMP.replace("[errors]", "[transport]\nbaudrate = -1\n\n[errors]"),
            "transport.baudrate",
            "positive integer",
        ),
        (
            MINIMAL_PUMP.replace('query = "SYST:ERR?"', "drain_after_set = true"),
            "errors.drain_after_set",
            "needs errors.query",
        ),
        (
            MINIMAL_PUMP.replace("[commands]", "[commands]\nidentify = 5\n").replace(
                'identify = { send = "*IDN?", reply = "idn" }\n', ""
            ),
            "commands.identify",
            "expected a table",
        ),
    ],
)
def test_validation_errors_name_file_and_key(tmp_path, text, key, words):
    path = write(tmp_path, text)
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    message = str(info.value)
    assert str(path) in message
    assert key in message
    assert words in message


def test_enum_values_must_be_booleans(tmp_path):
    text = MINIMAL_PUMP.replace(
        'interlock = { send = "OUTP:INTL?", reply = "bool" }',
        'interlock = { send = "OUTP:INTL?", reply = { CLOSED = "yes" } }',
    )
    with pytest.raises(ProfileError, match=r"commands\.interlock\.reply\.CLOSED: expected true or false"):
        load_profile(write(tmp_path, text))


def test_invalid_toml_names_the_file_and_line(tmp_path):
    path = write(tmp_path, "[profile]\nname = \n")
    with pytest.raises(ProfileError, match=r"not valid TOML .*line 2"):
        load_profile(path)


def test_wrong_role_for_the_driver(tmp_path):
    with pytest.raises(ProfileError, match="is for the 'pump' role but is used for the 'detector' role"):
        load_profile("generic-pump", role="detector")


def test_unknown_builtin_name_lists_the_builtins():
    with pytest.raises(ProfileError, match="generic-pump") as info:
        load_profile("no-such-profile")
    assert "no built-in profile" in str(info.value)


def test_missing_file(tmp_path):
    with pytest.raises(ProfileError, match="file not found"):
        load_profile(tmp_path / "absent.toml")


def test_undefined_optional_operation_names_the_key(tmp_path):
    prof = load_profile(write(tmp_path, MINIMAL_PUMP))
    with pytest.raises(ProfileError, match=r"commands\.power: operation 'power' is not defined"):
        prof.command("power")


# -- codec: every reply format --------------------------------------------------------------


def test_reply_formats_on_lines(tmp_path):
    prof = load_profile("generic-pump")
    errors = prof.errors
    assert codec.decode_line(prof.command("current_setpoint"), b"2.5", errors) == 2.5
    assert codec.decode_line(prof.command("output_state"), b"1", errors) is True
    assert codec.decode_line(prof.command("output_state"), b"OFF", errors) is False
    ident = codec.decode_line(prof.command("identify"), b"Maker,Model,SN1,1.0", errors)
    assert ident.model == "Model"
    with pytest.raises(ReplyError):
        codec.decode_line(prof.command("current_setpoint"), b"2.5 A", errors)
    with pytest.raises(ReplyError):
        codec.decode_line(prof.command("output_state"), b"maybe", errors)


def test_ok_and_enum_and_inline_errors():
    prof = load_profile("qs2-shutter")
    errors = prof.errors
    assert codec.decode_line(prof.command("open"), b"OK", errors) is None
    with pytest.raises(ReplyError, match="acknowledgement 'OK'"):
        codec.decode_line(prof.command("open"), b"OKAY", errors)
    assert codec.decode_line(prof.command("state"), b"OPEN", errors) is True
    assert codec.decode_line(prof.command("state"), b"shut", errors) is False
    with pytest.raises(ReplyError, match="expected one of"):
        codec.decode_line(prof.command("state"), b"AJAR", errors)
    with pytest.raises(InstrumentReportedError) as info:
        codec.decode_line(prof.command("open"), b"ERR 2 bad shutter", errors)
    assert info.value.code == 2 and info.value.text == "bad shutter"


def test_text_and_int_and_csv(tmp_path):
    prof = load_profile("generic-digitiser")
    errors = prof.errors
    assert codec.decode_line(prof.command("position"), b"123456", errors) == 123456
    truth = codec.decode_line(prof.command("sim_truth"), b"1,2,3,4,5,6,7,8,9,10,11,12,13,14,15,16", errors)
    np.testing.assert_array_equal(truth, np.arange(1, 17))
    with pytest.raises(ReplyError, match="expected 16 numbers"):
        codec.decode_line(prof.command("sim_truth"), b"1,2,3", errors)
    text = MINIMAL_PUMP.replace('reply = "idn"', 'reply = "text"')
    cmd = load_profile(write(tmp_path, text)).command("identify")
    assert codec.decode_line(cmd, b"  some words ", errors) == "some words"
    with pytest.raises(ReplyError, match="not ASCII"):
        codec.decode_line(cmd, b"caf\xe9", errors)


def test_block_formats(tmp_path):
    prof = load_profile("generic-digitiser")
    cmd = prof.command("fetch")
    values = np.array([0.5, -0.25, 1e-3, 2.0], dtype="<f4")
    np.testing.assert_array_equal(codec.decode_block(cmd, values.tobytes()), values.astype(np.float64))
    with pytest.raises(ReplyError, match="whole number of 4-byte values"):
        codec.decode_block(cmd, b"\x00" * 6)
    # int16 counts times the scale: 1 count = 10 V / 32768 (a +-10 V 16-bit range)
    with open(prof.path, encoding="utf-8") as f:
        original = f.read()
    text = original.replace(
        'fetch = { send = "FETC:DATA? {count}", reply = "block_f32le", unit = "V" }',
        'fetch = { send = "FETC:DATA? {count}", reply = "block_i16le", scale = 3.0517578125e-4 }',
    )
    prof16 = load_profile(write(tmp_path, text))
    counts = np.array([0, 1, -32768, 32767], dtype="<i2")
    got = codec.decode_block(prof16.command("fetch"), counts.tobytes())
    np.testing.assert_allclose(got, counts * (10.0 / 32768))


def test_encode_checks_parameters():
    prof = load_profile("generic-pump")
    cmd = prof.command("set_current")
    assert codec.encode(cmd, {"value": 2.5}, b"\n") == b"SOUR:CURR 2.5\n"
    with pytest.raises(ValueError, match="value"):
        codec.encode(cmd, {}, b"\n")
    with pytest.raises(ValueError, match="value"):
        codec.encode(cmd, {"value": float("nan")}, b"\n")
    with pytest.raises(ValueError, match="colour"):
        codec.encode(cmd, {"value": 1.0, "colour": 1}, b"\n")


def test_parse_profile_directly_names_given_path():
    with pytest.raises(ProfileError, match="inline.toml: profile: missing"):
        parse_profile("[commands]\n", "inline.toml")
