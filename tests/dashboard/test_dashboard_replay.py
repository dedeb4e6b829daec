"""The replay dashboard on a run recorded here: pause, speed, seek, next event, and the guard
panel showing what the guard did then (from the stored events).

The run is recorded headless on the simulated bench with the hardware interlock opening
during emission, so it holds a trip; the replay must show TRIPPED at the trip's time and SAFE
before arming, exactly as the stored guard events say (the events are the reference).
"""

from __future__ import annotations

import io
from contextlib import redirect_stdout

import pytest
from test_dashboard import pilot_test, plots_current, press, save, screen_text, wait_for

from bench.cli import main
from bench.store import RunReader

ARM = ["--operator", "tester", "--eyewear-od", "940nm=5", "--eyewear-od", "1030nm=2", "--confirm-setup"]


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    logs = tmp_path_factory.mktemp("logs")
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(
            [
                "record",
                "--seconds",
                "3",
                "--quiet",
                "--logs",
                str(logs),
                "--seed",
                "7",
                "--fault",
                "interlock@2.5s+0.3s",
                *ARM,
            ]
        )
    assert code == 0, buf.getvalue()
    run_id = buf.getvalue().strip().splitlines()[-1]
    path = logs / f"{run_id}.gbrun"
    with RunReader(path) as r:
        trips = [e for e in r.events() if e.kind == "trip"]
    assert trips, "the recorded run should hold a trip"
    return path, trips[0]


@pilot_test
async def test_replay_controls_and_the_guard_as_recorded(recorded):
    from bench.dashboard.replay_app import ReplayDashboard
    from bench.dashboard.replay_feed import ReplayFeed

    path, trip = recorded
    feed = ReplayFeed(path, speed=1.0)
    app = ReplayDashboard(feed)
    async with app.run_test(size=(120, 40)) as pilot:
        await wait_for(
            pilot, lambda: app.last_snapshot is not None and app.last_snapshot.blocks > 5, "replayed blocks"
        )
        await wait_for(
            pilot,
            lambda: "REPLAY" in screen_text(app) and "as recorded" in screen_text(app),
            "the replay banner and the guard panel's source",
        )
        # pause: the play clock stands still
        await press(pilot, "space")
        assert feed.paused
        held = feed.position()
        await wait_for(pilot, lambda: "paused" in screen_text(app), "paused on screen")
        assert feed.position() == held
        await press(pilot, "space")
        await wait_for(pilot, lambda: feed.position() > held, "playing again")
        # speed up twice, down once (x1 -> x2 -> x5 -> x2)
        await press(pilot, "full_stop", "full_stop")
        await wait_for(pilot, lambda: feed.speed == 5.0, "x5")
        await wait_for(pilot, lambda: "×5" in screen_text(app), "x5 on screen")
        await press(pilot, "comma")
        await wait_for(pilot, lambda: feed.speed == 2.0, "x2")
        # from the start, jump from event to event up to the trip; at each stop the guard panel
        # shows the state the stored guard events give for that time (the reference here)
        await press(pilot, "space", "home")
        await wait_for(
            pilot, lambda: feed.paused and feed.position() == 0.0 and not feed.seeking, "paused at the start"
        )
        seen = []
        for _ in range(60):
            await press(pilot, "n")
            await wait_for(pilot, lambda: not feed.seeking, "the seek to the next event")
            pos = feed.position()
            expected = recorded_state(feed.events, pos)
            word = expected.upper()
            await wait_for(pilot, lambda word=word: word in screen_text(app), f"{word} at {pos:.3f} s")
            seen.append(expected)
            if pos >= trip.t - 1e-9:
                break
        assert feed.position() == pytest.approx(trip.t)
        assert seen[-1] == "tripped" and {"safe", "armed", "emitting"} <= set(seen), seen
        await wait_for(pilot, lambda: "interlock" in screen_text(app), "the trip's reason on the guard panel")
        await wait_for(pilot, lambda: plots_current(app), "every plot drawn at the trip")
        save(app, "replay_trip_120x40.svg")
        # seeking back replays from the start up to the target
        passes = feed.passes
        await press(pilot, "left")
        await wait_for(pilot, lambda: feed.passes > passes and not feed.seeking, "the backward seek")
        back = feed.position()
        assert back == pytest.approx(max(0.0, trip.t - 5.0))
        await press(pilot, "right")
        await wait_for(pilot, lambda: not feed.seeking and feed.position() > back, "the forward seek")
        assert feed.position() == pytest.approx(min(feed.end_t, back + 5.0), abs=0.05)
        end_state = recorded_state(feed.events, feed.position()).upper()
        await wait_for(pilot, lambda: end_state in screen_text(app), f"{end_state} after the forward seek")
        await press(pilot, "q")
    assert not feed.alive, "the replay thread stops with the app"


def recorded_state(events, t: float) -> str:
    """The guard's state at ``t``: the "to" of the last accepted guard or trip event (slow, obvious)."""
    state = "unknown"
    for ev in events:
        if ev.t <= t and ev.kind in ("guard", "trip") and ev.data.get("accepted", True):
            state = ev.data["to"]
    return state
