"""The dashboard's plain parts, without a terminal: wording, meters, replay bookkeeping, keys.

Statistics are checked against numpy (a reference implementation); the guard's recorded
state against a slow, obvious reading of the events; the wording checks are the
dashboard's own contract (common practice, no source: colour is never the only carrier).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.config import load_bench
from bench.dashboard import format as fmt
from bench.dashboard.checklist_screen import verdict_of
from bench.dashboard.live_app import KEYS as LIVE_KEYS
from bench.dashboard.live_app import LiveDashboard, help_rows
from bench.dashboard.meters import RateMeter, ScreenLatency
from bench.dashboard.mode_screen import ModeChoice
from bench.dashboard.plots import reduce_points
from bench.dashboard.replay_app import KEYS as REPLAY_KEYS
from bench.dashboard.replay_app import ReplayDashboard
from bench.dashboard.replay_feed import SPEEDS, guard_at, jump_targets
from bench.dashboard.replay_panel import play_state, position_bar
from bench.records import Event, Quantity
from bench.run.pump_program import chop_frequency
from bench.safety.checklist import checklist_items


def guard_event(t, before, after, kind="guard", accepted=True, reason="r"):
    return Event(
        t,
        kind,
        f"{before} -> {after}",
        data={"from": before, "to": after, "accepted": accepted, "reason": reason},
    )


# -- wording (common practice, no source: a state is said in words, not colour alone) -------


@pytest.mark.parametrize("state", ["safe", "armed", "emitting", "tripped"])
def test_every_guard_state_has_its_word_and_symbol(state):
    look = fmt.guard_look(state)
    assert look.word == state.upper()
    assert look.symbol and look.meaning and look.css_class == f"guard-{state}"
    others = {fmt.guard_look(s).symbol for s in ("safe", "armed", "emitting", "tripped") if s != state}
    assert look.symbol not in others  # each state looks different in monochrome too


def test_unknown_guard_state_is_not_shown_as_safe():
    assert fmt.guard_look(None).word == "UNKNOWN"
    assert fmt.guard_look("replay").word == "REPLAY"


def test_celsius_from_kelvin():
    # 0 degC = 273.15 K exactly (SI Brochure, 9th edition, 2.3.1)
    assert fmt.celsius(273.15) == "0.0 °C"
    assert fmt.celsius(295.15) == "22.0 °C"
    assert fmt.celsius(None) == "— °C"


def test_sizes_ages_durations():
    # decimal prefixes, kB = 1000 B (SI Brochure, 9th edition, 3.1)
    assert fmt.size(999) == "999 B"
    assert fmt.size(1500) == "1.5 kB"
    assert fmt.size(6_500_000) == "6.5 MB"
    assert fmt.age(None) == "never" and fmt.age(0.3) == "<1 s" and fmt.age(12.4) == "12 s"
    assert fmt.duration(42) == "0:42" and fmt.duration(3723) == "1:02:03"


def test_quantities_carry_their_uncertainty():
    assert fmt.quantity(Quantity(0.30051, 0.0169)) == "0.3005 ± 0.017"
    assert fmt.quantity(Quantity(6.0e-4, 1.2e-5), scale=1e3, unit="ms") == "0.6 ± 0.012 ms"
    assert fmt.quantity(None) == "—"
    assert fmt.quantity(Quantity(math.nan, 1.0)) == "—"
    assert fmt.sigma(Quantity(2.5, 0.031), unit="dB") == "0.031 dB"
    assert fmt.fixed(2.5071, 3, sign=True) == "+2.507" and fmt.fixed(-0.0123, 4) == "-0.0123"


def test_flags_in_words():
    assert fmt.flag_words(frozenset({"low_snr", "no_dark"})) == "low snr, no dark"
    assert fmt.flag_words(frozenset()) == "none"


# -- meters (numpy as the reference) ---------------------------------------------------------


def test_screen_latency_statistics_match_numpy():
    rng = np.random.default_rng(3)
    meter = ScreenLatency(keep=1000)
    painted = np.cumsum(rng.uniform(0.05, 0.15, 300))
    age = rng.uniform(0.0, 0.2, 300)  # of the newest reading on each repaint
    newest = np.maximum.accumulate(painted - age)
    for p, t in zip(painted, newest, strict=True):
        meter.add(p, t)
    new = np.concatenate(([True], np.diff(newest) > 0))  # repaints that showed new readings
    # the oldest new reading of repaint k is the first one after the newest of repaint k-1
    since = np.concatenate(([newest[0]], newest[:-1]))
    lat = (painted - since)[new]
    f = meter.figures()
    assert f.n == new.sum()
    assert f.mean == pytest.approx(lat.mean())
    assert f.median == pytest.approx(np.median(lat))
    assert f.p95 == pytest.approx(np.percentile(lat, 95))
    assert f.worst == pytest.approx(lat.max())
    assert f.fresh_median == pytest.approx(np.median((painted - newest)[new]))
    assert f.repaint_hz == pytest.approx(299 / (painted[-1] - painted[0]))
    # at 4x speed the run clock runs 4 times faster than the wall clock
    assert meter.figures(speed=4.0).repaint_hz == pytest.approx(4 * f.repaint_hz)


def test_screen_latency_counts_the_wait_for_the_next_repaint():
    # Readings up to t=1.0 shown at 1.05; the next repaint at 1.15 shows readings up to 1.12:
    # the reading at 1.0001 waited from 1.0 to 1.15 (common practice, no source).
    meter = ScreenLatency()
    meter.add(1.05, 1.0)
    meter.add(1.15, 1.12)
    meter.add(1.20, 1.12)  # a repaint with nothing new is not a latency
    f = meter.figures()
    assert f.n == 2
    assert f.worst == pytest.approx(0.15)
    assert f.fresh_median == pytest.approx(0.04)


def test_screen_latency_keeps_only_the_latest():
    meter = ScreenLatency(keep=10)
    for k in range(100):  # a repaint a second; the newest reading 3 s old, then 0.5 s old
        meter.add(float(k), float(k) - (3.0 if k < 80 else 0.5))
    assert meter.figures().worst == pytest.approx(1.5)  # 1 s for the next repaint + 0.5 s
    assert meter.figures() is not None and ScreenLatency().figures() is None
    with pytest.raises(ValueError, match="keep"):
        ScreenLatency(keep=1)


def test_rate_meter():
    meter = RateMeter(window=2.0)
    assert meter.add(0.0, 0) is None
    for k in range(1, 41):
        rate = meter.add(k * 0.1, k * 5)  # 50 per second
    assert rate == pytest.approx(50.0)
    with pytest.raises(ValueError, match="window"):
        RateMeter(window=0)


def test_reduce_points_matches_a_slow_reference():
    rng = np.random.default_rng(11)
    x = np.arange(1003, dtype=float)
    y = rng.normal(size=1003)
    y[17] = np.nan
    rx, ry = reduce_points(x, y, 100)
    good = np.isfinite(y)
    gx, gy = x[good], y[good]
    k = math.ceil(gx.size / 100)
    m = (gx.size // k) * k
    ref = [gy[i : i + k].mean() for i in range(0, m, k)]  # the obvious loop
    np.testing.assert_allclose(ry, ref, rtol=1e-12)
    assert rx.size <= 100 and rx.size == len(ref)
    sx, sy = reduce_points(x[:50], y[:50], 100)  # short input: unchanged but for NaNs
    assert sx.size == 49


# -- replay bookkeeping ------------------------------------------------------------------------

EVENTS = [
    guard_event(0.03, "safe", "safe"),
    Event(0.5, "procedure", "dark captured"),
    guard_event(1.1, "safe", "armed"),
    guard_event(1.2, "armed", "armed", accepted=False),
    guard_event(1.3, "armed", "emitting"),
    Event(1.5, "note", "aligned"),
    guard_event(1.8, "emitting", "tripped", kind="trip", reason="trip: hardware interlock reads open"),
    guard_event(2.2, "tripped", "tripped"),
    guard_event(2.3, "tripped", "safe"),
]


def slow_state(events, t):
    state = None
    for ev in events:
        if ev.t <= t and ev.kind in ("guard", "trip") and ev.data.get("accepted", True):
            state = ev.data["to"]
    return state


@pytest.mark.parametrize("t", [0.0, 0.03, 0.6, 1.15, 1.25, 1.4, 1.8, 2.0, 2.25, 2.3, 9.0])
def test_guard_as_recorded(t):
    then = guard_at(EVENTS, t)
    assert then.state == slow_state(EVENTS, t)
    if then.state == "tripped":
        assert then.reason == "hardware interlock reads open"
    else:
        assert then.reason == ""


def test_jump_targets_skip_unchanged_and_refused_guard_events():
    targets = [e.t for e in jump_targets(EVENTS)]
    assert targets == [0.5, 1.1, 1.3, 1.5, 1.8, 2.3]


def test_position_bar_and_play_state():
    assert position_bar(5, 10, 10) == "█████░░░░░"
    assert position_bar(20, 10, 4) == "████" and position_bar(1, 0, 3) == "░░░"
    assert play_state(False, False, False, 2.0) == "▶ playing ×2"
    assert play_state(True, False, False, 1.0).endswith("paused")
    assert play_state(True, True, False, 1.0).endswith("end of run")
    assert play_state(False, False, True, 1.0).endswith("seeking")
    assert list(SPEEDS) == sorted(SPEEDS) and 1.0 in SPEEDS


# -- modes and the checklist ---------------------------------------------------------------------


def test_mode_choice_defaults_and_modulation():
    cfg = load_bench()
    choice = ModeChoice.defaults(cfg, "chopped")
    assert choice.modulation_hz == pytest.approx(chop_frequency(cfg, "chopped"))
    assert ModeChoice.defaults(cfg, "decay").modulation_hz == pytest.approx(chop_frequency(cfg, "decay"))
    assert ModeChoice.defaults(cfg, "watch").modulation_hz is None
    # a sweep chops every step at the chopped period (drift cancels step by step)
    assert ModeChoice.defaults(cfg, "sweep").modulation_hz == pytest.approx(chop_frequency(cfg, "chopped"))
    # a 30 ms period is 33.3 Hz (f = 1 / T)
    assert ModeChoice("chopped", 0.030, 0.05).modulation_hz == pytest.approx(1 / 0.030)


@pytest.mark.parametrize(
    "kwargs, name",
    [
        ({"mode": "fast"}, "mode"),
        ({"chop_period": 0.0}, "chop_period"),
        ({"decay_period": math.inf}, "decay_period"),
        ({"sweep_steps": 1}, "sweep_steps"),
        ({"sweep_dwell": -1.0}, "sweep_dwell"),
    ],
)
def test_mode_choice_names_the_bad_field(kwargs, name):
    args = {"mode": "watch", "chop_period": 0.01, "decay_period": 0.03, **kwargs}
    with pytest.raises(ValueError, match=name):
        ModeChoice(**args)


def test_checklist_verdicts_use_the_checklists_own_judgement():
    cfg = load_bench()
    items = checklist_items(cfg)
    readings = {"interlock_closed": True, "mount_temperature": 295.15, "current_setpoint": 0.0}
    eye = next(i for i, it in enumerate(items) if it.id == "eyewear@940nm")
    need = items[eye].required_od
    ok, why = verdict_of(items, eye, {items[eye].id: need - 1}, readings, "tester", clock=lambda: 1.0)
    assert not ok and f"OD {need - 1:g}" in why and f"OD {need}" in why
    ok, _ = verdict_of(items, eye, {items[eye].id: need}, readings, "tester", clock=lambda: 1.0)
    assert ok
    ok, why = verdict_of(items, 0, {}, {**readings, "interlock_closed": False}, "tester", clock=lambda: 1.0)
    assert not ok and "open" in why


# -- keys --------------------------------------------------------------------------------------


@pytest.mark.parametrize("app, keys", [(LiveDashboard, LIVE_KEYS), (ReplayDashboard, REPLAY_KEYS)])
def test_every_binding_is_on_the_help_screen_and_has_an_action(app, keys):
    bound = {(b.key, b.action) for b in app.BINDINGS}
    for key, action, _, does in keys:
        assert (key, action) in bound
        name = action.split("(")[0]
        assert callable(getattr(app, f"action_{name}", None)), action
        assert does
    if app is LiveDashboard:
        assert len(help_rows()) == len(keys)


def test_no_key_is_bound_twice():
    for keys in (LIVE_KEYS, REPLAY_KEYS):
        seen = [k for row in keys for k in row[0].split(",")]
        assert len(seen) == len(set(seen)), seen


# -- the plots on synthetic snapshots (no bench) --------------------------------------------------


def snapshot(mode="watch", estimate=None, t=1.0, n=400):
    from types import MappingProxyType

    from bench.run.consumer import Snapshot
    from bench.run.history import EstimateView, TraceView

    tt = np.linspace(t - 2.0, t, n)
    on = (np.floor(tt / 0.2) % 2).astype(float)  # pump on every other 0.2 s
    s = 1.3333 * np.exp(0.69 * on)
    cols = np.column_stack([0.8 * np.ones(n), 0.6 * np.ones(n), s, 0.7 * on])
    trace = TraceView(("probe", "reference", "transmission", "pump_monitor"), tt, cols, cols, cols)
    et = np.linspace(0.1, t, 10)
    ests = EstimateView(
        et,
        ("beta", "gain_db", "ln_ratio", "tau_s"),
        np.tile([0.3, 2.5, 0.69, 6e-4], (10, 1)),
        np.tile([0.017, 0.03, 1e-5, 1e-5], (10, 1)),
    )
    return Snapshot(
        t=t,
        mode=mode,
        estimate=estimate,
        window=None,
        has_dark=True,
        has_baseline=True,
        pump=MappingProxyType({}),
        guard_state="safe",
        trip_reason=None,
        blocks=10,
        samples=n,
        drops=0,
        dropped_samples=0,
        faults=0,
        last_fault="",
        trace=trace,
        pump_trace=None,
        estimates=ests,
        truth=None,
        events=(),
        last_flush_age=None,
        store_bytes=None,
        sample_rate=1e5,
        extra=MappingProxyType({}),
    )


def plot_text(plot_cls, snap, **kwargs):
    """Mount one plot in a bare app, hand it ``snap``, return its title and the screen text."""
    import asyncio

    from textual.app import App

    class One(App):
        def compose(self):
            yield plot_cls(id="p", **kwargs)

    async def run():
        app = One()
        async with app.run_test(size=(80, 20)) as pilot:
            plot = app.query_one("#p")
            assert plot.show(snap)
            await pilot.pause(0.05)
            text = "\n".join(s.text for s in app.screen._compositor.render_strips())
            return plot.border_title, text, plot.drawings

    return asyncio.run(run())


def test_response_plot_marks_the_pump_on_stretches():
    from bench.dashboard.plots import ResponsePlot

    title, text, drawings = plot_text(ResponsePlot, snapshot())
    assert "transmission" in title and drawings >= 1
    assert "pump on" in text and "▀" in text  # the mark is a shape with a legend, not a colour


def test_response_plot_shows_the_decay_fit_and_the_sweep_points():
    from bench.dashboard.plots import ResponsePlot
    from bench.records import Estimate

    t = np.linspace(0, 3e-3, 12)
    curve = {
        "t_s": list(t),
        "ln_ratio": list(0.7 * np.exp(-t / 6e-4)),
        "sigma": [1e-3] * 12,
        "fit": list(0.7 * np.exp(-t / 6e-4)),
    }
    decay = Estimate(1.0, "decay", "cumulative", {}, extra={"curve": curve})
    title, text, _ = plot_text(ResponsePlot, snapshot("decay", decay))
    assert title.startswith("decay") and "fit" in text
    points = [{"pump_power_w": p, "beta": b} for p, b in ((1.0, 0.05), (3.0, 0.14), (6.0, 0.25))]
    fits = {"saturation": {"curve": {"pump_power_w": [0.0, 3.0, 6.0], "beta": [0.0, 0.14, 0.25]}}}
    sweep = Estimate(1.0, "sweep", "cumulative", {}, extra={"points": points, "fits": fits})
    title, text, _ = plot_text(ResponsePlot, snapshot("sweep", sweep))
    assert title.startswith("sweep") and "steps" in text and "saturation fit" in text
    # without curve data the decay plot falls back to the transmission trace
    title, _, _ = plot_text(ResponsePlot, snapshot("decay", Estimate(1.0, "decay", "cumulative", {})))
    assert "transmission" in title


def test_trend_plot_draws_the_band():
    from bench.dashboard.plots import TrendPlot

    title, text, _ = plot_text(TrendPlot, snapshot(), key="gain_db")
    assert "gain" in title and "±2σ" in text


def test_mode_screen_refuses_a_chopping_period_with_no_settled_data():
    # The same refusal as `record --period` (bench.estimator.timing.run_period), on the screen,
    # before the choice reaches the bench.
    import asyncio

    from textual.app import App

    from bench.dashboard.mode_screen import ModeScreen
    from bench.estimator.timing import run_period
    from bench.run.pump_program import default_current

    cfg = load_bench()
    results = []

    def check(choice):
        if choice.period is not None:
            run_period(cfg, choice.mode, default_current(cfg), choice.period)

    class One(App):
        def on_mount(self):
            self.push_screen(
                ModeScreen(ModeChoice.defaults(cfg, "chopped"), check=check), callback=results.append
            )

    async def run():
        app = One()
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause(0.05)
            chop = app.screen.query_one("#in-chop")
            chop.value = "10"
            chop.focus()
            await pilot.press("enter")
            await pilot.pause(0.05)
            error = str(app.screen.query_one("#mode-error").render())
            refused = isinstance(app.screen, ModeScreen) and not results
            chop.value = "50"
            await pilot.press("enter")
            await pilot.pause(0.05)
            return error, refused

    error, refused = asyncio.run(run())
    assert refused
    assert "no settled data" in error and "10 ms" in error and "50 ms" in error
    assert len(results) == 1 and results[0].chop_period == pytest.approx(0.05)
