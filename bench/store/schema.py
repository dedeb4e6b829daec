"""The layout of a run file, and how records are turned into rows and back.

A run file is one SQLite database. Everything that decides its layout lives here: the schema
(tables, indexes, the triggers that keep recorded rows from being changed), its version, the
application id in the SQLite header, the check of a file's first bytes, and the encoding of
samples, estimates and events. `bench.store` does the reading and writing.

Layout, schema version 1
------------------------
``meta``       key/value rows, values JSON: ``application`` ("gainbench"), ``schema_version``,
               ``run_id``, ``start_time`` / ``stop_time`` (ISO 8601 with UTC offset; stop_time
               null while recording or when cut off), ``stop_reason``, ``bench_text`` (the bench
               file as read), ``bench_source``, ``software_version``, ``instruments`` (role ->
               identity, e.g. the ``*IDN?`` reply), ``operator``, ``sample_id``, ``mode`` (at the
               start), ``simulated``, ``platform``, plus anything a caller adds.
               The writer also keeps ``block_layouts`` and ``max_block_span_s`` (below).
               A run whose bench file names a cross-section spectrum keeps it in ``spectrum``
               (`bench.physics.spectra.stored_form`: the file's text, name and SHA-256, the SI
               table); runs written before that have none and read the file. An imported run
               has ``imported_from``, ``import`` and ``final_report``
               (`bench.run.import_analysis`).
``analyses``   one row per analysis: ``live`` (made while recording), ``replay`` or
               ``reanalysis``, with the overrides it used, the software version, a note, its
               creation and finishing times.
``blocks``     one row per `Block`; ``data`` holds the samples as little-endian float32 when
               every value survives float32 exactly, else float64, row-major
               ``n x len(channels)``.
``estimates``  one row per `Estimate`, under an analysis id; ``quantities`` (not "values", an
               SQL keyword) is JSON ``{key: {value, sigma, sigma_noise, sigma_systematic}}``.
``events``     one row per `Event`; ``truth`` the simulator's ground truth, JSON per row.

Rows of blocks, events, truth and estimates are never updated or deleted (triggers refuse);
a re-analysis adds rows under a new analysis id.
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
import struct
from collections.abc import Mapping
from datetime import datetime
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np

from bench.errors import RunStoreError
from bench.records import Estimate, Event, Quantity

#: The schema this code writes; it reads this one and older ones.
SCHEMA_VERSION = 1

#: SQLite header "application id" of a run file: the bytes ``gbrn``.
APPLICATION_ID = 0x6762726E

#: The ``application`` row of ``meta``.
APPLICATION = "gainbench"

#: File name extension of a run file.
SUFFIX = ".gbrun"

#: Page size: large pages suit tables of large BLOBs (fewer overflow pages).
PAGE_SIZE = 32768

ANALYSIS_KINDS = ("live", "replay", "reanalysis")

SAMPLE_DTYPES = ("<f4", "<f8")

TABLES = ("meta", "analyses", "blocks", "estimates", "events", "truth")

#: Meta rows the writer keeps up to date with the blocks: ``[[source, [channel, ...]], ...]``
#: in order of first appearance, and the longest block's span ``dt * (n - 1)`` in s (a reader
#: bounds a time-window query with it, so it needs the time index only).
BLOCK_LAYOUTS = "block_layouts"
MAX_BLOCK_SPAN = "max_block_span_s"

#: Files SQLite may keep beside a run file (the WAL, its index, a rollback journal).
SIDE_FILES = ("-wal", "-shm", "-journal")

SCHEMA_SQL = """
CREATE TABLE meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
) WITHOUT ROWID;

CREATE TABLE analyses (
    id               INTEGER PRIMARY KEY,
    created          TEXT NOT NULL,
    finished         TEXT,
    kind             TEXT NOT NULL CHECK (kind IN ('live', 'replay', 'reanalysis')),
    overrides        TEXT NOT NULL,
    software_version TEXT NOT NULL,
    note             TEXT NOT NULL
);

CREATE TABLE blocks (
    id          INTEGER PRIMARY KEY,
    source      TEXT NOT NULL,
    seq         INTEGER NOT NULL,
    t0          REAL NOT NULL,
    dt          REAL NOT NULL,
    first_index INTEGER NOT NULL,
    n           INTEGER NOT NULL,
    channels    TEXT NOT NULL,
    dtype       TEXT NOT NULL CHECK (dtype IN ('<f4', '<f8')),
    data        BLOB NOT NULL,
    UNIQUE (source, seq)
);
CREATE INDEX blocks_by_time ON blocks (t0, source, seq);

