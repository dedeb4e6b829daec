"""`gainbench benchmark`: what this machine sustains, measured, each figure beside its reference.

Every figure is measured on the machine it runs on, against the simulated bench in a process of
its own (so the measurement sees the same loopback transports a real bench would):

- raw sequential write speed of the log disk, and the run store's write speed as a ratio to it;
- the highest sustained acquisition rate (3 digitiser channels) with zero drops, headless;
- the estimator's cost per sample, and replay speed as a multiple of real time;
- guard trip latency, from the reading that shows an opened interlock to the pump-off command;
- memory after 1 and after 24 simulated hours (a slow sample rate at a high simulation speed,
  so that a day passes in minutes).

Nothing here asserts: the numbers are for a person to read against their instrument's sample
rate (see the README).
"""

from __future__ import annotations

import contextlib
import gc
import math
import os
import tempfile
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from bench.config import BenchConfig, load_bench, load_bench_text
from bench.records import Block

ARM_ODS = {940e-9: 7.0, 1030e-9: 7.0}


@dataclass
class Figure:
    name: str
    value: float | None
    unit: str
    reference: str
    detail: str = ""
    extra: dict[str, Any] = field(default_factory=dict)


def bench_at(
    rate_hz: float, *, base: BenchConfig | None = None, extra: dict[str, str] | None = None
) -> BenchConfig:
    """The built-in bench with the digitiser at ``rate_hz``."""
    cfg = base or load_bench()
    overrides = {"instruments.detector.options.sample_rate": f"{rate_hz:g} Hz", **(extra or {})}
    return load_bench_text(cfg.text, cfg.source, overrides=overrides)


# -- disk ------------------------------------------------------------------------------------------


