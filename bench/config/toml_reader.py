"""Walking a bench file's TOML tree: typed access with units, ``--set`` overrides, unknown keys
refused, and every error naming the file, the key and its line."""

from __future__ import annotations

import copy
import math
import re
from collections.abc import Mapping
from typing import Any

from bench.config.limits import WAVELENGTH_RANGE
from bench.errors import ConfigError
from bench.units import parse_quantity, parse_relative


def apply_overrides(raw: dict, overrides: Mapping[str, str], source: str) -> dict:
    raw = copy.deepcopy(raw)
    for key, value in overrides.items():
        parts = key.split(".")
        node = raw
        for k, part in enumerate(parts[:-1]):
            nxt = node.get(part)
            if nxt is None:  # a table the file leaves out (an unknown one is refused when read)
                nxt = node[part] = {}
            if not isinstance(nxt, dict):
                raise ConfigError(
                    f"--set {key}: in {source}, {'.'.join(parts[: k + 1])} is a value, not a table"
                )
            node = nxt
        old = node.get(parts[-1])
        if old is None:  # a key the file leaves at its default: typed as the text reads
            # (an unknown key is still refused, by name, when the tree is read)
            node[parts[-1]] = _typed(value)
            continue
        if isinstance(old, bool):
            if value.lower() not in ("true", "false"):
                raise ConfigError(f"--set {key}={value}: expected true or false")
            node[parts[-1]] = value.lower() == "true"
        elif isinstance(old, int):
            try:
                node[parts[-1]] = int(value)
            except ValueError:
                raise ConfigError(f"--set {key}={value}: expected a whole number") from None
        elif isinstance(old, float):
            try:
                node[parts[-1]] = float(value)
            except ValueError:
                raise ConfigError(f"--set {key}={value}: expected a number") from None
        elif isinstance(old, str):
            node[parts[-1]] = value
        else:
            raise ConfigError(f"--set {key}: only single values can be overridden, not tables or lists")
    return raw


def _typed(value: str) -> Any:
    """``true``/``false``, a whole number, a number, else the text itself (a quantity with a unit)."""
    if value.lower() in ("true", "false"):
        return value.lower() == "true"
    for kind in (int, float):
        try:
            return kind(value)
        except ValueError:
            pass
    return value


