"""Fault soak: an accelerated simulated bench suffers random faults while a run is recorded.

The simulated bench runs in its own process (`bench.run.simulator_process.SimulatorProcess`), sped up,
with the digitiser at 2 kHz so that the data stay small. Faults are injected at random moments
from a seeded generator: dropped connections, garbled and slow replies, the interlock opening,
over-temperature, detector saturation, an error pushed into the pump's queue. After every trip
the soak acknowledges once the condition has cleared, re-arms through the checklist and emits
again, as an operator would. Checked afterwards:

- nothing is lost without a trace: the digitiser's sample indices in the run file run on
  from 0, and every hole is logged as a ``gap`` event of exactly that size and has a cause in
  the log (a failed detector exchange or a buffer overflow nearby, or blocks dropped by a full
  queue, which also leave a hole in the block numbers);
- the pump is never on while the guard does not let it emit: its output, asked over a
  connection of its own 20 times a second, never reads on more than 0.2 s after the guard
  left ``emitting`` (a trip, a stop) or before it entered it, and the simulator's own record of
  the pump power agrees;
- no reader thread or the consumer died, and the run file opens and passes SQLite's
  integrity check.

The 0.2 s allowance is this project's trip-latency budget with margin (common practice for a
software interlock layer, no source); times here are real (monotonic) seconds, since the
simulated clock runs ``speed`` times faster. The full simulated hour is ``@pytest.mark.slow``;
a few simulated minutes run in the default suite.
"""

from __future__ import annotations

import random
import threading
import time
from dataclasses import dataclass, field

import pytest

from bench.config import builtin_bench_path, load_bench_text
from bench.errors import GainbenchError
from bench.run.measurement import Measurement
from bench.safety.checklist_answers import answers_from_flags
from bench.store import RunReader

#: Real seconds a reading of "on" may lag the guard leaving ``emitting``.
OFF_ALLOWANCE = 0.2

#: Pump current of the soak (A): below the demo bench's 9 A limit.
CURRENT = 6.0

#: (kind, role or None, duration in real seconds or None), with weights.
FAULTS = [
    (("drop", "detector", None), 2),
    (("drop", "pump", None), 2),
    (("drop", "shutter", None), 1),
    (("garble", "detector", 0.3), 2),
    (("garble", "pump", None), 2),
    (("garble", "pump", 0.5), 1),
    (("slow", "pump", None), 1),
    (("slow", "pump", 3.0), 1),
    (("slow", "detector", None), 1),
    (("interlock", None, 1.0), 2),
    (("overtemp", None, 1.5), 1),
    (("saturate", None, 0.5), 2),
    (("error", "pump", None), 1),
]


@dataclass
class Soak:
    """What a soak did and saw."""

    injected: list[tuple[float, str]] = field(default_factory=list)
    inject_errors: list[str] = field(default_factory=list)
    refusals: list[str] = field(default_factory=list)
    emits: int = 0
    readings: list[tuple[float, float, bool]] = field(default_factory=list)  # (before, after, on)
    unreadable: int = 0


def _fault_spec(kind: str, role: str | None, duration: float | None, speed: float) -> str:
    spec = kind if role is None else f"{kind}:{role}"
    if duration is not None:  # fault durations are simulated seconds
        spec += f"+{duration * speed:.4g}s"
    return spec


def _schedule(rng: random.Random, start: float, real_seconds: float, mean_gap: float, speed: float):
    kinds, weights = zip(*FAULTS, strict=True)
    out, t = [], start + rng.uniform(0.5, mean_gap)
    while t < start + real_seconds - 1.0:
        out.append((t, _fault_spec(*rng.choices(kinds, weights)[0], speed)))
        t += rng.expovariate(1.0 / mean_gap)
    return out


def _poll_pump(m: Measurement, stop: threading.Event, soak: Soak) -> None:
    """Ask the simulated pump driver whether its output is on, about 20 times a second."""
    while not stop.wait(0.05):
        before = time.monotonic()
        try:
            on = m.sim.pump_output_on()
        except GainbenchError:  # a fault on the pump's connection: no reading this time
            soak.unreadable += 1
            continue
        soak.readings.append((before, time.monotonic(), bool(on)))


