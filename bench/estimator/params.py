"""The estimator's fixed settings, taken from a bench file once: `EstimatorParams`.

Everything the estimator needs besides the data lives here, in SI units, frozen: the sample's
cross-sections, length and density with their configured uncertainties, the nominal lifetime,
how weak the probe is, the detector range, and the timing rules (settle time, window length,
decay bins). `EstimatorParams.from_config` derives them from a `BenchConfig`; any field can be
overridden by name. No I/O: a cross-section spectrum, if wanted, is read by the caller
(`bench.physics.spectra.load_spectrum`) and passed in.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

from bench import physics
from bench.config import BenchConfig
from bench.physics.spectra import CrossSectionSpectrum
from bench.units import parse_quantity

#: Ways a decay finds its unpumped level: the stored baseline, the decay's own late tail, or
#: the tail when it is long enough and the baseline otherwise.
DECAY_REFERENCES = ("auto", "baseline", "tail")

#: Monitor threshold used when neither an absolute threshold nor a monitor calibration is known.
FALLBACK_PUMP_THRESHOLD_V = 0.05


#: The settle windows of the modulated modes end when the part of ln R still to come (rise)
#: or still to go (decay) is at most this fraction of ln R: ``exp(-k t) = 1e-5`` at
#: ``t = 11.5 / k``. Averaged over the used part of a half-period that is a few 1e-7 of ln R,
#: well below the noise of a run of minutes.
SETTLE_RESIDUAL = 1e-5


def back_face_pump_rate(
    sigma_ap: float, sigma_ep: float, wavelength: float, beam_diameter: float, absorbance: float
) -> float:
    """Pump rate per watt at the back face of the sample, ``(sigma_ap + sigma_ep) exp(-A) /
    (h nu_p pi w^2)`` in 1/(s W), ``w = D/2``, ``A = sigma_ap N L`` the unbleached absorbance.

    The intensity ``P / (pi w^2)`` is the mean over the beam's 1/e^2 area: exact for a top-hat
    beam of diameter D, and below the intensity a probe narrower than 0.6 D sees on the axis
    of a Gaussian pump, so the rate is a lower bound either way (Svelto, *Principles of
    Lasers*, 5th ed., 2010, sec. 2.4 for Beer-Lambert absorption, ch. 7 for the rate).
    """
    if not (math.isfinite(beam_diameter) and beam_diameter > 0):
        raise ValueError(f"beam_diameter: must be a positive length in m, got {beam_diameter!r}")
    w = 0.5 * beam_diameter
    flux_per_watt = float(physics.photon_flux(1.0 / (math.pi * w * w), wavelength))
    return (sigma_ap + sigma_ep) * flux_per_watt * math.exp(-absorbance)


@dataclass(frozen=True)
class EstimatorParams:
    """Fixed inputs of the estimator (SI units). Build with `from_config`.

    Attributes
    ----------
    probe_wavelength : float
        m.
    sigma_e, sigma_a : float
        Emission and absorption cross-sections at the probe wavelength, m^2.
    length, n_total : float
        Sample length (m) and dopant density (m^-3).
    u_length : float
        Standard uncertainty of the length, m (absolute).
    u_n_total, u_cross_sections : float
        Relative standard uncertainties of the density and of each cross-section (the two are
        taken as independent).
    tau, u_tau : float
        Nominal upper-state lifetime (s) and its relative uncertainty (it enters the
        systematic part of the probe-held excitation added back to beta, and of the sweep's
        correction of p_sat for the probe's stimulated rate).
    probe_kind : str
        ``"cw"`` or ``"pulsed"``.
    probe_peak : float
        On-axis probe intensity (W/m^2, cw) or fluence (J/m^2, pulsed); the probe's own figures
        use half of it (`probe_mean`).
    weak_fraction : float
        Flag the probe as not weak above this ``I/I_sat`` (or ``F/F_sat``), ``I`` the probe's
        power-weighted mean intensity (`probe_mean`).
    detector_range : float or None
        Full scale of the detector inputs, V; None if unknown (no full-scale check).
    full_scale_fraction : float
        Flag samples above this fraction of the range.
    settle_time : float
        Samples within this time after a pump edge are not used, s (default 5 tau).
    rise_settle_time : float
        In chopped and decay modes, the pump-on part of a half-period is used from this time
        after its edge. Zero (the default) derives it from the pump power in use,
        `rise_settle`: ``ln(1 / SETTLE_RESIDUAL) / k_rise`` with ``k_rise`` the pumped rise
        rate of the most weakly pumped depth (`rise_rate`).
    off_settle_time : float
        In chopped mode, the pump-off part of a half-period is used from this time after its
        edge. Zero (the default) derives it, `off_settle`: ``ln(1 / SETTLE_RESIDUAL)`` times
        the pump-off relaxation time ``1 / (1 / tau + W_s)``; what is left of the gain decay
        (below ``SETTLE_RESIDUAL`` of ln R) is corrected as well.
    pump_rate_per_watt : float
        Pump rate ``(sigma_ap + sigma_ep) I_p / (h nu_p)`` per watt of pump power, at the back
        face of the sample after unbleached absorption, 1/(s W) (see `rise_rate`); zero when
        unknown (the rise is then taken at the bare relaxation rate, the slowest it can be).
    step_settle_time : float
        The same after a sweep step (default the settle time plus 30 ms for the driver's
        current to reach its new setpoint).
    window : float
        Length of a "window" estimate, s (default 0.25 s).
    batches_per_window : int
        Sub-windows ("batches") per window; noise figures come from the scatter of batch
        means (default 20, so a full window has 20 batches).
    pump_threshold_v : float or None
        Absolute pump-on threshold on the pump monitor, V. When None the threshold is
        ``pump_threshold_fraction`` of the monitor level expected at the current pump power
        (``monitor_per_watt * pump_power``); without a monitor calibration or a power it is
        `FALLBACK_PUMP_THRESHOLD_V`.
    pump_threshold_fraction : float
        See above (default 0.5).
    monitor_per_watt : float or None
        Pump monitor responsivity, V/W.
    pump_slope, pump_threshold_current : float
        The pump's current-to-power calibration (W/A, A).
    pump_absorbance : float or None
        Unbleached pump absorbance ``sigma_ap N L`` of the sample, for the thick-sample
        saturation fit of pump sweeps (`bench.physics.fitting.thick_sample_fraction`); None fits the
        thin-sample form. Its relative uncertainty follows from those of sigma_ap, N and L.
    baseline_max_age : float
        A baseline older than this (s) is flagged stale (default 600 s).
    baseline_drift_k : float
        In chopped mode, flag the baseline stale when the pump-off level differs from it by
        more than this many standard uncertainties (default 5).
    snr_min : float
        Flag ``low_snr`` when ``|ln R| / sigma_noise`` is below this (default 3).
    min_batches : int
        Flag ``low_snr`` when the noise figure rests on fewer batches (or cycles, decays) than
        this (default 10): a standard deviation from few values is itself uncertain.
    decay_bin : float
        Bin width of decay curves, s (default tau / 10; at least one sample).
    decay_fit_span : float
        Fit ln R(t) for t in [decay_skip, decay_fit_span] after the pump edge (default 5 tau).
    decay_skip : float
        Leave out this much after the edge (default 0).
    decay_tail_start, decay_record : float
        The late tail used as unpumped level runs from ``decay_tail_start`` (default 8 tau) to
        ``decay_record`` (default 20 tau) or the next pump edge.
    decay_min_tail : float
        The tail must be at least this long to be used (default 2 tau).
    decay_reference : str
        One of `DECAY_REFERENCES`.
    spectrum : CrossSectionSpectrum or None
        Cross-section spectra, for probe-wavelength steps and the McCumber check.
    zero_line_energy : float or None
        J (``sample.zero_line`` as a photon energy).
    temperature : float
        Sample temperature, K.
    """

    probe_wavelength: float
    sigma_e: float
    sigma_a: float
    length: float
    n_total: float
    u_length: float
    u_n_total: float
    u_cross_sections: float
    tau: float
    u_tau: float
    probe_kind: str
    probe_peak: float
    weak_fraction: float
    detector_range: float | None
    full_scale_fraction: float
    settle_time: float
    step_settle_time: float
    rise_settle_time: float = 0.0
    off_settle_time: float = 0.0
    pump_rate_per_watt: float = 0.0
    window: float = 0.25
    batches_per_window: int = 20
    pump_threshold_v: float | None = None
    pump_threshold_fraction: float = 0.5
    monitor_per_watt: float | None = None
    pump_slope: float = 1.0
    pump_threshold_current: float = 0.0
    pump_absorbance: float | None = None
    baseline_max_age: float = 600.0
    baseline_drift_k: float = 5.0
    snr_min: float = 3.0
    min_batches: int = 10
    decay_bin: float = 0.0
    decay_fit_span: float = 0.0
    decay_skip: float = 0.0
    decay_tail_start: float = 0.0
    decay_record: float = 0.0
    decay_min_tail: float = 0.0
    decay_reference: str = "auto"
    spectrum: CrossSectionSpectrum | None = field(default=None, compare=False)
    zero_line_energy: float | None = None
    temperature: float = 295.0
    sigma_a_per_kelvin: float = (
        0.0  # relative change of sigma_a at the probe per K (`bench.estimator.heating`)
    )
    sigma_e_per_kelvin: float = 0.0
    u_temperature_dependence: float = 0.0  # relative standard uncertainty of both
    refractive_index: float = 1.5  # of the sample, for the Fresnel loss of its faces
    #: sigma_ap / (sigma_ap + sigma_ep): the largest excited fraction the pump alone reaches
    pump_fraction_max: float | None = None

    def __post_init__(self) -> None:
        positive = (
            "probe_wavelength",
            "length",
            "n_total",
            "tau",
            "weak_fraction",
            "window",
            "settle_time",
            "step_settle_time",
            "pump_slope",
            "baseline_max_age",
            "baseline_drift_k",
            "decay_bin",
            "decay_fit_span",
            "decay_tail_start",
            "decay_record",
            "decay_min_tail",
            "temperature",
        )
        for name in positive:
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
                raise ValueError(f"{name}: must be a positive number, got {v!r}")
        nonneg = (
            "sigma_e",
            "sigma_a",
            "u_length",
            "u_n_total",
            "u_cross_sections",
            "u_tau",
            "probe_peak",
            "pump_threshold_current",
            "snr_min",
            "decay_skip",
            "rise_settle_time",
            "off_settle_time",
            "pump_rate_per_watt",
        )
        for name in nonneg:
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ValueError(f"{name}: must be zero or positive, got {v!r}")
        if not self.sigma_e + self.sigma_a > 0:
            raise ValueError("sigma_e, sigma_a: their sum must be positive")
        if self.u_length >= self.length:
            raise ValueError("u_length: must be smaller than the length")
        if self.probe_kind not in ("cw", "pulsed"):
            raise ValueError(f"probe_kind: must be 'cw' or 'pulsed', got {self.probe_kind!r}")
        if self.detector_range is not None and not (
            math.isfinite(self.detector_range) and self.detector_range > 0
        ):
            raise ValueError(
                f"detector_range: must be a positive voltage or None, got {self.detector_range!r}"
            )
        if not 0 < self.full_scale_fraction <= 1:
            raise ValueError(f"full_scale_fraction: must be in (0, 1], got {self.full_scale_fraction!r}")
        if not (isinstance(self.batches_per_window, int) and self.batches_per_window >= 2):
            raise ValueError(
                f"batches_per_window: must be a whole number of at least 2, got {self.batches_per_window!r}"
            )
        if not (isinstance(self.min_batches, int) and self.min_batches >= 2):
            raise ValueError(f"min_batches: must be a whole number of at least 2, got {self.min_batches!r}")
        if self.pump_threshold_v is not None and not math.isfinite(self.pump_threshold_v):
            raise ValueError(f"pump_threshold_v: must be finite or None, got {self.pump_threshold_v!r}")
        if not 0 < self.pump_threshold_fraction < 1:
            raise ValueError(
                f"pump_threshold_fraction: must be in (0, 1), got {self.pump_threshold_fraction!r}"
            )
        if self.monitor_per_watt is not None and not (
            math.isfinite(self.monitor_per_watt) and self.monitor_per_watt > 0
        ):
            raise ValueError(f"monitor_per_watt: must be positive or None, got {self.monitor_per_watt!r}")
        if self.pump_absorbance is not None and not (
            math.isfinite(self.pump_absorbance) and self.pump_absorbance > 0
        ):
            raise ValueError(f"pump_absorbance: must be positive or None, got {self.pump_absorbance!r}")
        if self.decay_reference not in DECAY_REFERENCES:
            raise ValueError(
                f"decay_reference: must be one of {', '.join(DECAY_REFERENCES)}, got {self.decay_reference!r}"
            )
        if not self.decay_skip < self.decay_fit_span:
            raise ValueError("decay_skip: must be shorter than decay_fit_span")
        if not self.decay_fit_span <= self.decay_record:
            raise ValueError("decay_fit_span: must not be longer than decay_record")
        if not self.decay_tail_start < self.decay_record:
            raise ValueError("decay_tail_start: must be earlier than decay_record")
        if self.zero_line_energy is not None and not (
            math.isfinite(self.zero_line_energy) and self.zero_line_energy > 0
        ):
            raise ValueError(
                f"zero_line_energy: must be a positive energy in J or None, got {self.zero_line_energy!r}"
            )

    # -- building ------------------------------------------------------------------------

    @classmethod
    def from_config(
        cls, cfg: BenchConfig, *, spectrum: CrossSectionSpectrum | None = None, **overrides: Any
    ) -> EstimatorParams:
        """Parameters for the bench ``cfg``; keyword overrides replace fields by name.

        Derived defaults (settle time 5 tau, decay bins and spans in units of tau, the chopped
        and decay settle windows of `rise_settle` and `off_settle`) follow an overridden
        ``tau``. The detector range comes from the detector's ``range`` option and
        the monitor responsivity from its ``pump_monitor_per_watt`` option or, on the
        simulated bench, from ``[simulation]``.
        """
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(overrides) - names)
        if unknown:
            raise ValueError(f"{unknown[0]}: not an estimator parameter (known: {', '.join(sorted(names))})")
        s = cfg.sample
        det = cfg.instruments.get("detector")
        options = dict(det.options) if det is not None else {}
        rng = options.get("range")
        detector_range = (
            parse_quantity(rng, "voltage", f"{cfg.source}: instruments.detector.options.range")
            if rng is not None
            else None
        )
        mpw = options.get("pump_monitor_per_watt")
        if mpw is not None:
            monitor = parse_quantity(
                mpw, "volts_per_watt", f"{cfg.source}: instruments.detector.options.pump_monitor_per_watt"
            )
        elif cfg.simulation is not None:
            monitor = cfg.simulation.pump_monitor_per_watt
        else:
            monitor = None
        base: dict[str, Any] = dict(
            window=cfg.run.estimate_every,
            probe_wavelength=cfg.probe.wavelength,
            sigma_e=s.sigma.probe_emission,
            sigma_a=s.sigma.probe_absorption,
            length=s.length,
            n_total=s.n_total,
            u_length=s.uncertainty.length,
            u_n_total=s.uncertainty.n_total,
            u_cross_sections=s.uncertainty.cross_sections,
            tau=s.upper_state_lifetime,
            u_tau=s.uncertainty.upper_state_lifetime,
            probe_kind=cfg.probe.kind,
            probe_peak=physics.gaussian_peak(
                cfg.probe.pulse_energy if cfg.probe.kind == "pulsed" else cfg.probe.power,
                cfg.probe.beam_diameter,
            ),
            weak_fraction=cfg.probe.weak_fraction,
            detector_range=detector_range,
            full_scale_fraction=cfg.guard.full_scale_fraction,
            monitor_per_watt=monitor,
            pump_slope=cfg.pump.slope_efficiency,
            pump_threshold_current=cfg.pump.threshold_current,
            pump_absorbance=s.sigma.pump_absorption * s.n_total * s.length,
            pump_rate_per_watt=back_face_pump_rate(
                s.sigma.pump_absorption,
                s.sigma.pump_emission,
                cfg.pump.wavelength,
                cfg.pump.beam_diameter,
                s.sigma.pump_absorption * s.n_total * s.length,
            ),
            spectrum=spectrum,
            zero_line_energy=physics.photon_energy(s.zero_line).item() if s.zero_line is not None else None,
            temperature=s.temperature,
            refractive_index=s.refractive_index,
            pump_fraction_max=s.sigma.pump_absorption / (s.sigma.pump_absorption + s.sigma.pump_emission),
            sigma_a_per_kelvin=s.probe_absorption_per_kelvin,
            sigma_e_per_kelvin=s.probe_emission_per_kelvin,
            u_temperature_dependence=s.uncertainty.temperature_dependence,
            settle_time=None,
            step_settle_time=None,
        )
        base.update(overrides)
        tau = float(base["tau"])
        derived = dict(
            settle_time=5.0 * tau,
            decay_bin=tau / 10.0,
            decay_fit_span=5.0 * tau,
            decay_tail_start=8.0 * tau,
            decay_record=20.0 * tau,
            decay_min_tail=2.0 * tau,
        )
        for key, value in derived.items():
            if base.get(key) in (None, 0.0):
                base[key] = value
        if base.get("step_settle_time") is None:
            base["step_settle_time"] = float(base["settle_time"]) + 0.03
        return cls(**base)

    def replace(self, **changes: Any) -> EstimatorParams:
        """A copy with fields changed (validated again)."""
        return dataclasses.replace(self, **changes)

    # -- derived figures -----------------------------------------------------------------

    @property
    def probe_rate(self) -> float:
        """The probe's own stimulated rate ``W_s = (sigma_e + sigma_a) Phi_s``, 1/s (cw probes;
        ``Phi_s`` the photon flux weighted by the probe's Gaussian profile, half the on-axis
        value); zero for pulsed probes."""
        if self.probe_kind != "cw":
            return 0.0
        return (self.sigma_e + self.sigma_a) * float(
            physics.photon_flux(0.5 * self.probe_peak, self.probe_wavelength)
        )

    def rise_rate(self, pump_power: float | None) -> float:
        """Slowest rate (1/s) at which the excited fraction approaches its pumped level.

        In the rate-equation picture of a quasi-three-level medium under constant pump and
        probe [1]_ [2]_, ``dN2/dt = (sigma_ap N1 - sigma_ep N2) Phi_p + (sigma_as N1 -
        sigma_es N2) Phi_s - N2 / tau`` is linear in N2, so N2 relaxes to its steady state at
        ``k = W_p + W_s + 1 / tau`` with ``W_p = (sigma_ap + sigma_ep) I_p / (h nu_p)``. In a
        thick sample the pump is absorbed on its way, so the back face is pumped least and
        rises slowest; `pump_rate_per_watt` takes the intensity there after *unbleached*
        absorption ``exp(-sigma_ap N L)``, a lower bound (bleaching only lets more pump
        through). ``pump_power`` None or 0 gives the bare ``1/tau + W_s``.

        References
        ----------
        .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7
           (rate equations of quasi-three-level media).
        .. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
        """
        p = 0.0 if pump_power is None or not pump_power > 0 else float(pump_power)
        return self.pump_rate_per_watt * p + self.probe_rate + 1.0 / self.tau

    def rise_settle(self, pump_power: float | None) -> float:
        """Time (s) after a rising pump edge from which pump-on samples are used: the
        configured `rise_settle_time`, or ``ln(1 / SETTLE_RESIDUAL) / rise_rate(pump_power)``."""
        if self.rise_settle_time > 0:
            return float(self.rise_settle_time)
        return math.log(1.0 / SETTLE_RESIDUAL) / self.rise_rate(pump_power)

    def off_settle(self) -> float:
        """Time (s) after a falling pump edge from which pump-off samples are used (chopped):
        the configured `off_settle_time`, or ``ln(1 / SETTLE_RESIDUAL) / (1 / tau + W_s)``."""
        if self.off_settle_time > 0:
            return float(self.off_settle_time)
        return math.log(1.0 / SETTLE_RESIDUAL) / (1.0 / self.tau + self.probe_rate)

    @property
    def u_pump_absorbance(self) -> float:
        """Relative standard uncertainty of `pump_absorbance` (sigma_ap, N, L independent)."""
        return math.sqrt(self.u_cross_sections**2 + self.u_n_total**2 + (self.u_length / self.length) ** 2)

    def pump_power_at(self, current: float) -> float:
        """Pump power (W) from the linear current-to-power calibration."""
        return max(0.0, self.pump_slope * (float(current) - self.pump_threshold_current))

    def cross_sections_at(self, wavelength: float | None) -> tuple[float, float] | None:
        """``(sigma_e, sigma_a)`` at a probe wavelength: the configured pair at the configured
        wavelength, else from the spectrum; None when neither applies."""
        if wavelength is None or abs(wavelength - self.probe_wavelength) <= 1e-6 * self.probe_wavelength:
            return self.sigma_e, self.sigma_a
        if self.spectrum is None:
            return None
        sa, se = self.spectrum.at(wavelength)
        if not se + sa > 0:
            return None
        return float(se), float(sa)

    @property
    def probe_mean(self) -> float:
        """The probe's intensity (W/m^2, cw) or fluence (J/m^2, pulsed) as gainbench uses it:
        the mean over its own power, ``P / (pi w^2)``, half the on-axis `probe_peak`.

        For a Gaussian beam ``int I^2 dA / int I dA = I_peak / 2`` (Siegman sec. 17.1): the
        intensity an average probe photon sees, so what sets the probe's own effect on the gain
        it measures (its stimulated rate, the excitation it keeps up, how far it saturates).
        `gainbench sample` shows the same figure.
        """
        return 0.5 * self.probe_peak

    def probe_saturation(self, wavelength: float | None = None) -> float | None:
        """``I_probe / I_sat`` (cw) or ``F_probe / F_sat`` (pulsed) at the probe wavelength, with
        the probe's power-weighted mean intensity or fluence (`probe_mean`)."""
        lam = self.probe_wavelength if wavelength is None else wavelength
        xs = self.cross_sections_at(lam)
        if xs is None:
            return None
        se, sa = xs
        if self.probe_kind == "pulsed":
            return float(self.probe_mean / physics.saturation_fluence(lam, se, sa))
        return float(
            physics.probe_weakness(self.probe_mean, physics.saturation_intensity(lam, se, sa, self.tau))
        )

    def pump_threshold(self, pump_power: float | None) -> float:
        """Pump-on threshold (V) on the monitor channel at this pump power (see the class doc)."""
        if self.pump_threshold_v is not None:
            return float(self.pump_threshold_v)
        if self.monitor_per_watt is not None and pump_power is not None:
            if pump_power <= 0:
                return math.inf  # no pump: every sample is off
            return self.pump_threshold_fraction * self.monitor_per_watt * float(pump_power)
        return FALLBACK_PUMP_THRESHOLD_V
