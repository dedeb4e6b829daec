"""Detector blocks straight from the simulated bench's model (`BenchModel`, no sockets), as the
digitiser driver would deliver them: probe, reference and pump monitor, numbered by their
first sample."""

from __future__ import annotations

from bench.records import Block

CHANNELS = ("probe", "reference", "pump_monitor")


def model_blocks(model, n: int, size: int = 2500):
    """Yield ``n`` samples of ``model`` as detector blocks of at most ``size`` samples."""
    while n > 0:
        k = min(n, size)
        data, first = model.generate(k)
        yield Block(
            "detector",
            first // size,
            model.acquisition_start + first / model.sample_rate,
            1.0 / model.sample_rate,
            first,
            CHANNELS,
            data,
        )
        n -= k
