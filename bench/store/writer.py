"""Writing run files: `RunWriter` records a run, `open_for_analysis` adds a re-analysis.

See `bench.store` for the durability rules and `bench.store.schema` for the layout.
"""

from __future__ import annotations

import os
import platform
import re
import sqlite3
import time
from collections.abc import Callable, Iterable, Mapping
from contextlib import closing
from datetime import datetime
from pathlib import Path
from typing import Any

from bench import __version__
from bench.errors import ConfigError
from bench.records import Block, Estimate, Event
from bench.store.reader import RunReader
from bench.store.schema import (
    ANALYSIS_KINDS,
    APPLICATION,
    APPLICATION_ID,
    BLOCK_LAYOUTS,
    MAX_BLOCK_SPAN,
    PAGE_SIZE,
    SCHEMA_SQL,
    SCHEMA_VERSION,
    SIDE_FILES,
    SUFFIX,
    encode_samples,
    estimate_row,
    event_row,
    iso,
    now,
    run_file_error,
    to_json,
    truth_row,
)

#: Meta keys a caller may not set: they identify the file, or the writer keeps them.
RESERVED_META = ("application", "schema_version", "run_id", BLOCK_LAYOUTS, MAX_BLOCK_SPAN)


def _platform() -> str:
    return (
        f"{platform.system()} {platform.release()} ({platform.machine()}), "
        f"Python {platform.python_version()}, SQLite {sqlite3.sqlite_version}"
    )


def _file_part(sample_id: str) -> str:
    part = re.sub(r"[^A-Za-z0-9._-]+", "-", sample_id).strip("-.")[:40]
    return part or "run"


#: Added to a run file's name (after a leading dot) while `RunWriter.create` builds it. Such a
#: name never ends with `SUFFIX`, so a file left by a killed creation is never taken for a run.
CREATING_SUFFIX = ".creating"


def creating_path(path: Path) -> Path:
    """The temporary name under which the run file ``path`` is built (same directory)."""
    return path.with_name(f".{path.name}{CREATING_SUFFIX}")


def _taken(path: Path) -> bool:
    """Whether ``path`` or a side file of it exists (a leftover -wal or hot journal would be
    applied by SQLite to a new file of the same name)."""
    return any(os.path.lexists(f"{path}{side}") for side in ("", *SIDE_FILES))


def _remove(path: Path) -> None:
    for side in ("", *SIDE_FILES):
        Path(f"{path}{side}").unlink(missing_ok=True)


def _reserve(log_dir: Path, start: datetime, sample_id: str) -> tuple[str, Path, Path]:
    """Claim a run id: its final path and its temporary file, the latter created exclusively.

    The temporary file is created first and the final name checked after: a writer keeps its
    temporary file until it renames it to the final name, so a second writer of the same id
    either fails to create the temporary file or finds the final name taken; two writers never
    share a name. A temporary file left by a killed creation keeps its id taken.
    """
    base = f"{start:%Y%m%d-%H%M%S}-{_file_part(sample_id)}"
    for k in range(1, 1000):
        run_id = base if k == 1 else f"{base}-{k}"
        path = log_dir / f"{run_id}{SUFFIX}"
        temp = creating_path(path)
        if _taken(path) or any(os.path.lexists(f"{temp}{side}") for side in SIDE_FILES):
            continue
        try:
            fd = os.open(temp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            continue
        os.close(fd)
        if _taken(path):  # published by another writer since the first check
            temp.unlink(missing_ok=True)
            continue
        return run_id, path, temp
    raise run_file_error(log_dir / f"{base}{SUFFIX}", "that name and 998 variants are taken")


def _build(temp: Path, meta_rows: list[tuple[str, str]], created: str, software_version: str) -> int:
    """Write the schema, the meta rows and the live analysis into ``temp`` in one transaction,
    commit and close; return the live analysis' id. The file stays in rollback-journal mode,
    so when this returns it is complete by itself, with no side file."""
    with closing(sqlite3.connect(temp, isolation_level=None, timeout=5.0)) as conn:
        conn.execute(f"PRAGMA page_size = {PAGE_SIZE}")
        conn.execute("PRAGMA synchronous = FULL")
        conn.executescript(
            f"BEGIN; PRAGMA application_id = {APPLICATION_ID}; "
            f"PRAGMA user_version = {SCHEMA_VERSION}; {SCHEMA_SQL}"
        )
        conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", meta_rows)
        cur = conn.execute(
            "INSERT INTO analyses (created, kind, overrides, software_version, note) VALUES (?, ?, ?, ?, ?)",
            (created, "live", "{}", software_version, "recorded live"),
        )
        analysis_id = int(cur.lastrowid)
        conn.execute("COMMIT")
    return analysis_id


def _publish(temp: Path, path: Path) -> None:
    """Give the complete file ``temp`` its final name ``path`` (one atomic rename)."""
    os.replace(temp, path)
    _sync_directory(path.parent)


def _sync_directory(directory: Path) -> None:
    """Make a rename in ``directory`` survive a power cut: POSIX only (Windows cannot open a
    directory to sync it; NTFS journals the rename itself)."""
    if os.name == "nt":
        return
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return  # not allowed to open it: the rename is atomic all the same, only less durable
    try:
        os.fsync(fd)
    except OSError:
        pass  # some file systems cannot sync a directory; the rename is atomic all the same
    finally:
        os.close(fd)


def _open_recording(path: Path) -> sqlite3.Connection:
    """Open the published run file for recording: WAL mode, each commit synced.

    WAL mode is set here, on the final name, never before the rename: SQLite names the -wal and
    -shm files after the name a connection was opened with, so a connection opened before the
    rename would keep its commits beside the old name, where no reader looks for them (on Linux
    its next write fails with a disk I/O error instead).
    """
    conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False, timeout=5.0)
    try:
        if conn.execute("PRAGMA journal_mode = WAL").fetchone()[0] != "wal":
            raise sqlite3.OperationalError("the file system does not support WAL mode")
        conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA wal_autocheckpoint = 512")  # pages: about 16 MB
        conn.execute("PRAGMA journal_size_limit = 67108864")
        conn.execute("PRAGMA cache_size = -8192")  # KiB
    except BaseException:
        conn.close()
        raise
    return conn


