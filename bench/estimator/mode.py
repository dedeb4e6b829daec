"""The `Mode` record: everything that differs between measurement modes, and the table of modes.

A mode is one frozen `Mode` record, looked up by name in `MODES`. The estimator's stream
(`bench.estimator.stream`), the run (`bench.run.measurement`, `bench.run.consumer`), the
dashboard's mode screen and `gainbench record` ask the record; none of them names a mode.
The built-in modes live in `bench.estimator.modes` (one module each) and are registered there;
`register_mode` adds another.

The hooks, in the order the stream calls them for each detector block:

``settle(params, settings)``
    (after a rising pump edge, after a falling one) in s: how long the samples after a pump
    edge are left out (`bench.estimator.state.make_frame`).
``new_core(params, settings, clock)``
    The mode's accumulators, frozen. ``clock`` is None before the first block; a core that
    needs the sample interval returns None then and is built once it is known.
``ingest(state, core, frame, clock)``
    One block's samples in: (new core, finished items). Items are small named records with an
    ``end`` (the sample index of their last sample); the stream sorts them and hands each to
    ``add`` in the window it ends in. `Skipped` items are counted, not added.
``add(core, item)``, ``reset_window(core)``
    Add one finished item (to the window's and the cumulative accumulators); empty the
    window's accumulators after an emission.
``estimate(state, core, scope, t, counts)``
    The `bench.records.Estimate` of ``scope`` (``"window"`` or ``"cumulative"``) at ``t``.
``flush(state)``
    For `bench.estimator.stream.report`: the state with what is still open counted (a batch
    being filled, an open decay that covers the fit span, a sweep's open step).
``restart(state)``, ``close_step(state)``
    A new cumulative scope (fresh core; a sweep keeps its points), and the end of a scope
    (a sweep closes its step into a point; the consumer calls `report` at the end of a
    stream for such a mode). Both optional.

And what the rest of gainbench asks: ``pump_steady(settings)`` (the pump is held at one level
between setting changes, not modulated), ``steps_pump`` (the mode changes the pump setting on
purpose during a run), ``timing`` (the modulation rule of a modulated mode: default period and
check, `bench.estimator.timing`), ``period`` (which of the dashboard's periods it modulates
with), ``settings`` (settings only this mode accepts), ``step_figure`` (what a sweep step
measured as in this mode gives), ``polled`` (it takes a polled detector's one-sample blocks,
`bench.estimator.state.POLL_TICK`), ``pump_on`` (how a block tells the pump's state, when not by
the pump monitor), ``channels`` (the block channels its ingest reads from ``Frame.extra``) and
its words for ``record --help`` and the dashboard.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, NamedTuple

__all__ = [
    "EMISSION_SETTINGS",
    "Mode",
    "Timing",
    "Skipped",
    "MODES",
    "register_mode",
    "unregister_mode",
    "mode_of",
    "modulated",
]


#: Settings that tell a mode reading the pump's state from settings (``pump_on``) when the
#: guard last switched the pump on and off (run clock, s). They move no step and start no new
#: scope: the pump's edges settle as edges do.
EMISSION_SETTINGS = ("emission_start", "emission_stop")


class Skipped(NamedTuple):
    """An item that is counted but not added: ``reason`` is ``"skip"`` (no settled part, too
    short), ``"warmup"`` (before the pump's first steady cycle: expected, not counted) or
    ``"no_reference"`` (no pump-off reference)."""

    end: int
    reason: str

    @property
    def counts_as_skipped(self) -> bool:
        return self.reason in ("skip", "no_reference")


@dataclass(frozen=True)
class Timing:
    """The pump modulation rule of a modulated mode (50 % duty cycle).

    ``half_periods(params, pump_power)`` gives the (pump-on, pump-off) half-period lengths in s
    below which the mode has no settled data; ``default_half(params, pump_power, on, off)`` the
    half-period a default period is rounded up from; ``refusal(params, period, pump_power, on,
    off)`` the message refusing ``period``, or None when it leaves settled data.
    """

    half_periods: Callable[[Any, float | None], tuple[float, float]]
    default_half: Callable[[Any, float | None, float, float], float]
    refusal: Callable[[Any, float, float | None, float, float], str | None]


def _no_close(state):
    return state


@dataclass(frozen=True)
class Mode:
    """One measurement mode (see the module doc for each hook)."""

    name: str
    new_core: Callable[[Any, Mapping[str, Any], Any], Any]
    ingest: Callable[[Any, Any, Any, Any], tuple[Any, list]]
    add: Callable[[Any, Any], Any]
    reset_window: Callable[[Any], Any]
    estimate: Callable[[Any, Any, str, float, Any], Any]
    flush: Callable[[Any], Any]
    settle: Callable[[Any, Mapping[str, Any]], tuple[float, float]]
    pump_steady: Callable[[Mapping[str, Any]], bool]
    words: str
    cli_words: str
    describe: str = ""
    timing: Timing | None = None
    period: str | None = None
    steps_pump: bool = False
    #: It tunes the probe during a run (``gainbench record --wavelengths``; needs an instrument
    #: of role ``wavelength``).
    steps_wavelength: bool = False
    settings: tuple[str, ...] = ()
    #: The settings a run of this mode starts with when it steps the pump itself (a sweep's
    #: ``method``); a steady or modulated mode starts with the pump current and power instead.
    run_settings: Mapping[str, Any] = field(default_factory=dict)
    restart: Callable[[Any], Any] | None = None
    close_step: Callable[[Any], Any] = _no_close
    step_figure: Callable[[Any, Any], tuple[float, float, int, float] | None] | None = None
    #: It takes a polled stream (one-sample blocks at their own, irregular times: a meter),
    #: with batches and windows by time span; a mode that needs a sample interval does not.
    polled: bool = False
    #: ``pump_on(block, params, settings)``: per sample, whether the pump is on (modulated, for
    #: a lock-in); None: the pump monitor above `EstimatorParams.pump_threshold`.
    pump_on: Callable[[Any, Any, Mapping[str, Any]], Any] | None = None
    #: Channels the mode's ingest reads (`bench.estimator.state.Frame.extra`) besides S.
    channels: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not (isinstance(self.name, str) and self.name.isidentifier()):
            raise ValueError(f"mode: the name must be a plain word, got {self.name!r}")
        if self.period not in (None, "chop", "decay"):
            raise ValueError(f"mode {self.name}: period must be None, 'chop' or 'decay', got {self.period!r}")
        if (self.timing is None) != (self.period is None):
            raise ValueError(
                f"mode {self.name}: a modulated mode needs both timing and period, a steady one neither"
            )

    @property
    def closes_steps(self) -> bool:
        """Whether the mode closes a step at the end of a scope (its last one when the stream ends)."""
        return self.close_step is not _no_close

    def describe_choice(
        self, chop_period: float, decay_period: float, steps: int, dwell: float, lockin_hz: float = 0.0
    ) -> str:
        """The dashboard's one-line description of this mode with its timing."""
        return self.describe.format(
            chop_ms=chop_period * 1e3,
            decay_ms=decay_period * 1e3,
            steps=steps,
            dwell=dwell,
            lockin_hz=lockin_hz,
        )


#: The table of modes, in the order the dashboard and ``record --help`` show them.
MODES: dict[str, Mode] = {}


def register_mode(mode: Mode) -> Mode:
    """Add ``mode`` to `MODES` (a name already there is refused); returns it."""
    if not isinstance(mode, Mode):
        raise ValueError(f"mode: expected a Mode record, got {type(mode).__name__}")
    if mode.name in MODES:
        raise ValueError(f"mode: {mode.name!r} is already registered")
    MODES[mode.name] = mode
    return mode


def unregister_mode(name: str) -> None:
    """Take mode ``name`` out of `MODES` (for tests that register one of their own)."""
    MODES.pop(name, None)


def mode_of(name: str) -> Mode:
    """The `Mode` record of ``name``; ValueError naming the known modes otherwise."""
    try:
        return MODES[name]
    except (KeyError, TypeError):
        raise ValueError(f"mode: {name!r} is not one of {', '.join(MODES)}") from None


def modulated() -> tuple[str, ...]:
    """The names of the modes that modulate the pump (those with a timing rule)."""
    return tuple(name for name, m in MODES.items() if m.timing is not None)
