"""The table of modes is the only place to touch: a mode defined in this file alone runs through
the estimator, `gainbench record` on the simulated bench and a replay of the stored run.

The "hold" mode reports the mean normalised transmission ``S = V_probe / V_ref`` (dark
subtracted) of every sample since the scope started, against the stored baseline:
``ln_ratio = ln(mean S / S_off)``, with the noise of the mean from the scatter of the means of
fixed blocks of samples on the sample-index grid (batch means, Flyvbjerg and Petersen, J. Chem.
Phys. 91, 461 (1989)). Its figures are checked against numpy on the raw samples (np.mean,
np.std with ddof=1), computed here from the blocks alone.
"""

from __future__ import annotations

import dataclasses
import io
import math
import re
from contextlib import redirect_stdout
from types import MappingProxyType
from typing import NamedTuple

import numpy as np
import pytest
from cli_flags import ARM

import bench.estimator as est
from bench.cli import main
from bench.config import load_bench
from bench.estimator.mode import MODES, Mode, register_mode, unregister_mode
from bench.records import Block, Estimate, Quantity
from bench.run.replay import replay
from bench.store import RunReader

HOLD_BLOCK = 200  # samples per block of the hold mode


class HoldBlock(NamedTuple):
    end: int
    n: int
    total: float  # sum of S over the block


@dataclasses.dataclass(frozen=True)
class HoldCore:
    first: int = -1  # first sample index of the scope
    open_id: int = -1
    open_n: int = 0
    open_sum: float = 0.0
    n: int = 0
    total: float = 0.0
    means: tuple[float, ...] = ()  # the finished blocks' means
    win_n: int = 0


def _ingest(state, core, f, clock):
    first = f.i0 if core.first < 0 else core.first
    ids = np.arange(f.i0, f.i0 + f.n) // HOLD_BLOCK
    items = []
    open_id, open_n, open_sum = core.open_id, core.open_n, core.open_sum
    for b in np.unique(ids):
        sel = ids == b
        n, total = int(np.count_nonzero(sel)), float(np.sum(f.s[sel]))
        if b == open_id:
            n, total = n + open_n, total + open_sum
        if (b + 1) * HOLD_BLOCK - 1 <= f.i0 + f.n - 1:
            items.append(HoldBlock(int((b + 1) * HOLD_BLOCK - 1), n, total))
            open_id, open_n, open_sum = -1, 0, 0.0
        else:
            open_id, open_n, open_sum = int(b), n, total
    return dataclasses.replace(core, first=first, open_id=open_id, open_n=open_n, open_sum=open_sum), items


def _add(core, item):
    return dataclasses.replace(
        core,
        n=core.n + item.n,
        total=core.total + item.total,
        means=core.means + (item.total / item.n,),
        win_n=core.win_n + item.n,
    )


def _flush(state):
    core = state.core
    if core.open_n:
        core = dataclasses.replace(
            core, n=core.n + core.open_n, total=core.total + core.open_sum, open_id=-1, open_n=0, open_sum=0.0
        )
    return dataclasses.replace(state, core=core)


def _estimate(state, core, scope, t, counts):
    values, flags = {}, set()
    extra = {"first_index": core.first, "n_blocks": len(core.means)}
    b = state.baseline
    if b is None:
        flags.add("no_baseline")
    elif core.n and len(core.means) >= 2:
        mean = core.total / core.n
        noise = float(np.std(core.means, ddof=1)) / math.sqrt(len(core.means)) / mean
        values["ln_ratio"] = Quantity(math.log(mean / b.value), noise, noise, 0.0)
        extra.update(s_mean=mean, s_off=b.value)
    n = core.win_n if scope == "window" else core.n
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=n,
        extra=MappingProxyType(extra),
    )


HOLD = Mode(
    name="hold",
    new_core=lambda params, settings, clock: HoldCore(),
    ingest=_ingest,
    add=_add,
    reset_window=lambda core: dataclasses.replace(core, win_n=0),
    estimate=_estimate,
    flush=_flush,
    settle=lambda params, settings: (0.0, 0.0),
    pump_steady=lambda settings: True,
    words="hold: mean transmission change, steady pump",
    cli_words="hold: mean transmission change",
    describe="hold, steady pump",
)


@pytest.fixture
def hold_mode():
    register_mode(HOLD)
    try:
        yield HOLD
    finally:
        unregister_mode("hold")
    assert "hold" not in MODES


@pytest.fixture(scope="module")
def params():
    return est.EstimatorParams.from_config(load_bench(), pump_threshold_v=0.25)


