"""`gainbench record` and `gainbench summary --json` as the run tests call them: one recorded
run (quiet, with the arming flags of `cli_flags.ARM`) and its summary."""

from __future__ import annotations

import io
import json
from contextlib import redirect_stdout
from pathlib import Path

from cli_flags import ARM

from bench.cli import main


def record_run(logs: Path, *args: str) -> tuple[str, str]:
    """(run id, everything `record` printed) of ``record --quiet --logs LOGS ARM... ARGS``;
    the exit status must be 0."""
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["record", "--quiet", "--logs", str(logs), *ARM, *args])
    out = buf.getvalue()
    assert code == 0, out
    return out.strip().splitlines()[-1], out


def summary_json(logs: Path, run_id: str, capsys, *extra: str) -> dict:
    """``gainbench summary RUN --json`` read back (``capsys`` is pytest's fixture)."""
    capsys.readouterr()
    assert main(["summary", run_id, "--logs", str(logs), "--json", *extra]) == 0
    return json.loads(capsys.readouterr().out)
