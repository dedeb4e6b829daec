"""The live dashboard driven with textual's Pilot against the simulated bench.

Every flow a person runs at the bench is pressed through the keys and checked on the
measurement itself (guard state, the simulated pump driver's real output, the run file) and
on the screen text. The simulated bench runs at real speed; waits are conditions with
deadlines. The arming checks follow the checklist's rules (ANSI Z136.1-2014 control measures:
eyewear of adequate OD at each wavelength; from memory). A few screenshots are saved to
tests/dashboard/snapshots/ for a reviewer to look at; nothing compares them.
"""

from __future__ import annotations

import asyncio
import functools
import time
from pathlib import Path

import pytest
from textual import events

from bench.config import load_bench
from bench.errors import GainbenchError
from bench.run.measurement import Measurement
from bench.run.pump_program import default_current
from bench.store import RunReader

SNAPSHOTS = Path(__file__).parent / "snapshots"
SIZE = (120, 40)
SEED = 20261201


def pilot_test(fn):
    """Run an async Pilot test on its own event loop (no pytest asyncio plugin needed)."""

    @functools.wraps(fn)
    def run(*args, **kwargs):
        return asyncio.run(fn(*args, **kwargs))

    return run


def screen_text(app) -> str:
    """The text of the topmost screen, as a user sees it."""
    return "\n".join(strip.text for strip in app.screen._compositor.render_strips())


async def wait_for(pilot, condition, what: str, timeout: float = 20.0) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout} s waiting for {what}\n{screen_text(pilot.app)}")
        await pilot.pause(0.05)


#: Key names whose key events carry a printable character.
CHARACTERS = {"plus": "+", "minus": "-", "question_mark": "?", "space": " ", "full_stop": ".", "comma": ","}


async def press(pilot, *keys: str) -> None:
    """Send key events as a terminal would, without Pilot.press's waits for an idle process
    (never idle here: the acquisition threads keep working, so each of those waits lasts 1 s)."""
    for key in keys:
        char = CHARACTERS.get(key, key if len(key) == 1 else None)
        pilot.app.post_message(events.Key(key, char))
    await pilot.pause(0.02)


async def type_text(pilot, text: str) -> None:
    await press(pilot, *("space" if c == " " else c for c in text))


def plots_current(app) -> bool:
    """Every plot on screen shows the latest snapshot (plots take turns, so this can take a while)."""
    snap = app.last_snapshot
    return snap is not None and all(p._drawn_key == p.data_key(snap) for p in app.plots if p.display)


def save(app, name: str) -> None:
    SNAPSHOTS.mkdir(exist_ok=True)
    app.save_screenshot(name, path=str(SNAPSHOTS))


#: These tests press through the dashboard's flows; the guard's own timing is tested elsewhere
#: (tests/safety/test_guard_on_bench.py). On a loaded 2-core test machine a 0.5 s staleness limit can
#: trip now and then while several test processes compete, so the tests allow 3 s.
BENCH_OVERRIDES = {"guard.stale_after": "3 s"}


def open_measurement(log_dir) -> Measurement:
    cfg = load_bench(overrides=BENCH_OVERRIDES)
    current = default_current(cfg)
    return Measurement(
        cfg,
        mode="watch",
        settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
        log_dir=log_dir,
        speed=1.0,
        seed=SEED,
        operator="tester",
    )


@pytest.fixture(scope="module")
def shared(tmp_path_factory):
    """One measurement for the tests that leave it open (starting the simulator takes seconds)."""
    with open_measurement(tmp_path_factory.mktemp("runs")) as m:
        yield m


@pytest.fixture
def meas(shared):
    """The shared measurement, back to pump off, guard safe, watch mode, no modulation."""
    m = shared
    m.stop_emission(who="test reset")
    if m.guarded_pump.state == "tripped":
        deadline = time.monotonic() + 30
        while True:
            try:
                m.acknowledge("test reset")
                break
            except GainbenchError:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.1)
    if m.guarded_pump.state == "armed":
        m.guarded_pump.disarm(who="test reset")
    for attempt in (1, 2):  # a stale error in the pump's queue (e.g. from a trip) fails the first
        try:
            m.set_modulation(None)
            break
        except GainbenchError:
            if attempt == 2:
                raise
    current = default_current(m.cfg)
    m.set_mode("watch", {"pump_current": current, "pump_power": m.cfg.pump.power_at(current)})
    return m


