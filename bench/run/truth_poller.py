"""The simulator's ground truth during a run on the simulated bench, polled over a detector
connection of its own and handed to the consumer as `TruthItem` rows (stored beside the data,
never used by the estimator)."""

from __future__ import annotations

import contextlib
import logging
import random
import threading
from collections.abc import Callable

from bench.config import BenchConfig
from bench.run.consumer import TruthItem
from bench.run.instrument_setup import open_truth_connection

log = logging.getLogger(__name__)

#: How the simulator's truth names map to the stored row's names.
TRUTH_NAMES = {"t": "sim_t", "pump_W": "pump_w"}


def poll_truth(
    cfg: BenchConfig, sim, detector_reader, stop: threading.Event, put: Callable[[TruthItem], None]
) -> None:
    """The simulator's truth about every 50 ms of real time until ``stop`` is set (a thread's
    target). Times become run-clock times through the detector reader's ``t_start``."""
    try:
        conn = open_truth_connection(cfg, sim)
    except Exception:  # no truth then; the run goes on
        log.warning("cannot reach the simulator for its truth", exc_info=True)
        return
    try:
        _truth_loop(detector_reader, conn, stop, put)
    finally:
        with contextlib.suppress(Exception):
            conn.close()


def _truth_loop(det, conn, stop: threading.Event, put: Callable[[TruthItem], None]) -> None:
    # every 30-70 ms at random, so that the rows never lock to the phase of a chopped pump
    jitter = random.Random()
    warned = False
    while not stop.wait(jitter.uniform(0.03, 0.07)):
        try:
            truth = conn.sim_truth()  # t: simulated s since the digitiser's INIT
        except Exception:  # a fault on this connection (it reconnects), or the simulator is closing
            if not warned:
                log.warning("the simulator's truth query failed (further failures not logged)", exc_info=True)
                warned = True
            continue
        values = {TRUTH_NAMES.get(k, k): float(v) for k, v in truth.items()}
        put(TruthItem(det.t_start + values.get("sim_t", 0.0), values))
