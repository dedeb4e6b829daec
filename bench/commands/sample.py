"""`gainbench sample`: what to expect from the sample before measuring it.

The probe's intensity is its power-weighted mean, ``P / (pi w^2)`` (half the Gaussian peak),
as everywhere in gainbench. The configured lifetime uncertainty gives the uncertainty of the
figures proportional to the lifetime shown here (the probe-held excitation, the pump's
saturation power); the refractive index gives the Fresnel reflectance of an uncoated face at
normal incidence (Born and Wolf, *Principles of Optics*, sec. 1.5.3), which cancels in ln R but
reduces the pump power that enters an uncoated sample.
"""

from __future__ import annotations

import argparse
import json
import math

from bench import physics
from bench.config import BenchConfig, load_bench

NAME = "sample"
HELP = "figures of the configured sample and lasers to know before measuring (table or --json)"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", help="bench file; default: the built-in simulated bench")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON (SI units)")


def figures(cfg: BenchConfig) -> dict[str, float]:
    """The sample's figures in SI units, keyed by name (the JSON of ``--json``)."""
    s, p, q = cfg.sample, cfg.probe, cfg.pump
    sig = s.sigma
    sum_probe = sig.probe_emission + sig.probe_absorption
    beta_tr = float(physics.transparency_fraction(sig.probe_emission, sig.probe_absorption))
    t0 = float(physics.unpumped_transmission(sig.probe_absorption, s.n_total, s.length))
    g_full = float(physics.full_inversion_gain(sig.probe_emission, s.n_total, s.length))
    i_sat = float(
        physics.saturation_intensity(
            p.wavelength, sig.probe_emission, sig.probe_absorption, s.upper_state_lifetime
        )
    )
    f_sat = float(physics.saturation_fluence(p.wavelength, sig.probe_emission, sig.probe_absorption))
    probe_area = math.pi * (p.beam_diameter / 2) ** 2
    pump_area = math.pi * (q.beam_diameter / 2) ** 2
    # the probe's power-weighted mean intensity P / (pi w^2) (half the Gaussian peak), the one
    # definition gainbench uses (`EstimatorParams.probe_mean`, the weak-probe flag)
    i_probe = p.power / probe_area
    phi_probe = float(physics.photon_flux(i_probe, p.wavelength))
    held = float(
        physics.probe_held_fraction(
            phi_probe, sig.probe_emission, sig.probe_absorption, s.upper_state_lifetime
        )
    )
    _, i_sat_pump = physics.pump_saturation_parameters(
        q.wavelength, sig.pump_absorption, sig.pump_emission, s.upper_state_lifetime
    )
    fresnel = float(physics.fresnel_reflectance(s.refractive_index))
    i_tr = float(
        physics.transparency_pump_intensity(
            q.wavelength, sig.pump_absorption, sig.pump_emission, s.upper_state_lifetime, beta_tr
        )
    )
    i_pump_max = q.max_power / pump_area
    beta_max_pump = float(
        physics.steady_state_fraction(
            i_pump_max, q.wavelength, sig.pump_absorption, sig.pump_emission, s.upper_state_lifetime
        )
    )
    pump_absorbed = 1.0 - math.exp(-sig.pump_absorption * s.n_total * s.length)
    return {
        "probe_wavelength_m": p.wavelength,
        "pump_wavelength_m": q.wavelength,
        "probe_photon_energy_j": float(physics.photon_energy(p.wavelength)),
        "pump_photon_energy_j": float(physics.photon_energy(q.wavelength)),
        "sigma_sum_probe_m2": sum_probe,
        "transparency_fraction": beta_tr,
        "unpumped_transmission": t0,
        "max_gain_full_inversion": g_full,
        "max_gain_full_inversion_db": float(physics.gain_db(g_full)),
        "saturation_intensity_w_per_m2": i_sat,
        "saturation_fluence_j_per_m2": f_sat,
        "probe_intensity_w_per_m2": i_probe,
        "probe_peak_intensity_w_per_m2": 2.0 * i_probe,
        "probe_intensity_over_saturation": i_probe / i_sat,
        "probe_held_fraction": held,
        "probe_held_fraction_sigma": held * s.uncertainty.upper_state_lifetime,
        "pump_intensity_for_transparency_w_per_m2": i_tr,
        "pump_power_for_transparency_w": i_tr * pump_area if math.isfinite(i_tr) else math.inf,
        "pump_max_power_w": q.max_power,
        "pump_max_intensity_w_per_m2": i_pump_max,
        "steady_state_fraction_at_max_pump": beta_max_pump,
        "unpumped_pump_absorbed_fraction": pump_absorbed,
        "pump_saturation_power_w": float(i_sat_pump) * pump_area,
        "pump_saturation_power_w_sigma": float(i_sat_pump) * pump_area * s.uncertainty.upper_state_lifetime,
        "fresnel_reflectance_per_face": fresnel,
        "uncoated_faces_transmission": (1.0 - fresnel) ** 2,
    }


