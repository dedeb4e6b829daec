"""The whole simulated bench as one deterministic model: sources, sample, detectors, truth.

`BenchModel` joins the gain medium (`medium`, `medium_timeline`), the pump diode driver
(`diode_driver_model`), the two shutters, the optional tunable probe (`lineshape`) and the detectors
(`detectors`). It has its own simulated time ``t`` (s); settings take effect at ``t``, and
`generate` / `advance_to` move time on. It is used directly, without sockets, e.g. to score
the estimator over many seeds, and it is what the served instruments talk to.

Acquisition: sample set ``i`` is taken at ``t_acq + i / sample_rate`` (``t_acq`` is the time of
`start_acquisition`, 0 for a new model). `generate(n)` returns the next ``n`` sample sets;
`advance_to` skips to a later time (the samples in between are not produced).

Ground truth (`truth`): length-averaged N2, excited fraction, the lifetime used, pump power on
the sample, the probe's true single-pass transmission pumped and unpumped (summed over the
medium's slices), the true gain coefficient and the true ln R = ln(S_on / S_off) =
(sigma_es + sigma_as) L (<N2> - N2_off) of the probe relative to the unpumped sample, at the
model's time. N2_off is the (tiny) excitation
the probe itself keeps up with the pump off, which a baseline includes; ``n2_avg`` and ``beta``
are absolute.

Deterministic: the same bench file, seed and sequence of calls give the same numbers, however
`generate` calls are split (the medium steps and the noise are drawn independently of the
blocking).
"""

from __future__ import annotations

import heapq
import math
from dataclasses import dataclass

import numpy as np
from scipy import constants

from drivers.errors import DriverConfigError
from drivers.units import parse_quantity
from simulated_instruments.detectors import CLIP_HOLD, DetectorModel
from simulated_instruments.device_errors import ILLEGAL_VALUE, INPUT_OVER_RANGE, OUT_OF_RANGE, DeviceError
from simulated_instruments.diode_driver_model import RAMP_TIME, DiodeDriverModel
from simulated_instruments.drive import Drive, Gate, SquareWave
from simulated_instruments.faults import MODEL_KINDS, Fault
from simulated_instruments.lineshape import DEFAULT_TEMPERATURE, probe_cross_sections, tuning_range
from simulated_instruments.medium import GainMedium
from simulated_instruments.medium_timeline import MediumTimeline
from simulated_instruments.sample_heating import READING_NOISE_K, SampleHeating
from simulated_instruments.setup_config import BenchSetup, SimulatorSetupError

DEFAULT_SAMPLE_RATE = 100e3  # Hz
RATE_RANGE = (1.0, 2e6)  # Hz
RANGES = (1.0, 2.0, 5.0, 10.0)  # V
DEFAULT_RANGE = 10.0  # V, the digitiser's power-on range
CHOP_RANGE = (0.1, 200.0)  # Hz
WAVELENGTH_SETTLE = 50e-3  # s
#: Stray light of the saturation fault on the probe input, in units of the present range.
STRAY_LIGHT = 1.5
#: Sample sets computed at once (bounds the memory of a long `generate`).
CHUNK = 1 << 16

SHUTTERS = {"probe": 1, "pump": 2, 1: 1, 2: 2}

#: The fields of `BenchModel.truth`, in the order of the ``SIM:TRUTH?`` reply (COMMANDS.md).
TRUTH_FIELDS = (
    "t",
    "n2_avg",
    "beta",
    "tau",
    "pump_w",
    "ln_ratio",
    "n_total",
    "length",
    "ln_t_pumped",
    "ln_t_unpumped",
    "gain_per_m",
    "n2_probe_only",
    "inputs_steady_s",
    "probe_wavelength",
    "sigma_a",
    "sigma_e",
)

#: The fields of `BenchModel.pulse_truth`, in the order of the scope's ``SIM:TRUTh:PULSe?``.
PULSE_TRUTH_FIELDS = (
    "pulse_t",
    "n2_before",
    "n2_peak",
    "beta_peak",
    "ln_ratio_peak",
    "pulse_pump_w",
    "tau",
    "pulses",
)
#: Pump pulses whose truth is kept.
PULSES_KEPT = 256


@dataclass(frozen=True)
class TruthBlock:
    """True values at every sample time of a block."""

    t: np.ndarray  # s, model time
    n2_avg: np.ndarray  # m^-3
    ln_ratio: np.ndarray
    pump_w: np.ndarray  # W on the sample


