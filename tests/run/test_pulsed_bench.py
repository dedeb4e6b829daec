"""The demo bench with pulsed pumping and a triggered scope, through the command line with its
defaults: `record --mode pulsed --shots 50`, summary, replay, and the refusals.

The outside reference is the simulated medium's own state: `summary --json` gives, beside the
estimates, the medium's populations at the end of its pump pulses (polled from the simulator's
``SIM:TRUTH:PULSE?``, never from the estimator) and its lifetime. On a simulated sample with
no parameter error the estimate lies within 4 sigma_noise of it. The replay is checked
against the stored live estimates ("identical" in replay's own compare).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_flags import ARM
from cli_runs import record_run
from cli_runs import summary_json as summary
from scipy import constants

from bench.cli import main
from bench.config import builtin_bench_path
from bench.store import RunReader

DATA = Path(__file__).resolve().parents[2] / "bench" / "data"
PULSED_BENCH = str(DATA / "demo_pulsed_bench.toml")


def record(logs: Path, *extra: str) -> tuple[str, str]:
    return record_run(logs, "--config", PULSED_BENCH, *extra)


@pytest.fixture(scope="module")
def pulsed_run(tmp_path_factory):
    logs = tmp_path_factory.mktemp("pulsed-logs")
    run_id, _ = record(logs, "--mode", "pulsed", "--shots", "50")  # the README command
    return logs, run_id


def test_peak_beta_and_decay_time_within_4_sigma_noise_of_the_medium(pulsed_run, capsys):
    logs, run_id = pulsed_run
    s = summary(logs, run_id, capsys)
    assert s["mode"] == "pulsed" and s["status"] == "complete"
    assert s["shots"] >= 50
    assert s["truth_source"].startswith("medium: its own populations")
    for key in ("beta", "ln_ratio", "n2_per_m3", "tau_s"):
        est, truth = s["estimates"][key], s["truth"][key]["value"]
        assert est["sigma_noise"] > 0, key
        assert abs(est["value"] - truth) < 4 * est["sigma_noise"], (key, est, truth)
    # the medium decays with the bench file's lifetime (demo_pulsed_bench.toml: 0.6 ms)
    assert s["truth"]["tau_s"]["value"] == pytest.approx(0.6e-3)
    assert s["estimates"]["tau_s"]["sigma_noise"] < 0.02 * 0.6e-3  # a measurement, not a shrug


def test_stored_energy_is_zero_line_photons_times_the_peak_density(pulsed_run, capsys):
    logs, run_id = pulsed_run
    s = summary(logs, run_id, capsys)
    e = s["estimates"]["stored_energy_j_per_m3"]
    n2 = s["estimates"]["n2_per_m3"]["value"]
    # h c / lambda at the bench file's zero line, 976 nm (CODATA constants through scipy)
    assert e["value"] == pytest.approx(constants.h * constants.c / 976e-9 * n2, rel=1e-9)
    truth = s["truth"]["stored_energy_j_per_m3"]["value"]
    assert abs(e["value"] - truth) < 4 * e["sigma_noise"], (e, truth)
    # the transmission before the pulse is the pre-trigger part's: positive, finite, with scatter
    before = s["estimates"]["transmission_before"]
    assert before["value"] > 0 and before["sigma_noise"] > 0


def test_the_run_stores_one_block_per_shot_with_its_trigger_times(pulsed_run):
    logs, run_id = pulsed_run
    with RunReader(logs / f"{run_id}.gbrun") as r:
        assert "QO-4" in json.dumps(r.meta.get("instruments"))
        blocks = list(r.iter_blocks(source="detector"))
    assert len(blocks) >= 50
    for b in blocks:
        tt = b.column("trigger_time")
        assert tt[0] < 0 < tt[-1]  # the pre-trigger part is in every shot
        assert b.n == 1000  # the QO-4's power-on record length (COMMANDS.md)
    starts = [b.t0 for b in blocks]
    assert all(b > a for a, b in zip(starts, starts[1:]))


def test_the_report_draws_the_shots(pulsed_run, tmp_path, capsys):
    """`gainbench report` on a pulsed run: the shots' figure beside the others, named on the page.
    The mean transient it draws must peak at the pump pulse's end (0.5 ms after the trigger on
    the demo bench: the population rises while the pump is on and decays after; rate equations,
    common practice, no source)."""
    logs, run_id = pulsed_run
    out = tmp_path / "report"
    assert main(["report", run_id, "--logs", str(logs), "--out", str(out)]) == 0
    assert (out / "fig-pulses-a1.png").stat().st_size > 10_000
    assert "Pulsed shots" in (out / "report.html").read_text(encoding="utf-8")
    with RunReader(logs / f"{run_id}.gbrun") as r:
        tr = r.final_estimate().extra["transient"]
    k = max(range(len(tr["ln_ratio"])), key=lambda i: tr["ln_ratio"][i])
    assert tr["t_s"][k] == pytest.approx(0.5e-3, abs=0.05e-3)


def test_pulsed_replay_reproduces_the_stored_estimates(pulsed_run, capsys):
    logs, run_id = pulsed_run
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    out = capsys.readouterr().out
    assert "identical" in out and "tau_s" in out, out


@pytest.mark.parametrize(
    "value, words",
    [
        ("fifty", "'fifty' is not a whole number"),
        ("1", "outside 2"),
        ("-3", "outside 2"),
        ("2.5", "not a whole"),
    ],
)
def test_bad_shots_are_named(value, words, tmp_path, capsys):
    code = main(
        [
            "record",
            "--config",
            PULSED_BENCH,
            "--mode",
            "pulsed",
            "--shots",
            value,
            "--logs",
            str(tmp_path),
            *ARM,
        ]
    )
    err = capsys.readouterr().err
    assert code == 2, err
    assert "--shots" in err and words in err, err
    assert not list(tmp_path.glob("*.gbrun"))


def test_shots_apply_to_pulsed_mode_only(tmp_path, capsys):
    code = main(["record", "--mode", "watch", "--shots", "5", "--logs", str(tmp_path), *ARM])
    err = capsys.readouterr().err
    assert code == 2 and "--shots: applies to pulsed mode" in err, err


def test_pulsed_mode_needs_a_scope(tmp_path, capsys):
    code = main(["record", "--mode", "pulsed", "--logs", str(tmp_path), *ARM])
    err = capsys.readouterr().err
    assert code == 2 and "triggered scope" in err, err
    assert not list(tmp_path.glob("*.gbrun"))


def test_a_scope_bench_without_pulse_settings_is_refused_before_anything_opens(tmp_path, capsys):
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
    assert "pump.pulse_width" in err and "pulsed mode" in err, err
    assert not logs.exists() or not list(logs.glob("*.gbrun"))
    # and the other modes are refused on a scope bench
    code = main(["record", "--config", str(bench), "--mode", "watch", "--logs", str(logs), "--quiet", *ARM])
    err = capsys.readouterr().err
    assert code == 2 and "triggered scope" in err, err


def test_the_guard_trips_on_an_interlock_fault_during_a_pulsed_run(tmp_path, capsys):
    # the interlock opens while the pump pulses (dark and baseline take about 1 s of the run
    # clock; 300 shots of 10 ms periods keep it emitting for several seconds after)
    run_id, out = record(tmp_path, "--shots", "300", "--fault", "interlock@2.5s+0.5s")
    assert "guard TRIPPED" in out and "trip acknowledged" in out, out
    s = summary(tmp_path, run_id, capsys)
    trip = s["trips"][0]
    assert "interlock" in trip["reason"] or trip["condition"] == "current_not_following", trip
    assert trip["latency_s"] is not None and trip["latency_s"] <= 0.1
    with RunReader(tmp_path / f"{run_id}.gbrun") as r:
        events = r.events()
    t_trip = next(e.t for e in events if e.kind == "trip")
    # pulsing goes off once the guard has tripped (the output is off already)
    assert any(e.kind == "setting" and e.text == "pump pulsing off" and e.t >= t_trip for e in events)