@pytest.fixture
def own_meas(tmp_path):
    """A measurement of its own, for a test that closes it."""
    with open_measurement(tmp_path) as m:
        yield m


def dashboard(meas, **kwargs):
    from bench.dashboard.live_app import LiveDashboard

    return LiveDashboard(meas, operator="tester", **kwargs)


async def started(pilot):
    app = pilot.app
    await wait_for(
        pilot,
        lambda: (
            app.last_snapshot is not None and app.last_snapshot.blocks > 10 and app.setpoint == app.target
        ),
        "the first snapshots and the current preset",
    )


async def arm(pilot, od_pump: str = "5", od_probe: str = "2"):
    """Press through the checklist: name, interlock, eyewear at 940 and 1030 nm, three yes, two checks."""
    from bench.dashboard.checklist_screen import ChecklistScreen

    app = pilot.app
    await press(pilot, "a")
    await wait_for(pilot, lambda: isinstance(app.screen, ChecklistScreen), "the checklist screen")
    screen = app.screen
    await wait_for(pilot, lambda: "SECOND LAYER ONLY" in screen_text(app), "the second-layer notice")
    await press(pilot, "enter")  # operator name, prefilled
    await wait_for(pilot, lambda: screen.step == 0 and screen.readings is not None, "the pump readings")
    await wait_for(
        pilot, lambda: "ok: the hardware interlock reads closed" in screen_text(app), "the interlock check"
    )
    await press(pilot, "enter")  # interlock: read, not asked
    await wait_for(pilot, lambda: screen.step == 1, "the first eyewear question")
    await wait_for(
        pilot,
        lambda: "940 nm" in screen_text(app) and "CAUTION" in screen_text(app),
        "the eyewear question with its caution",
    )
    await type_text(pilot, od_pump)
    await press(pilot, "enter")
    # a refused OD ends the questions: wait for either outcome (the key may not be handled yet)
    await wait_for(pilot, lambda: screen.stage != "asking" or screen.step == 2, "the answer to be taken")
    if screen.stage != "asking":
        return screen
    await type_text(pilot, od_probe)
    await press(pilot, "enter")
    for k in (3, 4, 5):
        await wait_for(pilot, lambda k=k: screen.step == k, f"question {k + 1}")
        await press(pilot, "y")
    for k in (6, 7):
        await wait_for(pilot, lambda k=k: screen.step == k, f"check {k + 1}")
        await press(pilot, "enter")
    return screen


async def closed_checklist(pilot):
    """Close the checklist screen once its verdict is shown."""
    from bench.dashboard.checklist_screen import ChecklistScreen

    app = pilot.app
    await wait_for(
        pilot,
        lambda: isinstance(app.screen, ChecklistScreen) and app.screen.stage == "done",
        "the checklist's verdict",
    )
    await press(pilot, "enter")
    await wait_for(pilot, lambda: not isinstance(app.screen, ChecklistScreen), "the checklist closed")


def procedures(meas) -> list[str]:
    return [e.text for e in meas.snapshot(with_history=False).events if e.kind == "procedure"]


