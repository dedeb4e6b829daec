"""``[bench] visa_library``: the VISA library every VISA instrument of a bench opens through.

The value is pyvisa's library specification, ``PATH@BACKEND`` with either part optional:

- ``"@py"``: pyvisa-py, the pure-Python library (the default; no vendor installation needed);
- ``""``: pyvisa's own default, the installed vendor VISA library (pyvisa-py if none is found);
- ``"vendor/libvisa.so"`` (or an absolute path): that vendor library file;
- ``"devices.yaml@sim"``: pyvisa-sim, serving the instruments a device file describes.

A relative path resolves against the bench file's folder, as the other relative paths in a
bench file do. Two checks, at two times: the form (`read_visa_library`, whenever bench-file
text is read, replays of stored runs included), and that the library file exists and its
backend is installed (`check_visa_library`, when a bench file is read from disk for use:
`load_bench`, so `check`, `instruments`, `record` and `live` refuse it first).
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

from bench.config.toml_reader import BenchFileReader, line_of
from bench.errors import ConfigError

KEY = "bench.visa_library"
DEFAULT = "@py"

#: The backends pyvisa itself knows, and what each one's path part is.
_BUILTIN_BACKENDS = {"py": "", "ivi": "a VISA library file", "sim": "a pyvisa-sim device file"}
_BACKEND_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")

EXPECTED = (
    'expected "@py" (pyvisa-py, the default), "" (the installed vendor VISA library), the path '
    'of a VISA library file, or "devices.yaml@sim" (pyvisa-sim with a device file)'
)


def split_library(value: str) -> tuple[str, str | None]:
    """``"devices.yaml@sim"`` -> ``("devices.yaml", "sim")``; ``"/lib/visa.so"`` -> (path, None).

    Split at the last ``@``, as pyvisa does (``pyvisa.highlevel.open_visa_library``).
    """
    path, sep, backend = value.rpartition("@")
    if not sep:
        return value, None
    return path, backend


def read_visa_library(r: BenchFileReader, base_dir: Path) -> str:
    """The bench's library specification, its path part made absolute against ``base_dir``.

    Raises
    ------
    ConfigError
        ``FILE: bench.visa_library (line N): what is wrong``, for a value of the wrong form.
    """
    value = r.string(KEY, DEFAULT)
    if value != value.strip():
        raise r.fail(KEY, f"{value!r} has spaces around it; {EXPECTED}")
    path, backend = split_library(value)
    if backend is not None:
        if not _BACKEND_NAME.fullmatch(backend):
            raise r.fail(
                KEY,
                f"{value!r}: the part after the last '@' names a pyvisa backend (py, sim, ivi), "
                f"not {backend!r}; {EXPECTED}",
            )
        if backend == "py" and path:
            raise r.fail(KEY, f'{value!r}: pyvisa-py takes no file; write "@py" alone, or {EXPECTED}')
    if not path:
        return value
    resolved = Path(path).expanduser()
    if not resolved.is_absolute():
        resolved = base_dir / resolved
    return str(resolved.resolve()) + (f"@{backend}" if backend is not None else "")


def check_visa_library(library: str, source: str, text: str, overridden: bool = False) -> None:
    """The library can be found: its file exists, and a backend beyond pyvisa's own is installed.

    ``library`` is `read_visa_library`'s result; ``source`` and ``text`` are the bench file's
    name and text (for the line), ``overridden`` whether ``--set`` gave the value.

    Raises
    ------
    ConfigError
        ``FILE: bench.visa_library (line N): what is wrong``.
    """
    if overridden:
        where = f"--set {KEY} (over {source})"
    else:
        line = line_of(text, KEY)
        where = f"{source}: {KEY}" + (f" (line {line})" if line else "")
    path, backend = split_library(library)
    if backend is not None and backend not in _BUILTIN_BACKENDS:
        if importlib.util.find_spec(f"pyvisa_{backend}") is None:
            raise ConfigError(
                f"{where}: unknown VISA backend '@{backend}' (no package pyvisa_{backend} is "
                f"installed); {EXPECTED}"
            )
        return  # a backend of its own: what its path part means is its business
    if path and not Path(path).is_file():
        what = _BUILTIN_BACKENDS.get(backend or "ivi", "a file")
        raise ConfigError(
            f"{where}: no such file {path} (expected {what}; a relative path is relative to "
            "the bench file's folder)"
        )
