"""Reading run files: `RunReader`, and finding runs in a log directory (`resolve_run`, `list_runs`).

See `bench.store` for what reading does and does not touch, and `bench.store.schema` for
the layout.
"""

from __future__ import annotations

import os
import sqlite3
import stat
from collections.abc import Callable, Iterator
from datetime import datetime
from pathlib import Path
from typing import Any

from bench.errors import RunStoreError
from bench.records import Block, Estimate, Event
from bench.store.schema import (
    APPLICATION,
    APPLICATION_ID,
    BLOCK_LAYOUTS,
    MAX_BLOCK_SPAN,
    READ_ERRORS,
    SCHEMA_VERSION,
    SUFFIX,
    TABLES,
    Damaged,
    check_header,
    decode_channels,
    decode_samples,
    estimate_from_row,
    event_from_row,
    from_json,
    run_file_error,
    sqlite_reason,
    truth_from_row,
    wal_frames,
)

#: Keys of every `RunReader.summary` / `list_runs` row.
SUMMARY_KEYS = (
    "id",
    "path",
    "status",
    "error",
    "start",
    "stop",
    "duration_s",
    "sample",
    "mode",
    "simulated",
    "size_bytes",
    "blocks",
    "analyses",
    "beta",
    "beta_sigma",
    "beta_analysis",
)


# --------------------------------------------------------------------------------------------
# Reading