@pilot_test
async def test_dark_and_baseline(meas):
    app = dashboard(meas)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        if not meas.snapshot(with_history=False).has_dark:  # the first test on the shared measurement
            await wait_for(pilot, lambda: "dark ✗ no" in screen_text(app), "no dark yet")
        before = len(procedures(meas))
        await press(pilot, "d")
        await wait_for(pilot, lambda: meas.snapshot(with_history=False).has_dark, "the dark")
        await wait_for(pilot, lambda: app.busy is None, "the dark procedure to end")
        await press(pilot, "b")
        await wait_for(pilot, lambda: meas.snapshot(with_history=False).has_baseline, "the baseline")
        await wait_for(pilot, lambda: "baseline ✓ yes" in screen_text(app), "the baseline on screen")
        assert "dark ✓ yes" in screen_text(app)
        await wait_for(pilot, lambda: "baseline captured" in screen_text(app), "the action line")
        await press(pilot, "g")  # the background needs the pump on: refused, saying why
        await wait_for(pilot, lambda: "pump must be on" in screen_text(app), "the background refused")
    new = procedures(meas)[before:]
    assert any(t.startswith("dark captured") for t in new) and any(
        t.startswith("baseline captured") for t in new
    )


@pilot_test
async def test_arming_refused_with_low_eyewear_od(meas):
    app = dashboard(meas)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        # the pump at 940 nm needs OD 4 for this bench (bench.safety.exposure_limits, ANSI Z136.1 MPE)
        screen = await arm(pilot, od_pump="2")
        await wait_for(pilot, lambda: screen.stage == "done", "the verdict")
        await wait_for(
            pilot,
            lambda: "ARMING REFUSED" in screen_text(app) and "below the OD" in screen_text(app),
            "the refusal in words",
        )
        save(app, "checklist_refused.svg")
        await press(pilot, "enter")
        await wait_for(pilot, lambda: "arming refused" in screen_text(app), "the refusal on the action line")
        assert meas.guarded_pump.state == "safe"
        await press(pilot, "e")  # emission is refused while not armed
        await wait_for(pilot, lambda: "emission refused" in screen_text(app), "the emission refusal")
        assert not meas.sim.pump_output_on()
    # every answer is recorded in the run with the operator, and the verdict last
    records = [e for e in meas.snapshot(with_history=False).events if e.kind == "checklist"]
    assert any("REFUSED" in e.text and "eyewear@940nm" in e.text and e.who == "tester" for e in records)
    assert records[-1].data["passed"] is False


@pilot_test
async def test_arm_emit_change_current_and_stop(meas):
    app = dashboard(meas, current_step=1.0)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        await press(pilot, "d")
        await wait_for(pilot, lambda: app.busy is None and meas.snapshot(False).has_dark, "the dark")
        await press(pilot, "b")
        await wait_for(pilot, lambda: app.busy is None and meas.snapshot(False).has_baseline, "the baseline")
        screen = await arm(pilot)
        await wait_for(pilot, lambda: screen.stage == "done", "the verdict")
        assert screen.result is not None and screen.result.passed, screen.result
        await closed_checklist(pilot)
        assert meas.guarded_pump.state == "armed"
        await wait_for(pilot, lambda: "ARMED" in screen_text(app), "ARMED on the guard panel")
        await press(pilot, "e")
        await wait_for(pilot, lambda: meas.guarded_pump.state == "emitting", "emission")
        await wait_for(pilot, lambda: meas.sim.pump_output_on(), "the simulated driver's output on")
        await wait_for(
            pilot,
            lambda: "EMITTING" in screen_text(app) and "OUTPUT ON" in screen_text(app),
            "EMITTING and OUTPUT ON on screen",
        )
        await wait_for(
            pilot,
            lambda: (e := meas.snapshot(False).estimate) is not None and "beta" in e.values,
            "an estimate of beta",
            timeout=30,
        )
        await wait_for(
            pilot,
            lambda: "β  σ" in screen_text(app) and "gain dB  σ" in screen_text(app),
            "beta and gain with their uncertainties on screen",
        )
        await wait_for(
            pilot, lambda: app.last_snapshot.estimates.t.size > 3, "a few estimates for the trends"
        )
        await press(pilot, "g")  # the pump-induced background, with the pump on
        await wait_for(pilot, lambda: "background captured" in screen_text(app), "the background", timeout=30)
        assert any(t.startswith("background captured") for t in procedures(meas))
        await wait_for(
            pilot,
            lambda: (e := meas.snapshot(False).estimate) is not None and "beta" in e.values,
            "an estimate of beta after the background",
            timeout=30,
        )
        save(app, "live_emitting_120x40.svg")
        # one step up from 7.2 A is accepted; two more would pass the guard's 9 A limit
        await press(pilot, "plus")
        await wait_for(pilot, lambda: app.setpoint == pytest.approx(8.2), "8.2 A accepted")
        await press(pilot, "plus")
        await wait_for(pilot, lambda: "above the limit" in screen_text(app), "the guard's refusal above 9 A")
        assert app.setpoint == pytest.approx(8.2) and app.target == pytest.approx(8.2)
        await wait_for(
            pilot,
            lambda: meas.snapshot(False).pump.get("pump_setpoint") == pytest.approx(8.2),
            "the driver's setpoint",
        )
        await wait_for(pilot, lambda: "set 8.20 A" in screen_text(app), "the new setpoint on the pump panel")
        await press(pilot, "s")
        await wait_for(pilot, lambda: meas.guarded_pump.state == "armed", "emission stopped, still armed")
        await wait_for(pilot, lambda: not meas.sim.pump_output_on(), "the simulated driver's output off")
        await wait_for(pilot, lambda: "output off" in screen_text(app), "output off on screen")


