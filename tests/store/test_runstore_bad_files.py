"""Bad run files: every one gives a RunStoreError naming the file and what is wrong, and
reading never changes a byte of it (nor its modification time).

The damage is made by hand to a valid run: cut short, bits flipped, another program's SQLite
database, a newer schema. Offsets are those of the SQLite file format
(https://www.sqlite.org/fileformat.html, section 1.3: page size at offset 16, page count at
28, user version at 60, application id at 68). The fuzz tests (hypothesis) cut and flip at
random: the outcome is always a RunStoreError or a complete read, never another exception.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import struct
import tempfile
from contextlib import closing
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.errors import RunStoreError
from bench.records import Block, Estimate, Event, Quantity
from bench.store import RunReader, RunWriter, list_runs, open_for_analysis


def _fingerprint(path: Path) -> tuple[str, int, int]:
    st_ = path.stat()
    return hashlib.sha256(path.read_bytes()).hexdigest(), st_.st_mtime_ns, st_.st_size


def _make_run(log_dir: Path) -> Path:
    with RunWriter.create(log_dir, bench_text="[bench]\nname = 'fuzz'\n", sample_id="F") as w:
        for seq in range(3):
            rng = np.random.default_rng(seq)
            data = rng.normal(size=(64, 2)) if seq % 2 else rng.integers(0, 4096, size=(64, 2)) * 2.0**-12
            w.append_block(Block("detector", seq, seq * 64e-5, 1e-5, seq * 64, ("probe", "reference"), data))
        w.append_estimates(
            Estimate(0.002, "watch", "cumulative", {"beta": Quantity(0.3, 0.01)}, frozenset({"low_snr"}))
        )
        w.append_event(Event(0.001, "note", "fuzz me", data={"k": 1}))
        w.append_truth(0.001, {"beta": 0.3})
        path = w.path
    with open_for_analysis(path, "reanalysis", {"sample.length": "5 mm"}) as a:
        a.append_estimates(Estimate(0.002, "watch", "cumulative", {"beta": Quantity(0.31, 0.01)}))
    return path


@lru_cache(maxsize=1)
def _valid_bytes() -> bytes:
    with tempfile.TemporaryDirectory() as d:
        return _make_run(Path(d)).read_bytes()


def _read_everything(path: Path) -> None:
    with RunReader(path) as r:
        _ = r.meta, r.status, r.run_id
        list(r.iter_blocks())
        list(r.iter_blocks(source="detector", start=0.0, stop=1.0))
        r.block_count()
        r.sources()
        r.channels()
        for a in r.analyses():
            r.estimates(a["id"])
            r.final_estimate(a["id"])
        r.events()
        r.truth()
        r.summary()
        r.integrity_check()


def _expect_error(path: Path, *fragments: str) -> str:
    before = _fingerprint(path)
    with pytest.raises(RunStoreError) as info:
        _read_everything(path)
    message = str(info.value)
    assert message.startswith(f"{path}: "), message
    for fragment in fragments:
        assert fragment in message, message
    assert _fingerprint(path) == before
    return message


@pytest.fixture
def valid(tmp_path) -> Path:
    path = tmp_path / "good.gbrun"
    path.write_bytes(_valid_bytes())
    return path


def test_the_valid_run_reads_and_is_not_touched(valid):
    before = _fingerprint(valid)
    _read_everything(valid)
    assert _fingerprint(valid) == before
    assert sorted(p.name for p in valid.parent.iterdir()) == ["good.gbrun"]  # no side files


def test_missing_file_and_directory(tmp_path):
    _expect_error_no_file(tmp_path / "absent.gbrun", "no such run file")
    d = tmp_path / "dir.gbrun"
    d.mkdir()
    _expect_error_no_file(d, "is a directory, not a run file")


def _expect_error_no_file(path: Path, fragment: str) -> None:
    with pytest.raises(RunStoreError, match=fragment) as info:
        RunReader(path)
    assert str(info.value).startswith(f"{path}: ")


def test_empty_file(tmp_path):
    path = tmp_path / "empty.gbrun"
    path.write_bytes(b"")
    _expect_error(path, "is empty (0 bytes)")


def test_not_sqlite(tmp_path):
    path = tmp_path / "text.gbrun"
    path.write_text("time,probe,reference\n0,1,2\n" * 100)
    _expect_error(path, "not a SQLite database")


@pytest.mark.parametrize("keep", [10, 99, 4096, 32768, 32768 * 3 + 17, -32768])
def test_truncated(tmp_path, keep):
    data = _valid_bytes()
    path = tmp_path / "cut.gbrun"
    path.write_bytes(data[:keep])
    _expect_error(path, "truncated")


def test_truncated_tail_is_reported_against_the_header_page_count(tmp_path):
    data = _valid_bytes()
    # SQLite file format 1.3: page size (2 bytes) at 16, page count (4 bytes) at 28.
    page_size = struct.unpack(">H", data[16:18])[0]
    pages = struct.unpack(">I", data[28:32])[0]
    assert pages * page_size == len(data)
    path = tmp_path / "cut.gbrun"
    path.write_bytes(data[: (pages - 1) * page_size])
    _expect_error(path, f"its header counts {pages} pages of {page_size} bytes")


def test_foreign_sqlite_database(tmp_path):
    path = tmp_path / "other.gbrun"
    with closing(sqlite3.connect(path)) as c:
        c.execute("CREATE TABLE sensors (t REAL, v REAL)")
        c.execute("CREATE TABLE meta (key TEXT, value TEXT)")
        c.commit()
    _expect_error(
        path, "is not a gainbench run file: a SQLite database of another program (tables: meta, sensors)"
    )


def test_gainbench_id_but_missing_tables(valid):
    with closing(sqlite3.connect(valid)) as c:
        c.execute("DROP TABLE truth")
        c.commit()
    _expect_error(valid, "is damaged: table truth missing")


def test_newer_schema(valid):
    with closing(sqlite3.connect(valid)) as c:
        c.execute("PRAGMA user_version = 99")
        c.commit()
    _expect_error(valid, "was written by a newer gainbench (run file schema 99; this version reads up to 1)")
    with pytest.raises(RunStoreError, match="newer gainbench"):
        open_for_analysis(valid, "reanalysis")


def test_wrong_application_row(valid):
    with closing(sqlite3.connect(valid)) as c:
        c.execute("UPDATE meta SET value = '\"someone else\"' WHERE key = 'application'")
        c.commit()
    _expect_error(valid, "its application is 'someone else'")


def test_damaged_rows_are_named(valid):
    with closing(sqlite3.connect(valid)) as c:
        c.execute("DROP TRIGGER events_kept_update")
        c.execute("UPDATE events SET data = '{not json'")
        c.commit()
    _expect_error(valid, "is damaged: event: event data is not valid JSON")


def test_flipped_byte_in_the_schema_page(tmp_path):
    data = bytearray(_valid_bytes())
    # The schema's text (sqlite_schema rows) sits on page 1; one flipped bit turns the "(" of
    # "CREATE TABLE blocks (" into ")" (ASCII 0x28 -> 0x29), which SQLite cannot parse.
    at = data.find(b"CREATE TABLE blocks (")
    assert 0 < at < 32768
    data[at + 20] ^= 0x01
    path = tmp_path / "flip.gbrun"
    path.write_bytes(bytes(data))
    _expect_error(path, "is damaged (SQLite: malformed database schema")


def test_text_that_is_not_utf8(tmp_path):
    data = bytearray(_valid_bytes())
    at = data.find(b"fuzz me")  # the event's text; 0xFF never occurs in UTF-8 (RFC 3629)
    assert at > 0
    data[at] = 0xFF
    path = tmp_path / "utf.gbrun"
    path.write_bytes(bytes(data))
    _expect_error(path, "is damaged")


def test_a_wal_mode_run_is_read_without_changing_the_main_file(tmp_path):
    w = RunWriter.create(tmp_path, bench_text="", sample_id="W")
    w.append_block(Block("detector", 0, 0.0, 1e-5, 0, ("probe",), np.ones((10, 1))))
    w.flush()
    main = _fingerprint(w.path)
    _read_everything(w.path)
    assert _fingerprint(w.path) == main
    w.close()


def test_list_runs_survives_every_kind_of_bad_file(tmp_path, valid):
    data = _valid_bytes()
    (tmp_path / "a-cut.gbrun").write_bytes(data[:5000])
    (tmp_path / "b-empty.gbrun").write_bytes(b"")
    prints = {p.name: _fingerprint(p) for p in tmp_path.iterdir()}
    rows = list_runs(tmp_path)
    assert [r["status"] for r in rows] == ["unreadable", "unreadable", "complete"]
    assert "truncated" in rows[0]["error"] and "empty" in rows[1]["error"]
    assert {p.name: _fingerprint(p) for p in tmp_path.iterdir()} == prints


# --------------------------------------------------------------------------------------------
# Fuzzing


def _fuzz_check(data: bytes) -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "fuzz.gbrun"
        path.write_bytes(data)
        os.utime(path, ns=(1_000_000_000, 1_000_000_000))
        before = _fingerprint(path)
        try:
            _read_everything(path)
        except RunStoreError as exc:
            assert str(exc).startswith(f"{path}: ")
        assert _fingerprint(path) == before


_FUZZ = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@_FUZZ
@given(cut=st.integers(min_value=0, max_value=len(_valid_bytes()) - 1))
def test_fuzz_truncation(cut):
    _fuzz_check(_valid_bytes()[:cut])


@_FUZZ
@given(
    flips=st.lists(
        st.tuples(
            st.one_of(st.integers(0, 32767), st.integers(0, len(_valid_bytes()) - 1)), st.integers(0, 7)
        ),
        min_size=1,
        max_size=8,
    )
)
def test_fuzz_bit_flips(flips):
    data = bytearray(_valid_bytes())
    for position, bit in flips:
        data[position] ^= 1 << bit
    _fuzz_check(bytes(data))