def _top_hat_area(diameter: float) -> float:
    return math.pi * diameter**2 / 4.0


def _photon_energy(wavelength: float) -> float:
    """h c / lambda, J (CODATA constants through scipy.constants)."""
    return constants.h * constants.c / wavelength


def _option(cfg: BenchSetup, key: str, kind: str):
    inst = cfg.instruments.get("detector")
    if inst is None or key not in inst.options:
        return None
    where = f"{cfg.source}: instruments.detector.options.{key}"
    value = inst.options[key]
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return float(value)
    try:
        return parse_quantity(value, kind, where)
    except DriverConfigError as exc:
        raise SimulatorSetupError(str(exc)) from None


def _flat(values: np.ndarray):
    """One number if every value is the same (cheaper downstream), else the array."""
    if values.size and values[0] == values[-1] and np.all(values == values[0]):
        return float(values[0])
    return values


class BenchModel:
    """The simulated bench (see module docstring).

    Parameters
    ----------
    cfg : BenchSetup
        A bench file with a ``[simulation]`` table (e.g. gainbench's ``load_bench()``).
    seed : int, optional
        Random seed; default ``cfg.simulation.seed``.
    sample_rate : float, optional
        Sample sets per second; default the detector's ``sample_rate`` option, else 100 kHz.
    voltage_range : float, optional
        Digitiser full scale (1, 2, 5 or 10 V); default the detector's ``range`` option, else
        10 V.
    """

    def __init__(
        self,
        cfg: BenchSetup,
        *,
        seed: int | None = None,
        sample_rate: float | None = None,
        voltage_range: float | None = None,
    ):
        if cfg.simulation is None:
            raise SimulatorSetupError(f"{cfg.source}: no [simulation] table, so there is nothing to simulate")
        sim = cfg.simulation
        self.cfg = cfg
        self.seed = sim.seed if seed is None else int(seed)
        noise_seq, drift_seq = np.random.SeedSequence(self.seed).spawn(2)
        self._detectors = DetectorModel(
            sim, np.random.Generator(np.random.SFC64(noise_seq)), np.random.default_rng(drift_seq)
        )
        s = cfg.sample
        self.medium = GainMedium(
            s.length,
            s.n_total,
            s.upper_state_lifetime,
            s.sigma.pump_absorption,
            s.sigma.pump_emission,
            sim.slices,
        )
        self.pump = DiodeDriverModel(cfg.pump, sim)
        self.heating = SampleHeating(
            sim.ambient_temperature,
            float(getattr(sim, "sample_heating", 0.0) or 0.0),
            float(getattr(sim, "sample_thermal_time_constant", 5.0) or 5.0),
            -math.expm1(-s.sigma.pump_absorption * s.n_total * s.length),
        )
        self._per_kelvin = (
            float(getattr(s, "probe_absorption_per_kelvin", 0.0) or 0.0),
            float(getattr(s, "probe_emission_per_kelvin", 0.0) or 0.0),
        )
        self._temperature_rng = np.random.default_rng(np.random.SeedSequence(self.seed).spawn(3)[2])
        self._gates = {1: Gate(), 2: Gate()}
        self._flux_per_watt = 1.0 / (
            _top_hat_area(cfg.pump.beam_diameter) * _photon_energy(cfg.pump.wavelength)
        )
        self._ramp_piece = min(s.upper_state_lifetime / 4.0, RAMP_TIME / 50.0)
        self.t = 0.0
        self._drive_since = 0.0  # when the drive last changed (`truth`'s inputs_steady_s)
        self._wavelength = cfg.probe.wavelength
        self._wavelength_changed = -math.inf
        self._update_probe()
        # the sample has been sitting in the probe beam with the pump off
        self._timeline = MediumTimeline(
            self.medium, self._drive(), model_step=sim.model_step, n2=np.full(sim.slices, self._n2_off)
        )
        self._events: list[tuple[float, int, str]] = []
        self._pulses: list[tuple[float, float, float, float]] = []  # `pulse_truth`
        self._pulse_count = 0
        self._event_seq = 0
        self._saturation: list[tuple[float, float]] = []
        self._device_errors: list[tuple[str, int]] = []
        rate = sample_rate if sample_rate is not None else _option(cfg, "sample_rate", "frequency")
        full_scale = voltage_range if voltage_range is not None else _option(cfg, "range", "voltage")
        self.full_scale = DEFAULT_RANGE
        self.set_range(DEFAULT_RANGE if full_scale is None else full_scale)
        self.sample_rate = DEFAULT_SAMPLE_RATE
        self._acquiring = False
        self._acq_t0 = 0.0
        self._next_index = 0
        self._clip_last = np.full(3, -math.inf)
        self.start_acquisition(DEFAULT_SAMPLE_RATE if rate is None else rate)

    # -- sources and sample ----------------------------------------------------------------------
    def _probe_terms(self, wavelength: float) -> tuple[float, float, float, float]:
        """(sigma_as, sigma_es, sigma_as Phi_s, (sigma_as + sigma_es) Phi_s) at ``wavelength``."""
        cfg = self.cfg
        sig = cfg.sample.sigma
        sa, se = probe_cross_sections(
            wavelength,
            cfg.probe.wavelength,
            sig.probe_absorption,
            sig.probe_emission,
            float(getattr(cfg.sample, "temperature", DEFAULT_TEMPERATURE)),
        )
        flux = cfg.probe.power / (_top_hat_area(cfg.probe.beam_diameter) * _photon_energy(wavelength))
        return sa, se, sa * flux, (sa + se) * flux

    def _update_probe(self) -> None:
        """Probe terms at the present wavelength.

        The unpumped reference state is the sample with the pump off and the probe on (what a
        baseline measures): N2_off = sigma_as Phi_s N / ((sigma_as + sigma_es) Phi_s + 1/tau).
        Probe volts scale as T / T_ref, T_ref that state's transmission at the bench file's
        probe wavelength; the true ln R is (sigma_es + sigma_as) L (<N2> - N2_off).
        """
        s = self.cfg.sample
        length, n_total, tau = s.length, s.n_total, s.upper_state_lifetime
        self._sigma_as, self._sigma_es, self._probe_up, self._probe_k = self._probe_terms(self._wavelength)
        self._ln_ratio_per_n2 = (self._sigma_es + self._sigma_as) * length
        self._n2_off = self._probe_up * n_total / (self._probe_k + 1.0 / tau)
        sa0, se0, up0, k0 = self._probe_terms(self.cfg.probe.wavelength)
        n2_off_ref = up0 * n_total / (k0 + 1.0 / tau)
        ln_t_ref = (se0 + sa0) * length * n2_off_ref - sa0 * n_total * length
        self._ln_t_ref = ln_t_ref
        # ln(T / T_ref) = (sigma_es + sigma_as) L <N2> + _ln_t_offset
        self._ln_t_offset = -self._sigma_as * n_total * length - ln_t_ref
        # The medium's own fluorescence reaching the probe detector, proportional to <N2>: a
        # power at full inversion, turned into volts with the probe detector's responsivity
        # (probe_signal volts for the probe power the unpumped sample transmits).
        fluo_w = float(getattr(self.cfg.simulation, "fluorescence_on_probe", 0.0) or 0.0)
        responsivity = self.cfg.simulation.probe_signal / (self.cfg.probe.power * math.exp(ln_t_ref))
        self._fluo_v_per_n2 = fluo_w * responsivity / n_total

    def _drive(self) -> Drive:
        return Drive(
            envelope=self.pump.envelope,
            modulation=self.pump.waveform,
            pump_gate=self._gates[2],
            probe_gate=self._gates[1],
            slope=self.pump.slope,
            threshold=self.pump.threshold,
            flux_per_watt=self._flux_per_watt,
            probe_up=self._probe_up,
            probe_k=self._probe_k,
            ramp_piece=self._ramp_piece,
        )

    def _changed(self) -> None:
        self._drive_since = self.t
        self._timeline.set_drive(self._drive())

    # -- pump driver -------------------------------------------------------------------------------
    def set_pump(
        self, *, current: float | None = None, on: bool | None = None, limit: float | None = None
    ) -> None:
        """Change the pump driver's limit, setpoint and/or output (in that order), now.

        Raises `DeviceError` (a ValueError) when refused: setpoint above the limit (-222),
        output on with the interlock open (201) or the mount over temperature (202).
        """
        try:
            if limit is not None:
                self.pump.set_limit(self.t, float(limit))
            if current is not None:
                self.pump.set_setpoint(self.t, float(current))
            if on is not None:
                self.pump.set_output(self.t, bool(on))
        finally:
            self._changed()

    def set_modulation(self, hz: float | None) -> None:
        """Square-wave modulation of the pump at ``hz`` (None: off), from now."""
        if hz is None:
            self.pump.set_modulation(self.t, False)
        else:
            self.pump.set_modulation_frequency(self.t, float(hz))
            self.pump.set_modulation(self.t, True)
        self._changed()

    def set_modulation_frequency(self, hz: float) -> None:
        self.pump.set_modulation_frequency(self.t, float(hz))
        self._changed()

    def set_modulation_enabled(self, on: bool) -> None:
        self.pump.set_modulation(self.t, bool(on))
        self._changed()

    # Pulsing shapes the pump in time (`DiodeDriverModel.pulse_train`): the drive changes.
    def set_pulse_width(self, seconds: float) -> None:
        self.pump.set_pulse_width(self.t, float(seconds))
        self._changed()

    def set_pulse_period(self, seconds: float) -> None:
        self.pump.set_pulse_period(self.t, float(seconds))
        self._changed()

    def set_pulsing(self, on: bool) -> None:
        self.pump.set_pulsing(self.t, bool(on))
        self._changed()

    def set_mount_setpoint(self, kelvin: float) -> None:
        self.pump.set_temperature_setpoint(self.t, float(kelvin))

    def reset_pump(self) -> None:
        """The driver's *RST: output off, setpoint 0 A, modulation off."""
        self.pump.reset(self.t)
        self._changed()

    def set_interlock(self, closed: bool) -> None:
        """The hardware interlock input (opening it switches an emitting pump off, error 201)."""
        for code in self.pump.set_interlock(self.t, closed):
            self._device_errors.append(("pump", code))
        self._changed()

    @property
    def pump_output_on(self) -> bool:
        return self.pump.output

    def pump_current(self) -> float:
        return self.pump.current(self.t)

    def pump_optical_power(self) -> float:
        return self.pump.optical_power(self.t)

    def mount_temperature(self) -> float:
        return self.pump.temperature(self.t)

    # -- shutters ----------------------------------------------------------------------------------
    def set_shutter(self, shutter: int | str, open: bool = True, chop_hz: float | None = None) -> None:
        """Open or shut shutter 1 (``"probe"``) or 2 (``"pump"``), or chop it at ``chop_hz``.

        ``chop_hz = 0`` stops chopping and leaves the shutter open.
        """
        n = SHUTTERS.get(shutter)
        if n is None:
            raise ValueError(f"shutter: expected 1, 2, 'probe' or 'pump', got {shutter!r}")
        if chop_hz is not None:
            hz = float(chop_hz)
            lo, hi = CHOP_RANGE
            if hz == 0.0:
                self._gates[n] = Gate(open=True)
            elif math.isfinite(hz) and lo <= hz <= hi:
                self._gates[n] = Gate(open=True, chop=SquareWave(hz, self.t))
            else:
                raise ValueError(f"chop_hz: expected 0 or {lo:g} ... {hi:g} Hz, got {chop_hz!r}")
        else:
            self._gates[n] = Gate(open=bool(open))
        self._changed()

    def shutter_open(self, shutter: int | str) -> bool:
        n = SHUTTERS.get(shutter)
        if n is None:
            raise ValueError(f"shutter: expected 1, 2, 'probe' or 'pump', got {shutter!r}")
        return self._gates[n].open_at(self.t)

    # -- tunable probe -----------------------------------------------------------------------------
    @property
    def probe_wavelength(self) -> float:
        return self._wavelength

    def wavelength_range(self) -> tuple[float, float]:
        return tuning_range(self.cfg.probe.wavelength)

    def set_probe_wavelength(self, wavelength: float) -> None:
        lo, hi = self.wavelength_range()
        if not (math.isfinite(wavelength) and lo <= wavelength <= hi):
            raise DeviceError(OUT_OF_RANGE, f"wavelength: {wavelength!r} m is outside {lo:g} ... {hi:g} m")
        self._wavelength = float(wavelength)
        self._wavelength_changed = self.t
        self._update_probe()
        self._changed()

    def wavelength_settled(self) -> bool:
        return self.t - self._wavelength_changed >= WAVELENGTH_SETTLE

    # -- digitiser ---------------------------------------------------------------------------------
    def set_range(self, volts: float) -> None:
        """Digitiser full scale: one of 1, 2, 5, 10 V."""
        for r in RANGES:
            if abs(volts - r) <= 1e-9 * r:
                self.full_scale = r
                return
        raise DeviceError(ILLEGAL_VALUE, f"volts: range {volts!r} V; expected one of 1, 2, 5, 10 V")

    def start_acquisition(self, sample_rate: float | None = None) -> None:
        """Start (or restart) acquiring now: sample index 0 is taken now."""
        if sample_rate is not None:
            lo, hi = RATE_RANGE
            if not (math.isfinite(sample_rate) and lo <= sample_rate <= hi):
                raise DeviceError(OUT_OF_RANGE, f"sample_rate: {sample_rate!r} Hz; expected 1 Hz ... 2 MHz")
            self.sample_rate = float(sample_rate)
        self._acquiring = True
        self._acq_t0 = self.t
        self._next_index = 0
        self._clip_last[:] = -math.inf

    def stop_acquisition(self) -> None:
        self._acquiring = False

    @property
    def acquiring(self) -> bool:
        return self._acquiring

    @property
    def acquisition_start(self) -> float:
        """Model time of sample index 0 (the last `start_acquisition`)."""
        return self._acq_t0

    @property
    def next_index(self) -> int:
        return self._next_index

    def samples_due(self, t: float) -> int:
        """How many sample sets fall before time ``t`` and are not yet produced."""
        if not self._acquiring or t <= self._acq_t0:
            return 0
        return max(0, math.ceil((t - self._acq_t0) * self.sample_rate - 1e-9) - self._next_index)

    def generate(self, n_sets: int) -> tuple[np.ndarray, int]:
        """The next ``n_sets`` sample sets: (volts (n, 3) [probe, reference, pump monitor], first index)."""
        data, first, _ = self._generate(n_sets, want_truth=False)
        return data, first

    def generate_with_truth(self, n_sets: int) -> tuple[np.ndarray, int, TruthBlock]:
        """As `generate`, plus the true values at every sample time."""
        return self._generate(n_sets, want_truth=True)

    def iter_blocks(self, n_sets: int, chunk: int = CHUNK):
        """`generate` in blocks of at most ``chunk`` sets: yields (volts, first index)."""
        left = self._check_count(n_sets)
        while left > 0:
            m = min(left, chunk)
            data, first, _ = self._block(m, want_truth=False)
            left -= m
            yield data, first

    def _check_count(self, n_sets: int) -> int:
        if isinstance(n_sets, bool) or not isinstance(n_sets, (int, np.integer)) or n_sets < 0:
            raise ValueError(f"n_sets: expected a whole number of at least 0, got {n_sets!r}")
        if not self._acquiring:
            raise ValueError("n_sets: acquisition is stopped; call start_acquisition() first")
        return int(n_sets)

    def _generate(self, n_sets: int, want_truth: bool):
        n = self._check_count(n_sets)
        first = self._next_index
        if n <= CHUNK:
            data, _, truth = self._block(n, want_truth)
            return data, first, truth
        parts, truths = [], []
        left = n
        while left > 0:
            m = min(left, CHUNK)
            data, _, truth = self._block(m, want_truth)
            parts.append(data)
            truths.append(truth)
            left -= m
        data = np.concatenate(parts)
        if not want_truth:
            return data, first, None
        return (
            data,
            first,
            TruthBlock(
                *(
                    np.concatenate([getattr(tb, f) for tb in truths])
                    for f in ("t", "n2_avg", "ln_ratio", "pump_w")
                )
            ),
        )

    def _block(self, n: int, want_truth: bool):
        i0 = self._next_index
        rate = self.sample_rate
        times = np.arange(i0, i0 + n, dtype=float)
        times /= rate
        times += self._acq_t0
        t_end = self._acq_t0 + (i0 + n) / rate
        edges = self._pulse_edges(float(times[0]) if n else self.t, t_end)
        if edges is None:
            n2, pump_w, probe_open = self._advance(t_end, times, 1.0 / rate)
        else:
            # the medium at the pulses' edges too (the pulse truth), split off afterwards
            merged = np.concatenate((times, edges.ravel()))
            order = np.argsort(merged, kind="stable")
            n2_all, pw_all, po_all = self._advance(t_end, merged[order], None)
            back = np.empty_like(order)
            back[order] = np.arange(order.size)
            n2, pump_w, probe_open = n2_all[back[:n]], pw_all[back[:n]], po_all[back[:n]]
            self._record_pulses(
                edges, n2_all[back[n:]].reshape(edges.shape), pw_all[back[n:]].reshape(edges.shape)
            )
        self._next_index = i0 + n
        if self.heating.enabled:
            self.heating.advance(t_end, float(np.mean(pump_w)) if np.ndim(pump_w) else float(pump_w))
            ln_rel = self._heated_ln_rel(n2)
        elif n and n2[0] == n2[-1] and np.all(n2 == n2[0]):
            ln_rel = float(n2[0]) * self._ln_ratio_per_n2 + self._ln_t_offset  # steady: one number
        else:
            ln_rel = n2 * self._ln_ratio_per_n2
            ln_rel += self._ln_t_offset
        stray = self._stray(times)
        if self._fluo_v_per_n2:
            fluo = np.broadcast_to(np.asarray(n2, dtype=float) * self._fluo_v_per_n2, times.shape)
            stray = fluo if stray is None else stray + fluo
        volts, clipped = self._detectors.volts(
            times, ln_rel, _flat(probe_open), _flat(pump_w), stray, self.full_scale
        )
        self._track_clipping(times, clipped)
        truth = None
        if want_truth:
            truth = TruthBlock(times, n2, (n2 - self._n2_off) * self._ln_ratio_per_n2, pump_w)
        return volts, i0, truth

    def _pulse_edges(self, ta: float, tb: float) -> np.ndarray | None:
        """(rising, middle, falling) times of the pump pulses whose falling edge is in [ta, tb),
        shape (k, 3), or None when not pulsing (or none falls there)."""
        wave = self.pump.pulse_train
        if wave is None or not tb > ta:
            return None
        period, width = wave.period, wave.width
        m0 = math.ceil((ta - width - wave.t_ref) / period - 1e-12)
        m1 = math.ceil((tb - width - wave.t_ref) / period - 1e-12)
        if m1 <= m0:
            return None
        rise = wave.t_ref + period * np.arange(m0, m1, dtype=float)
        rise = rise[rise >= ta]  # a pulse that rose before this block: its start was not seen here
        if rise.size == 0:
            return None
        # the middle just before the fall, where the pump is surely on
        return np.stack((rise, rise + 0.5 * width, rise + width * (1.0 - 1e-9)), axis=1)

    def _record_pulses(self, edges: np.ndarray, n2: np.ndarray, pump_w: np.ndarray) -> None:
        self._pulse_count += edges.shape[0]
        for k in range(edges.shape[0]):
            self._pulses.append((float(edges[k, 2]), float(n2[k, 0]), float(n2[k, 2]), float(pump_w[k, 1])))
        del self._pulses[:-PULSES_KEPT]

    def pulse_truth(self) -> dict[str, float]:
        """The latest pump pulse's true figures (`PULSE_TRUTH_FIELDS`), as the medium knows them.

        ``pulse_t``: model time of its falling edge (the end of the pulse, where a rectangular
        pump pulse leaves the most excitation), ``n2_before`` and ``n2_peak``: length-averaged
        <N2> at its rising and falling edges (m^-3), ``beta_peak`` = n2_peak / N_total,
        ``ln_ratio_peak``: (sigma_es + sigma_as) L (n2_peak - n2_before), ``pulse_pump_w``: pump
        power on the sample during it, ``tau``: the medium's lifetime, ``pulses``: pulses seen.
        All NaN (pulses 0) before the first one.
        """
        out = dict.fromkeys(PULSE_TRUTH_FIELDS, math.nan)
        out["tau"] = self.cfg.sample.upper_state_lifetime
        out["pulses"] = float(self._pulse_count)
        if self._pulses:
            t, before, peak, power = self._pulses[-1]
            out.update(
                pulse_t=t,
                n2_before=before,
                n2_peak=peak,
                beta_peak=peak / self.cfg.sample.n_total,
                ln_ratio_peak=(peak - before) * self._ln_ratio_per_n2,
                pulse_pump_w=power,
            )
        return out

    def skip(self, n_sets: int) -> None:
        """Let ``n_sets`` sample sets go by without producing them."""
        n = self._check_count(n_sets)
        self._advance(self._acq_t0 + (self._next_index + n) / self.sample_rate)
        self._next_index += n

    def advance_to(self, t: float) -> None:
        """Move time on to ``t`` (s); sample sets falling before ``t`` are skipped."""
        if not math.isfinite(t) or t < self.t:
            raise ValueError(f"t: expected a time no earlier than now ({self.t!r} s), got {t!r}")
        due = self.samples_due(t)
        self._advance(t)
        self._next_index += due

    def _heated_ln_rel(self, n2: np.ndarray) -> np.ndarray:
        """ln(T / T_ref) of the probe with the cross-sections at the sample's temperature now
        (`SampleHeating`): ``(sigma_e + sigma_a)(T) L <N2> - sigma_a(T) N L - ln T_ref``."""
        ka, ke = self._per_kelvin
        dt = self.heating.excess()
        sa = self._sigma_as * (1.0 + ka * dt)
        se = self._sigma_es * (1.0 + ke * dt)
        s = self.cfg.sample
        return np.asarray(n2, dtype=float) * ((se + sa) * s.length) - (
            sa * s.n_total * s.length + self._ln_t_ref
        )

    def sample_temperature(self) -> float:
        """One reading of the sample's temperature now (K), with the sensor's noise."""
        return self.heating.temperature + float(self._temperature_rng.normal(0.0, READING_NOISE_K))

    def _stray(self, times: np.ndarray) -> np.ndarray | None:
        if not self._saturation:
            return None
        t0, t1 = float(times[0]), float(times[-1])
        windows = [(a, b) for a, b in self._saturation if a <= t1 and b > t0]
        if not windows:
            return None
        on = np.zeros(times.size, dtype=bool)
        for a, b in windows:
            on |= (times >= a) & (times < b)
        return on * (STRAY_LIGHT * self.full_scale)

    def _track_clipping(self, times: np.ndarray, clipped: np.ndarray) -> None:
        """One error 101 per clipping episode of each input (episodes end after CLIP_HOLD)."""
        if clipped is None:
            return
        for c in range(3):
            hit = times[clipped[:, c]]
            if hit.size == 0:
                continue
            starts = int(hit[0] - self._clip_last[c] > CLIP_HOLD) + int(
                np.count_nonzero(np.diff(hit) > CLIP_HOLD)
            )
            for _ in range(starts):
                self._device_errors.append(("detector", INPUT_OVER_RANGE))
            self._clip_last[c] = hit[-1]

    # -- time --------------------------------------------------------------------------------------
    def _advance(self, t_end: float, times: np.ndarray | None = None, step: float | None = None):
        """Move to ``t_end`` applying scheduled events on the way; values at ``times``."""
        if t_end < self.t:
            raise ValueError(f"t_end: {t_end!r} is before the model's time {self.t!r}")
        n = 0 if times is None else times.size
        n2 = np.empty(n)
        pump_w = np.empty(n)
        probe_open = np.empty(n)
        pos = 0
        while True:
            t_event = self._events[0][0] if self._events else math.inf
            seg_end = min(t_end, max(t_event, self.t))
            trip = self.pump.trip_time(self.t, seg_end)
            if trip is not None:
                seg_end = trip
            if times is not None:
                j = int(np.searchsorted(times, seg_end, side="left")) if seg_end < t_end else n
                ts = times[pos:j]
                n2[pos:j] = self._timeline.advance(seg_end, ts, step)
                drive = self._timeline.drive
                if j > pos:
                    if drive.constant_after(self.t):
                        pump_w[pos:j] = drive.pump_power(ts[:1])[0]
                        probe_open[pos:j] = drive.probe_open(ts[:1])[0]
                    else:
                        pump_w[pos:j] = drive.pump_power(ts)
                        probe_open[pos:j] = drive.probe_open(ts)
                pos = j
            else:
                self._timeline.advance(seg_end)
            self.t = seg_end
            self.pump.advance_thermal(seg_end)
            changed = False
            if trip is not None:
                for code in self.pump.over_temperature(self.t):
                    self._device_errors.append(("pump", code))
                changed = True
            while self._events and self._events[0][0] <= self.t:
                _, _, action = heapq.heappop(self._events)
                self._apply(action)
                changed = True
            if changed:
                self._changed()
            if self.t >= t_end:
                break
        if times is None:
            return None
        return n2, pump_w, probe_open

    # -- faults ----------------------------------------------------------------------------------
    def schedule(self, fault: Fault) -> None:
        """Schedule a physical fault (interlock, overtemp, saturate) at its time (None: now)."""
        if fault.kind not in MODEL_KINDS:
            raise ValueError(
                f"fault: {fault.kind!r} is not a fault of the physical bench "
                f"(expected one of: {', '.join(MODEL_KINDS)})"
            )
        start = self.t if fault.time is None else max(fault.time, self.t)
        end = start + fault.duration if fault.duration is not None else math.inf
        if fault.kind == "saturate":
            self._saturation.append((start, end))
            return
        begin, finish = {
            "interlock": ("interlock_open", "interlock_close"),
            "overtemp": ("tec_fail", "tec_restore"),
        }[fault.kind]
        self._push_event(start, begin)
        if math.isfinite(end):
            self._push_event(end, finish)
        if start <= self.t:
            self._advance(self.t)  # apply it now

    def _push_event(self, t: float, action: str) -> None:
        self._event_seq += 1
        heapq.heappush(self._events, (t, self._event_seq, action))

    def _apply(self, action: str) -> None:
        t = self.t
        if action == "interlock_open":
            errors = self.pump.set_interlock(t, False)
        elif action == "interlock_close":
            errors = self.pump.set_interlock(t, True)
        elif action == "tec_fail":
            errors = self.pump.fail_tec(t)
        elif action == "tec_restore":
            self.pump.restore_tec(t)
            errors = []
        else:  # pragma: no cover - the table above is the only source of actions
            raise AssertionError(action)
        for code in errors:
            self._device_errors.append(("pump", code))

    def pop_device_errors(self) -> list[tuple[str, int]]:
        """Errors the instruments have raised by themselves since the last call: (role, code)."""
        out, self._device_errors = self._device_errors, []
        return out

    # -- truth -------------------------------------------------------------------------------------
    def truth(self) -> dict[str, float]:
        """True state now, SI, as the medium itself knows it (the keys of `TRUTH_FIELDS`).

        ``t``; ``n2_avg`` and ``beta`` (absolute, length-averaged over the slices); ``tau``;
        ``pump_w`` (on the sample); ``ln_ratio`` = ln(T_on / T_off); ``n_total``; ``length``;
        ``ln_t_pumped``: ln of the probe's true single-pass transmission now, the sum over the
        slices of (sigma_es N2_i - sigma_as N1_i) dz (Beer-Lambert slice by slice), which is
        also the true ln of the net gain; ``ln_t_unpumped``: the same for the sample with the
        pump off and the probe on (every slice at N2_off, the baseline state);
        ``gain_per_m``: the true length-averaged gain coefficient, ``ln_t_pumped / L``;
        ``n2_probe_only``: N2_off. All at the present probe wavelength. ``inputs_steady_s``:
        how long the medium's inputs (pump power on the sample, probe) have been constant, s
        (since the last setting change, modulation or chopper edge, or the end of a ramp), so
        that a reader can tell a settled state from one caught during a transient.
        ``probe_wavelength`` (m) and the probe's ``sigma_a``, ``sigma_e`` there (m², `lineshape`;
        at a heated sample's base temperature).
        """
        slices = self._timeline.state()
        n2 = float(np.mean(slices))
        s = self.cfg.sample
        pump_w = float(self._timeline.drive.pump_power(np.array([self.t]))[0])
        ln_on = self.medium.probe_ln_transmission(slices, self._sigma_as, self._sigma_es)
        ln_off = self.medium.probe_ln_transmission(
            np.full(self.medium.slices, self._n2_off), self._sigma_as, self._sigma_es
        )
        return {
            "t": self.t,
            "n2_avg": n2,
            "beta": n2 / s.n_total,
            "tau": s.upper_state_lifetime,
            "pump_w": pump_w,
            "ln_ratio": ln_on - ln_off,
            "n_total": s.n_total,
            "length": s.length,
            "ln_t_pumped": ln_on,
            "ln_t_unpumped": ln_off,
            "gain_per_m": ln_on / s.length,
            "n2_probe_only": self._n2_off,
            "inputs_steady_s": self._timeline.drive.steady_for(self.t, self._drive_since),
            "probe_wavelength": self._wavelength,
            "sigma_a": self._sigma_as,
            "sigma_e": self._sigma_es,
        }

    @property
    def n2_probe_only(self) -> float:
        """Excited density (m⁻³) the probe alone keeps up with the pump off: the baseline state."""
        return self._n2_off

    def slice_densities(self) -> np.ndarray:
        """True excited density of every slice now, m⁻³ (front of the sample first)."""
        return self._timeline.state()

    @property
    def medium_regime(self) -> str:
        """How the medium is being computed: ``"steady"``, ``"periodic"`` or ``"stepping"``."""
        return self._timeline.regime
