"""What the served instruments share: the model, the clock, the lock, the digitiser's memory.

Every instrument command runs with `BenchCore.lock` held, after `BenchCore.sync` has brought
the model up to the clock's present time: the sample sets that fell due since the last sync
are generated into the digitiser's ring buffer (lazily, only when someone asks), faults due by
now are applied at their exact times, and the errors the model raised on its own (interlock,
over-temperature, clipping) are pushed into the instruments' error queues.
"""

from __future__ import annotations

import threading

from simulated_instruments.clock import SimClock
from simulated_instruments.device_errors import ErrorQueue
from simulated_instruments.faults import ROLES
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.ring_buffer import CAPACITY, SampleRing


class BenchCore:
    """Model + clock + lock + ring buffer + error queues of one served bench."""

    def __init__(self, model: BenchModel, clock: SimClock, capacity: int = CAPACITY):
        self.model = model
        self.clock = clock
        self.lock = threading.RLock()
        self.ring = SampleRing(capacity)
        self.errors = {role: ErrorQueue() for role in ROLES}
        self.acquisition_started = False
        model.stop_acquisition()  # the digitiser waits for INIT

    def sync(self) -> None:
        """Bring the model to the clock's now (call with ``lock`` held)."""
        model = self.model
        now = self.clock.now()
        if now > model.t:
            due = model.samples_due(now)
            if due > self.ring.capacity:
                model.skip(due - self.ring.capacity)
                self.ring.skip_to(model.next_index)
                due = self.ring.capacity
            if due:
                for block, _ in model.iter_blocks(due):
                    self.ring.write(block)
            # generating stops at the time of the next sample set, which may be just past now
            if now > model.t:
                model.advance_to(now)
        self.route_errors()

    def route_errors(self) -> None:
        for role, code in self.model.pop_device_errors():
            self.errors[role].push(code)

    def start_acquisition(self, rate: float) -> None:
        """INIT: clear the memory, sample index 0 now (lock held, after sync)."""
        self.model.start_acquisition(rate)
        self.ring.clear(0)
        self.acquisition_started = True

    def acquisition_time(self) -> float:
        """Simulated seconds since INIT (since the bench started if there was no INIT)."""
        return self.model.t - self.model.acquisition_start
