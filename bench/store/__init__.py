"""The run store: one SQLite file per run, written so that a killed process loses little.

A run is recorded by a `RunWriter` into ``<log_dir>/<run_id>.gbrun``, where ``run_id`` is
``YYYYMMDD-HHMMSS-<sample id or "run">`` (local start time), with ``-2``, ``-3``, ... added when
that name is taken. The file's layout is described in `bench.store.schema`. A `RunReader`
reads a run back, also while it is still being recorded; `open_for_analysis` adds the
estimates of a replay or re-analysis beside the original ones. `resolve_run` and `list_runs`
find runs in a log directory.

Durability
----------
While recording, the file is in SQLite's WAL journal mode with ``synchronous=FULL``: each
commit writes and fsyncs the ``-wal`` file, so whatever was committed survives a killed
process (and, if the disk honours fsync, a power cut). The writer commits at least once per
flush interval (at most 1 s). It does so without a thread: every append checks the time since
the last commit, and the pipeline calls `RunWriter.flush_if_due` from its loop so that a quiet
spell is committed too. A writer is used from one thread at a time. Nothing waits in memory
for a commit but SQLite's own bounded page cache, so a 24-hour run keeps memory flat.

When the writer closes, the ``-wal`` file is merged into the main file and the journal mode is
set back to DELETE, so a finished run is one self-contained file. A run that was cut off
(killed, power cut) keeps its last commits in ``<run>.gbrun-wal`` until something opens the
file for writing (`open_for_analysis` does); copy the ``-wal`` file with it.

A checkpoint cut off by a full disk leaves the main file shorter than its header says (or not
a whole number of pages) beside a ``-wal`` file that still holds every page. SQLite reads such
a file, and so does `RunReader`: it lets SQLite check that the missing pages are in the
``-wal`` file (``PRAGMA quick_check``) instead of refusing the file by its size. The next
write (`open_for_analysis`) checkpoints it into one complete file again.

Reading never writes the run file
---------------------------------
`RunReader` opens the file read-only (SQLite URI ``mode=ro``) after checking its first bytes
itself. The main file's bytes are never changed by reading. For a file in WAL mode (a run
being recorded, or cut off), SQLite needs the ``-wal`` and ``-shm`` files beside it: a reader
uses them when they are there, and creates them (empty) when they are not and the directory
is writable; it leaves them behind, since only a writer may remove them. (In a read-only
directory a WAL-mode run opens only if those files are already there.) A finished run is in
DELETE mode and reading it creates no file at all.
"""

from bench.store.reader import SUMMARY_KEYS, RunReader, list_runs, resolve_run
from bench.store.schema import SCHEMA_VERSION, SUFFIX
from bench.store.writer import AnalysisWriter, RunWriter, open_for_analysis

__all__ = [
    "SCHEMA_VERSION",
    "SUFFIX",
    "SUMMARY_KEYS",
    "AnalysisWriter",
    "RunReader",
    "RunWriter",
    "list_runs",
    "open_for_analysis",
    "resolve_run",
]
