"""The simulated gain medium against closed-form results of the rate equation.

Sources: the quasi-three-level rate equation dN2/dt = (sigma_ap N1 - sigma_ep N2) Phi_p
+ (sigma_as N1 - sigma_es N2) Phi_s - N2/tau, its steady state and its exponential solution for
constant fluxes (O. Svelto, *Principles of Lasers*, 5th ed., 2010, sec. 7.3; W. Koechner,
*Solid-State Laser Engineering*, 6th ed., 2006, sec. 1.4), and the Beer-Lambert law
T = exp(-alpha L) (Svelto sec. 2.4). Numbers are the demo bench's (invented, realistic).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.config import load_bench
from simulated_instruments.drive import Drive, Envelope, Gate, SquareWave
from simulated_instruments.medium import GainMedium, Inputs, evaluate_pieces
from simulated_instruments.medium_timeline import MediumTimeline

CFG = load_bench()
S = CFG.sample
SAP, SEP = S.sigma.pump_absorption, S.sigma.pump_emission
SAS, SES = S.sigma.probe_absorption, S.sigma.probe_emission
N, L, TAU = S.n_total, S.length, S.upper_state_lifetime
PHI = 1.3e27  # pump photons m^-2 s^-1, about 9 W in the demo bench's 0.2 mm beam
PHI_S = 6.6e23  # probe photons m^-2 s^-1, 1 mW in 0.1 mm


def medium(length=L, slices=24, sep=SEP) -> GainMedium:
    return GainMedium(length, N, TAU, SAP, sep, slices)


def flux_drive(flux: float, *, modulation: SquareWave | None = None, probe: bool = False) -> Drive:
    """A drive whose 'current' is the incident pump flux itself (slope 1, no threshold)."""
    return Drive(
        envelope=Envelope.constant(flux),
        modulation=modulation,
        pump_gate=Gate(),
        probe_gate=Gate(),
        slope=1.0,
        threshold=0.0,
        flux_per_watt=1.0,
        probe_up=SAS * PHI_S if probe else 0.0,
        probe_k=(SAS + SES) * PHI_S if probe else 0.0,
        ramp_piece=TAU / 4,
    )


def analytic_beta(phi_p, phi_s=0.0, sas=SAS, ses=SES, sep=SEP):
    # Svelto sec. 7.3 / Koechner sec. 1.4: steady state of the quasi-three-level rate equation
    return (SAP * phi_p + sas * phi_s) / ((SAP + sep) * phi_p + (sas + ses) * phi_s + 1.0 / TAU)


def test_unpumped_pump_transmission_is_beer_lambert():
    # Beer-Lambert: T = exp(-sigma_a N L) for a weak beam through an unexcited sample
    for slices in (1, 7, 24):
        _, t = medium(slices=slices).pump_profile(np.zeros(slices), 1e20)
        assert t == pytest.approx(math.exp(-SAP * N * L), rel=1e-12)


def test_weak_pump_absorbed_fraction():
    # Beer-Lambert: absorbed fraction 1 - exp(-alpha_p L), alpha_p = sigma_ap N_total; the
    # slice-averaged fluxes must absorb exactly that, however coarse the slicing
    for slices in (1, 3, 24):
        m = medium(slices=slices)
        phi, _ = m.pump_profile(np.zeros(slices), PHI)
        absorbed = float(np.sum(SAP * N * phi) * m.dz) / PHI
        assert absorbed == pytest.approx(1 - math.exp(-SAP * N * L), rel=1e-12)


def test_probe_transmission_beer_lambert_and_gain():
    # Beer-Lambert for the unpumped sample, T = exp(-sigma_a N L); pumped, ln T = sum of the
    # local gain coefficients g = sigma_e N2 - sigma_a N1 (Svelto sec. 2.4 / 7.3)
    m = medium()
    assert m.probe_ln_transmission(np.zeros(24), SAS, SES) == pytest.approx(-SAS * N * L, rel=1e-12)
    n2 = np.linspace(0.05, 0.4, 24) * N
    expected = (SES + SAS) * L * n2.mean() - SAS * N * L
    assert m.probe_ln_transmission(n2, SAS, SES) == pytest.approx(expected, rel=1e-12)


def test_steady_state_thin_sample_equals_analytic():
    # thin sample (alpha L = 1e-6): uniform flux, so <N2>/N is the analytic steady state
    thin = medium(length=5e-9, slices=4)
    for phi in (1e25, PHI, 1e28):
        for probe in (False, True):
            tl = MediumTimeline(thin, flux_drive(phi, probe=probe), model_step=10e-6)
            tl.advance(0.05)
            assert tl.regime == "steady"
            beta = analytic_beta(phi, PHI_S if probe else 0.0)
            assert tl.mean() / N == pytest.approx(beta, rel=2e-6)


def test_steady_state_thick_sample_slice_by_slice():
    # each slice of the demo sample sits at the analytic steady state of the flux it sees
    m = medium()
    tl = MediumTimeline(m, flux_drive(PHI), model_step=10e-6)
    tl.advance(0.05)
    n2 = tl.state()
    phi, _ = m.pump_profile(n2, PHI)
    np.testing.assert_allclose(n2 / N, analytic_beta(phi), rtol=1e-7)
    # and the bleached front is more excited than the back
    assert n2[0] > n2[-1]
    np.testing.assert_allclose(n2, m.steady_state(Inputs(PHI, 0.0, 0.0)), rtol=1e-7)


def test_weak_pump_energy_balance():
    # steady state, weak pump (beta << 1): decays per area, <N2> L / tau, equal the absorbed
    # photon flux Phi (1 - exp(-alpha_p L)) (Beer-Lambert plus the rate equation)
    phi = 1e23
    m = medium()
    tl = MediumTimeline(m, flux_drive(phi), model_step=10e-6)
    tl.advance(0.05)
    assert tl.mean() * L / TAU == pytest.approx(phi * (1 - math.exp(-SAP * N * L)), rel=1e-4)


def test_rise_thin_sample_is_exponential():
    # constant fluxes from N2 = 0: N2(t) = N2ss (1 - exp(-k t)), k = (sap + sep) Phi + 1/tau
    thin = medium(length=5e-9, slices=2)
    tl = MediumTimeline(thin, flux_drive(PHI), model_step=10e-6)
    times = np.arange(0, 5e-3, 1e-6)
    got = tl.advance(5e-3, times)
    k = (SAP + SEP) * PHI + 1 / TAU
    want = analytic_beta(PHI) * N * -np.expm1(-k * times)
    np.testing.assert_allclose(got, want, atol=2e-6 * want[-1])


def test_decay_after_pump_off_is_the_lifetime():
    # pump off, no probe: N2(t) = N2(0) exp(-t/tau) in every slice (Svelto sec. 7.3)
    m = medium()
    tl = MediumTimeline(m, flux_drive(PHI), model_step=10e-6)
    tl.advance(0.02)
    tl.set_drive(flux_drive(0.0))
    times = 0.02 + np.arange(0, 3e-3, 1e-6)
    n2 = tl.advance(0.023, times)
    slope, _ = np.polyfit(times - 0.02, np.log(n2), 1)
    assert -1 / slope == pytest.approx(TAU, rel=1e-9)


def test_four_level_limit():
    # four-level: no ground-state absorption at the probe, no emission at the pump:
    # beta = W tau / (1 + W tau), W = sigma_ap Phi; ln T = sigma_e L <N2>, T = 1 unpumped
    thin = medium(length=5e-9, slices=2, sep=0.0)
    tl = MediumTimeline(thin, flux_drive(PHI), model_step=10e-6)
    tl.advance(0.05)
    w_tau = SAP * PHI * TAU
    assert tl.mean() / N == pytest.approx(w_tau / (1 + w_tau), rel=2e-6)
    assert thin.probe_ln_transmission(np.zeros(2), 0.0, SES) == 0.0
    assert thin.probe_ln_transmission(tl.state(), 0.0, SES) == pytest.approx(
        SES * 5e-9 * tl.mean(), rel=1e-12
    )


def test_adaptive_steps_match_a_fine_reference():
    # step refinement (common practice, no source): the adaptive steps after a pump edge agree
    # with 0.5 us fixed steps to 2e-4 of the transient's amplitude
    times = np.arange(0, 0.005, 1e-6)
    fine = MediumTimeline(medium(), flux_drive(PHI), model_step=0.5e-6)
    fine.max_step = 0.5e-6
    ref = fine.advance(0.005, times)
    tl = MediumTimeline(medium(), flux_drive(PHI), model_step=10e-6)
    got = tl.advance(0.005, times)
    assert np.max(np.abs(got - ref)) <= 2e-4 * (ref[-1] - ref[0])
    assert tl.steps < 200  # and it took few steps


def test_piece_interpolation_within_1e6_of_amplitude():
    # the polynomial of each step reproduces the exact closed form (the module's stated bound)
    m = medium()
    n2 = np.zeros(24)
    t = 0.0
    for dt in (10e-6, 40e-6, 150e-6, 150e-6):
        piece = m.step(t, n2, Inputs(PHI, 0.0, 0.0), dt)
        s = np.linspace(0, dt, 200, endpoint=False)
        exact = np.array([piece.mean_at(x) for x in s])
        approx = evaluate_pieces(np.array([t]), np.array([dt]), piece.coefs[:, None], t + s)
        amplitude = abs(exact[-1] - exact[0]) + 1e-30
        assert np.max(np.abs(approx - exact)) <= 1e-6 * amplitude
        n2, t = piece.end_state, t + dt


def test_periodic_shortcut_equals_plain_stepping(monkeypatch):
    # folding onto the detected periodic orbit gives what stepping on would give
    # (common practice, no source)
    mod = SquareWave(1e3, 0.0)
    fast = MediumTimeline(medium(), flux_drive(PHI, modulation=mod), model_step=10e-6)
    fast.advance(0.05)
    assert fast.regime == "periodic"
    plain_drive = flux_drive(PHI, modulation=mod)
    monkeypatch.setattr(Drive, "periodic", lambda self, t: None)
    plain = MediumTimeline(medium(), plain_drive, model_step=10e-6)
    plain.advance(0.05)
    assert plain.regime == "stepping"
    times = 0.05 + np.arange(0, 3e-3, 1e-6)
    a = fast.advance(0.053, times, 1e-6)
    b = plain.advance(0.053, times)
    np.testing.assert_allclose(a, b, atol=1e-8 * N)
    np.testing.assert_allclose(fast.state(), plain.state(), atol=1e-8 * N)


def test_any_chunking_gives_the_same_result():
    # the step plan depends on the drive only, not on how advance() is called
    times = np.arange(0, 0.02, 1e-6)
    mod = SquareWave(700.0, 0.0)
    one = MediumTimeline(medium(), flux_drive(PHI, modulation=mod), model_step=10e-6).advance(0.02, times)
    tl = MediumTimeline(medium(), flux_drive(PHI, modulation=mod), model_step=10e-6)
    parts, t0 = [], 0
    for cut in (1234, 5000, 5001, 13000, 20000):
        t_end = cut * 1e-6
        parts.append(tl.advance(t_end, times[t0:cut]))
        t0 = cut
    np.testing.assert_allclose(np.concatenate(parts), one, rtol=1e-13)


def test_arguments_are_checked():
    with pytest.raises(ValueError, match="length"):
        GainMedium(-1.0, N, TAU, SAP, SEP, 4)
    with pytest.raises(ValueError, match="slices"):
        GainMedium(L, N, TAU, SAP, SEP, 0)
    with pytest.raises(ValueError, match="model_step"):
        MediumTimeline(medium(), flux_drive(PHI), model_step=0.0)
    tl = MediumTimeline(medium(), flux_drive(PHI), model_step=10e-6)
    tl.advance(1e-3)
    with pytest.raises(ValueError, match="t_end"):
        tl.advance(0.5e-3)