def _blocks(rng, n, size, dt=1e-4):
    ref = 0.6 + 1e-3 * rng.standard_normal(n)
    probe = 0.8 * (1.0 + 0.02 * np.sin(np.arange(n) / 300.0)) + 1e-3 * rng.standard_normal(n)
    data = np.column_stack([probe, ref, np.full(n, 0.5)])
    return [
        Block(
            "detector", k // size, k * dt, dt, k, ("probe", "reference", "pump_monitor"), data[k : k + size]
        )
        for k in range(0, n, size)
    ], data


def test_a_mode_registered_in_the_table_runs_through_the_estimator(hold_mode, params):
    rng = np.random.default_rng(5)
    n = 40 * HOLD_BLOCK
    blocks, data = _blocks(rng, n, 317)
    dark = est.Dark(0.002, 1e-6, 0.001, 1e-6, 1000, 0.0)
    base = est.Baseline(1.31, 1e-5, 10_000, 0.0, 0.0)
    state = est.with_baseline(est.with_dark(est.new_state(params, "hold"), dark), base)
    emitted = []
    for b in blocks:
        state, out = est.update(state, b)
        emitted += out
    final = est.report(state)[0]
    # numpy on the raw samples: S, its mean, and the scatter of the 200-sample block means
    s = (data[:, 0] - dark.probe) / (data[:, 1] - dark.reference)
    means = s.reshape(-1, HOLD_BLOCK).mean(axis=1)
    assert final.mode == "hold" and final.n_samples == n
    assert final.values["ln_ratio"].value == pytest.approx(math.log(np.mean(s) / base.value), rel=1e-12)
    assert final.values["ln_ratio"].sigma_noise == pytest.approx(
        np.std(means, ddof=1) / math.sqrt(means.size) / np.mean(s), rel=1e-9
    )
    # the stream's windows: one window and one cumulative estimate per finished window
    windows = [e for e in emitted if e.scope == "window"]
    assert windows and len(windows) == len(emitted) // 2
    assert sum(e.n_samples for e in windows) <= n
    # a mode name outside the table is refused with the known ones named
    unregister_mode("hold")
    with pytest.raises(ValueError, match="not one of watch, chopped, decay, sweep"):
        est.new_state(params, "hold")
    register_mode(HOLD)


def test_a_mode_registered_in_the_table_records_and_replays(hold_mode, tmp_path):
    logs = tmp_path / "logs"
    buf = io.StringIO()
    with redirect_stdout(buf):  # the record command's --mode choices come from the table
        code = main(
            [
                "record",
                "--mode",
                "hold",
                "--seconds",
                "1.5",
                "--quiet",
                "--no-dark",
                "--logs",
                str(logs),
                *ARM,
            ]
        )
    out = buf.getvalue()
    assert code == 0, out
    run_id = out.strip().splitlines()[-1]
    path = logs / f"{run_id}.gbrun"
    with RunReader(path) as r:
        assert r.meta["estimator_mode"] == "hold"
        live = r.estimates()
        baseline = next(e for e in r.events() if e.text.startswith("baseline captured"))
        s_off = float(re.search(r"S_off = (\S+)", baseline.text).group(1))
        blocks = [b for b in r.iter_blocks("detector")]
    final = [e for e in live if e.scope == "cumulative"][-1]
    assert final.mode == "hold" and "ln_ratio" in final.values
    # numpy on the stored raw samples since the scope's first sample (no dark: S = V_p / V_r)
    first = final.extra["first_index"]
    end = first + final.n_samples
    s = np.concatenate([b.column("probe") / b.column("reference") for b in blocks])
    index = np.concatenate([np.arange(b.first_index, b.first_index + b.n) for b in blocks])
    s = s[(index >= first) & (index < end)]
    assert s.size == final.n_samples
    assert final.extra["s_mean"] == pytest.approx(np.mean(s), rel=1e-12)
    assert final.extra["s_off"] == pytest.approx(s_off, rel=1e-5)  # the event prints 6 digits
    assert final.values["ln_ratio"].value == pytest.approx(
        math.log(np.mean(s) / final.extra["s_off"]), rel=1e-12
    )
    # the replay of the stored run gives the live estimates again (the replay tests' 1e-9)
    result = replay(path)
    assert len(result.estimates) == len(live) and result.compared > 0
    assert result.max_relative_difference is not None and result.max_relative_difference <= 1e-9
    assert result.final.extra["s_mean"] == pytest.approx(np.mean(s), rel=1e-12)
