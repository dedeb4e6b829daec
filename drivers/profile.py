"""Command profiles: one small TOML file per instrument, mapping a role's operations to commands.

A profile lets a user adapt gainbench to the instrument on their bench without code::

    [profile]
    name = "generic-pump"
    role = "pump"
    description = "SCPI diode driver"

    [transport]
    read_termination = "\\n"
    write_termination = "\\n"
    timeout = "1 s"            # or a number of seconds
    # baudrate = 9600          # serial instruments only

    [errors]
    query = "SYST:ERR?"        # omit if the instrument has no error queue
    drain_after_set = true     # read the queue after every setting command
    # reply_prefix = "ERR"     # replies "ERR <code> <text>" are errors (line protocols)

    [commands]
    set_current = { send = "SOUR:CURR {value:.6g}" }
    measure_current = ...      # every operation of the role: see drivers/roles.py
    mount_temperature = { send = "MEAS:TEMP?", reply = "float", unit = "degC" }

    [options]                  # defaults for the driver's options (the bench file overrides)

Reply formats: ``float``, ``int``, ``bool`` (1/0/ON/OFF), ``text``, ``idn``, ``csv_floats``,
``block_f32le`` (and ``block_f32be``, ``block_f64le``), ``block_i8``, ``block_i16le`` /
``block_i16be`` (with ``scale``, volts per count), ``ok`` (a literal ``token``, default ``"OK"``) and an enum
mapping written as a table (``reply = { OPEN = true, SHUT = false }``). ``unit`` states the
instrument's unit; the driver converts to SI. Every mistake is a `ProfileError` naming the
file, the key and what was expected. Profiles are named (built-in, in ``drivers/profiles/``)
or given as a path.
"""

from __future__ import annotations

import math
import re
import string
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from drivers.errors import DriverConfigError, ProfileError
from drivers.roles import PLACEHOLDER_SAMPLES, ROLES, Operation, missing_operations

#: The folder of built-in profiles.
BUILTIN_DIR = Path(__file__).resolve().parent / "profiles"

#: Reply formats and what each returns.
REPLY_FORMATS: dict[str, str] = {
    "float": "one number",
    "int": "one integer",
    "bool": "1/0/ON/OFF",
    "text": "the reply line as text",
    "idn": "an identity (maker, model, serial, firmware)",
    "csv_floats": "comma-separated numbers",
    "block_f32le": "definite-length block of little-endian float32",
    "block_f32be": "definite-length block of big-endian float32",
    "block_f64le": "definite-length block of little-endian float64",
    "block_i8": "definite-length block of int8 counts (times scale)",
    "block_i16le": "definite-length block of little-endian int16 counts (times scale)",
    "block_i16be": "definite-length block of big-endian int16 counts (times scale)",
    "ok": "a literal acknowledgement token",
    "enum": "one word from a table of words",
}

#: numpy dtype of each block format.
BLOCK_DTYPES: dict[str, str] = {
    "block_f32le": "<f4",
    "block_f32be": ">f4",
    "block_f64le": "<f8",
    "block_i8": "i1",
    "block_i16le": "<i2",
    "block_i16be": ">i2",
}

#: The block formats of integer counts (they take a ``scale``).
INTEGER_BLOCKS = frozenset({"block_i8", "block_i16le", "block_i16be"})

_COMMAND_KEYS = {
    "send",
    "reply",
    "unit",
    "scale",
    "token",
    "count",
    "fields",
    "values",
    "idempotent",
    "check_errors",
}
_SECTIONS = {"profile", "transport", "errors", "commands", "options"}
_PLACEHOLDERS_REQUIRED = {"value", "n", "hz", "channels", "spec"}
_ESCAPES = {"n": "\n", "r": "\r", "t": "\t", "\\": "\\", "0": "\0"}


@dataclass(frozen=True)
class TransportSettings:
    """How bytes are framed and how long to wait, from ``[transport]``."""

    read_termination: bytes = b"\n"
    write_termination: bytes = b"\n"
    timeout_s: float = 2.0
    baudrate: int | None = None
    chunk_size: int = 1 << 16