class BenchFileReader:
    """Walks the TOML tree, remembers which keys were used, and words every error."""

    def __init__(self, raw: dict, source: str, text: str, overridden: set[str] | None = None):
        self.raw = raw
        self.source = source
        self.text = text
        self.overridden = overridden or set()
        self.used: set[str] = set()
        self.known_tables: set[str] = set()

    # -- locating --------------------------------------------------------------------------
    def where(self, key: str) -> str:
        if key in self.overridden:
            return f"--set {key} (over {self.source})"
        line = _line_of(self.text, key)
        return f"{self.source}: {key}" + (f" (line {line})" if line else "")

    def fail(self, key: str, message: str) -> ConfigError:
        return ConfigError(f"{self.where(key)}: {message}")

    def _lookup(self, key: str) -> tuple[bool, Any]:
        node: Any = self.raw
        for part in key.split("."):
            if not isinstance(node, dict) or part not in node:
                return False, None
            node = node[part]
        return True, node

    # -- typed access ----------------------------------------------------------------------
    def table(self, key: str, required: bool = True) -> dict | None:
        self.known_tables.add(key)
        found, value = self._lookup(key)
        if not found:
            if required:
                raise ConfigError(f"{self.source}: missing table [{key}]")
            return None
        if not isinstance(value, dict):
            raise self.fail(key, "expected a table")
        return value

    def get(
        self,
        key: str,
        default: Any = ...,
    ) -> Any:
        self.used.add(key)
        found, value = self._lookup(key)
        if not found:
            if default is ...:
                raise ConfigError(f"{self.source}: missing key {key}")
            return default
        return value

    def quantity(self, key: str, kind: str, default: Any = ...) -> float:
        value = self.get(key, default)
        if value is None:
            return None  # type: ignore[return-value]
        return parse_quantity(value, kind, self.where(key))

    def positive(self, key: str, kind: str, default: Any = ..., allow_zero: bool = False) -> float:
        value = self.quantity(key, kind, default)
        if value is None:
            return None  # type: ignore[return-value]
        if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
            word = "negative" if value < 0 else ("zero" if value == 0 else "not finite")
            raise self.fail(key, f'"{self.get(key)}" is {word}; expected a positive value')
        return value

    def bounded(self, key: str, kind: str, lo: float, hi: float, unit: str, default: Any = ...) -> float:
        """A positive quantity within [lo, hi] (SI); the error names the key, the value and the bound."""
        value = self.positive(key, kind, default)
        if value is None:
            return None  # type: ignore[return-value]
        if value < lo:
            raise self.fail(key, f'"{self.get(key)}" is below {lo:g} {unit}, the smallest this tool accepts')
        if value > hi:
            raise self.fail(key, f'"{self.get(key)}" is above {hi:g} {unit}, the largest this tool accepts')
        return value

    def wavelength(self, key: str, default: Any = ...) -> float:
        value = self.positive(key, "length", default)
        if value is None:
            return None  # type: ignore[return-value]
        lo, hi = WAVELENGTH_RANGE
        if not lo <= value <= hi:
            raise self.fail(key, f'"{self.get(key)}" is outside 200 nm - 20 um')
        return value

    def string(self, key: str, default: Any = ...) -> str:
        value = self.get(key, default)
        if not isinstance(value, str):
            raise self.fail(key, f"{value!r} is not text; expected a quoted string")
        return value

    def number(self, key: str, default: Any = ..., lo: float | None = None, hi: float | None = None) -> float:
        value = self.get(key, default)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(key, f"{value!r} is not a plain number")
        value = float(value)
        if (lo is not None and value < lo) or (hi is not None and value > hi) or not math.isfinite(value):
            raise self.fail(key, f"{value!r} is outside {lo} ... {hi}")
        return value

    def integer(self, key: str, default: Any = ..., lo: int | None = None, hi: int | None = None) -> int:
        value = self.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"{value!r} is not a whole number")
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self.fail(key, f"{value!r} is outside {lo} ... {hi}")
        return value

    def boolean(self, key: str, default: Any = ...) -> bool:
        value = self.get(key, default)
        if not isinstance(value, bool):
            raise self.fail(key, f"{value!r} is not true or false")
        return value

    def relative(self, key: str, default: Any = ...) -> float:
        return parse_relative(self.get(key, default), self.where(key))

    # -- strictness ------------------------------------------------------------------------
    def reject_unknown(self) -> None:
        """A key nobody read is a typo until proven otherwise."""

        def walk(node: dict, prefix: str) -> None:
            for k, v in node.items():
                dotted = f"{prefix}{k}"
                if dotted in self.used:
                    continue
                if isinstance(v, dict) and (dotted in self.known_tables or _is_free_table(dotted)):
                    if not _is_free_table(dotted):
                        walk(v, dotted + ".")
                    continue
                known = sorted(
                    u[len(prefix) :].split(".")[0]
                    for u in self.used | self.known_tables
                    if u.startswith(prefix)
                )
                hint = f"; expected one of: {', '.join(dict.fromkeys(known))}" if known else ""
                raise ConfigError(f"{self.where(dotted)}: unknown key{hint}")

        walk(self.raw, "")


def _is_free_table(dotted: str) -> bool:
    """Tables whose keys belong to someone else (instrument options go to the driver)."""
    return bool(re.fullmatch(r"instruments\.[^.]+\.options", dotted))


def line_of(text: str, key: str) -> int | None:
    """Line number of a dotted key in bench-file text, or None (for errors found past this module)."""
    return _line_of(text, key)


def _line_of(text: str, key: str) -> int | None:
    """Best-effort line number of a dotted key in TOML text (tomllib gives none)."""
    parts = key.split(".")
    table, leaf = ".".join(parts[:-1]), parts[-1]
    current = ""
    header = re.compile(r"^\s*\[\s*([^\]]+?)\s*\]\s*(#.*)?$")
    for number, line in enumerate(text.splitlines(), start=1):
        m = header.match(line)
        if m:
            current = m.group(1).strip()
            if current == key:
                return number
            continue
        stripped = line.strip()
        if current == table and re.match(rf"^{re.escape(leaf)}\s*=", stripped):
            return number
        if table and current == ".".join(parts[:-2]) and re.match(rf"^{re.escape(parts[-2])}\s*=", stripped):
            return number  # inline table, e.g. options = { ... }
    return None