def run(args: argparse.Namespace) -> int:
    cfg = load_bench(args.config)
    f = figures(cfg)
    if args.json:
        out = {
            "bench": cfg.name,
            "simulated": cfg.simulated,
            "sample": cfg.sample.label,
            "figures": {k: (None if not math.isfinite(v) else v) for k, v in f.items()},
        }
        print(json.dumps(out, indent=2))
        return 0
    ev = 1.602176634e-19
    rows = [
        (
            "probe photon energy",
            f"{f['probe_photon_energy_j']:.4g} J",
            f"{f['probe_photon_energy_j'] / ev:.4f} eV",
        ),
        (
            "pump photon energy",
            f"{f['pump_photon_energy_j']:.4g} J",
            f"{f['pump_photon_energy_j'] / ev:.4f} eV",
        ),
        ("sigma_e + sigma_a at the probe", f"{f['sigma_sum_probe_m2'] * 1e4:.4g} cm^2", ""),
        ("transparency fraction beta_tr", f"{f['transparency_fraction']:.4f}", ""),
        (
            "unpumped single-pass transmission",
            f"{f['unpumped_transmission']:.4f}",
            f"{physics.gain_db(f['unpumped_transmission']):+.2f} dB",
        ),
        (
            "largest gain (full inversion)",
            f"{f['max_gain_full_inversion']:.4g}x",
            f"{f['max_gain_full_inversion_db']:+.2f} dB",
        ),
        (
            "saturation intensity I_sat (probe)",
            f"{f['saturation_intensity_w_per_m2'] * 1e-7:.4g} kW/cm^2",
            "",
        ),
        ("saturation fluence F_sat (probe)", f"{f['saturation_fluence_j_per_m2'] * 1e-4:.4g} J/cm^2", ""),
        (
            "probe I / I_sat (I = P / (pi w^2), half the peak)",
            f"{f['probe_intensity_over_saturation']:.3g}",
            "weak" if f["probe_intensity_over_saturation"] <= cfg.probe.weak_fraction else "NOT WEAK",
        ),
        (
            "beta the probe alone keeps up (in the baseline)",
            f"{f['probe_held_fraction']:.3g}",
            f"± {f['probe_held_fraction_sigma']:.2g} (lifetime)",
        ),
        (
            "pump intensity for transparency",
            _kw(f["pump_intensity_for_transparency_w_per_m2"]),
            _w(f["pump_power_for_transparency_w"]),
        ),
        ("pump at max current", _kw(f["pump_max_intensity_w_per_m2"]), _w(f["pump_max_power_w"])),
        (
            "steady-state beta at max pump (entrance face)",
            f"{f['steady_state_fraction_at_max_pump']:.4f}",
            "",
        ),
        ("pump absorbed, unpumped sample", f"{f['unpumped_pump_absorbed_fraction'] * 100:.1f} %", ""),
        (
            "pump saturation power (thin sample)",
            f"{f['pump_saturation_power_w']:.4g} W",
            f"± {f['pump_saturation_power_w_sigma']:.2g} W (lifetime)",
        ),
        (
            f"Fresnel reflectance per uncoated face (n = {cfg.sample.refractive_index:g})",
            f"{f['fresnel_reflectance_per_face'] * 100:.2f} %",
            "cancels in ln R; reduces the pump entering",
        ),
    ]
    print(f"{cfg.name}{'  [SIMULATED]' if cfg.simulated else ''}")
    print(f"sample: {cfg.sample.label}")
    width = max(len(r[0]) for r in rows)
    for name, a, b in rows:
        print(f"  {name:<{width}}  {a:>18}  {b}")
    return 0


def _kw(i: float) -> str:
    return "unreachable" if not math.isfinite(i) else f"{i * 1e-7:.4g} kW/cm^2"


def _w(p: float) -> str:
    return "" if not math.isfinite(p) else f"{p:.3g} W"