class RunReader:
    """Reads one run file, read-only. Every problem is a `RunStoreError` naming the file.

    Attributes: ``path``, ``meta`` (dict, as it was when the reader opened), ``run_id``,
    ``schema_version``, ``status`` (``"complete"``, or ``"incomplete"`` when there is no stop
    time: still being recorded, or cut off). Blocks, estimates and events are read afresh by
    each call, so a reader of a run being recorded sees each new commit.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._conn: sqlite3.Connection | None = None
        reason = self._precheck()
        short_main = None
        if reason and reason.startswith("is truncated:") and _has_header(self.path) and wal_frames(self.path):
            # The main file is shorter than its pages (a checkpoint cut off by a full disk, or
            # a copy taken mid-write), but a -wal file is there: SQLite reads the newest pages
            # from it. Whether it holds every missing page is checked once open.
            short_main, reason = reason, None
        if reason:
            raise run_file_error(self.path, reason)
        try:
            uri = self.path.resolve().as_uri() + "?mode=ro"
            self._conn = sqlite3.connect(uri, uri=True, timeout=5.0, check_same_thread=False)
            if short_main is not None:
                self._check_pages(short_main)
            self._validate()
        except READ_ERRORS as exc:
            self.close()
            raise run_file_error(self.path, sqlite_reason(exc)) from None
        except Damaged as exc:
            self.close()
            raise run_file_error(self.path, f"is damaged: {exc}") from None
        except RunStoreError:
            self.close()
            raise

    def _precheck(self) -> str | None:
        try:
            st = self.path.stat()
            if stat.S_ISDIR(st.st_mode):
                return "is a directory, not a run file"
            if not stat.S_ISREG(st.st_mode):
                return "is not a regular file"
            return check_header(self.path)
        except FileNotFoundError:
            return "no such run file"
        except OSError as exc:
            return f"cannot be read ({exc.strerror or exc})"

    def _check_pages(self, short_main: str) -> None:
        """SQLite's quick check over a run whose main file is short but has a -wal file."""
        try:
            problems = [r[0] for r in self._connection().execute("PRAGMA quick_check(5)")]
        except READ_ERRORS as exc:
            problems = [str(exc)]
        if problems != ["ok"]:
            raise run_file_error(
                self.path,
                f"{short_main}, and its -wal file does not hold the missing pages "
                f"(SQLite: {'; '.join(map(str, problems[:3]))})",
            )

    def _validate(self) -> None:
        conn = self._connection()
        app = conn.execute("PRAGMA application_id").fetchone()[0]
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if app != APPLICATION_ID:
            listed = ", ".join(sorted(t for t in tables if isinstance(t, str))[:6]) or "none"
            raise run_file_error(
                self.path,
                f"is not a gainbench run file: a SQLite database of another program (tables: {listed})",
            )
        if version > SCHEMA_VERSION:
            raise run_file_error(
                self.path,
                f"was written by a newer gainbench (run file schema {version}; "
                f"this version reads up to {SCHEMA_VERSION}): update gainbench to "
                "read it",
            )
        if version < 1:
            raise Damaged(f"its schema version is {version}")
        missing = [t for t in TABLES if t not in tables]
        if missing:
            raise Damaged(f"table {', '.join(missing)} missing")
        meta = {}
        for key, value in conn.execute("SELECT key, value FROM meta"):
            if not isinstance(key, str):
                raise Damaged("a meta key is not text")
            meta[key] = from_json(value, f"meta {key!r}")
        if meta.get("application") != APPLICATION:
            raise run_file_error(
                self.path, f"is not a gainbench run file (its application is {meta.get('application')!r})"
            )
        for key in ("run_id", "start_time", "bench_text"):
            if not isinstance(meta.get(key), str):
                raise Damaged(f"meta {key!r} is missing or not text")
        self.meta: dict[str, Any] = meta
        self.schema_version = int(version)

    def _connection(self) -> sqlite3.Connection:
        if self._conn is None:
            raise run_file_error(self.path, "the reader is closed")
        return self._conn

    def _query(self, sql: str, args: tuple = ()) -> list[tuple]:
        try:
            return self._connection().execute(sql, args).fetchall()
        except READ_ERRORS as exc:
            raise run_file_error(self.path, sqlite_reason(exc)) from None

    def _decoded(self, what: str, fn: Callable[..., Any], *args: Any) -> Any:
        try:
            return fn(*args)
        except Damaged as exc:
            raise run_file_error(self.path, f"is damaged: {what}: {exc}") from None

    @property
    def run_id(self) -> str:
        return self.meta["run_id"]

    @property
    def status(self) -> str:
        return "complete" if self.meta.get("stop_time") else "incomplete"

    def close(self) -> None:
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def __enter__(self) -> RunReader:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- blocks ------------------------------------------------------------------------------
    def block_count(self, source: str | None = None) -> int:
        if source is None:
            # Blocks are never deleted (the schema's triggers refuse), so the highest row id is
            # the count, found without reading every row.
            return int(self._query("SELECT coalesce(max(id), 0) FROM blocks")[0][0])
        return int(self._query("SELECT count(*) FROM blocks WHERE source = ?", (source,))[0][0])

    def sources(self) -> list[str]:
        return [r[0] for r in self._query("SELECT DISTINCT source FROM blocks ORDER BY source")]

    def channels(self, source: str | None = None) -> tuple[str, ...]:
        """Every channel name in the blocks (of one source), in order of first appearance."""
        rows = self._query("SELECT value FROM meta WHERE key = ?", (BLOCK_LAYOUTS,))
        if rows:
            layouts = self._decoded("block layouts", _layouts, rows[0][0])
        else:  # no block yet
            layouts = []
        names: dict[str, None] = {}
        for src, channels in layouts:
            if source is None or src == source:
                names.update(dict.fromkeys(channels))
        return tuple(names)

    def iter_blocks(
        self, source: str | None = None, start: float | None = None, stop: float | None = None
    ) -> Iterator[Block]:
        """Blocks in seq order per source and in time order overall (by first-sample time).

        ``start`` / ``stop`` (run-clock s) keep the blocks that overlap ``[start, stop)``,
        whole. Rows are read one at a time, so a run of any length streams.
        """
        for name, value in (("start", start), ("stop", stop)):
            if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))):
                raise ValueError(f"{name}: expected a time in s, got {value!r}")
        return self._blocks(source, start, stop)

    def _blocks(self, source: str | None, start: float | None, stop: float | None) -> Iterator[Block]:
        where: list[str] = []
        args: list[Any] = []
        if source is not None:
            where.append("source = ?")
            args.append(str(source))
        if stop is not None:
            where.append("t0 < ?")
            args.append(float(stop))
        if start is not None:
            # A lower bound on t0 from the longest block's span lets SQLite use the time index
            # (with a margin for rounding); the exact overlap test follows it.
            where.append(
                f"t0 >= ? - coalesce((SELECT CAST(value AS REAL) FROM meta WHERE key = "
                f"'{MAX_BLOCK_SPAN}'), 1e300) * 1.000001 - 1e-9"
            )
            where.append("t0 + dt * max(n - 1, 0) >= ?")
            args += [float(start), float(start)]
        sql = (
            "SELECT source, seq, t0, dt, first_index, n, channels, dtype, data FROM blocks"
            + (" WHERE " + " AND ".join(where) if where else "")
            + (" ORDER BY seq" if source is not None else " ORDER BY t0, source, seq")
        )
        try:
            cursor = self._connection().execute(sql, tuple(args))
            channel_cache: dict[str, tuple[str, ...]] = {}
            for row in cursor:
                yield self._decoded("block", self._block_from_row, row, channel_cache)
        except READ_ERRORS as exc:
            raise run_file_error(self.path, sqlite_reason(exc)) from None

    @staticmethod
    def _block_from_row(row: tuple, cache: dict[str, tuple[str, ...]]) -> Block:
        source, seq, t0, dt, first_index, n, channels_text, dtype, blob = row
        channels = cache.get(channels_text) if isinstance(channels_text, str) else None
        if channels is None:
            channels = decode_channels(channels_text)
            if len(cache) < 64:
                cache[channels_text] = channels
        if not isinstance(source, str) or not all(isinstance(v, int) for v in (seq, first_index)):
            raise Damaged("block row has wrong column types")
        if not all(isinstance(v, float) for v in (t0, dt)):
            raise Damaged("block times are not numbers")
        data = decode_samples(blob, dtype, n, len(channels))
        try:
            return Block(
                source=source, seq=seq, t0=t0, dt=dt, first_index=first_index, channels=channels, data=data
            )
        except ValueError as exc:
            raise Damaged(str(exc)) from None

    # -- estimates, events, truth, analyses -------------------------------------------------
    def analyses(self) -> list[dict[str, Any]]:
        """Every analysis: id, created, finished, kind, overrides, software_version, note, estimates."""
        rows = self._query(
            "SELECT a.id, a.created, a.finished, a.kind, a.overrides, a.software_version, a.note, "
            "(SELECT count(*) FROM estimates e WHERE e.analysis_id = a.id) FROM analyses a ORDER BY a.id"
        )
        out = []
        for aid, created, finished, kind, overrides, version, note, count in rows:
            out.append(
                {
                    "id": aid,
                    "created": created,
                    "finished": finished,
                    "kind": kind,
                    "overrides": self._decoded("analysis overrides", from_json, overrides, "overrides"),
                    "software_version": version,
                    "note": note,
                    "estimates": count,
                }
            )
        return out

    def _analysis(self, analysis_id: int | None) -> int | None:
        ids = [r[0] for r in self._query("SELECT id FROM analyses ORDER BY id")]
        if analysis_id is None:
            return ids[0] if ids else None
        if analysis_id not in ids:
            known = ", ".join(str(i) for i in ids) or "none"
            raise run_file_error(self.path, f"has no analysis {analysis_id} (its analyses: {known})")
        return analysis_id

    def estimates(self, analysis_id: int | None = None) -> list[Estimate]:
        """Estimates of one analysis in the order written; None: the run's first analysis (the
        live one of a recorded run)."""
        aid = self._analysis(analysis_id)
        if aid is None:
            return []
        rows = self._query(
            "SELECT t, mode, scope, n_samples, flags, quantities, extra FROM estimates "
            "WHERE analysis_id = ? ORDER BY id",
            (aid,),
        )
        return [self._decoded("estimate", estimate_from_row, *r) for r in rows]

    def final_estimate(self, analysis_id: int | None = None) -> Estimate | None:
        """The last cumulative estimate of an analysis (None: the first analysis), or None."""
        aid = self._analysis(analysis_id)
        if aid is None:
            return None
        rows = self._query(
            "SELECT t, mode, scope, n_samples, flags, quantities, extra FROM estimates "
            "WHERE analysis_id = ? AND scope = 'cumulative' ORDER BY id DESC LIMIT 1",
            (aid,),
        )
        return self._decoded("estimate", estimate_from_row, *rows[0]) if rows else None

    def events(self) -> list[Event]:
        rows = self._query("SELECT t, kind, who, text, data FROM events ORDER BY t, id")
        return [self._decoded("event", event_from_row, *r) for r in rows]

    def truth(self) -> list[dict[str, Any]]:
        """The simulator's ground truth: dicts with ``t`` and the recorded figures."""
        rows = self._query("SELECT t, data FROM truth ORDER BY id")
        return [self._decoded("truth", truth_from_row, *r) for r in rows]

    # -- checks and summary ------------------------------------------------------------------
    def integrity_check(self) -> None:
        """Run SQLite's full integrity check; RunStoreError listing the first problems if any."""
        problems = [r[0] for r in self._query("PRAGMA integrity_check(20)")]
        if problems != ["ok"]:
            raise run_file_error(
                self.path, "fails SQLite's integrity check: " + "; ".join(map(str, problems[:5]))
            )

    def duration(self) -> float | None:
        """Seconds from start to stop (wall clock), or, for an incomplete run and for a run
        imported from a file (whose start and stop are those of the import), the run-clock time
        of the last record."""
        try:
            start = datetime.fromisoformat(self.meta["start_time"])
            if self.meta.get("stop_time") and self.meta.get("imported_from") is None:
                return (datetime.fromisoformat(self.meta["stop_time"]) - start).total_seconds()
        except (TypeError, ValueError):
            pass
        last = self._query(
            "SELECT max(coalesce((SELECT t0 + dt * max(n - 1, 0) FROM blocks ORDER BY t0 DESC LIMIT 1), 0), "
            "coalesce((SELECT max(t) FROM events), 0), coalesce((SELECT max(t) FROM estimates), 0))"
        )[0][0]
        return float(last) if isinstance(last, (int, float)) else None

    def summary(self) -> dict[str, Any]:
        """One row of `gainbench runs`: see `SUMMARY_KEYS`. The β figure is the final cumulative
        estimate of the latest analysis that has one (``beta_analysis`` names it)."""
        m = self.meta
        final, final_id = None, None
        for a in reversed(self.analyses()):
            final = self.final_estimate(a["id"])
            if final is not None:
                final_id = a["id"]
                break
        beta = final.values.get("beta") if final is not None else None
        return {
            "id": m["run_id"],
            "path": str(self.path),
            "status": self.status,
            "error": None,
            "start": m.get("start_time"),
            "stop": m.get("stop_time"),
            "duration_s": self.duration(),
            "sample": m.get("sample_id") or m.get("sample_label") or "",
            "mode": m.get("mode"),
            "simulated": m.get("simulated"),
            "size_bytes": _size(self.path),
            "blocks": self.block_count(),
            "analyses": len(self.analyses()),
            "beta": beta.value if beta is not None else None,
            "beta_sigma": beta.sigma if beta is not None else None,
            "beta_analysis": final_id if beta is not None else None,
        }