def config_meta(cfg: Any) -> dict[str, Any]:
    """Meta rows a run keeps of its bench beyond the file's text: the cross-section spectrum
    the bench file names (``spectrum``, `bench.physics.spectra.stored_form`), so that the run does not
    depend on that file later."""
    path = cfg.sample.spectrum_file
    if path is None:
        return {}
    from bench import physics
    from bench.physics import spectra

    zero_line = cfg.sample.zero_line
    epsilon = float(physics.photon_energy(zero_line)) if zero_line is not None else None
    record = spectra.stored_form(path, epsilon=epsilon, temperature=cfg.sample.temperature)
    table = spectra.StoredSpectrum.from_stored(record, path.name).table
    sigma = cfg.sample.sigma
    if table.at(cfg.probe.wavelength) != (sigma.probe_absorption, sigma.probe_emission) or table.at(
        cfg.pump.wavelength
    ) != (sigma.pump_absorption, sigma.pump_emission):
        raise ConfigError(f"{path}: the spectrum file changed after {cfg.source} was read; start again")
    return {"spectrum": record}


def _check_interval(flush_interval: float) -> float:
    if not isinstance(flush_interval, (int, float)) or not 0 < flush_interval <= 1.0:
        raise ValueError(f"flush_interval: {flush_interval!r} s is not in (0, 1] s")
    return float(flush_interval)


# --------------------------------------------------------------------------------------------
# Writing


