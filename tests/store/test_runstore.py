"""The run store: what is written is read back exactly, under the documented layout.

External references: the SQLite file format (https://www.sqlite.org/fileformat.html: the
header's magic string, user version at offset 60, application id at offset 68, the journal
mode bytes at offsets 18-19), SQLite's own PRAGMAs read through Python's sqlite3 module, and
IEEE 754 binary32 (exactly representable values) evaluated through numpy.
"""

from __future__ import annotations

import os
import sqlite3
import struct
import subprocess
import sys
import textwrap
from contextlib import closing
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pytest

import bench.store.writer as writer_module
from bench.cli import main
from bench.config import load_bench
from bench.errors import RunStoreError
from bench.records import Block, Estimate, Event, Quantity
from bench.store import (
    SCHEMA_VERSION,
    SUMMARY_KEYS,
    RunReader,
    RunWriter,
    list_runs,
    open_for_analysis,
    resolve_run,
)
from bench.store.schema import APPLICATION_ID, SCHEMA_SQL, decode_samples, encode_samples

START = datetime(2026, 3, 4, 5, 6, 7, tzinfo=timezone(timedelta(hours=1)))


class FakeClock:
    """A monotonic clock the test moves by hand."""

    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def _block(
    seq: int, source: str = "detector", n: int = 500, t0: float | None = None, exact32: bool = False
) -> Block:
    rng = np.random.default_rng(seq)
    if exact32:  # 16-bit ADC codes times a power-of-two step: exact in float32
        data = rng.integers(-32768, 32768, size=(n, 2)) * 2.0**-14
    else:
        data = rng.normal(0.5, 0.01, size=(n, 2))
    return Block(
        source=source,
        seq=seq,
        t0=seq * n * 1e-5 if t0 is None else t0,
        dt=1e-5,
        first_index=seq * n,
        channels=("probe", "reference"),
        data=data,
    )


def _estimate(t: float, beta: float, scope: str = "cumulative") -> Estimate:
    return Estimate(
        t=t,
        mode="watch",
        scope=scope,
        values={"beta": Quantity(beta, 0.01, 0.008, 0.006), "ln_ratio": Quantity(0.2, 0.003, 0.003, 0.0)},
        flags=frozenset({"low_snr"}),
        n_samples=int(t * 1e5),
        extra={"window_s": 0.1},
    )


def _writer(tmp_path: Path, **kw) -> RunWriter:
    kw.setdefault("bench_text", "[bench]\nname = 'x'\n")
    kw.setdefault("sample_id", "S1")
    kw.setdefault("start_time", START)
    return RunWriter.create(tmp_path / "logs", **kw)


def test_round_trip_of_every_record(tmp_path):
    with _writer(
        tmp_path,
        operator="ada",
        mode="chopped",
        simulated=True,
        instruments={"detector": "MAKER,DIG-1,123,1.0"},
    ) as w:
        blocks = [_block(i, exact32=i % 2 == 0) for i in range(6)] + [_block(0, source="pump", n=1, t0=0.001)]
        for b in blocks:
            w.append_block(b)
        w.append_estimates([_estimate(0.01, 0.30, "window"), _estimate(0.02, 0.31)])
        w.append_estimates(_estimate(0.03, 0.32))
        w.append_event(Event(t=0.005, kind="note", text="aligned", who="ada", data={"x": [1, 2]}))
        w.append_event(Event(t=0.001, kind="guard", text="armed", data={"from": "safe", "to": "armed"}))
        w.append_truth(0.01, {"beta": 0.305, "tau_s": 6e-4})
        w.set_meta(instruments={"detector": "MAKER,DIG-1,123,1.1"})
        path = w.path
    with RunReader(path) as r:
        assert r.status == "complete"
        assert r.meta["operator"] == "ada" and r.meta["mode"] == "chopped" and r.meta["simulated"] is True
        assert r.meta["instruments"] == {"detector": "MAKER,DIG-1,123,1.1"}
        assert r.meta["start_time"] == "2026-03-04T05:06:07.000+01:00"
        assert r.meta["bench_text"] == "[bench]\nname = 'x'\n"
        assert r.block_count() == 7 and r.block_count("pump") == 1
        got = list(r.iter_blocks())
        # Time order overall: the pump's block at 1 ms comes between detector blocks 0 and 1.
        assert [(b.source, b.seq) for b in got][:3] == [("detector", 0), ("pump", 0), ("detector", 1)]
        by_key = {(b.source, b.seq): b for b in blocks}
        for b in got:
            ref = by_key[(b.source, b.seq)]
            assert b.data.dtype == np.float64
            assert np.array_equal(b.data.view(np.uint64), ref.data.view(np.uint64))  # bit for bit
            assert (b.t0, b.dt, b.first_index, b.channels) == (ref.t0, ref.dt, ref.first_index, ref.channels)
        est = r.estimates()
        assert [e.t for e in est] == [0.01, 0.02, 0.03]
        assert est[0].values["beta"] == Quantity(0.30, 0.01, 0.008, 0.006)
        assert est[0].flags == frozenset({"low_snr"}) and est[0].extra["window_s"] == 0.1
        assert r.final_estimate().values["beta"].value == 0.32
        assert [e.text for e in r.events()] == ["armed", "aligned"]  # time order
        assert r.events()[1].data["x"] == [1, 2]
        assert r.truth() == [{"t": 0.01, "beta": 0.305, "tau_s": 6e-4}]
        assert [a["kind"] for a in r.analyses()] == ["live"] and r.analyses()[0]["finished"] is not None
        r.integrity_check()