def _operate(m: Measurement, soak: Soak, schedule, until: float) -> None:
    """The operator: inject the faults when due; after a trip acknowledge, re-arm and emit."""
    gp = m.guarded_pump
    answers = answers_from_flags("soak", {940e-9: 5, 1030e-9: 2}, True)
    next_try = 0.0
    while m.clock.now() < until:
        m.check_alive()
        now = time.monotonic()
        while schedule and schedule[0][0] <= now:
            _, spec = schedule.pop(0)
            try:
                m.sim.inject(spec)
            except GainbenchError as exc:  # e.g. the digitiser's connection itself is faulty
                soak.inject_errors.append(f"{spec}: {exc}")
            soak.injected.append((m.clock.now(), spec))
        if now >= next_try:
            try:
                if gp.state == "tripped":
                    m.acknowledge("soak")
                elif gp.state == "safe":
                    result = m.arm(answers, "soak")
                    if not result.passed:
                        soak.refusals.append("; ".join(result.refusals))
                        next_try = now + 0.2
                elif gp.state == "armed":
                    m.set_current(CURRENT, who="soak")
                    m.emit("soak")
                    soak.emits += 1
            except GainbenchError as exc:  # refused while a condition holds: try again shortly
                soak.refusals.append(str(exc))
                next_try = now + 0.2
        time.sleep(0.02)


def _run_soak(tmp_path, *, speed: float, sim_seconds: float, mean_gap: float, seed: int):
    text = builtin_bench_path().read_text(encoding="utf-8")
    cfg = load_bench_text(
        text,
        "soak bench",
        overrides={
            "instruments.detector.options.sample_rate": "2 kHz",
            # real seconds on an accelerated bench (the measurement scales it by the speed); a
            # loaded test machine stalls a reader for less than this
            "guard.stale_after": "2 s",
        },
    )
    rng = random.Random(seed)
    soak = Soak()
    m = Measurement(
        cfg,
        speed=speed,
        log_dir=tmp_path,
        seed=seed,
        settings={"pump_current": CURRENT, "pump_power": cfg.pump.power_at(CURRENT)},
    )
    stop = threading.Event()
    poller = threading.Thread(target=_poll_pump, args=(m, stop, soak), name="soak-pump-poll", daemon=True)
    with m:
        m.capture_baseline(1.0)
        poller.start()
        start = time.monotonic()
        schedule = _schedule(rng, start, sim_seconds / speed, mean_gap, speed)
        try:
            _operate(m, soak, schedule, m.clock.now() + sim_seconds)
        finally:
            stop.set()
            poller.join(10)
        readers = list(m.readers)
        clock_start = m.clock.start
    for r in readers:
        assert r.error is None, f"reader {r.name} stopped: {r.error!r}"
    return m, soak, clock_start


def _emitting_intervals(events, clock_start: float, speed: float) -> list[tuple[float, float]]:
    """Real-time intervals in which the guard let the pump emit, from the run's guard events."""
    out, since = [], None
    for e in events:
        if e.kind not in ("guard", "trip") or "to" not in e.data:
            continue
        real = clock_start + e.t / speed
        if e.data["to"] == "emitting" and since is None:
            since = real
        elif e.data["to"] != "emitting" and since is not None:
            out.append((since, real))
            since = None
    if since is not None:
        out.append((since, float("inf")))
    return out


def _pump_unreachable(events, clock_start: float, speed: float) -> list[tuple[float, float]]:
    """Real-time intervals from a failed exchange with the pump to "communication recovered".

    While the pump driver does not answer, no software can switch its output off: the guard
    trips, closes the pump shutter and says so loudly; the hardware interlock is what protects
    people then (common practice, no source). The output may stay on until the driver answers.
    """
    out, since = [], None
    for e in events:
        if e.kind != "fault" or e.data.get("source") != "pump":
            continue
        real = clock_start + e.t / speed
        if not e.data.get("ok", True) and since is None:
            since = real
        elif e.data.get("ok") and since is not None:
            out.append((since, real))
            since = None
    if since is not None:
        out.append((since, float("inf")))
    return out


def _check_shutter_closed_while_unreachable(events, unreachable, clock_start: float, speed: float) -> None:
    """Every stretch in which the pump could not be reached and a trip fell ends with the off
    command confirmed, and no trip in it went without the shutter being closed."""
    for a, b in unreachable:
        trips = [
            e
            for e in events
            if e.kind == "trip" and e.data.get("from") != "tripped" and a <= clock_start + e.t / speed <= b
        ]
        for e in trips:
            assert "CloseShutter" in (e.data.get("actions") or ()), e.text


def _check_pump_never_on_unguarded(soak: Soak, intervals, truth, speed: float, clock_start: float) -> None:
    def allowed(t0: float, t1: float) -> bool:
        return any(a <= t1 and t0 <= b + OFF_ALLOWANCE for a, b in intervals)

    bad = [(t0, t1) for t0, t1, on in soak.readings if on and not allowed(t0, t1)]
    assert not bad, (
        f"pump output read on outside emission (+{OFF_ALLOWANCE} s): {bad[:5]} of {len(soak.readings)}"
    )
    powered = [row["t"] for row in truth if row.get("pump_w", 0.0) > 1e-9]
    bad_truth = [t for t in powered if not allowed(clock_start + t / speed, clock_start + t / speed)]
    assert not bad_truth, f"the simulator shows pump power outside emission at run times {bad_truth[:5]}"


