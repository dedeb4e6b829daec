"""Export a run's blocks, estimates or events to CSV or Parquet, for other tools.

Blocks become one row per sample (``time``, ``source``, then one column per channel, empty
where a source has no such channel) and are streamed: a chunk of rows is built, written and
dropped, so a run of any length exports in bounded memory (Parquet through
``pyarrow.parquet.ParquetWriter``, one row group per chunk). Estimates are flattened to one row
each (``t, mode, scope, analysis, analysis_kind, n_samples, flags``, then ``<key>_value``,
``<key>_sigma``, ``<key>_sigma_noise``, ``<key>_sigma_systematic`` per figure, then ``extra`` as
JSON); events to ``t, kind, who, text, data`` (JSON). Floats are written in full precision
(CSV: the shortest text that reads back to the same float).

The export is written to ``<out>.partial`` and renamed when complete, so a failed export
never leaves a file that looks whole. The run file is only read.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from bench.errors import RunStoreError
from bench.records import ESTIMATE_KEYS
from bench.store import RunReader

FORMATS = ("csv", "parquet")
WHAT = ("blocks", "estimates", "events")

#: Rows per chunk of an exported block table.
CHUNK_ROWS = 262_144

_QUANTITY_PARTS = ("value", "sigma", "sigma_noise", "sigma_systematic")


def export_run(
    path: str | Path,
    fmt: str,
    what: str,
    out: str | Path,
    *,
    source: str | None = None,
    analysis_id: int | None = None,
    overwrite: bool = False,
    chunk_rows: int = CHUNK_ROWS,
) -> Path:
    """Write ``what`` of the run at ``path`` to ``out`` as ``fmt``; returns ``out``.

    Parameters
    ----------
    path : run file
    fmt : ``"csv"`` or ``"parquet"``
    what : ``"blocks"``, ``"estimates"`` or ``"events"``
    out : output file; an existing one is replaced only with ``overwrite=True``
    source : blocks of this source only (default: all)
    analysis_id : estimates of this analysis only (default: every analysis, in order)
    chunk_rows : rows per written chunk of blocks
    """
    if fmt not in FORMATS:
        raise ValueError(f"fmt: {fmt!r} is not one of: {', '.join(FORMATS)}")
    if what not in WHAT:
        raise ValueError(f"what: {what!r} is not one of: {', '.join(WHAT)}")
    if not isinstance(chunk_rows, int) or chunk_rows < 1:
        raise ValueError(f"chunk_rows: {chunk_rows!r} is not a positive whole number")
    out = Path(out)
    if out.is_dir():
        raise RunStoreError(f"{out}: is a directory; give a file name to export to")
    if out.exists() and not overwrite:
        raise RunStoreError(f"{out}: already exists; choose another name or allow overwriting")
    partial = out.with_name(out.name + ".partial")
    with RunReader(path) as reader:
        if what == "blocks":
            columns = _block_columns(reader.channels(source))
            frames = _block_frames(reader, source, columns, chunk_rows)
        elif what == "estimates":
            frames = iter([_estimate_frame(reader, analysis_id)])
            columns = None
        else:
            frames = iter([_event_frame(reader)])
            columns = None
        try:
            if fmt == "csv":
                _write_csv(frames, columns, partial)
            else:
                _write_parquet(frames, columns, partial)
            os.replace(partial, out)
        except OSError as exc:
            raise RunStoreError(f"{out}: cannot write the export ({exc.strerror or exc})") from None
        finally:
            partial.unlink(missing_ok=True)
    return out


# --------------------------------------------------------------------------------------------
# Blocks


def _block_columns(channels: tuple[str, ...]) -> dict[str, str]:
    """Channel name -> column name (a channel called ``time`` or ``source`` gets ``_channel``)."""
    return {c: (f"{c}_channel" if c in ("time", "source") else c) for c in channels}


def _block_frames(
    reader: RunReader, source: str | None, columns: dict[str, str], chunk_rows: int
) -> Iterator[pd.DataFrame]:
    pending: list[Any] = []
    rows = 0
    for block in reader.iter_blocks(source=source):
        if block.n == 0:
            continue
        pending.append(block)
        rows += block.n
        if rows >= chunk_rows:
            yield _frame_of(pending, columns)
            pending, rows = [], 0
    if pending:
        yield _frame_of(pending, columns)


def _frame_of(blocks: list, columns: dict[str, str]) -> pd.DataFrame:
    data: dict[str, Any] = {
        "time": np.concatenate([b.times() for b in blocks]),
        "source": np.concatenate([np.full(b.n, b.source, dtype=object) for b in blocks]),
    }
    for channel, column in columns.items():
        parts = []
        for b in blocks:
            parts.append(b.column(channel) if channel in b.channels else np.full(b.n, np.nan))
        data[column] = np.concatenate(parts)
    return pd.DataFrame(data)


# --------------------------------------------------------------------------------------------
# Estimates and events


def _estimate_frame(reader: RunReader, analysis_id: int | None) -> pd.DataFrame:
    analyses = reader.analyses()
    if analysis_id is not None:
        reader.estimates(analysis_id)  # names the file and the analyses if it does not exist
        analyses = [a for a in analyses if a["id"] == analysis_id]
    rows: list[dict[str, Any]] = []
    keys: dict[str, None] = {}
    for a in analyses:
        for e in reader.estimates(a["id"]):
            row: dict[str, Any] = {
                "t": e.t,
                "mode": e.mode,
                "scope": e.scope,
                "analysis": a["id"],
                "analysis_kind": a["kind"],
                "n_samples": e.n_samples,
                "flags": ";".join(sorted(e.flags)),
            }
            for key, q in e.values.items():
                keys.setdefault(key)
                for part in _QUANTITY_PARTS:
                    row[f"{key}_{part}"] = getattr(q, part)
            row["extra"] = json.dumps(dict(e.extra), separators=(",", ":"))
            rows.append(row)
    ordered = [k for k in ESTIMATE_KEYS if k in keys] + [k for k in keys if k not in ESTIMATE_KEYS]
    columns = (
        ["t", "mode", "scope", "analysis", "analysis_kind", "n_samples", "flags"]
        + [f"{k}_{part}" for k in ordered for part in _QUANTITY_PARTS]
        + ["extra"]
    )
    frame = pd.DataFrame(rows, columns=columns)
    numeric = [c for c in columns if c.endswith(tuple(f"_{p}" for p in _QUANTITY_PARTS)) or c == "t"]
    frame[numeric] = frame[numeric].astype(np.float64)
    frame[["analysis", "n_samples"]] = frame[["analysis", "n_samples"]].astype(np.int64)
    return frame


def _event_frame(reader: RunReader) -> pd.DataFrame:
    rows = [
        {
            "t": e.t,
            "kind": e.kind,
            "who": e.who,
            "text": e.text,
            "data": json.dumps(dict(e.data), separators=(",", ":")),
        }
        for e in reader.events()
    ]
    frame = pd.DataFrame(rows, columns=["t", "kind", "who", "text", "data"])
    frame["t"] = frame["t"].astype(np.float64)
    return frame


# --------------------------------------------------------------------------------------------
# Writers


def _write_csv(frames: Iterator[pd.DataFrame], columns: dict[str, str] | None, target: Path) -> None:
    with open(target, "w", encoding="utf-8", newline="") as f:
        wrote_header = False
        for frame in frames:
            frame.to_csv(f, index=False, header=not wrote_header, lineterminator="\n")
            wrote_header = True
        if not wrote_header:  # no blocks: a header alone
            assert columns is not None
            f.write(",".join(["time", "source", *columns.values()]) + "\n")


def _block_schema(columns: dict[str, str]) -> pa.Schema:
    return pa.schema(
        [("time", pa.float64()), ("source", pa.string())] + [(c, pa.float64()) for c in columns.values()]
    )


def _write_parquet(frames: Iterator[pd.DataFrame], columns: dict[str, str] | None, target: Path) -> None:
    writer = None
    try:
        for frame in frames:
            schema = _block_schema(columns) if columns is not None else None
            table = pa.Table.from_pandas(frame, schema=schema, preserve_index=False)
            if writer is None:
                writer = pq.ParquetWriter(target, table.schema)
            writer.write_table(table)
        if writer is None:  # no blocks: the schema alone
            assert columns is not None
            writer = pq.ParquetWriter(target, _block_schema(columns))
    finally:
        if writer is not None:
            writer.close()