class _Appender:
    """Commits at least every ``flush_interval`` seconds (checked on each write)."""

    def __init__(
        self,
        conn: sqlite3.Connection,
        path: Path,
        analysis_id: int,
        flush_interval: float,
        clock: Callable[[], float],
    ) -> None:
        self._conn = conn
        self.path = path
        self.analysis_id = analysis_id
        self.flush_interval = flush_interval
        self._clock = clock
        self._last_flush = clock()
        self.flush_count = 0
        self.closed = False

    def _write(self, sql: str, rows: Iterable[tuple] | tuple, what: str, many: bool = False) -> None:
        self._execute(sql, rows, what, many)
        self.flush_if_due()

    def _execute(self, sql: str, rows: Iterable[tuple] | tuple, what: str, many: bool = False) -> None:
        """Run one statement in the open transaction (begun if need be), without committing."""
        if self.closed:
            raise run_file_error(self.path, f"cannot store {what}: the writer is closed")
        try:
            if not self._conn.in_transaction:
                self._conn.execute("BEGIN")
            if many:
                self._conn.executemany(sql, rows)  # type: ignore[arg-type]
            else:
                self._conn.execute(sql, rows)  # type: ignore[arg-type]
        except sqlite3.IntegrityError as exc:
            raise ValueError(f"{what}: refused by the run file ({exc})") from None
        except sqlite3.Error as exc:
            raise run_file_error(self.path, f"cannot store {what} (SQLite: {exc})") from None

    def flush_if_due(self) -> bool:
        """Commit if the flush interval has passed since the last commit; True if it did."""
        if self.closed or self._clock() - self._last_flush < self.flush_interval:
            return False
        return self.flush()

    def flush(self) -> bool:
        """Commit now; True if there was something to commit."""
        if self.closed:
            return False
        self._last_flush = self._clock()
        if not self._conn.in_transaction:
            return False
        try:
            self._conn.execute("COMMIT")
        except sqlite3.Error as exc:
            raise run_file_error(self.path, f"cannot commit to the run file (SQLite: {exc})") from None
        self.flush_count += 1
        return True

    def append_estimates(self, estimates: Estimate | Iterable[Estimate]) -> None:
        """Store one estimate or several, under this writer's analysis id."""
        items = [estimates] if isinstance(estimates, Estimate) else list(estimates)
        rows = [estimate_row(e, self.analysis_id) for e in items]
        if rows:
            self._write(
                "INSERT INTO estimates (analysis_id, t, mode, scope, n_samples, flags, quantities, "
                "extra) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                rows,
                "estimates",
                many=True,
            )

    def _finish_analysis(self, when: datetime) -> None:
        self._write(
            "UPDATE analyses SET finished = ? WHERE id = ?",
            (iso(when), self.analysis_id),
            "the analysis' finishing time",
        )

    def _close_connection(self) -> None:
        """Merge the -wal file and leave the file in DELETE mode when nobody else has it open."""
        try:
            self._conn.execute("PRAGMA busy_timeout = 200")
            self._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            self._conn.execute("PRAGMA journal_mode = DELETE")
        except sqlite3.OperationalError:
            pass  # a reader has the file open: it stays in WAL mode, which is just as valid
        finally:
            self._conn.close()
            self.closed = True

    def __enter__(self):
        return self


