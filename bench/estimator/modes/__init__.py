"""The built-in modes, one module each, and their rows in the table `bench.estimator.mode.MODES`.

Adding a mode: a module with its core, ingest, add, estimate ... and one `bench.estimator.mode.Mode`
record, and one row below (or `bench.estimator.mode.register_mode` from anywhere else).
The order of the rows is the order the dashboard and ``gainbench record --help`` show.
"""

from __future__ import annotations

from bench.estimator.mode import MODES, register_mode
from bench.estimator.modes import chopped, decay, lockin, pulsed, spectrum, sweep, watch

for _mode in (
    watch.MODE,
    chopped.MODE,
    decay.MODE,
    sweep.MODE,
    lockin.MODE,
    pulsed.MODE,
    spectrum.MODE,
):
    if _mode.name not in MODES:
        register_mode(_mode)

__all__ = ["watch", "chopped", "decay", "sweep", "lockin", "pulsed", "spectrum"]