@pilot_test
async def test_trip_opens_a_screen_that_must_be_acknowledged(meas):
    from bench.dashboard.trip_screen import TripScreen

    app = dashboard(meas)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        await arm(pilot)
        await closed_checklist(pilot)
        await press(pilot, "e")
        await wait_for(pilot, lambda: meas.guarded_pump.state == "emitting", "emission")
        meas.sim.inject("interlock+8s")  # the interlock opens for 8 s of simulated time
        await wait_for(pilot, lambda: isinstance(app.screen, TripScreen), "the trip screen")
        assert meas.guarded_pump.state == "tripped"
        await wait_for(pilot, lambda: not meas.sim.pump_output_on(), "the pump off after the trip")
        await wait_for(
            pilot, lambda: "interlock" in screen_text(app).lower(), "the reason on the trip screen"
        )
        await press(pilot, "k")  # the interlock is still open: refused, and said so
        await wait_for(
            pilot,
            lambda: "REFUSED: acknowledgement refused" in screen_text(app),
            "the refusal of the acknowledgement",
        )
        assert meas.guarded_pump.state == "tripped"
        save(app, "trip_screen.svg")
        await press(pilot, "escape")  # hide: still tripped, and the dashboard says so
        await wait_for(pilot, lambda: not isinstance(app.screen, TripScreen), "the trip screen hidden")
        await wait_for(pilot, lambda: "TRIPPED" in screen_text(app), "TRIPPED on the guard panel")
        await wait_for(
            pilot,
            lambda: meas.snapshot(False).pump.get("interlock") == 1.0,
            "the interlock closed again",
            timeout=30,
        )
        await press(pilot, "k")
        await wait_for(pilot, lambda: isinstance(app.screen, TripScreen), "the trip screen again")
        await press(pilot, "k")
        await wait_for(pilot, lambda: meas.guarded_pump.state == "safe", "acknowledged: back to safe")
        await wait_for(pilot, lambda: "SAFE" in screen_text(app), "SAFE on screen")