def test_samples_are_float32_only_when_exact():
    # IEEE 754 binary32 holds 2**-14 multiples of 16-bit codes and integers below 2**24 exactly.
    exact = np.array([[0.0, -0.0], [1.0, 2.0**-14 * 12345], [16777216.0, np.inf]])
    dtype, blob = encode_samples(exact)
    assert dtype == "<f4" and len(blob) == exact.size * 4
    back = decode_samples(blob, dtype, 3, 2)
    assert np.array_equal(back.view(np.uint64), exact.view(np.uint64))  # -0.0 kept too
    # 0.1 and 2**24 + 1 are not binary32 numbers; 1e39 overflows binary32.
    for value in (0.1, 16777217.0, 1e39):
        arr = np.array([[1.0, value]])
        dtype, blob = encode_samples(arr)
        assert dtype == "<f8"
        assert np.array_equal(decode_samples(blob, dtype, 1, 2), arr)


def test_stored_dtype_column_follows_the_data(tmp_path):
    with _writer(tmp_path) as w:
        w.append_block(_block(0, exact32=True))
        w.append_block(_block(1))
        path = w.path
    with closing(sqlite3.connect(path)) as c:
        assert c.execute("SELECT seq, dtype, length(data) FROM blocks ORDER BY seq").fetchall() == [
            (0, "<f4", 500 * 2 * 4),
            (1, "<f8", 500 * 2 * 8),
        ]


def test_file_layout_follows_the_sqlite_format(tmp_path):
    with _writer(tmp_path) as w:
        w.append_block(_block(0))
        path = w.path
        with closing(sqlite3.connect(path)) as live:
            assert live.execute("PRAGMA journal_mode").fetchone()[0] == "wal"  # while recording
    assert path.name == "20260304-050607-S1.gbrun"
    head = path.read_bytes()[:100]
    # SQLite file format, section 1.3: magic, write/read version 1 = rollback journal (not WAL),
    # user version at offset 60, application id at offset 68.
    assert head[:16] == b"SQLite format 3\x00"
    assert head[18:20] == b"\x01\x01"
    assert struct.unpack(">I", head[60:64])[0] == SCHEMA_VERSION
    assert struct.unpack(">I", head[68:72])[0] == APPLICATION_ID
    assert not Path(f"{path}-wal").exists() and not Path(f"{path}-shm").exists()


def test_run_ids_from_start_time_and_sample_with_suffix_when_taken(tmp_path):
    names = []
    for sample in ("S1", "S1", "S1", "", "a b/c:d"):
        w = _writer(tmp_path, sample_id=sample)
        names.append(w.run_id)
        w.close()
    assert names == [
        "20260304-050607-S1",
        "20260304-050607-S1-2",
        "20260304-050607-S1-3",
        "20260304-050607-run",
        "20260304-050607-a-b-c-d",
    ]


