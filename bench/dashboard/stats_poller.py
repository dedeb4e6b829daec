"""Reads the instruments' health counters off the event loop.

A driver's ``stats`` waits for the exchange in progress on that instrument (the counters
share the session's lock), which can take up to the driver's timeout when the instrument is
in trouble. The dashboard must never wait on an instrument, so a small thread copies the
counters every ``period`` seconds and the app's timer reads the latest copy.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Mapping
from types import MappingProxyType
from typing import Any

from bench.dashboard.meters import RateMeter

log = logging.getLogger(__name__)


class StatsPoller:
    """``latest()`` -> (role -> stats, role -> reads per second); ``stop()`` ends the thread."""

    def __init__(self, instruments: Mapping[str, Any], period: float = 0.5) -> None:
        if not period > 0:
            raise ValueError(f"period: {period} is not positive")
        self._instruments = dict(instruments)
        self.period = float(period)
        self._stop = threading.Event()
        self._latest: tuple[Mapping[str, Any], Mapping[str, float | None]] = (
            MappingProxyType({}),
            MappingProxyType({}),
        )
        self._meters = {role: RateMeter(window=3.0) for role in self._instruments}
        self._thread = threading.Thread(target=self._run, name="dashboard-stats", daemon=True)

    def start(self) -> StatsPoller:
        self._thread.start()
        return self

    def latest(self) -> tuple[Mapping[str, Any], Mapping[str, float | None]]:
        return self._latest

    def _run(self) -> None:
        while not self._stop.is_set():
            stats: dict[str, Any] = {}
            rates: dict[str, float | None] = {}
            for role, inst in self._instruments.items():
                if self._stop.is_set():
                    return
                try:
                    s = inst.stats
                except Exception as exc:  # a closed or broken driver: show the others
                    log.debug("stats of %s: %s", role, exc)
                    continue
                stats[role] = s
                rates[role] = self._meters[role].add(time.monotonic(), s.reads)
            self._latest = (MappingProxyType(stats), MappingProxyType(rates))
            self._stop.wait(self.period)

    def stop(self, timeout: float = 2.0) -> None:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout)
