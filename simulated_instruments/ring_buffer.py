"""The digitiser's sample memory: a ring buffer of sample sets with absolute indices.

Holds up to ``capacity`` sample sets of ``channels`` float32 volts (float32 holds every ADC code
of up to 24 bits exactly). Writing into a full buffer drops the oldest unread sets and counts
them as lost. Indices are absolute since the last `clear`.
"""

from __future__ import annotations

import numpy as np

CAPACITY = 1 << 22


class SampleRing:
    """Ring buffer of sample sets (see module docstring)."""

    def __init__(self, capacity: int = CAPACITY, channels: int = 3):
        if isinstance(capacity, bool) or not isinstance(capacity, int) or capacity < 1:
            raise ValueError(f"capacity: expected a whole number of at least 1, got {capacity!r}")
        self.capacity = capacity
        self.channels = channels
        self._data: np.ndarray | None = None  # allocated at first write (pages fill as used)
        self.clear()

    def clear(self, start_index: int = 0) -> None:
        self.read_index = start_index  # absolute index of the oldest unread set
        self.write_index = start_index  # absolute index of the next set written
        self.lost = 0

    @property
    def waiting(self) -> int:
        return self.write_index - self.read_index

    def skip_to(self, index: int) -> None:
        """Sets before ``index`` were never stored (they would have overflowed anyway): the
        unread ones and the skipped ones all count as lost, and reading resumes at ``index``."""
        if index > self.write_index:
            self.lost += index - self.read_index
            self.read_index = self.write_index = index

    def write(self, block: np.ndarray) -> None:
        """Append sample sets (n, channels); the oldest unread ones go if it overflows."""
        n = block.shape[0]
        if n == 0:
            return
        if self._data is None:
            self._data = np.empty((self.capacity, self.channels), dtype=np.float32)
        if n > self.capacity:
            self.skip_to(self.write_index + n - self.capacity)
            block = block[n - self.capacity :]
            n = self.capacity
        start = self.write_index % self.capacity
        first = min(n, self.capacity - start)
        self._data[start : start + first] = block[:first]
        if first < n:
            self._data[: n - first] = block[first:]
        self.write_index += n
        overflow = self.write_index - self.read_index - self.capacity
        if overflow > 0:
            self.read_index += overflow
            self.lost += overflow

    def read(self, n: int) -> tuple[np.ndarray, int]:
        """Up to ``n`` of the oldest unread sets, as (float32 (k, channels), index of the first)."""
        k = max(0, min(n, self.waiting))
        first_index = self.read_index
        out = np.empty((k, self.channels), dtype=np.float32)
        if k:
            start = self.read_index % self.capacity
            first = min(k, self.capacity - start)
            out[:first] = self._data[start : start + first]
            if first < k:
                out[first:] = self._data[: k - first]
        self.read_index += k
        return out, first_index
