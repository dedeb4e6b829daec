"""The bounds of the values a bench file (and ``--set``) may give."""

#: Wavelengths a bench file may name (the tool's physics and safety tables stop there).
WAVELENGTH_RANGE = (200e-9, 20e-6)

# Bounds of values a bench file (and ``--set``, which passes through the same reader) may
# give. Each is far outside what a real bench needs and inside what the tool's arithmetic
# and the guard's job survive; common practice, no source, unless a value says otherwise.

#: 1/e² beam diameters at the sample, m: no free-space beam at 200 nm - 20 um focuses below
#: 1 um (diffraction), and no lab sample is pumped or probed through a beam wider than 10 cm.
BEAM_DIAMETER_RANGE = (1e-6, 0.1)
#: Upper-state lifetimes, s. Long-lived laser levels live about 10 ms (Er3+ 4I13/2 in glass,
#: from memory); 100 ms leaves a factor ten. The baseline and the chopping wait several
#: lifetimes for the medium to relax, so a lifetime of minutes would make them wait for hours.
LIFETIME_RANGE = (1e-9, 0.1)
#: Active-ion density, m^-3: stoichiometric Yb or Nd crystals hold about 1.4e22 cm^-3 (from
#: memory); no solid holds ten times that.
N_TOTAL_MAX = 1e29
#: Cross-sections, m² (1e-14 cm²): above those of dyes and semiconductors, the largest of
#: laser transitions (about 1e-16 cm², from memory).
CROSS_SECTION_MAX = 1e-18
#: Sample length, m (long fibre amplifiers are tens of metres).
LENGTH_RANGE = (1e-6, 100.0)
#: (sigma_e + sigma_a) N_total L at the probe: exp(200) is 7e86, a gain or loss of 870 dB in
#: one pass that no probe is measured through (double precision overflows at exp(709)).
OPTICAL_DEPTH_MAX = 200.0
#: Probe power on the sample, W: a probe is a weak beam (microwatts to milliwatts); 100 W is
#: five orders of magnitude above that and keeps its photon flux far from overflow.
PROBE_POWER_MAX = 100.0
#: Pump diode currents, A: diode bars and stacks run at up to a few hundred amperes (from
#: memory); 10 kA leaves a factor of ten and keeps the power calibration finite.
PUMP_CURRENT_MAX = 1e4
#: Pump slope efficiency, W/A: at most h nu / e per emitter in series (1.3 W/A at 940 nm, a
#: quantum efficiency of 1); 1000 W/A would be some 750 emitters in series.
SLOPE_EFFICIENCY_MAX = 1000.0

#: The guard's limits. A value outside switches a trip condition off in effect:
#: - stale_after: a pump left on with no fresh reading for longer than a few seconds is
#:   unsupervised (5 s leaves room for a loaded lab PC and slow instruments);
#: - comm_failures: more than 10 failed exchanges in a row is a link that is down, not a glitch;
#: - mount temperatures: laser-diode mounts are run within about -10 degC to 60 degC; a window
#:   reaching beyond that would never trip on a failed cooler;
#: - current_tolerance: the over-current trip fires at max_current + current_tolerance, so more
#:   than 10 % of the diode's rating would let the diode run well above its rating;
#: - transmission_jump: a beam blocked or a sample broken makes S fall towards 0, a relative
#:   change of at most 1; above 0.9 such a fall could not trip.
STALE_AFTER_MAX = 5.0
COMM_FAILURES_MAX = 10
MOUNT_TEMPERATURE_RANGE = (263.15, 333.15)
CURRENT_TOLERANCE_MAX_FRACTION = 0.1
TRANSMISSION_JUMP_MAX = 0.9

#: The largest relative temperature coefficient of a cross-section accepted: 20 %/K. Rare-earth
#: cross-sections at a given wavelength change by about 1 %/K at most on a line's wing (a fact
#: of the trade, no source); more is a typing error (a percent read as a fraction).
TEMPERATURE_COEFFICIENT_MAX = 0.2
