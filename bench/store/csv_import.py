"""Make a run from a CSV file recorded elsewhere (an oscilloscope, another logger).

The file holds a time column (seconds) and probe and reference detector columns (volts), and
optionally a pump on/off column. Lines before the header (an instrument's preamble), blank
lines and lines starting with ``#`` are skipped; the header is the first line that names every
requested column. The delimiter (comma, semicolon or tab) is taken from the header line.

Sampling. A run's blocks are uniformly sampled (``t0 + dt * i``), so the import does not
resample (that would change the raw data): it takes ``dt`` as the median interval of the
first 1000 intervals and stores the samples as they are, with these rules:

- a sample within `GRID_TOLERANCE` x ``dt`` of its place on the grid belongs to the block; the
  largest such deviation is recorded (meta ``import.max_timing_deviation_dt`` and a note);
- an interval of a whole number m >= 2 of ``dt`` (within the same tolerance) is a gap: m - 1
  samples are missing, the block ends, the next one starts with ``first_index`` advanced by
  m - 1, and a ``gap`` event is logged (as a digitiser's lost samples would be);
- any other interval is irregular sampling and an error naming the line, as is time that
  does not increase.

The time column is shifted so that the first sample is at run-clock time 0 (the offset is kept
in meta ``import.time_offset_s``). The pump column becomes a ``pump_monitor`` channel of 0/1
volts: numbers above ``pump_on_threshold`` and the words on/true/yes are 1, the rest 0. The
samples are stored in blocks of ``block_size`` from source ``detector`` (a block also starts at
the first pump-on sample), with the bench file's text and its spectrum as the run's snapshot.

Analysis. With a pump column the stored run is then analysed as a recorded run is live
(`bench.run.import_analysis`: the dark given or taken from a window of the file, the baseline from
the pump-off samples before the pump first switches on); its live analysis holds the estimates.

Every problem is a `ConfigError` naming the file, the line and the
column; a run file is made only once the header and the first rows are good, and removed again
if a later line is bad, so a failed import leaves nothing behind.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from bench.config import BenchConfig
from bench.errors import ConfigError
from bench.estimator.params import EstimatorParams
from bench.records import PROBE, PUMP_MONITOR, REFERENCE, Block, Event
from bench.run.import_analysis import FINAL_REPORT, PUMP_THRESHOLD_V, DarkGiven, analyse
from bench.store import RunReader, RunWriter
from bench.store.schema import SIDE_FILES
from bench.store.writer import config_meta

#: Names of the columns a caller maps to header names; the first three are required.
COLUMN_ROLES = ("time", "probe", "reference", "pump_on")
REQUIRED_ROLES = ("time", "probe", "reference")

#: A sample this far (in units of dt) from its place on the uniform grid is not on it.
GRID_TOLERANCE = 0.25

#: Intervals used for the median sample interval.
DT_INTERVALS = 1000

#: Lines searched for the header.
MAX_PREAMBLE = 200

#: Longest line read (characters, line end included). A data row of a few numbers is well
#: under a kilobyte and an instrument's header line a few; a longer "line" is not CSV text
#: (``/dev/zero``, a binary file), and reading it whole would take unbounded memory.
MAX_LINE_CHARS = 65536

MODES = ("watch", "chopped", "decay", "sweep")

_ON_WORDS = {"on": 1.0, "true": 1.0, "yes": 1.0, "off": 0.0, "false": 0.0, "no": 0.0}


def import_csv(
    csv_path: str | Path,
    columns: Mapping[str, str],
    cfg: BenchConfig,
    log_dir: str | Path | None = None,
    *,
    block_size: int = 10_000,
    mode: str | None = None,
    pump_on_threshold: float = 0.5,
    sample_id: str | None = None,
    dark: DarkGiven | None = None,
) -> Path:
    """Store the CSV file ``csv_path`` as a new run; returns the run file's path.

    Parameters
    ----------
    csv_path : the CSV file
    columns : ``{"time": HEADER, "probe": HEADER, "reference": HEADER, "pump_on": HEADER}``
        (``pump_on`` optional): which header names hold what
    cfg : the bench the data was recorded on (its text is stored as the run's snapshot)
    log_dir : where the run goes; default ``cfg.run.log_dir``
    block_size : samples per stored block
    mode : the run's mode; default (`default_mode`) ``chopped`` when the pump column switches
        on more than once, else ``watch``
    pump_on_threshold : pump column values above this are "on"
    sample_id : default ``cfg.sample.sample_id``
    dark : the dark levels or a dark window (`bench.run.import_analysis.DarkGiven`); None: none
        (the probe and reference are taken as reading 0 V with the probe blocked)

    With a pump column the stored data are analysed as a recorded run is live
    (`bench.run.import_analysis`): the run's live analysis holds the estimates.
    """
    roles = _check_columns(columns)
    if not isinstance(block_size, int) or block_size < 1:
        raise ValueError(f"block_size: {block_size!r} is not a positive whole number")
    if mode is not None and mode not in MODES:
        raise ValueError(f"mode: {mode!r} is not one of: {', '.join(MODES)}")
    if not isinstance(pump_on_threshold, (int, float)) or not math.isfinite(pump_on_threshold):
        raise ValueError(f"pump_on_threshold: {pump_on_threshold!r} is not a number")
    path = Path(csv_path)
    if not path.exists():
        raise ConfigError(f"{path}: no such CSV file")
    if path.is_dir():
        raise ConfigError(f"{path}: is a directory, not a CSV file")
    try:
        with open(path, encoding="utf-8-sig", newline="") as f:
            return _import(
                f, path, roles, cfg, log_dir, block_size, mode, float(pump_on_threshold), sample_id, dark
            )
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{path}: is not UTF-8 text ({exc.reason} at byte {exc.start} of a line)") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the CSV file ({exc.strerror or exc})") from None


def _check_columns(columns: Mapping[str, str]) -> dict[str, str]:
    if not isinstance(columns, Mapping):
        raise ValueError(f"columns: expected a mapping of {', '.join(COLUMN_ROLES)} to header names")
    unknown = [k for k in columns if k not in COLUMN_ROLES]
    if unknown:
        raise ValueError(
            f"columns: unknown key {', '.join(map(repr, unknown))}; expected {', '.join(COLUMN_ROLES)}"
        )
    missing = [k for k in REQUIRED_ROLES if not columns.get(k)]
    if missing:
        raise ValueError(f"columns: needs the header name of {', '.join(missing)}")
    roles = {k: columns[k] for k in COLUMN_ROLES if columns.get(k)}  # time first
    for role, name in roles.items():
        if not isinstance(name, str) or not name.strip():
            raise ValueError(f"columns[{role!r}]: {name!r} is not a header name")
    return {k: v.strip() for k, v in roles.items()}


class _Rows:
    """The data rows of an open CSV file as (line number, float values in role order)."""

    def __init__(self, f: Any, path: Path, roles: dict[str, str], threshold: float) -> None:
        self.path = path
        self.roles = roles
        self.threshold = threshold
        self._lines = _bounded_lines(f, path)
        self.header_line, delimiter, cells = self._find_header()
        self.index = {role: cells.index(name) for role, name in roles.items()}
        self._reader = csv.reader(self._lines, delimiter=delimiter)

    def _find_header(self) -> tuple[int, str, list[str]]:
        names = list(self.roles.values())
        first: tuple[int, list[str]] | None = None
        for number in range(1, MAX_PREAMBLE + 1):
            line = next(self._lines, "")
            if not line:
                break
            if not line.strip() or line.lstrip().startswith("#"):
                continue
            for delimiter in (",", ";", "\t"):
                cells = [c.strip() for c in next(csv.reader([line], delimiter=delimiter))]
                if all(n in cells for n in names):
                    return number, delimiter, cells
            if first is None:
                first = (number, [c.strip() for c in next(csv.reader([line]))])
        if first is None:
            raise ConfigError(f"{self.path}: is empty (no header line and no data)")
        number, cells = first
        absent = [n for n in names if n not in cells]
        raise ConfigError(
            f"{self.path}: no header line names the column(s) {', '.join(map(repr, absent))} "
            f"(looked at the first {MAX_PREAMBLE} lines; line {number} has: {', '.join(map(repr, cells[:12]))})"
        )

    def __iter__(self) -> Iterator[tuple[int, list[float]]]:
        while True:
            try:
                row = next(self._reader)
            except StopIteration:
                return
            except csv.Error as exc:
                line = self.header_line + self._reader.line_num
                raise ConfigError(f"{self.path}: line {line}: is not a CSV record ({exc})") from None
            line = self.header_line + self._reader.line_num
            if not row or all(not c.strip() for c in row) or row[0].lstrip().startswith("#"):
                continue
            values = []
            for role in self.roles:
                k = self.index[role]
                name = self.roles[role]
                if k >= len(row):
                    raise ConfigError(
                        f"{self.path}: line {line}: has {len(row)} fields, so no column {name!r} "
                        f"(field {k + 1} of the header)"
                    )
                values.append(self._value(row[k].strip(), role, line, name))
            yield line, values

    def _value(self, cell: str, role: str, line: int, name: str) -> float:
        if role == "pump_on" and cell.lower() in _ON_WORDS:
            return _ON_WORDS[cell.lower()]
        try:
            x = float(cell)
        except ValueError:
            what = "is empty" if not cell else f"{cell!r} is not a number"
            raise ConfigError(f"{self.path}: line {line}, column {name!r}: {what}") from None
        if not math.isfinite(x):
            raise ConfigError(f"{self.path}: line {line}, column {name!r}: {cell!r} is not a finite number")
        if role == "pump_on":
            return 1.0 if x > self.threshold else 0.0
        return x


def _bounded_lines(f: Any, path: Path) -> Iterator[str]:
    """The lines of ``f``, each read with a bound (`MAX_LINE_CHARS`); a `ConfigError` naming the
    line for one that is longer or holds NUL characters (not text)."""
    number = 0
    while True:
        line = f.readline(MAX_LINE_CHARS)
        if not line:
            return
        number += 1
        if "\x00" in line:
            raise ConfigError(f"{path}: line {number} holds NUL characters: a binary file, not CSV text")
        if len(line) >= MAX_LINE_CHARS and not line.endswith("\n"):
            raise ConfigError(
                f"{path}: line {number} is longer than {MAX_LINE_CHARS} characters: not a CSV "
                "file of numbers (is it a binary file?)"
            )
        yield line


class _Blocks:
    """Cuts timed samples into uniformly sampled blocks and hands them to the writer."""

    def __init__(
        self,
        writer: RunWriter,
        path: Path,
        time_name: str,
        dt: float,
        t_offset: float,
        channels: tuple[str, ...],
        block_size: int,
    ) -> None:
        self.writer, self.path, self.time_name = writer, path, time_name
        self.dt, self.t_offset, self.channels, self.block_size = dt, t_offset, channels, block_size
        self.rows: list[list[float]] = []
        self.t0 = 0.0
        self.first_index = 0
        self.next_index = 0  # grid index of the next sample
        self.prev_t: float | None = None
        self.seq = 0
        self.samples = 0
        self.gaps = 0
        self.missing = 0
        self.max_deviation = 0.0
        self.pump = channels.index(PUMP_MONITOR) if PUMP_MONITOR in channels else None
        self.first_on: float | None = None  # run-clock time of the first pump-on sample
        self.switch_ons = 0  # off -> on changes of the pump column
        self._on = False

    def add(self, line: int, t_raw: float, values: list[float]) -> None:
        t = t_raw - self.t_offset
        if self.pump is not None:
            on = values[self.pump] > 0.5
            if on and self.prev_t is not None and not self._on:
                self.switch_ons += 1
            self._on = on
            if on and self.first_on is None:
                # a block starts at the first pump-on sample: the baseline is taken before it
                self.first_on = t
                self.flush()
        if self.prev_t is not None:
            deviation = abs(t - (self.t0 + self.dt * len(self.rows)))
            if self.rows and deviation <= GRID_TOLERANCE * self.dt:
                self.max_deviation = max(self.max_deviation, deviation / self.dt)
            else:  # a new block: after a full one, at a gap, or to follow a drifting clock
                interval = t - self.prev_t
                m = round(interval / self.dt)
                if m < 1 or abs(interval - m * self.dt) > GRID_TOLERANCE * self.dt:
                    raise ConfigError(
                        f"{self.path}: line {line}, column {self.time_name!r}: irregular sampling: the interval "
                        f"{interval:.6g} s is not a whole number of the sample interval {self.dt:.6g} s "
                        f"(median of the first intervals)"
                    )
                self.flush()
                if m >= 2:
                    self.next_index += m - 1
                    self.gaps += 1
                    self.missing += m - 1
                    self.writer.append_event(
                        Event(
                            t=t,
                            kind="gap",
                            text=f"{m - 1} samples missing before line {line} of {self.path.name}",
                            who="csv import",
                            data={"line": line, "missing": m - 1, "first_index": self.next_index},
                        )
                    )
        if not self.rows:
            self.t0 = t
            self.first_index = self.next_index
        self.rows.append(values)
        self.next_index += 1
        self.prev_t = t
        if len(self.rows) >= self.block_size:
            self.flush()

    def flush(self) -> None:
        if not self.rows:
            return
        data = np.array(self.rows, dtype=np.float64)
        self.writer.append_block(
            Block(
                source="detector",
                seq=self.seq,
                t0=self.t0,
                dt=self.dt,
                first_index=self.first_index,
                channels=self.channels,
                data=data,
            )
        )
        self.seq += 1
        self.samples += len(self.rows)
        self.rows = []


def default_mode(switch_ons: int | None) -> str:
    """The mode of an import without ``--mode``: ``chopped`` when the pump switches on more than
    once (``switch_ons``, off -> on changes; None: no pump column), else ``watch``."""
    return "chopped" if switch_ons is not None and switch_ons > 1 else "watch"


def _import(
    f: Any,
    path: Path,
    roles: dict[str, str],
    cfg: BenchConfig,
    log_dir: str | Path | None,
    block_size: int,
    mode: str | None,
    threshold: float,
    sample_id: str | None,
    dark: DarkGiven | None,
) -> Path:
    rows = _Rows(f, path, roles, threshold)
    it = iter(rows)
    head: list[tuple[int, list[float]]] = []
    for item in it:
        if head and item[1][0] <= head[-1][1][0]:
            _not_increasing(path, roles["time"], item[0], item[1][0], head[-1][1][0])
        head.append(item)
        if len(head) > DT_INTERVALS:
            break
    if len(head) < 2:
        raise ConfigError(
            f"{path}: has {len(head)} data row(s) after the header (line {rows.header_line}); "
            "at least 2 are needed to know the sample interval"
        )
    times = np.array([values[0] for _, values in head])
    dt = float(np.median(np.diff(times)))
    t_offset = float(times[0])
    channels = (PROBE, REFERENCE) + ((PUMP_MONITOR,) if "pump_on" in roles else ())
    writer = RunWriter.create(
        cfg.run.log_dir if log_dir is None else log_dir,
        bench_text=cfg.text,
        bench_source=cfg.source,
        sample_id=cfg.sample.sample_id if sample_id is None else sample_id,
        operator=cfg.run.operator,
        mode=mode or "watch",  # set from the data below when not given
        simulated=False,
        instruments={"detector": f"CSV file {path.name}"},
        flush_interval=cfg.run.flush_interval,
        meta={
            "bench_name": cfg.name,
            "sample_label": cfg.sample.label,
            "imported_from": str(path),
            "bench_overrides": dict(cfg.overrides),
            **config_meta(cfg),
        },
    )
    try:
        blocks = _Blocks(writer, path, roles["time"], dt, t_offset, channels, block_size)
        prev = None
        for line, values in _chain(head, it):
            if prev is not None and values[0] <= prev:
                _not_increasing(path, roles["time"], line, values[0], prev)
            prev = values[0]
            blocks.add(line, values[0], values[1:])
        blocks.flush()
        if mode is None:
            mode = default_mode(blocks.switch_ons if blocks.pump is not None else None)
        info = {
            "file": str(path),
            "columns": roles,
            "samples": blocks.samples,
            "blocks": blocks.seq,
            "dt_s": dt,
            "time_offset_s": t_offset,
            "gaps": blocks.gaps,
            "missing_samples": blocks.missing,
            "max_timing_deviation_dt": blocks.max_deviation,
            "grid_tolerance_dt": GRID_TOLERANCE,
            "pump_on_threshold": threshold if "pump_on" in roles else None,
            "pump_switch_ons": blocks.switch_ons if blocks.pump is not None else None,
            "first_pump_on_s": blocks.first_on,
            "dark": _dark_info(dark),
        }
        analysed = blocks.pump is not None
        writer.set_meta({"import": info, "mode": mode})
        if analysed:
            overrides = {"pump_threshold_v": PUMP_THRESHOLD_V}
            writer.set_meta(
                {
                    "estimator_mode": mode,
                    "estimator_settings": {},
                    "estimator_overrides": overrides,
                    FINAL_REPORT: True,
                }
            )
        writer.append_event(
            Event(
                t=0.0,
                kind="note",
                who="csv import",
                text=(
                    f"imported {blocks.samples} samples from {path.name}: sample interval {dt:.6g} s (median of the "
                    f"first intervals), {blocks.gaps} gap(s), largest timing deviation "
                    f"{100 * blocks.max_deviation:.3g} % of the interval"
                ),
                data=info,
            )
        )
        if analysed:
            writer.flush()
            params = EstimatorParams.from_config(cfg, **overrides)
            with RunReader(writer.path) as reader:
                analyse(
                    writer,
                    reader,
                    params,
                    mode,
                    dark=dark,
                    first_on=blocks.first_on,
                    t_offset=t_offset,
                    csv_name=path.name,
                )
        else:
            writer.append_event(
                Event(t=0.0, kind="note", who="csv import", text="not analysed: the file has no pump column")
            )
        writer.close(reason="imported")
    except BaseException:
        if not writer.closed:
            writer.close(reason="import failed")
        for side in ("", *SIDE_FILES):
            Path(f"{writer.path}{side}").unlink(missing_ok=True)
        raise
    return writer.path


def _dark_info(dark: DarkGiven | None) -> dict[str, Any] | None:
    if dark is None:
        return None
    if dark.window is not None:
        return {"window_file_s": list(dark.window)}
    return {"probe_v": dark.probe_v, "reference_v": dark.reference_v}


def _chain(head: list, rest: Iterator) -> Iterator:
    yield from head
    yield from rest


def _not_increasing(path: Path, name: str, line: int, t: float, prev: float) -> None:
    raise ConfigError(
        f"{path}: line {line}, column {name!r}: time {t!r} is not after the previous "
        f"row's {prev!r} (time must increase)"
    )