@pilot_test
async def test_note_mode_change_and_help(meas):
    from bench.dashboard.mode_screen import ModeScreen
    from bench.dashboard.small_screens import HelpScreen

    app = dashboard(meas)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        await press(pilot, "n")
        await type_text(pilot, "probe realigned")
        await press(pilot, "enter")
        await wait_for(
            pilot,
            lambda: any(
                e.kind == "note" and e.text == "probe realigned" for e in meas.snapshot(False).events
            ),
            "the note in the run",
        )
        await press(pilot, "m")
        await wait_for(pilot, lambda: isinstance(app.screen, ModeScreen), "the mode screen")
        await press(pilot, "down", "enter")  # watch -> chopped in the radio set
        await wait_for(pilot, lambda: app.screen.chosen_mode() == "chopped", "chopped chosen")
        chop = app.screen.query_one("#in-chop")
        chop.value = "30"
        chop.focus()
        await press(pilot, "enter")
        await wait_for(pilot, lambda: meas.snapshot(False).mode == "chopped", "the chopped mode")
        await wait_for(pilot, lambda: app.busy is None, "the mode procedure to end")
        assert app.choice.chop_period == pytest.approx(0.030)
        events = meas.snapshot(False).events
        assert any(e.kind == "setting" and "33.3" in e.text for e in events), [e.text for e in events]
        await press(pilot, "question_mark")
        await wait_for(pilot, lambda: isinstance(app.screen, HelpScreen), "the help screen")
        await wait_for(pilot, lambda: "capture the dark" in screen_text(app), "the key list")
        text = screen_text(app)
        for words in (
            "capture the dark",
            "arming checklist",
            "pump output ON",
            "pump output OFF",
            "acknowledge",
            "add a note",
            "quit: pump off first",
        ):
            assert words in text, words
        await press(pilot, "escape")
        await wait_for(pilot, lambda: not isinstance(app.screen, HelpScreen), "the help screen closed")


@pilot_test
async def test_quit_switches_the_pump_off_then_asks_then_closes_the_run(own_meas):
    from bench.dashboard.small_screens import QuitScreen

    meas = own_meas
    app = dashboard(meas)
    async with app.run_test(size=SIZE) as pilot:
        await started(pilot)
        screen = await arm(pilot)
        await wait_for(pilot, lambda: screen.stage == "done", "the verdict")
        await closed_checklist(pilot)
        await press(pilot, "e")
        await wait_for(pilot, lambda: meas.sim.pump_output_on(), "the pump on")
        await press(pilot, "q")
        await wait_for(pilot, lambda: isinstance(app.screen, QuitScreen), "the quit question")
        # the pump is off before the question is asked
        assert not meas.sim.pump_output_on()
        assert meas.guarded_pump.state == "armed"
        await press(pilot, "n")  # stay
        await wait_for(pilot, lambda: not isinstance(app.screen, QuitScreen) and not app.quitting, "staying")
        await press(pilot, "q")
        await wait_for(pilot, lambda: isinstance(app.screen, QuitScreen), "the quit question again")
        await press(pilot, "y")
        await wait_for(pilot, lambda: not app.is_running, "the app to leave")
    assert app.closed_cleanly
    with RunReader(meas.run_path) as r:
        assert r.status == "complete"
        assert "dashboard" in r.meta.get("stop_reason", "")


@pilot_test
async def test_dashboard_on_a_bench_process_arms_emits_and_quits(tmp_path):
    # As `gainbench live` runs it: the bench (instruments, guard, run file) in a process of its own.
    from bench.dashboard.small_screens import QuitScreen
    from bench.run.measurement_process import RemoteMeasurement

    cfg = load_bench(overrides=BENCH_OVERRIDES)
    current = default_current(cfg)
    meas = RemoteMeasurement(
        cfg,
        settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
        log_dir=tmp_path,
        seed=SEED,
        operator="tester",
    )
    meas.start()
    try:
        app = dashboard(meas)
        async with app.run_test(size=SIZE) as pilot:
            await started(pilot)  # the dashboard opened the bench (the process was started above)

            def pump_on() -> bool:
                return meas.snapshot(with_history=False).pump.get("pump_on", 0.0) > 0.5

            screen = await arm(pilot)
            await wait_for(pilot, lambda: screen.stage == "done", "the verdict")
            await closed_checklist(pilot)
            assert meas.guarded_pump.state == "armed"
            await press(pilot, "e")
            await wait_for(pilot, pump_on, "the pump on")
            await wait_for(pilot, lambda: "EMITTING" in screen_text(app), "the guard panel to say so")
            await press(pilot, "q")
            await wait_for(pilot, lambda: isinstance(app.screen, QuitScreen), "the quit question")
            # off before the question is asked (commanded and read back by the guard; the
            # dashboard's next pump reading shows it a poll later)
            assert meas.snapshot(with_history=False).guard_state == "armed"
            await wait_for(pilot, lambda: not pump_on(), "the pump to read off", timeout=2.0)
            await press(pilot, "y")
            await wait_for(pilot, lambda: not app.is_running, "the app to leave")
        assert app.closed_cleanly
    finally:
        meas.close()
    with RunReader(meas.run_path) as r:
        assert r.status == "complete"
        assert "dashboard" in r.meta.get("stop_reason", "")