def _layouts(text: Any) -> list[tuple[str, tuple[str, ...]]]:
    value = from_json(text, "block layouts")
    if not isinstance(value, list):
        raise Damaged("block layouts are not a list")
    out = []
    for item in value:
        if (
            not isinstance(item, list)
            or len(item) != 2
            or not isinstance(item[0], str)
            or not isinstance(item[1], list)
            or not all(isinstance(c, str) for c in item[1])
        ):
            raise Damaged("block layouts are not [source, [channel, ...]] pairs")
        out.append((item[0], tuple(item[1])))
    return out


def _has_header(path: Path) -> bool:
    """Whether ``path`` holds at least the 100-byte SQLite header (its page size is needed)."""
    try:
        return path.stat().st_size >= 100
    except OSError:
        return False


def _size(path: Path) -> int | None:
    """Bytes of the run file plus its -wal file."""
    try:
        size = path.stat().st_size
    except OSError:
        return None
    wal = Path(f"{path}-wal")
    return size + (wal.stat().st_size if wal.is_file() else 0)


# --------------------------------------------------------------------------------------------
# Finding runs


def _run_files(log_dir: Path) -> list[Path]:
    return sorted(p for p in log_dir.iterdir() if p.name.endswith(SUFFIX))


def resolve_run(text: str, log_dir: str | Path = "logs") -> Path:
    """The run file meant by ``text``: a path, a run id, or a unique prefix of one in ``log_dir``."""
    if not isinstance(text, str):
        raise ValueError(f"text: expected a run id or a path, got {text!r}")
    if not text.strip():  # typed by a user: `gainbench summary ""`
        raise RunStoreError(
            "no run named (an empty run id); give a run id, a unique prefix of one, or a run file path"
        )
    text = text.strip()
    given = Path(text)
    if given.is_file() or given.suffix == SUFFIX or "/" in text or os.sep in text:
        if given.exists():
            return given
        raise run_file_error(given, "no such run file")
    d = Path(log_dir)
    if not d.is_dir():
        raise RunStoreError(f"no run {text!r}: the log directory {d} does not exist")
    exact = d / f"{text}{SUFFIX}"
    if exact.exists():
        return exact
    runs = _run_files(d)
    found = [p for p in runs if p.name.startswith(text)]
    if len(found) == 1:
        return found[0]
    if not found:
        raise RunStoreError(
            f"no run matches {text!r} in {d} ({len(runs)} runs there; `gainbench runs` lists them)"
        )
    names = ", ".join(p.name[: -len(SUFFIX)] for p in found[:10]) + (", ..." if len(found) > 10 else "")
    raise RunStoreError(f"{text!r} matches {len(found)} runs in {d}: {names}; give more of the id")


def list_runs(log_dir: str | Path = "logs") -> list[dict[str, Any]]:
    """A `RunReader.summary` for each run file in ``log_dir``, oldest first; a file that cannot
    be read is listed with status ``"unreadable"`` and the reason in ``error``."""
    d = Path(log_dir)
    if not d.exists():
        return []
    if not d.is_dir():
        raise RunStoreError(f"{d}: is not a directory (expected the log directory)")
    out = []
    for p in _run_files(d):
        try:
            with RunReader(p) as reader:
                out.append(reader.summary())
        except RunStoreError as exc:
            row = dict.fromkeys(SUMMARY_KEYS)
            row.update(
                id=p.name[: -len(SUFFIX)],
                path=str(p),
                status="unreadable",
                error=getattr(exc, "reason", str(exc)),
                size_bytes=_size(p),
            )
            out.append(row)
    return out
