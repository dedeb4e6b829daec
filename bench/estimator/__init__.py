"""The online estimator: blocks of detector samples in, gain and inversion estimates out.

State in, state out, no I/O. One module per job:

* `bench.estimator.stream`: `new_state`, `update`, `report`, `with_dark`, `with_baseline`,
  `with_background`, `with_setting` (emission windows, gaps, determinism);
* `bench.estimator.state`: the state record and the per-block frame (signals, settling);
* `bench.estimator.capture`: `Dark`, `Baseline`, `Background`, `capture_dark`, `capture_baseline`,
  `capture_background`;
* `bench.estimator.figures`: `figures`, `probe_terms`, `pump_induced` (the uncertainty model);
* `bench.estimator.mode`: the `Mode` record and the table `MODES`; `bench.estimator.modes`: one
  module per mode (watch, chopped, decay, sweep), each with its own description;
* `bench.estimator.params`, `bench.estimator.timing`, `bench.estimator.cost`.

Usage::

    params = EstimatorParams.from_config(cfg)
    dark = capture_dark(dark_blocks)                 # probe blocked
    baseline = capture_baseline(off_blocks, dark)    # pump off
    state = with_baseline(with_dark(new_state(params, "watch", {"pump_power": 4.0}), dark), baseline)
    for block in detector_blocks:
        state, estimates = update(state, block)
    final = report(state)

Flags (`bench.records.FLAGS`): ``probe_not_weak`` (``I/I_sat`` or ``F/F_sat`` above
``weak_fraction``, ``I`` the probe's power-weighted mean intensity, half its peak; pulsed probes are then corrected with Frantz-Nodvik), ``near_full_scale``
(a sample behind the estimate above ``full_scale_fraction`` of the range), ``baseline_stale``
(older than ``baseline_max_age``, or in chopped mode the pump-off level differs from it by more
than ``baseline_drift_k`` sigma), ``low_snr`` (``|ln R| < snr_min sigma_noise``, or fewer than
``min_batches`` batches / cycles / decays behind the noise figure), ``not_settled`` (pump-on
samples inside the settle time in the window, or no settled data at all), ``no_baseline``
(a figure needs the stored baseline and there is none; the estimate then has no values),
``no_dark`` (no dark captured: zero volts assumed), ``background_high`` (the pump-induced
background subtracted from the probe is above ``background_flag_fraction`` of the probe level).

References
----------
.. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
   (quasi-three-level gain and inversion).
.. [2] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
   J. Chem. Phys. 91, 461 (1989) (batch / blocking estimates of the error of a mean).
.. [3] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
   J. Appl. Phys. 34, 2346 (1963).
"""

from __future__ import annotations

from bench.estimator import modes as _modes  # noqa: F401 - registers the built-in modes
from bench.estimator.capture import (
    Background,
    Baseline,
    Dark,
    capture_background,
    capture_baseline,
    capture_dark,
)
from bench.estimator.figures import figures, probe_terms, pulsed_small_signal_ln_ratio, pump_induced
from bench.estimator.mode import MODES, Mode, Skipped, Timing, mode_of, register_mode, unregister_mode
from bench.estimator.params import EstimatorParams
from bench.estimator.state import EstimatorState
from bench.estimator.stream import (
    SETTINGS,
    new_state,
    report,
    update,
    with_background,
    with_baseline,
    with_dark,
    with_setting,
)

__all__ = [
    "MODES",
    "SETTINGS",
    "Mode",
    "Timing",
    "Skipped",
    "mode_of",
    "register_mode",
    "unregister_mode",
    "Dark",
    "Baseline",
    "Background",
    "EstimatorParams",
    "EstimatorState",
    "capture_dark",
    "capture_baseline",
    "capture_background",
    "new_state",
    "with_dark",
    "with_baseline",
    "with_background",
    "with_setting",
    "update",
    "report",
    "figures",
    "probe_terms",
    "pump_induced",
    "pulsed_small_signal_ln_ratio",
]