class RunWriter(_Appender):
    """Records one run. Make one with `RunWriter.create` or `RunWriter.from_config`.

    Attributes: ``path``, ``run_id``, ``analysis_id`` (the live analysis), ``flush_interval``,
    ``flush_count`` (commits so far), ``closed``.
    """

    def __init__(
        self,
        conn: sqlite3.Connection,
        path: Path,
        run_id: str,
        analysis_id: int,
        flush_interval: float,
        clock: Callable[[], float],
    ) -> None:
        super().__init__(conn, path, analysis_id, flush_interval, clock)
        self.run_id = run_id
        self._layouts: dict[tuple[str, tuple[str, ...]], None] = {}
        self._max_span = 0.0

    @classmethod
    def create(
        cls,
        log_dir: str | Path,
        *,
        bench_text: str,
        sample_id: str = "",
        operator: str = "",
        mode: str = "watch",
        simulated: bool = False,
        instruments: Mapping[str, str] | None = None,
        bench_source: str = "",
        software_version: str | None = None,
        flush_interval: float = 1.0,
        meta: Mapping[str, Any] | None = None,
        start_time: datetime | None = None,
        clock: Callable[[], float] = time.monotonic,
    ) -> RunWriter:
        """Create a new run file in ``log_dir`` (made if missing) and return its writer.

        ``instruments`` maps role to identity (e.g. the ``*IDN?`` reply); ``meta`` adds more
        meta rows (JSON-serialisable); ``clock`` is the monotonic clock of the flush check.

        The file is built under a temporary name in ``log_dir`` (`creating_path`: a leading dot
        and `CREATING_SUFFIX`); its schema, meta rows and live analysis are committed there, and
        only then is it renamed to ``<run_id>.gbrun`` and reopened under that name in WAL mode.
        So a run file never exists without its schema: a process killed during creation leaves
        at most the temporary file, which no listing takes for a run; a failure here removes it.
        """
        if not isinstance(bench_text, str):
            raise ValueError(f"bench_text: expected the bench file's text, got {type(bench_text).__name__}")
        for name, value in (("sample_id", sample_id), ("operator", operator), ("mode", mode)):
            if not isinstance(value, str):
                raise ValueError(f"{name}: expected text, got {type(value).__name__}")
        flush_interval = _check_interval(flush_interval)
        extra = dict(meta or {})
        bad = [k for k in extra if k in RESERVED_META]
        if bad:
            raise ValueError(
                f"meta: {', '.join(bad)} cannot be set (they identify the file or are kept by the writer)"
            )
        start = start_time or now()
        log_dir = Path(log_dir)
        try:
            log_dir.mkdir(parents=True, exist_ok=True)
            run_id, path, temp = _reserve(log_dir, start, sample_id)
        except OSError as exc:
            raise run_file_error(log_dir, f"cannot create a run file there ({exc.strerror or exc})") from None
        rows = {
            "application": APPLICATION,
            "schema_version": SCHEMA_VERSION,
            "run_id": run_id,
            "start_time": iso(start),
            "stop_time": None,
            "stop_reason": None,
            "bench_text": bench_text,
            "bench_source": bench_source,
            "software_version": software_version or __version__,
            "instruments": dict(instruments or {}),
            "operator": operator,
            "sample_id": sample_id,
            "mode": mode,
            "simulated": bool(simulated),
            "platform": _platform(),
            **extra,
        }
        try:
            meta_rows = [(k, to_json(v, f"meta[{k!r}]")) for k, v in rows.items()]
            analysis_id = _build(temp, meta_rows, iso(start), rows["software_version"])
            _publish(temp, path)
        except BaseException as exc:
            _remove(temp)
            if isinstance(exc, sqlite3.Error):
                raise run_file_error(path, f"cannot create the run file (SQLite: {exc})") from None
            if isinstance(exc, OSError):
                raise run_file_error(path, f"cannot create the run file ({exc.strerror or exc})") from None
            raise
        try:
            conn = _open_recording(path)
        except sqlite3.Error as exc:
            _remove(path)
            raise run_file_error(path, f"cannot record into the run file (SQLite: {exc})") from None
        return cls(conn, path, run_id, analysis_id, flush_interval, clock)

    @classmethod
    def from_config(
        cls,
        cfg: Any,
        *,
        mode: str = "watch",
        instruments: Mapping[str, str] | None = None,
        log_dir: str | Path | None = None,
        meta: Mapping[str, Any] | None = None,
        clock: Callable[[], float] = time.monotonic,
    ) -> RunWriter:
        """`create` with the settings of a `bench.config.BenchConfig` (log dir, flush interval,
        operator, sample id and label, simulated, the bench file's text)."""
        extra = {
            "bench_name": cfg.name,
            "sample_label": cfg.sample.label,
            **config_meta(cfg),
            **dict(meta or {}),
        }
        return cls.create(
            cfg.run.log_dir if log_dir is None else log_dir,
            bench_text=cfg.text,
            bench_source=cfg.source,
            sample_id=cfg.sample.sample_id,
            operator=cfg.run.operator,
            mode=mode,
            simulated=cfg.simulated,
            instruments=instruments,
            flush_interval=cfg.run.flush_interval,
            meta=extra,
            clock=clock,
        )

    def append_block(self, block: Block) -> None:
        """Store a block of raw samples (call this before anything else is done with it)."""
        if not isinstance(block, Block):
            raise ValueError(f"block: expected Block, got {type(block).__name__}")
        if not block.channels or not all(isinstance(c, str) and c for c in block.channels):
            raise ValueError(f"block: channels {block.channels!r} are not a list of names")
        dtype, blob = encode_samples(block.data)
        what = f"block {block.source} #{block.seq}"
        self._execute(
            "INSERT INTO blocks (source, seq, t0, dt, first_index, n, channels, dtype, data) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                str(block.source),
                int(block.seq),
                float(block.t0),
                float(block.dt),
                int(block.first_index),
                block.n,
                to_json(list(block.channels), "block channels"),
                dtype,
                blob,
            ),
            what,
        )
        # Kept in meta, in the same transaction as the block, so that readers of a long run
        # need not scan every block's row (see `bench.store.schema`).
        layout = (str(block.source), tuple(block.channels))
        span = float(block.dt) * max(block.n - 1, 0)
        if layout not in self._layouts:
            self._layouts[layout] = None
            self._execute(
                "INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                (BLOCK_LAYOUTS, to_json([[s, list(c)] for s, c in self._layouts], "layouts")),
                what,
            )
        if span > self._max_span:
            self._max_span = span
            self._execute(
                "INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                (MAX_BLOCK_SPAN, to_json(span, "span")),
                what,
            )
        self.flush_if_due()

    def append_event(self, event: Event) -> None:
        self._write(
            "INSERT INTO events (t, kind, who, text, data) VALUES (?, ?, ?, ?, ?)",
            event_row(event),
            f"event {getattr(event, 'kind', '?')}",
        )

    def append_truth(self, t: float, values: Mapping[str, Any]) -> None:
        """Store the simulator's ground truth at run-clock time ``t``."""
        self._write("INSERT INTO truth (t, data) VALUES (?, ?)", truth_row(t, values), "truth")

    def set_meta(self, items: Mapping[str, Any] | None = None, **more: Any) -> None:
        """Add or replace meta rows, e.g. ``set_meta(instruments={"detector": idn})``."""
        values = {**dict(items or {}), **more}
        bad = [k for k in values if k in RESERVED_META]
        if bad:
            raise ValueError(
                f"items: {', '.join(bad)} cannot be changed "
                "(they identify the file or are kept by the writer)"
            )
        rows = [(str(k), to_json(v, f"meta[{k!r}]")) for k, v in values.items()]
        self._write("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)", rows, "meta", many=True)

    def close(self, stop_time: datetime | None = None, reason: str = "stopped") -> None:
        """Write the stop time, commit, and leave a self-contained file. Closing twice is harmless."""
        if self.closed:
            return
        stop = stop_time or now()
        try:
            self.set_meta(stop_time=iso(stop), stop_reason=reason)
            self._finish_analysis(stop)
            self.flush()
        finally:
            self._close_connection()

    def __exit__(self, exc_type, exc, tb) -> None:
        self.close(reason="stopped" if exc_type is None else f"error: {exc_type.__name__}")