def test_flush_policy_commits_by_time_on_appends_and_when_asked(tmp_path):
    clock = FakeClock()
    w = _writer(tmp_path, flush_interval=0.5, clock=clock)

    def committed() -> int:
        with closing(sqlite3.connect(f"file:{w.path}?mode=ro", uri=True)) as c:
            return c.execute("SELECT count(*) FROM blocks").fetchone()[0]

    w.append_block(_block(0))
    assert committed() == 0 and w.flush_count == 0  # within the interval: held in the transaction
    clock.now += 0.3
    w.append_block(_block(1))
    assert not w.flush_if_due() and committed() == 0
    clock.now += 0.2
    w.append_block(_block(2))  # 0.5 s after the last commit: this append commits
    assert committed() == 3 and w.flush_count == 1
    w.append_block(_block(3))
    clock.now += 0.6
    assert w.flush_if_due() and committed() == 4  # a quiet spell is committed by the pipeline's call
    assert not w.flush_if_due()  # nothing pending
    w.close()


def test_flush_interval_is_limited_to_one_second(tmp_path):
    for bad in (0, -1, 1.5, float("nan")):
        with pytest.raises(ValueError, match="flush_interval"):
            _writer(tmp_path, flush_interval=bad)


def test_from_config_takes_the_bench_settings(tmp_path):
    cfg = load_bench()
    with RunWriter.from_config(cfg, log_dir=tmp_path, mode="decay") as w:
        assert w.flush_interval == cfg.run.flush_interval
        path = w.path
    with RunReader(path) as r:
        assert r.meta["bench_text"] == cfg.text
        assert r.meta["sample_id"] == cfg.sample.sample_id and r.meta["simulated"] is True
        assert r.meta["mode"] == "decay" and r.meta["sample_label"] == cfg.sample.label


def test_reader_sees_commits_while_the_run_is_recorded(tmp_path):
    w = _writer(tmp_path)
    w.append_block(_block(0))
    w.flush()
    with RunReader(w.path) as r:
        assert r.status == "incomplete" and r.block_count() == 1
        w.append_block(_block(1))
        w.append_block(_block(2))
        assert r.block_count() == 1  # not yet committed
        w.flush()
        assert [b.seq for b in r.iter_blocks()] == [0, 1, 2]
        w.close()  # a reader is still open: the file stays in WAL mode, still valid
    with RunReader(w.path) as r:
        assert r.status == "complete" and r.block_count() == 3


def test_window_and_source_selection(tmp_path):
    with _writer(tmp_path) as w:
        for i in range(5):
            w.append_block(_block(i, n=100, t0=float(i)))  # block i covers [i, i + 0.00099] s
        w.append_block(_block(0, source="pump", n=1, t0=2.5))
        # A slow logger's block: 11 samples 1 s apart from t = -4 s, so it spans [-4, 6] s.
        w.append_block(Block("logger", 0, -4.0, 1.0, 0, ("mount_temp",), np.full((11, 1), 298.0)))
        path = w.path
    with RunReader(path) as r:
        assert [(b.source, b.seq) for b in r.iter_blocks(start=1.0, stop=3.0)] == [
            ("logger", 0),
            ("detector", 1),
            ("detector", 2),
            ("pump", 0),
        ]
        assert [b.seq for b in r.iter_blocks(source="detector", start=3.0005)] == [3, 4]
        assert [b.source for b in r.iter_blocks(start=5.99, stop=7.0)] == ["logger"]
        assert list(r.iter_blocks(start=6.01, stop=7.0)) == []
        assert [b.seq for b in r.iter_blocks(source="pump")] == [0]
        assert r.sources() == ["detector", "logger", "pump"]
        assert r.channels() == ("probe", "reference", "mount_temp")
        assert r.channels("logger") == ("mount_temp",)
        with pytest.raises(ValueError, match="start"):
            r.iter_blocks(start="soon")