CREATE TABLE estimates (
    id          INTEGER PRIMARY KEY,
    analysis_id INTEGER NOT NULL REFERENCES analyses (id),
    t           REAL NOT NULL,
    mode        TEXT NOT NULL,
    scope       TEXT NOT NULL,
    n_samples   INTEGER NOT NULL,
    flags       TEXT NOT NULL,
    quantities  TEXT NOT NULL,
    extra       TEXT NOT NULL
);
CREATE INDEX estimates_by_analysis ON estimates (analysis_id, scope);

CREATE TABLE events (
    id   INTEGER PRIMARY KEY,
    t    REAL NOT NULL,
    kind TEXT NOT NULL,
    who  TEXT NOT NULL,
    text TEXT NOT NULL,
    data TEXT NOT NULL
);

CREATE TABLE truth (
    id   INTEGER PRIMARY KEY,
    t    REAL NOT NULL,
    data TEXT NOT NULL
);

CREATE TRIGGER blocks_kept_update BEFORE UPDATE ON blocks
BEGIN SELECT RAISE(ABORT, 'recorded blocks are never changed'); END;
CREATE TRIGGER blocks_kept_delete BEFORE DELETE ON blocks
BEGIN SELECT RAISE(ABORT, 'recorded blocks are never deleted'); END;
CREATE TRIGGER events_kept_update BEFORE UPDATE ON events
BEGIN SELECT RAISE(ABORT, 'recorded events are never changed'); END;
CREATE TRIGGER events_kept_delete BEFORE DELETE ON events
BEGIN SELECT RAISE(ABORT, 'recorded events are never deleted'); END;
CREATE TRIGGER truth_kept_update BEFORE UPDATE ON truth
BEGIN SELECT RAISE(ABORT, 'recorded truth is never changed'); END;
CREATE TRIGGER truth_kept_delete BEFORE DELETE ON truth
BEGIN SELECT RAISE(ABORT, 'recorded truth is never deleted'); END;
CREATE TRIGGER estimates_kept_update BEFORE UPDATE ON estimates
BEGIN SELECT RAISE(ABORT, 'estimates are never changed: a re-analysis adds its own'); END;
CREATE TRIGGER estimates_kept_delete BEFORE DELETE ON estimates
BEGIN SELECT RAISE(ABORT, 'estimates are never deleted: a re-analysis adds its own'); END;
CREATE TRIGGER analyses_kept_update BEFORE UPDATE OF id, created, kind, overrides, software_version, note
ON analyses BEGIN SELECT RAISE(ABORT, 'an analysis record is never changed'); END;
CREATE TRIGGER analyses_kept_delete BEFORE DELETE ON analyses
BEGIN SELECT RAISE(ABORT, 'an analysis record is never deleted'); END;
"""


class Damaged(Exception):
    """A row that cannot be decoded; the reader turns it into a `RunStoreError`."""


def run_file_error(path: Path | str, reason: str) -> RunStoreError:
    """A `RunStoreError` naming the file; ``.reason`` keeps the reason alone (for listings)."""
    err = RunStoreError(f"{path}: {reason}")
    err.reason = reason  # type: ignore[attr-defined]
    return err


#: What reading a damaged file may raise from the sqlite3 module (text that is not UTF-8
#: comes out of it as a UnicodeDecodeError).
READ_ERRORS = (sqlite3.Error, UnicodeDecodeError)


def sqlite_reason(exc: Exception) -> str:
    """The reason to show for an error from SQLite (or from decoding its text)."""
    text = str(exc)
    if isinstance(exc, UnicodeDecodeError) or "decode to UTF-8" in text:
        return "is damaged: it holds text that is not UTF-8"
    if "not a database" in text:
        return f"is not a gainbench run file (SQLite: {text})"
    if "malformed" in text or "corrupt" in text:
        return f"is damaged (SQLite: {text})"
    if "locked" in text or "busy" in text:
        return f"is busy in another program; try again (SQLite: {text})"
    return f"cannot be read (SQLite: {text})"


def now() -> datetime:
    return datetime.now().astimezone()


def iso(moment: datetime) -> str:
    if moment.tzinfo is None:
        moment = moment.astimezone()
    return moment.isoformat(timespec="milliseconds")


# --------------------------------------------------------------------------------------------
# The file's first bytes

_MAGIC = b"SQLite format 3\x00"
_HEADER_SIZE = 100


def check_header(path: Path) -> str | None:
    """What is wrong with the first bytes of ``path`` as a SQLite file, or None.

    Checks only what SQLite's own header says about the main file: the magic string, the page
    size and (when the header's page count is valid) that the file is as long as the header
    says. The application id is checked through SQLite, since a file being recorded in WAL
    mode may hold a newer first page in its ``-wal`` file.
    """
    size = path.stat().st_size
    if size == 0:
        return "is empty (0 bytes), not a run file"
    with open(path, "rb") as f:
        head = f.read(_HEADER_SIZE)
    if not (head.startswith(_MAGIC) or _MAGIC.startswith(head)):
        return "is not a gainbench run file (not a SQLite database)"
    if len(head) < _HEADER_SIZE:
        return f"is truncated: {size} bytes, shorter than a SQLite header ({_HEADER_SIZE} bytes)"
    (raw_page,) = struct.unpack(">H", head[16:18])
    page_size = 65536 if raw_page == 1 else raw_page
    if page_size < 512 or page_size & (page_size - 1):
        return f"is damaged: its header gives an impossible page size ({raw_page})"
    if size % page_size:
        return f"is truncated: {size} bytes is not a whole number of {page_size}-byte pages"
    (change_counter,) = struct.unpack(">I", head[24:28])
    (pages,) = struct.unpack(">I", head[28:32])
    (valid_for,) = struct.unpack(">I", head[92:96])
    if pages and change_counter == valid_for and size < pages * page_size:
        return f"is truncated: {size} bytes, but its header counts {pages} pages of {page_size} bytes"
    return None


#: First four bytes of a WAL file (big-endian checksums or little-endian ones).
_WAL_MAGIC = (0x377F0682, 0x377F0683)
_WAL_HEADER_SIZE = 32
_WAL_FRAME_HEADER_SIZE = 24


def wal_frames(path: Path) -> int:
    """Whole frames in the ``-wal`` file beside ``path`` (0 if there is none or it is not a WAL).

    A frame holds one page; the WAL file starts with a 32-byte header (magic number, format
    version, page size, ...) and each frame with a 24-byte header (SQLite file format,
    https://www.sqlite.org/fileformat2.html, section 4). Only the header is checked here;
    SQLite checks the frames' checksums itself when it opens the file.
    """
    wal = Path(f"{path}-wal")
    try:
        size = wal.stat().st_size
        with open(wal, "rb") as f:
            head = f.read(_WAL_HEADER_SIZE)
    except OSError:
        return 0
    if len(head) < _WAL_HEADER_SIZE:
        return 0
    magic, _version, page_size = struct.unpack(">III", head[:12])
    if magic not in _WAL_MAGIC or page_size < 512 or page_size & (page_size - 1) or page_size > 65536:
        return 0
    return (size - _WAL_HEADER_SIZE) // (page_size + _WAL_FRAME_HEADER_SIZE)


# --------------------------------------------------------------------------------------------
# JSON


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Mapping):
        return dict(obj)
    if isinstance(obj, (set, frozenset)):
        return sorted(obj)
    if isinstance(obj, tuple):
        return list(obj)
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    raise TypeError(f"{type(obj).__name__} is not JSON-serialisable")


def to_json(obj: Any, what: str) -> str:
    """JSON text of ``obj`` (NaN and infinities allowed); ValueError naming ``what`` otherwise."""
    try:
        return json.dumps(obj, default=_json_default, allow_nan=True, separators=(",", ":"))
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{what}: cannot be stored as JSON ({exc})") from None


def from_json(text: Any, what: str) -> Any:
    if not isinstance(text, str):
        raise Damaged(f"{what} is not text")
    try:
        return json.loads(text)
    except (ValueError, RecursionError) as exc:
        raise Damaged(f"{what} is not valid JSON ({exc})") from None


def _mapping(obj: Any, what: str) -> dict:
    if not isinstance(obj, dict):
        raise Damaged(f"{what} is not a JSON object")
    return obj


# --------------------------------------------------------------------------------------------
# Samples


def encode_samples(data: np.ndarray) -> tuple[str, bytes]:
    """``(dtype, bytes)`` of a block's samples: float32 if that keeps every bit, else float64.

    The test is exact: a value is stored as float32 only when converting it back gives the
    same 64 bits (so NaN payloads and signed zeros survive as well as ordinary values).
    """
    a = np.ascontiguousarray(data, dtype=np.float64)
    with np.errstate(over="ignore", invalid="ignore"):
        narrow = a.astype(np.float32)
    if np.array_equal(narrow.astype(np.float64).view(np.uint64), a.view(np.uint64)):
        return "<f4", narrow.astype("<f4", copy=False).tobytes()
    return "<f8", a.astype("<f8", copy=False).tobytes()


def decode_samples(blob: Any, dtype: Any, n: Any, n_channels: int) -> np.ndarray:
    """The float64 array ``(n, n_channels)`` stored by `encode_samples`; `Damaged` if it cannot be."""
    if dtype not in SAMPLE_DTYPES:
        raise Damaged(f"unknown sample type {dtype!r}")
    if not isinstance(blob, bytes):
        raise Damaged("samples are not binary data")
    if not isinstance(n, int) or n < 0:
        raise Damaged(f"impossible sample count {n!r}")
    item = np.dtype(dtype).itemsize
    if len(blob) != n * n_channels * item:
        raise Damaged(f"{len(blob)} bytes of samples, expected {n} x {n_channels} x {item}")
    return np.frombuffer(blob, dtype=dtype).reshape(n, n_channels).astype(np.float64)


def decode_channels(text: Any) -> tuple[str, ...]:
    names = from_json(text, "channel list")
    if not isinstance(names, list) or not names or not all(isinstance(c, str) for c in names):
        raise Damaged("channel list is not a list of names")
    return tuple(names)


# --------------------------------------------------------------------------------------------
# Estimates, events, truth


def estimate_row(e: Estimate, analysis_id: int) -> tuple:
    if not isinstance(e, Estimate):
        raise ValueError(f"estimates: expected Estimate, got {type(e).__name__}")
    quantities = {}
    for key, q in e.values.items():
        if not isinstance(q, Quantity):
            raise ValueError(f"estimates: values[{key!r}] is a {type(q).__name__}, expected Quantity")
        quantities[str(key)] = q.as_dict()
    return (
        analysis_id,
        float(e.t),
        str(e.mode),
        str(e.scope),
        int(e.n_samples),
        to_json(sorted(e.flags), "estimate flags"),
        to_json(quantities, "estimate values"),
        to_json(dict(e.extra), "estimate extra"),
    )


def _number(obj: Any, what: str) -> float:
    if isinstance(obj, bool) or not isinstance(obj, (int, float)):
        raise Damaged(f"{what} is not a number")
    return float(obj)


def estimate_from_row(
    t: Any, mode: Any, scope: Any, n_samples: Any, flags: Any, quantities: Any, extra: Any
) -> Estimate:
    if not isinstance(mode, str) or not isinstance(scope, str) or not isinstance(n_samples, int):
        raise Damaged("estimate row has wrong column types")
    flag_list = from_json(flags, "estimate flags")
    if not isinstance(flag_list, list) or not all(isinstance(f, str) for f in flag_list):
        raise Damaged("estimate flags are not a list of names")
    values = {}
    for key, q in _mapping(from_json(quantities, "estimate values"), "estimate values").items():
        q = _mapping(q, f"estimate value {key!r}")
        values[key] = Quantity(
            value=_number(q.get("value"), f"{key}.value"),
            sigma=_number(q.get("sigma"), f"{key}.sigma"),
            sigma_noise=_number(q.get("sigma_noise", 0.0), f"{key}.sigma_noise"),
            sigma_systematic=_number(q.get("sigma_systematic", 0.0), f"{key}.sigma_systematic"),
        )
    return Estimate(
        t=_number(t, "estimate time"),
        mode=mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flag_list),
        n_samples=n_samples,
        extra=MappingProxyType(_mapping(from_json(extra, "estimate extra"), "estimate extra")),
    )


def event_row(e: Event) -> tuple:
    if not isinstance(e, Event):
        raise ValueError(f"event: expected Event, got {type(e).__name__}")
    return (float(e.t), e.kind, str(e.who), str(e.text), to_json(dict(e.data), "event data"))


def event_from_row(t: Any, kind: Any, who: Any, text: Any, data: Any) -> Event:
    if not all(isinstance(v, str) for v in (kind, who, text)):
        raise Damaged("event row has wrong column types")
    try:
        return Event(
            t=_number(t, "event time"),
            kind=kind,
            text=text,
            who=who,
            data=MappingProxyType(_mapping(from_json(data, "event data"), "event data")),
        )
    except ValueError as exc:
        raise Damaged(f"event: {exc}") from None


def truth_row(t: float, values: Mapping[str, Any]) -> tuple:
    if not isinstance(values, Mapping):
        raise ValueError(f"values: expected a mapping, got {type(values).__name__}")
    if "t" in values:
        raise ValueError("values: must not have a key 't' (the time is given separately)")
    if not math.isfinite(float(t)):
        raise ValueError(f"t: {t!r} is not a finite time")
    return (float(t), to_json(dict(values), "truth values"))


def truth_from_row(t: Any, data: Any) -> dict[str, Any]:
    return {"t": _number(t, "truth time"), **_mapping(from_json(data, "truth values"), "truth values")}