class AnalysisWriter(_Appender):
    """Adds the estimates of one replay or re-analysis to an existing run (see `open_for_analysis`).

    `close` marks the analysis finished; leaving a ``with`` block by an exception commits what
    was written but leaves it unfinished (``finished`` stays null in `RunReader.analyses`).
    """

    def close(self, finished: bool = True) -> None:
        if self.closed:
            return
        try:
            if finished:
                self._finish_analysis(now())
            self.flush()
        finally:
            self._close_connection()

    def __exit__(self, exc_type, exc, tb) -> None:
        self.close(finished=exc_type is None)


def open_for_analysis(
    path: str | Path,
    kind: str,
    overrides: Mapping[str, str] | None = None,
    *,
    note: str = "",
    software_version: str | None = None,
    flush_interval: float = 1.0,
    clock: Callable[[], float] = time.monotonic,
) -> AnalysisWriter:
    """Open a run to add the estimates of a ``"replay"`` or ``"reanalysis"`` under a new analysis id.

    The only write ever made to an existing run: a row in ``analyses`` and its estimates; the
    recorded blocks, events, truth and earlier estimates are left as they are (the file's
    triggers refuse any change to them). ``overrides`` are the ``--set`` values used.
    """
    if kind not in ANALYSIS_KINDS or kind == "live":
        raise ValueError(f"kind: {kind!r} is not one of: replay, reanalysis")
    overrides = {str(k): str(v) for k, v in (overrides or {}).items()}
    flush_interval = _check_interval(flush_interval)
    path = Path(path)
    with RunReader(path) as reader:
        if reader.schema_version != SCHEMA_VERSION:
            raise run_file_error(
                path,
                f"has schema version {reader.schema_version}; this gainbench adds "
                f"analyses only to schema version {SCHEMA_VERSION}",
            )
    try:
        conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False, timeout=10.0)
    except sqlite3.Error as exc:
        raise run_file_error(path, f"cannot be opened for writing (SQLite: {exc})") from None
    try:
        # WAL while the analysis is written, so that the replay reading the blocks and this
        # writer do not lock each other out; closing merges it back (DELETE mode).
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
        conn.execute("BEGIN IMMEDIATE")
        cur = conn.execute(
            "INSERT INTO analyses (created, kind, overrides, software_version, note) VALUES (?, ?, ?, ?, ?)",
            (iso(now()), kind, to_json(overrides, "overrides"), software_version or __version__, str(note)),
        )
        analysis_id = int(cur.lastrowid)
        conn.execute("COMMIT")
    except sqlite3.Error as exc:
        conn.close()
        raise run_file_error(path, f"cannot add an analysis (SQLite: {exc})") from None
    return AnalysisWriter(conn, path, analysis_id, flush_interval, clock)