@dataclass(frozen=True)
class ErrorPolicy:
    """How the instrument reports errors, from ``[errors]``."""

    query: str | None = None
    drain_after_set: bool = False
    max_entries: int = 32
    reply_prefix: str | None = None


@dataclass(frozen=True)
class Command:
    """One operation as this instrument spells it."""

    op: str
    send: str
    reply: str | None
    #: SI value = instrument value * si_factor + si_offset.
    si_factor: float = 1.0
    si_offset: float = 0.0
    unit: str | None = None
    scale: float = 1.0
    token: str = "OK"
    count: int | None = None
    fields: tuple[str, ...] = ("maker", "model", "serial", "firmware")
    values: Mapping[str, bool] = field(default_factory=lambda: MappingProxyType({}))
    idempotent: bool = True
    check_errors: bool = False
    placeholders: frozenset[str] = frozenset()

    @property
    def is_block(self) -> bool:
        return self.reply in BLOCK_DTYPES

    def to_instrument(self, si_value: float) -> float:
        """An SI value in the instrument's unit."""
        return (si_value - self.si_offset) / self.si_factor

    def to_si(self, instrument_value: Any) -> Any:
        """A value (or numpy array) in the instrument's unit, in SI."""
        if self.si_factor == 1.0 and self.si_offset == 0.0:
            return instrument_value
        return instrument_value * self.si_factor + self.si_offset


@dataclass(frozen=True)
class Profile:
    """A validated command profile."""

    name: str
    role: str
    description: str
    path: str
    transport: TransportSettings
    errors: ErrorPolicy
    commands: Mapping[str, Command]
    options: Mapping[str, Any]

    def has(self, op: str) -> bool:
        return op in self.commands

    def command(self, op: str) -> Command:
        """The command for ``op``; a `ProfileError` if this profile does not define it."""
        try:
            return self.commands[op]
        except KeyError:
            raise ProfileError(
                self.path,
                f"commands.{op}",
                f"operation {op!r} is not defined; add it to [commands] to use this function",
            ) from None


# -- loading ---------------------------------------------------------------------------------


def builtin_profiles() -> list[str]:
    """Names of the built-in profiles."""
    return sorted(p.stem for p in BUILTIN_DIR.glob("*.toml"))


def resolve_profile_path(name_or_path: str | Path) -> Path:
    """A built-in profile name or a path -> the profile file's path."""
    text = str(name_or_path)
    if not text.strip():
        raise ProfileError("(none)", "", "no profile given; name a built-in profile or a file")
    candidate = Path(text).expanduser()
    looks_like_path = candidate.suffix.lower() == ".toml" or "/" in text or "\\" in text
    if looks_like_path or candidate.is_file():
        if not candidate.is_file():
            raise ProfileError(text, "", "file not found")
        return candidate
    builtin = BUILTIN_DIR / f"{text}.toml"
    if builtin.is_file():
        return builtin
    raise ProfileError(
        text,
        "",
        f"no built-in profile of that name (built-in: {', '.join(builtin_profiles())}); "
        "or give the path of a .toml file",
    )


