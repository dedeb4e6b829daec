"""A bench whose detector is a triggered scope: identified and read by the scope driver, but no
measurement records with it yet. `record` must say so before anything opens (no simulator, no
run file), not fail later inside the acquisition."""

from __future__ import annotations

from cli_flags import ARM

from bench.cli import main
from bench.config import builtin_bench_path


def test_record_on_a_scope_bench_is_refused_before_anything_opens(tmp_path, capsys):
    text = builtin_bench_path().read_text(encoding="utf-8")
    text = text.replace('driver = "digitiser"', 'driver = "scope"', 1).replace(
        'profile = "generic-digitiser"', 'profile = "generic-scope"', 1
    )
    start = text.index("options = {", text.index("[instruments.detector]"))
    text = text[:start] + text[text.index("\n", start) + 1 :]  # the digitiser's options
    bench = tmp_path / "scope_bench.toml"
    bench.write_text(text, encoding="utf-8")
    logs = tmp_path / "logs"
    code = main(["record", "--config", str(bench), "--logs", str(logs), "--quiet", *ARM])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "driver scope" in err and "pulsed mode is to come" in err, err
    assert not logs.exists() or not list(logs.glob("*.gbrun"))