def test_reanalysis_is_stored_beside_the_original(tmp_path):
    with _writer(tmp_path) as w:
        for i in range(3):
            w.append_block(_block(i))
        w.append_event(Event(t=0.0, kind="run", text="started"))
        w.append_estimates([_estimate(0.01, 0.30), _estimate(0.02, 0.31)])
        path = w.path
    with RunReader(path) as r:
        blocks_before = [b.data.tobytes() for b in r.iter_blocks()]
        events_before = r.events()
    with open_for_analysis(path, "reanalysis", {"sample.length": "5.1 mm"}, note="longer sample") as a:
        assert a.analysis_id == 2
        a.append_estimates([_estimate(0.01, 0.40), _estimate(0.02, 0.41)])
    with open_for_analysis(path, "replay") as a:
        a.append_estimates(_estimate(0.02, 0.31))
    with RunReader(path) as r:
        assert [b.data.tobytes() for b in r.iter_blocks()] == blocks_before
        assert r.events() == events_before
        assert [e.values["beta"].value for e in r.estimates()] == [0.30, 0.31]  # original untouched
        assert [e.values["beta"].value for e in r.estimates(2)] == [0.40, 0.41]
        analyses = r.analyses()
        assert [(a["id"], a["kind"], a["estimates"]) for a in analyses] == [
            (1, "live", 2),
            (2, "reanalysis", 2),
            (3, "replay", 1),
        ]
        assert (
            analyses[1]["overrides"] == {"sample.length": "5.1 mm"} and analyses[1]["note"] == "longer sample"
        )
        assert r.final_estimate(2).values["beta"].value == 0.41
        summary = r.summary()
        assert summary["beta_analysis"] == 3 and summary["beta"] == 0.31
        with pytest.raises(RunStoreError, match=r"has no analysis 7 \(its analyses: 1, 2, 3\)"):
            r.estimates(7)
    with pytest.raises(ValueError, match="kind"):
        open_for_analysis(path, "live")


def test_recorded_rows_cannot_be_changed_even_by_hand(tmp_path):
    with _writer(tmp_path) as w:
        w.append_block(_block(0))
        w.append_event(Event(t=0.0, kind="note", text="x"))
        w.append_estimates(_estimate(0.01, 0.3))
        path = w.path
    with closing(sqlite3.connect(path)) as c:
        for sql in (
            "UPDATE blocks SET t0 = 1",
            "DELETE FROM blocks",
            "UPDATE events SET text = 'y'",
            "DELETE FROM estimates",
            "UPDATE estimates SET t = 0",
            "UPDATE analyses SET kind = 'replay'",
        ):
            with pytest.raises(sqlite3.IntegrityError, match="never"):
                c.execute(sql)


def test_writer_refuses_bad_input_and_use_after_close(tmp_path):
    w = _writer(tmp_path)
    w.append_block(_block(0))
    with pytest.raises(ValueError, match="block detector #0: refused"):
        w.append_block(_block(0))  # same source and seq twice
    with pytest.raises(ValueError, match="block: expected Block"):
        w.append_block("not a block")
    with pytest.raises(ValueError, match="values: must not have a key 't'"):
        w.append_truth(0.0, {"t": 1})
    for key in ("run_id", "block_layouts", "max_block_span_s"):
        with pytest.raises(ValueError, match="cannot be changed"):
            w.set_meta({key: "other"})
    with pytest.raises(ValueError, match="cannot be stored as JSON"):
        w.set_meta(thing=object())
    w.close()
    w.close()  # harmless
    with pytest.raises(RunStoreError, match="the writer is closed"):
        w.append_block(_block(1))


def test_an_exception_leaves_a_complete_file_saying_why(tmp_path):
    with pytest.raises(RuntimeError), _writer(tmp_path) as w:
        w.append_block(_block(0))
        raise RuntimeError("instrument fell over")
    with RunReader(w.path) as r:
        assert r.status == "complete" and r.meta["stop_reason"] == "error: RuntimeError"
        assert r.block_count() == 1


def test_resolve_run_by_path_id_and_prefix(tmp_path):
    logs = tmp_path / "logs"
    ids = []
    for sample in ("S1", "S2", "T1"):
        w = _writer(tmp_path, sample_id=sample)
        ids.append(w.run_id)
        w.close()
    assert resolve_run(ids[0], logs) == logs / f"{ids[0]}.gbrun"
    assert resolve_run("20260304-050607-T", logs).name == f"{ids[2]}.gbrun"
    assert resolve_run(str(logs / f"{ids[1]}.gbrun"), logs) == logs / f"{ids[1]}.gbrun"
    with pytest.raises(
        RunStoreError, match=r"'20260304-050607-S' matches 2 runs in .*S1, 20260304-050607-S2; give"
    ):
        resolve_run("20260304-050607-S", logs)
    with pytest.raises(RunStoreError, match=r"no run matches '1999' in .*\(3 runs there"):
        resolve_run("1999", logs)
    with pytest.raises(RunStoreError, match="no such run file"):
        resolve_run(str(tmp_path / "nope.gbrun"), logs)
    with pytest.raises(RunStoreError, match="log directory .* does not exist"):
        resolve_run("x", tmp_path / "missing")