def load_profile(name_or_path: str | Path, *, role: str | None = None, driver: str | None = None) -> Profile:
    """Read and validate a profile by built-in name or path.

    Parameters
    ----------
    name_or_path : str or Path
        ``"generic-pump"`` or ``"my_profiles/ld-driver.toml"``.
    role : str, optional
        The role the caller needs; a profile for another role is a `ProfileError`.
    driver : str, optional
        The driver that will use it: the profile must define what that driver needs
        (`drivers.roles.DRIVER_NEEDS`); without one, what some driver of its role needs.
    """
    path = resolve_profile_path(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(str(path), "", f"cannot be read ({exc})") from None
    return parse_profile(text, str(path), role=role, driver=driver)


def parse_profile(text: str, path: str, *, role: str | None = None, driver: str | None = None) -> Profile:
    """Validate profile TOML ``text``; ``path`` names it in errors (``driver`` as in `load_profile`)."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(path, "", f"not valid TOML ({exc})") from None
    return _build(doc, path, role, driver)


def _build(doc: dict[str, Any], path: str, want_role: str | None, driver: str | None = None) -> Profile:
    for key in doc:
        if key not in _SECTIONS:
            raise ProfileError(path, key, f"unknown section; expected one of {sorted(_SECTIONS)}")
    head = _table(doc, "profile", path, required=True)
    _only_keys(head, {"name", "role", "description"}, path, "profile")
    name = _string(head, "name", path, "profile", required=True)
    role = _string(head, "role", path, "profile", required=True)
    if role not in ROLES:
        raise ProfileError(path, "profile.role", f"unknown role {role!r}; expected one of {sorted(ROLES)}")
    if want_role is not None and role != want_role:
        raise ProfileError(
            path,
            "profile.role",
            f"this profile is for the {role!r} role but is used for the {want_role!r} role",
        )
    description = _string(head, "description", path, "profile") or ""
    transport = _transport(_table(doc, "transport", path), path)
    errors = _errors(_table(doc, "errors", path), path)
    operations = ROLES[role]
    raw_commands = _table(doc, "commands", path, required=True)
    commands: dict[str, Command] = {}
    for op, entry in raw_commands.items():
        if op not in operations:
            raise ProfileError(
                path,
                f"commands.{op}",
                f"not an operation of the {role!r} role; expected one of {sorted(operations)}",
            )
        commands[op] = _command(op, entry, operations[op], errors, path)
    needed_by, missing = missing_operations(role, commands, driver)
    if missing:
        whose = f"the {needed_by!r} driver of the {role!r} role" if needed_by else f"the {role!r} role"
        raise ProfileError(
            path,
            f"commands.{missing[0].split(' or ')[0]}",
            f"missing; {whose} needs {', '.join(missing)}",
        )
    options = _table(doc, "options", path)
    return Profile(
        name=name,
        role=role,
        description=description,
        path=path,
        transport=transport,
        errors=errors,
        commands=MappingProxyType(commands),
        options=MappingProxyType(dict(options)),
    )


def _table(doc: dict[str, Any], key: str, path: str, required: bool = False) -> dict[str, Any]:
    if key not in doc:
        if required:
            raise ProfileError(path, key, f"missing [{key}] table")
        return {}
    value = doc[key]
    if not isinstance(value, dict):
        raise ProfileError(path, key, f"expected a table [{key}], got {value!r}")
    return value


def _only_keys(table: dict[str, Any], allowed: set[str], path: str, where: str) -> None:
    for key in table:
        if key not in allowed:
            raise ProfileError(path, f"{where}.{key}", f"unknown key; expected one of {sorted(allowed)}")


def _string(table: dict[str, Any], key: str, path: str, where: str, required: bool = False) -> str | None:
    if key not in table:
        if required:
            raise ProfileError(path, f"{where}.{key}", "missing; expected a string")
        return None
    value = table[key]
    if not isinstance(value, str) or (required and not value.strip()):
        raise ProfileError(path, f"{where}.{key}", f"expected a non-empty string, got {value!r}")
    return value


def _bool(table: dict[str, Any], key: str, path: str, where: str, default: bool) -> bool:
    value = table.get(key, default)
    if not isinstance(value, bool):
        raise ProfileError(path, f"{where}.{key}", f"expected true or false, got {value!r}")
    return value


def decode_escapes(text: str, path: str, key: str) -> bytes:
    """Termination text -> bytes; backslash escapes (``\\n``, ``\\r``, ``\\t``, ``\\xHH``) are decoded.

    A TOML basic string has already turned ``"\\n"`` into a line feed; this also accepts the
    escapes written in a literal string (``'\\r\\n'``).
    """
    out: list[str] = []
    i = 0
    while i < len(text):
        c = text[i]
        if c != "\\":
            out.append(c)
            i += 1
            continue
        nxt = text[i + 1 : i + 2]
        if nxt in _ESCAPES:
            out.append(_ESCAPES[nxt])
            i += 2
        elif nxt == "x" and len(text) >= i + 4:
            try:
                out.append(chr(int(text[i + 2 : i + 4], 16)))
            except ValueError:
                raise ProfileError(path, key, f"bad escape {text[i : i + 4]!r}; expected \\xHH") from None
            i += 4
        else:
            raise ProfileError(path, key, f"bad escape {text[i : i + 2]!r}; expected \\n, \\r, \\t or \\xHH")
    try:
        return "".join(out).encode("latin-1")
    except UnicodeEncodeError:
        raise ProfileError(path, key, f"{text!r} is not a byte sequence") from None


def _seconds(value: Any, path: str, key: str) -> float:
    if isinstance(value, bool):
        raise ProfileError(path, key, f'expected a time such as "2 s", got {value!r}')
    if isinstance(value, (int, float)):
        seconds = float(value)
    elif isinstance(value, str):
        from drivers.units import parse_quantity  # pint is imported only when a unit is read

        try:
            seconds = parse_quantity(value, "time", f"{path}: {key}")
        except DriverConfigError as exc:
            raise ProfileError(path, key, f'expected a time such as "2 s" ({exc})') from None
    else:
        raise ProfileError(path, key, f'expected a time such as "2 s", got {value!r}')
    if not math.isfinite(seconds) or seconds <= 0:
        raise ProfileError(path, key, f"expected a time > 0, got {value!r}")
    return seconds


def _transport(table: dict[str, Any], path: str) -> TransportSettings:
    _only_keys(
        table,
        {"read_termination", "write_termination", "timeout", "baudrate", "chunk_size"},
        path,
        "transport",
    )
    defaults = TransportSettings()
    terms = {}
    for key in ("read_termination", "write_termination"):
        value = table.get(key, None)
        if value is None:
            terms[key] = getattr(defaults, key)
            continue
        if not isinstance(value, str):
            raise ProfileError(path, f"transport.{key}", f'expected a string such as "\\n", got {value!r}')
        term = decode_escapes(value, path, f"transport.{key}")
        if not term or not term.isascii():
            # IEEE 488.2 and line protocols end messages with ASCII (LF, CR LF): a byte above
            # 0x7f would go out with every command and never match a reply
            raise ProfileError(
                path,
                f"transport.{key}",
                f'expected one or more ASCII characters such as "\\n", got {value!r}',
            )
        terms[key] = term
    timeout = (
        _seconds(table["timeout"], path, "transport.timeout") if "timeout" in table else defaults.timeout_s
    )
    baudrate = table.get("baudrate")
    if baudrate is not None and (
        not isinstance(baudrate, int) or isinstance(baudrate, bool) or baudrate <= 0
    ):
        raise ProfileError(
            path, "transport.baudrate", f"expected a positive integer such as 9600, got {baudrate!r}"
        )
    chunk = table.get("chunk_size", defaults.chunk_size)
    if not isinstance(chunk, int) or isinstance(chunk, bool) or chunk < 1:
        raise ProfileError(
            path, "transport.chunk_size", f"expected a positive number of bytes, got {chunk!r}"
        )
    return TransportSettings(terms["read_termination"], terms["write_termination"], timeout, baudrate, chunk)


def _errors(table: dict[str, Any], path: str) -> ErrorPolicy:
    _only_keys(table, {"query", "drain_after_set", "max_entries", "reply_prefix"}, path, "errors")
    query = _string(table, "query", path, "errors")
    if query is not None and not query.isascii():
        raise ProfileError(path, "errors.query", f"{query!r} is not ASCII; commands are sent as ASCII text")
    drain = _bool(table, "drain_after_set", path, "errors", default=query is not None)
    if drain and query is None:
        raise ProfileError(path, "errors.drain_after_set", "needs errors.query (the error-queue query)")
    max_entries = table.get("max_entries", 32)
    if not isinstance(max_entries, int) or isinstance(max_entries, bool) or not 1 <= max_entries <= 1000:
        raise ProfileError(path, "errors.max_entries", f"expected an integer 1..1000, got {max_entries!r}")
    prefix = _string(table, "reply_prefix", path, "errors")
    return ErrorPolicy(query, drain, max_entries, prefix)


def _unit_conversion(unit: Any, kind: str | None, path: str, key: str) -> tuple[float, float]:
    """(factor, offset) taking a value in ``unit`` to SI."""
    if not isinstance(unit, str) or not unit.strip():
        raise ProfileError(path, key, f'expected a unit such as "degC" or "mA", got {unit!r}')
    if kind is None:
        raise ProfileError(path, key, "this operation has no quantity, so it takes no unit")
    import pint

    from drivers.units import SI_UNITS, clean_unit_text, odd_numeral, registry

    ureg = registry()
    target = SI_UNITS[kind]
    odd = odd_numeral(unit)
    if odd:
        raise ProfileError(path, key, f"{unit!r} {odd}")
    cleaned = clean_unit_text(unit)
    if cleaned is None:  # pint evaluates powers exactly: "9**9**9 A" would never return
        raise ProfileError(
            path,
            key,
            f'{unit!r} is not a unit this tool reads (expected a unit such as "degC" '
            'or "mA"; powers may only be small whole numbers)',
        )
    try:
        zero = float(ureg.Quantity(0.0, cleaned).to(target).magnitude)
        one = float(ureg.Quantity(1.0, cleaned).to(target).magnitude)
    except pint.DimensionalityError:
        raise ProfileError(
            path, key, f"{unit!r} is not a unit of {kind} (expected one convertible to {target})"
        ) from None
    except Exception:  # pint raises several unrelated types for unknown unit text
        raise ProfileError(
            path, key, f"{unit!r} is not a unit pint knows (expected one convertible to {target})"
        ) from None
    factor = one - zero
    if not math.isfinite(factor) or factor == 0:
        raise ProfileError(path, key, f"{unit!r} cannot be converted to {target}")
    return factor, zero


def _check_template(send: str, spec: Operation, path: str, key: str) -> frozenset[str]:
    names: set[str] = set()
    try:
        parsed = list(string.Formatter().parse(send))
    except ValueError as exc:
        raise ProfileError(
            path, key, f"bad placeholder in {send!r} ({exc}); write a literal brace as {{{{ or }}}}"
        ) from None
    for _literal, name, format_spec, conversion in parsed:
        if name is None:
            continue
        if format_spec and ("{" in format_spec or re.search(r"\d{4,}", format_spec)):
            # "{value:999999999}" would build a string of a gigabyte at every command
            raise ProfileError(
                path,
                key,
                f"format spec {format_spec!r} in {send!r}: widths and precisions "
                "are at most 999 and cannot be placeholders",
            )
        if name not in spec.placeholders:
            allowed = ", ".join("{" + p + "}" for p in sorted(spec.placeholders)) or "none"
            raise ProfileError(
                path, key, f"unknown placeholder {{{name}}} in {send!r}; allowed here: {allowed}"
            )
        if conversion:
            raise ProfileError(
                path, key, f"placeholder {{{name}!{conversion}}} in {send!r}: conversions are not allowed"
            )
        names.add(name)
    missing = (spec.placeholders & _PLACEHOLDERS_REQUIRED) - names
    if missing:
        raise ProfileError(
            path,
            key,
            f"{send!r} lacks the placeholder(s) {', '.join('{' + m + '}' for m in sorted(missing))}",
        )
    samples = {p: PLACEHOLDER_SAMPLES[p] for p in spec.placeholders}
    try:
        send.format(**samples)
    except (ValueError, TypeError, IndexError, KeyError) as exc:
        raise ProfileError(path, key, f"bad placeholder format in {send!r} ({exc})") from None
    return frozenset(names)


def _command(op: str, entry: Any, spec: Operation, errors: ErrorPolicy, path: str) -> Command:
    key = f"commands.{op}"
    if isinstance(entry, str):
        entry = {"send": entry}
    if not isinstance(entry, dict):
        raise ProfileError(path, key, f'expected a table such as {{ send = "..." }}, got {entry!r}')
    _only_keys(entry, _COMMAND_KEYS, path, key)
    send = _string(entry, "send", path, key, required=True)
    assert send is not None
    if not send.isascii():
        raise ProfileError(path, f"{key}.send", f"{send!r} is not ASCII; commands are sent as ASCII text")
    placeholders = _check_template(send, spec, path, f"{key}.send")

    reply_raw = entry.get("reply")
    values: dict[str, bool] = {}
    if isinstance(reply_raw, dict):  # an enum written as a table
        if "values" in entry:
            raise ProfileError(
                path, f"{key}.values", "give the enum table either as reply = {...} or as values, not both"
            )
        values_raw, reply = reply_raw, "enum"
    else:
        reply = reply_raw
        values_raw = entry.get("values")
    if reply is not None and (not isinstance(reply, str) or reply not in REPLY_FORMATS):
        raise ProfileError(
            path, f"{key}.reply", f"unknown reply format {reply!r}; expected one of {sorted(REPLY_FORMATS)}"
        )
    if reply not in spec.replies:
        allowed = sorted("(no reply)" if r is None else r for r in spec.replies)
        raise ProfileError(
            path,
            f"{key}.reply",
            f"{reply or '(no reply)'!r} does not fit this operation; expected one of {allowed}",
        )
    if reply == "enum":
        if not isinstance(values_raw, dict) or not values_raw:
            raise ProfileError(
                path,
                f"{key}.reply",
                "an enum reply needs a table of words, e.g. { OPEN = true, SHUT = false }",
            )
        for word, value in values_raw.items():
            if not isinstance(value, bool):
                raise ProfileError(path, f"{key}.reply.{word}", f"expected true or false, got {value!r}")
            values[word.strip().upper()] = value
    elif values_raw is not None:
        raise ProfileError(path, f"{key}.values", "only an enum reply takes a table of words")

    factor, offset, unit = 1.0, 0.0, entry.get("unit")
    if unit is not None:
        factor, offset = _unit_conversion(unit, spec.kind, path, f"{key}.unit")
    scale = entry.get("scale", 1.0)
    if "scale" in entry:
        if reply not in INTEGER_BLOCKS:
            raise ProfileError(
                path,
                f"{key}.scale",
                f"only integer block replies ({', '.join(sorted(INTEGER_BLOCKS))}) take a scale "
                "(volts per count)",
            )
        if (
            isinstance(scale, bool)
            or not isinstance(scale, (int, float))
            or not math.isfinite(scale)
            or scale == 0
        ):
            raise ProfileError(
                path, f"{key}.scale", f"expected a non-zero number (volts per count), got {scale!r}"
            )
    token = entry.get("token", "OK")
    if "token" in entry and (reply != "ok" or not isinstance(token, str) or not token.strip()):
        raise ProfileError(
            path, f"{key}.token", "only an 'ok' reply takes a token, a non-empty string such as \"OK\""
        )
    count = entry.get("count")
    if count is not None and (
        reply != "csv_floats" or not isinstance(count, int) or isinstance(count, bool) or count < 1
    ):
        raise ProfileError(path, f"{key}.count", "only a csv_floats reply takes a count, a positive integer")
    fields = entry.get("fields", ["maker", "model", "serial", "firmware"])
    if "fields" in entry:
        from drivers.ieee488 import IDN_FIELDS

        if (
            reply != "idn"
            or not isinstance(fields, list)
            or not fields
            or any(f not in IDN_FIELDS for f in fields)
            or len(set(fields)) != len(fields)
        ):
            raise ProfileError(
                path,
                f"{key}.fields",
                f"only an idn reply takes fields: a list of distinct names from {list(IDN_FIELDS)}",
            )
    idempotent = _bool(entry, "idempotent", path, key, default=spec.idempotent)
    default_check = spec.sets and errors.drain_after_set
    check = _bool(entry, "check_errors", path, key, default=default_check)
    if check and errors.query is None:
        raise ProfileError(path, f"{key}.check_errors", "needs errors.query (the error-queue query)")
    return Command(
        op=op,
        send=send,
        reply=reply,
        si_factor=factor,
        si_offset=offset,
        unit=unit,
        scale=float(scale),
        token=token.strip(),
        count=count,
        fields=tuple(fields),
        values=MappingProxyType(values),
        idempotent=idempotent,
        check_errors=check,
        placeholders=placeholders,
    )