def disk_write_speed(directory: Path, megabytes: int = 256) -> float:
    """Sequential write speed (bytes/s) of ``directory``'s disk: os.write in 4 MiB chunks + fsync."""
    chunk = os.urandom(4 << 20)
    n = max(1, megabytes // 4)
    fd, name = tempfile.mkstemp(dir=directory, prefix="gainbench-disk-")
    try:
        t = time.perf_counter()
        for _ in range(n):
            os.write(fd, chunk)
        os.fsync(fd)
        dt = time.perf_counter() - t
    finally:
        os.close(fd)
        os.unlink(name)
    return n * len(chunk) / dt


def store_write_speed(directory: Path, megabytes: int = 256) -> float:
    """Bytes of raw block data per second the run store writes (float32-exact ADC-like data)."""
    from bench.store import RunWriter

    cfg = load_bench()
    rng = np.random.default_rng(1)
    sets = 65536
    codes = rng.integers(-30000, 30000, size=(sets, 3))
    data = codes.astype(np.float64) * (2.0 / 32768)
    per_block = data.astype(np.float32).nbytes
    n = max(1, (megabytes << 20) // per_block)
    with tempfile.TemporaryDirectory(dir=directory) as tmp:
        writer = RunWriter.create(tmp, bench_text=cfg.text, flush_interval=0.5)
        t = time.perf_counter()
        for k in range(n):
            writer.append_block(
                Block(
                    "detector",
                    k,
                    k * sets * 1e-6,
                    1e-6,
                    k * sets,
                    ("probe", "reference", "pump_monitor"),
                    data,
                )
            )
            writer.flush_if_due()
        writer.close()
        dt = time.perf_counter() - t
    return n * per_block / dt


# -- acquisition ------------------------------------------------------------------------------


def acquisition_run(
    rate_hz: float,
    seconds: float,
    log_dir: Path,
    *,
    speed: float = 1.0,
    faults: tuple[str, ...] = (),
    mode: str = "watch",
) -> dict[str, Any]:
    """Record ``seconds`` of pumped data at ``rate_hz``; drops, lag and trips as measured."""
    out: dict[str, Any] = {"rate_hz": rate_hz, "seconds": seconds}
    with _pumped(bench_at(rate_hz), mode=mode, log_dir=log_dir, speed=speed, faults=faults) as m:
        snap0 = m.snapshot(with_history=False)
        t0 = time.monotonic()
        m.hold(seconds, should_stop=lambda: m.guarded_pump.state == "tripped")
        out.update(_outcome(m, snap0, time.monotonic() - t0))
        out["lost"] = m.readers[0].lost_reported
        out["latencies"] = list(m.guarded_pump.trip_latencies)
    out["kept_up"] = _kept_up(out)
    return out


@contextlib.contextmanager
def _pumped(
    cfg: BenchConfig,
    kind: type | None = None,
    *,
    dark: float | None = 0.1,
    baseline: float = 0.2,
    **options: Any,
) -> Iterator[Any]:
    """An open `Measurement` (or ``kind``, e.g. `RemoteMeasurement`) on ``cfg`` with a dark of
    ``dark`` s (none if None) and a baseline of ``baseline`` s taken, armed and emitting."""
    from bench.run.measurement import Measurement
    from bench.run.pump_program import default_current
    from bench.safety.checklist_answers import answers_from_flags

    current = default_current(cfg)
    settings = {"pump_current": current, "pump_power": cfg.pump.power_at(current)}
    with (kind or Measurement)(cfg, settings=settings, **options) as m:
        if dark is not None:
            m.capture_dark(dark)
        m.capture_baseline(baseline)
        result = m.arm(answers_from_flags("benchmark", ARM_ODS, True), "benchmark")
        if not result.passed:
            raise RuntimeError("; ".join(result.refusals))
        m.set_current(current, who="benchmark")
        m.emit("benchmark")
        yield m


def _outcome(m, snap0, wall: float) -> dict[str, Any]:
    """Rate, drops, lag and trip of the ``wall`` s since ``snap0``, from a snapshot taken now."""
    snap = m.snapshot(with_history=False)
    return {
        "samples_per_s": (snap.samples - snap0.samples) / wall,
        "drops": snap.drops,
        "lag_s": max(0.0, m.clock.now() - snap.t),
        "tripped": snap.guard_state == "tripped",
        "trip_reason": snap.trip_reason,
        "run_path": str(m.run_path),
        "faults": snap.faults,
    }


def _kept_up(r: dict[str, Any]) -> bool:
    return (
        r["drops"] == 0
        and r["lost"] == 0
        and r["lag_s"] < 0.5
        and not r["tripped"]
        and r["samples_per_s"] >= 0.9 * r["rate_hz"]
    )


def dashboard_run(
    rate_hz: float,
    seconds: float,
    log_dir: Path,
    *,
    size: tuple[int, int] = (160, 50),
    report: Callable[[str], None] | None = None,
) -> dict[str, Any]:
    """As `acquisition_run`, with the live dashboard open on the bench as `gainbench live` runs
    it (the bench in a process of its own), plus the reading-to-screen latency and repaint rate.

    The dashboard runs on textual's headless driver at ``size`` cells: it lays out and renders
    every frame as on a terminal; only the bytes are not written to one.
    """
    import asyncio

    from bench.dashboard.live_app import LiveDashboard
    from bench.run.measurement_process import RemoteMeasurement

    out: dict[str, Any] = {"rate_hz": rate_hz, "seconds": seconds, "size": list(size)}
    with _pumped(bench_at(rate_hz), kind=RemoteMeasurement, log_dir=log_dir) as m:
        app = LiveDashboard(m, operator="benchmark", close_on_quit=False)

        async def watch() -> None:
            async with app.run_test(size=size):
                deadline = time.monotonic() + 10.0
                while not app.ready and time.monotonic() < deadline:
                    await asyncio.sleep(0.05)
                await asyncio.sleep(1.0)  # the first layout and paint
                app.latency = type(app.latency)()  # count from here
                snap0 = m.snapshot(with_history=False)
                t0, cpu0 = time.monotonic(), time.process_time()
                while time.monotonic() - t0 < seconds and m.guarded_pump.state != "tripped":
                    await asyncio.sleep(0.1)
                wall = time.monotonic() - t0
                out["dashboard_cpu"] = (time.process_time() - cpu0) / wall  # cores, this process
                out.update(_outcome(m, snap0, wall))
                out["lost"] = out["faults"]  # the readers are in the bench process: its fault count
                lat = app.latency.figures(m.speed)
                if lat is not None:
                    out.update(
                        latency_median_s=lat.median,
                        latency_p95_s=lat.p95,
                        latency_worst_s=lat.worst,
                        newest_age_median_s=lat.fresh_median,
                        newest_age_p95_s=lat.fresh_p95,
                        repaint_hz=lat.repaint_hz,
                        repaints=lat.n,
                    )

        asyncio.run(watch())
    out["kept_up"] = _kept_up(out)
    if report is not None and "latency_p95_s" in out:
        report(
            f"    reading to screen median {out['latency_median_s'] * 1e3:.0f} ms, p95 "
            f"{out['latency_p95_s'] * 1e3:.0f} ms, worst {out['latency_worst_s'] * 1e3:.0f} ms; "
            f"dashboard {out['dashboard_cpu'] * 100:.0f} % of a core"
        )
    return out


def highest_rate(
    log_dir: Path,
    rates: list[float],
    seconds: float,
    report: Callable[[str], None],
    run: Callable[..., dict[str, Any]] | None = None,
) -> tuple[float | None, list[dict[str, Any]]]:
    """Runs at each rate in turn until one does not keep up; the highest that did."""
    best = None
    runs = []
    for rate in rates:
        r = (run or acquisition_run)(rate, seconds, log_dir)
        runs.append(r)
        report(
            f"  {rate / 1e3:8.0f} kHz: {r['samples_per_s'] / 1e3:8.1f} k sets/s, drops {r['drops']}, "
            f"lost {r['lost']}, lag {r['lag_s'] * 1e3:.0f} ms{'  (tripped: ' + str(r['trip_reason']) + ')' if r['tripped'] else ''}"
        )
        if not r["kept_up"]:
            break
        best = rate
    return best, runs


# -- estimator and replay -------------------------------------------------------------------------


def replay_speed(run_path: str) -> dict[str, float]:
    """Replay ``run_path`` twice (as ``replay --headless --speed max``); the figures of the
    second pass (the first also pays for imports and the first reads of the file)."""
    from bench.run.replay import replay
    from bench.store import RunReader

    first = replay(run_path)
    r = replay(run_path)
    with RunReader(run_path) as reader:
        duration = reader.duration() or math.nan
        channels = len(reader.channels("detector") or ()) or 1
    with_real = (duration / r.seconds) if r.seconds > 0 else math.inf
    return {
        "sets_per_s": r.samples_per_second,
        "samples_per_s": r.samples_per_second * channels,
        "channels": channels,
        "first_pass_sets_per_s": first.samples_per_second,
        "times_real_time": with_real,
        "identical": r.max_relative_difference == 0.0,
    }


def estimator_cost(quick: bool = False) -> dict[str, float]:
    """CPU seconds per sample set of the estimator, per mode."""
    from bench.estimator import MODES
    from bench.estimator.cost import estimator_cost_per_sample

    seconds = 0.5 if quick else 2.0
    return {mode: estimator_cost_per_sample(mode, seconds=seconds) for mode in MODES}


# -- guard ------------------------------------------------------------------------------------------


def trip_latency(log_dir: Path, repeats: int = 3) -> list[float]:
    lat = []
    for _ in range(repeats):
        r = acquisition_run(100e3, 4.0, log_dir, faults=("interlock@3.5s+0.3s",))
        lat += r["latencies"][:1]
    return lat


# -- memory ------------------------------------------------------------------------------------------


def memory_over_day(
    log_dir: Path,
    hours: float = 24.0,
    speed: float = 1000.0,
    rate_hz: float = 50.0,
    report: Callable[[str], None] = print,
) -> dict[str, float]:
    """RSS after 1 simulated hour and after ``hours``, at ``speed`` (steady pump, recording).

    One estimate per 5 s of data, as a day-long monitoring run would be set up: at the default
    0.25 s and a speed of 1000 the estimator would have to make 8000 estimates per second of
    wall time, which is not what a day at the bench asks of it.
    """
    import psutil

    proc = psutil.Process()
    # No source drift: the demo's 2 %/h would carry the probe past 95 % of the detector range
    # (a guard trip, as it should be) after about 8 hours; the day is meant to be pumped.
    cfg = bench_at(rate_hz, extra={"run.estimate_every": "5 s", "simulation.drift_per_hour": "0"})
    out: dict[str, float] = {}
    with _pumped(cfg, dark=None, baseline=1.0, log_dir=log_dir, speed=speed) as m:
        m.hold(3600.0)
        gc.collect()
        out["rss_1h_mb"] = proc.memory_info().rss / 1e6
        report(f"  after 1 simulated hour: {out['rss_1h_mb']:.1f} MB")
        m.hold((hours - 1.0) * 3600.0, should_stop=lambda: m.guarded_pump.state == "tripped")
        gc.collect()
        out[f"rss_{hours:g}h_mb"] = proc.memory_info().rss / 1e6
        out["hours"] = hours
        out["tripped"] = m.guarded_pump.state == "tripped"
        snap = m.snapshot(with_history=False)
        out["drops"] = snap.drops
        report(f"  after {hours:g} simulated hours: {out[f'rss_{hours:g}h_mb']:.1f} MB (drops {snap.drops})")
    out["growth_mb"] = out[f"rss_{hours:g}h_mb"] - out["rss_1h_mb"]
    return out


def in_fresh_process(function: str, *args: Any, report: Callable[[str], None] = print, **kwargs: Any) -> Any:
    """Call ``bench.performance.<function>(*args, **kwargs)`` in a new interpreter and return
    what it returns (JSON-able): the figures are then those of a process that has done only
    that (as a user's ``gainbench record`` or ``gainbench live``), not of this one, which has
    made the other measurements before. Its report lines (indented) are passed on."""
    import json
    import subprocess
    import sys

    code = (
        "import json, sys; from pathlib import Path; import bench.performance as b\n"
        "if __name__ == '__main__':\n"
        "    call = json.loads(sys.argv[1])\n"
        "    out = getattr(b, call['f'])(*call['args'], **call['kwargs'],"
        " report=lambda t: print(t, file=sys.stderr, flush=True))\n"
        "    print(json.dumps(out, default=str))\n"
    )
    call = json.dumps(
        {"f": function, "args": [str(a) if isinstance(a, Path) else a for a in args], "kwargs": kwargs}
    )
    # -P: a folder named "bench" in the current directory is never imported in place of this package
    proc = subprocess.Popen(
        [sys.executable, "-P", "-c", code, call], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    lines = []
    assert proc.stderr is not None
    for line in proc.stderr:
        line = line.rstrip("\n")
        lines.append(line)
        if line.startswith("  "):
            report(line)
    out, _ = proc.communicate()
    if proc.returncode != 0:
        raise RuntimeError(f"{function} failed: " + "\n".join(lines[-20:]))
    return json.loads(out.strip().splitlines()[-1])


# -- all of it --------------------------------------------------------------------------------------


def run_benchmark(
    log_dir: Path, *, quick: bool = False, report: Callable[[str], None] = print
) -> list[Figure]:
    log_dir.mkdir(parents=True, exist_ok=True)
    figures: list[Figure] = []
    mb = 64 if quick else 256
    report("disk ...")
    disk = disk_write_speed(log_dir, mb)
    store = store_write_speed(log_dir, mb)
    figures.append(Figure("disk sequential write", disk / 1e6, "MB/s", "reference for the run store"))
    figures.append(
        Figure(
            "run store write",
            store / 1e6,
            "MB/s",
            f"{store / disk:.2f} x the disk",
            extra={"ratio_to_disk": store / disk},
        )
    )
    report("acquisition (3 channels, headless) ...")
    rates = (
        [250e3, 1e6] if quick else [100e3, 250e3, 500e3, 1e6, 1.5e6, 2e6]
    )  # 2 MHz: the simulated digitiser's top
    seconds = 3.0 if quick else 8.0
    best, runs = highest_rate(log_dir, rates, seconds, report)
    figures.append(
        Figure(
            "highest rate, zero drops, headless",
            None if best is None else best / 1e6,
            "M samples/s per channel",
            ">= 1 wanted (3 channels: probe, reference, pump monitor)",
            extra={"runs": runs},
        )
    )
    report("acquisition with the dashboard open (bench in its own process) ...")
    dash_rates = [250e3, 1e6] if quick else [250e3, 1e6, 2e6]

    def fresh_dashboard(rate: float, seconds: float, log_dir: Path) -> dict[str, Any]:
        # as a user runs `gainbench live`: in a process that has done nothing else
        return in_fresh_process("dashboard_run", rate, seconds, log_dir, report=report)

    dash_best, dash_runs = highest_rate(log_dir, dash_rates, seconds, report, run=fresh_dashboard)
    figures.append(
        Figure(
            "highest rate, zero drops, dashboard open",
            None if dash_best is None else dash_best / 1e6,
            "M samples/s per channel",
            ">= 1 wanted",
            extra={"runs": dash_runs},
        )
    )
    at = next((r for r in dash_runs if r["rate_hz"] == 1e6), dash_runs[-1] if dash_runs else None)
    if at is not None and "latency_p95_s" in at:
        where = f"at {at['rate_hz'] / 1e6:g} M samples/s per channel"
        figures.append(
            Figure(
                "reading to screen, 95th percentile",
                at["latency_p95_s"] * 1e3,
                "ms",
                f"<= 200 ms wanted; {where}",
                detail=f"median {at['latency_median_s'] * 1e3:.0f} ms, worst "
                f"{at['latency_worst_s'] * 1e3:.0f} ms; newest reading "
                f"{at['newest_age_median_s'] * 1e3:.0f} ms old at the median repaint; "
                f"{at['repaint_hz']:.1f} repaints/s",
                extra=at,
            )
        )
        figures.append(Figure("dashboard process CPU", at["dashboard_cpu"] * 100, "% of a core", where))
    report("estimator ...")
    cost = estimator_cost(quick)
    for mode, sec in cost.items():
        figures.append(
            Figure(
                f"estimator cost, {mode}", sec * 1e9, "ns/sample set", "1000 ns/set = one core at 1 M sets/s"
            )
        )
    last = next((r for r in reversed(runs) if r.get("kept_up")), runs[-1] if runs else None)
    if last is not None:
        report("replay ...")
        rs = replay_speed(last["run_path"])
        figures.append(
            Figure(
                "replay speed",
                rs["samples_per_s"] / 1e6,
                "M samples/s",
                f">= 20 wanted; {rs['times_real_time']:.1f} x real time of a "
                f"{last['rate_hz'] / 1e6:g} M samples/s per channel run ({rs['channels']} channels)",
                extra=rs,
            )
        )
    report("guard trip latency ...")
    lat = trip_latency(log_dir, 1 if quick else 3)
    figures.append(
        Figure(
            "guard trip latency (worst)",
            max(lat) * 1e3 if lat else None,
            "ms",
            "<= 100 ms required",
            detail=", ".join(f"{x * 1e3:.1f}" for x in lat),
        )
    )
    report("memory over a simulated day ...")
    hours = 3.0 if quick else 24.0
    mem = in_fresh_process("memory_over_day", log_dir, hours=hours, report=report)
    figures.append(
        Figure(
            "memory after 1 simulated hour",
            mem["rss_1h_mb"],
            "MB",
            "baseline (a recording process, 50 Hz at 1000 x real time)",
        )
    )
    figures.append(
        Figure(
            f"memory after {hours:g} simulated hours",
            mem[f"rss_{hours:g}h_mb"],
            "MB",
            f"growth {mem['growth_mb']:+.1f} MB (< 20 MB wanted)",
            extra=mem,
        )
    )
    return figures