def test_list_runs_shows_broken_files_without_failing(tmp_path):
    logs = tmp_path / "logs"
    with _writer(tmp_path) as w:
        w.append_block(_block(0))
        w.append_estimates(_estimate(0.01, 0.3))
    cut = _writer(tmp_path, sample_id="cut")
    cut.append_block(_block(0))
    cut.flush()  # left open: no stop time yet
    (logs / "zz-empty.gbrun").write_bytes(b"")
    (logs / "zz-text.gbrun").write_text("hello, not a run\n" * 20)
    (logs / "zz-dir.gbrun").mkdir()
    (logs / "notes.txt").write_text("ignored")
    rows = {row["id"]: row for row in list_runs(logs)}
    assert len(rows) == 5
    assert all(set(row) == set(SUMMARY_KEYS) for row in rows.values())
    done = rows[w.run_id]
    assert done["status"] == "complete" and done["beta"] == 0.3 and done["beta_sigma"] == 0.01
    assert done["sample"] == "S1" and done["blocks"] == 1 and done["size_bytes"] > 0
    assert rows[cut.run_id]["status"] == "incomplete"
    assert rows["zz-empty"]["status"] == "unreadable" and "empty" in rows["zz-empty"]["error"]
    assert "not a SQLite database" in rows["zz-text"]["error"]
    assert "is a directory" in rows["zz-dir"]["error"]
    cut.close()
    assert list_runs(tmp_path / "nowhere") == []


# -- creating a run file: built under a temporary name, renamed once complete ---------------


def _names(directory: Path) -> list[str]:
    return sorted(p.name for p in directory.iterdir())


def test_the_run_file_is_built_aside_and_renamed_only_once_complete(tmp_path, monkeypatch):
    seen = {}
    real_publish = writer_module._publish

    def publish(temp: Path, path: Path) -> None:
        # Just before the rename: nothing has the final name yet, and the temporary file alone
        # (no journal beside it) is a complete run that SQLite finds intact.
        seen.update(
            temp=temp, final_existed=path.exists(), names=_names(temp.parent), head=temp.read_bytes()[:100]
        )
        with RunReader(temp) as r:
            r.integrity_check()
            seen["run_id"] = r.meta["run_id"]
        real_publish(temp, path)

    monkeypatch.setattr(writer_module, "_publish", publish)
    w = _writer(tmp_path)
    logs = tmp_path / "logs"
    temp = seen["temp"]
    assert temp.parent == logs and temp.name == ".20260304-050607-S1.gbrun.creating"
    assert seen["final_existed"] is False and seen["names"] == [temp.name]
    assert seen["run_id"] == w.run_id
    # SQLite file format, section 1.3: bytes 18-19 are 1 for a rollback journal, 2 for WAL.
    assert seen["head"][18:20] == b"\x01\x01"
    assert w.path == logs / "20260304-050607-S1.gbrun" and not temp.exists()

    # WAL mode was set on the final name: the header says WAL, and SQLite opens the -wal file
    # (beside the final name) at the first write.
    assert w.path.read_bytes()[18:20] == b"\x02\x02"
    assert _names(logs) == ["20260304-050607-S1.gbrun"]
    with closing(sqlite3.connect(f"file:{w.path}?mode=ro", uri=True)) as c:
        assert c.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    with RunReader(w.path) as r:  # read-only
        r.integrity_check()
        assert r.status == "incomplete" and r.run_id == w.run_id and r.block_count() == 0
    w.append_block(_block(0))
    w.flush()
    assert _names(logs) == [
        "20260304-050607-S1.gbrun",
        "20260304-050607-S1.gbrun-shm",
        "20260304-050607-S1.gbrun-wal",
    ]
    assert Path(f"{w.path}-wal").stat().st_size > 0  # the commit went beside the final name
    w.close()
    assert _names(logs) == ["20260304-050607-S1.gbrun"]


def _fail_in_schema(monkeypatch):
    # a statement that fails inside the creating transaction, after the tables are made
    monkeypatch.setattr(writer_module, "SCHEMA_SQL", SCHEMA_SQL + "\nCREATE TABLE meta (key TEXT);")