def _check_nothing_lost_silently(path, speed: float) -> dict:
    with RunReader(path) as r:
        r.integrity_check()
        assert r.status == "complete"
        blocks = [(b.seq, b.first_index, b.n, b.t0, b.t_end) for b in r.iter_blocks(source="detector")]
        events = r.events()
    gaps = {e.data["first_index"]: e for e in events if e.kind == "gap"}
    causes = [
        e.t
        for e in events
        if e.kind == "fault"
        and e.data.get("source") == "detector"
        and (not e.data.get("ok", True) or "overflow" in e.text)
    ]
    dropped = max((e.data["by_source"].get("detector", 0) for e in events if e.kind == "drop"), default=0)
    holes, seq_jumps, end, prev = [], 0, 0, None
    for seq, first, n, t0, t_end in blocks:
        if prev is not None:
            seq_jumps += seq - prev[0] - 1
        if first != end:
            holes.append(
                (first, first - end, seq - (prev[0] if prev else -1) - 1, prev[4] if prev else 0.0, t_end)
            )
        end, prev = first + n, (seq, first, n, t0, t_end)
    assert blocks, "no detector data was stored"
    assert seq_jumps <= dropped, (
        f"{seq_jumps} detector blocks missing from the run but {dropped} reported dropped"
    )
    slack = 5.0 * speed  # run-clock s: a slow reply is held 3 real s, the digitiser's timeout is 2 s
    for first, missing, seqs_missing, t_before, t_after in holes:
        assert missing > 0, f"detector samples overlap at index {first}"
        gap = gaps.get(first)
        assert gap is not None and gap.data["missing"] == missing, (
            f"hole of {missing} before {first} not logged"
        )
        if seqs_missing:
            continue  # blocks dropped by a full queue (counted above)
        assert any(t_before - slack <= t <= t_after + slack for t in causes), (
            f"{missing} sample sets lost before index {first} (run time {t_before:.1f} - {t_after:.1f} s) "
            "with no detector fault logged nearby"
        )
    assert len(gaps) == len(holes), "gap events for holes that are not in the run"
    stored = sum(b[2] for b in blocks)
    return {
        "blocks": len(blocks),
        "stored": stored,
        "holes": len(holes),
        "lost": sum(h[1] for h in holes),
        "end": end,
        "dropped_blocks": dropped,
        "events": events,
    }


def _soak_and_check(tmp_path, speed, sim_seconds, mean_gap, seed, min_emissions):
    m, soak, clock_start = _run_soak(
        tmp_path, speed=speed, sim_seconds=sim_seconds, mean_gap=mean_gap, seed=seed
    )
    figures = _check_nothing_lost_silently(m.run_path, speed)
    events = figures.pop("events")
    with RunReader(m.run_path) as r:
        truth = r.truth()
    unreachable = _pump_unreachable(events, clock_start, speed)
    _check_shutter_closed_while_unreachable(events, unreachable, clock_start, speed)
    _check_pump_never_on_unguarded(
        soak, _emitting_intervals(events, clock_start, speed) + unreachable, truth, speed, clock_start
    )
    trips = [
        e
        for e in events
        if e.kind in ("guard", "trip") and e.data.get("to") == "tripped" and e.data.get("from") != "tripped"
    ]
    # the soak did what it is for: faults went in, the guard tripped, and emission resumed after trips
    assert len(soak.injected) >= 3 and trips and soak.emits >= min_emissions, (
        soak.injected,
        len(trips),
        soak.emits,
    )
    assert soak.readings, "the pump output was never read"
    assert figures["stored"] >= 0.5 * figures["end"], figures  # most of the data made it
    print(
        f"\nsoak speed {speed:g}, {sim_seconds:g} simulated s: {len(soak.injected)} faults "
        f"({len(soak.inject_errors)} injections reported an error), {len(trips)} trips, {soak.emits} emissions, "
        f"{len(soak.readings)} pump readings ({soak.unreadable} unreadable), {figures}"
    )
    return figures


def test_short_fault_soak(tmp_path):
    _soak_and_check(tmp_path, speed=20.0, sim_seconds=160.0, mean_gap=1.0, seed=7, min_emissions=1)


@pytest.mark.slow
@pytest.mark.timeout(900)
def test_an_accelerated_hour_of_faults(tmp_path):
    _soak_and_check(tmp_path, speed=30.0, sim_seconds=3600.0, mean_gap=2.0, seed=20261202, min_emissions=5)