@pilot_test
async def test_compact_layout_at_80x24(meas):
    app = dashboard(meas)
    async with app.run_test(size=(80, 24)) as pilot:
        await started(pilot)
        assert app.compact
        for words in ("SIMULATED BENCH", "SAFE", "output off", "mode watch", "interlock closed", "drops 0"):
            await wait_for(pilot, lambda words=words: words in screen_text(app), words)
        assert not app.screen_main.query_one("#signals").display
        await press(pilot, "v")
        await wait_for(pilot, lambda: app.screen_main.query_one("#signals").display, "the other two plots")
        save(app, "live_compact_80x24.svg")


@pilot_test
async def test_lockin_bench_counts_only_the_readings_taken_while_the_pump_emits(tmp_path, capsys):
    """On the lock-in bench the modulation (and so the lock-in's reference) runs from the
    moment the mode is chosen, before any emission and after a stop. Readings with the pump
    off must not count as pumped: the estimate waits for emission, and the final ln R, after a
    stop and more readings, still matches the medium's own (`summary --json` truth, from the
    simulated medium's populations) within 4 sigma_noise."""
    import json

    from bench.cli import main

    bench = Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_lockin_bench.toml"
    cfg = load_bench(bench, overrides=BENCH_OVERRIDES)
    current = default_current(cfg)
    meas = Measurement(
        cfg,
        mode="lockin",
        settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
        log_dir=tmp_path,
        speed=1.0,
        seed=SEED,
        operator="tester",
    )
    with meas:
        app = dashboard(meas)
        async with app.run_test(size=SIZE) as pilot:
            await started(pilot)
            await wait_for(pilot, lambda: "lockin" in screen_text(app), "lockin mode on screen")
            await wait_for(pilot, lambda: "25 Hz" in screen_text(app), "the 25 Hz modulation on screen")
            await pilot.pause(3.0)  # modulation running, pump off
            est = meas.snapshot(False).estimate
            assert est is None or "ln_ratio" not in est.values, est
            await press(pilot, "d")
            await wait_for(pilot, lambda: app.busy is None and meas.snapshot(False).has_dark, "the dark")
            await press(pilot, "b")
            await wait_for(
                pilot, lambda: app.busy is None and meas.snapshot(False).has_baseline, "the baseline"
            )
            screen = await arm(pilot)
            await wait_for(pilot, lambda: screen.stage == "done", "the verdict")
            assert screen.result is not None and screen.result.passed, screen.result
            await closed_checklist(pilot)
            await press(pilot, "e")
            await wait_for(pilot, lambda: meas.guarded_pump.state == "emitting", "emission")
            await wait_for(
                pilot,
                lambda: (e := meas.snapshot(False).estimate) is not None and "ln_ratio" in e.values,
                "an estimate of ln R",
                timeout=30,
            )
            await pilot.pause(4.0)
            await press(pilot, "s")
            await wait_for(pilot, lambda: meas.guarded_pump.state == "armed", "emission stopped")
            await pilot.pause(3.0)  # modulation still running, pump off
        meas.close()
    capsys.readouterr()
    assert main(["summary", meas.run_id, "--logs", str(tmp_path), "--json"]) == 0
    s = json.loads(capsys.readouterr().out)
    est, truth = s["estimates"]["ln_ratio"], s["truth"]["ln_ratio"]["value"]
    assert abs(est["value"] - truth) < 4 * est["sigma_noise"], (est, truth)