def _fail_at_rename(monkeypatch):
    def publish(temp: Path, path: Path) -> None:
        raise PermissionError(13, "Permission denied (simulated)", str(path))

    monkeypatch.setattr(writer_module, "_publish", publish)


@pytest.mark.parametrize(
    "fail, kw, error, message",
    [
        (
            _fail_in_schema,
            {},
            RunStoreError,
            r"20260304-050607-S1\.gbrun: cannot create the run file \(SQLite: table meta",
        ),
        (
            _fail_at_rename,
            {},
            RunStoreError,
            r"20260304-050607-S1\.gbrun: cannot create the run file \(Permission denied",
        ),
        (None, {"meta": {"thing": object()}}, ValueError, r"meta\['thing'\].*cannot be stored as JSON"),
    ],
    ids=["schema", "rename", "bad-meta"],
)
def test_a_failed_creation_leaves_no_file_at_all(tmp_path, monkeypatch, fail, kw, error, message):
    if fail is not None:
        fail(monkeypatch)
    logs = tmp_path / "logs"
    with pytest.raises(error, match=message):
        _writer(tmp_path, **kw)
    assert _names(logs) == []  # neither the final name nor the temporary file or its journal
    assert list_runs(logs) == []
    monkeypatch.undo()
    with _writer(tmp_path) as w:  # the run id is free again
        assert w.run_id == "20260304-050607-S1"


KILLED_CHILD = textwrap.dedent(
    """
    import os, sys
    from datetime import datetime, timezone
    import numpy as np
    import bench.store.writer as writer
    from bench.records import Block

    log_dir, when = sys.argv[1], sys.argv[2]
    if when == "before_rename":
        writer._publish = lambda temp, path: os._exit(9)
    w = writer.RunWriter.create(log_dir, bench_text="[bench]\\n", sample_id="S1",
                                start_time=datetime(2026, 3, 4, 5, 6, 7, tzinfo=timezone.utc))
    w.append_block(Block("detector", 0, 0.0, 1e-5, 0, ("probe", "reference"), np.ones((10, 2))))
    w.flush()
    os._exit(9)
    """
)


def _killed_creation(logs: Path, when: str) -> None:
    """Run a child that creates a run and dies at ``when`` by os._exit: like SIGKILL, it runs no
    cleanup (no finally, no atexit, no SQLite close); the OS closes its files. Portable."""
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    proc = subprocess.run(
        [sys.executable, "-c", KILLED_CHILD, str(logs), when],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert proc.returncode == 9, proc.stderr


def test_a_creation_killed_before_the_rename_leaves_no_run(tmp_path, capsys):
    logs = tmp_path / "logs"
    _killed_creation(logs, "before_rename")
    assert _names(logs) == [".20260304-050607-S1.gbrun.creating"]  # complete, but never renamed
    assert list_runs(logs) == []
    with pytest.raises(RunStoreError, match="no run matches '2026'"):
        resolve_run("2026", logs)
    capsys.readouterr()
    assert main(["runs", "--logs", str(logs)]) == 0
    assert capsys.readouterr().out.strip() == f"no runs in {logs}"
    # The leftover keeps its id taken; the next run of that second gets the next id.
    with RunWriter.create(
        logs, bench_text="[bench]\n", sample_id="S1", start_time=datetime(2026, 3, 4, 5, 6, 7, tzinfo=UTC)
    ) as w:
        assert w.run_id == "20260304-050607-S1-2"
    (row,) = list_runs(logs)
    assert row["id"] == "20260304-050607-S1-2" and row["status"] == "complete"


def test_a_run_killed_after_a_commit_keeps_it_beside_the_final_name(tmp_path):
    # WAL mode survives the rename: the commit made after it is in <run>.gbrun-wal.
    logs = tmp_path / "logs"
    _killed_creation(logs, "after_commit")
    assert _names(logs) == [
        "20260304-050607-S1.gbrun",
        "20260304-050607-S1.gbrun-shm",
        "20260304-050607-S1.gbrun-wal",
    ]
    with RunReader(logs / "20260304-050607-S1.gbrun") as r:
        r.integrity_check()
        assert r.status == "incomplete" and r.block_count() == 1
