"""`gainbench sample`: the figures a user checks before measuring, recomputed here by hand
from the bench file with scipy.constants (CODATA) as the reference for h and c."""

from __future__ import annotations

import json
import math

import pytest
import scipy.constants as sc

from bench.cli import main
from bench.config import load_bench


def test_json_figures_match_hand_computation(capsys):
    assert main(["sample", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    f = out["figures"]
    cfg = load_bench()
    s, p, q = cfg.sample, cfg.probe, cfg.pump
    se, sa = s.sigma.probe_emission, s.sigma.probe_absorption
    hv = sc.h * sc.c / p.wavelength  # photon energy, CODATA constants
    assert f["probe_photon_energy_j"] == pytest.approx(hv, rel=1e-12)
    assert f["transparency_fraction"] == pytest.approx(sa / (sa + se))
    # Beer-Lambert for the unpumped sample
    assert f["unpumped_transmission"] == pytest.approx(math.exp(-sa * s.n_total * s.length))
    assert f["max_gain_full_inversion"] == pytest.approx(math.exp(se * s.n_total * s.length))
    # I_sat = h nu / ((sigma_e + sigma_a) tau), F_sat = h nu / (sigma_e + sigma_a) (Koechner, from memory)
    assert f["saturation_intensity_w_per_m2"] == pytest.approx(hv / ((se + sa) * s.upper_state_lifetime))
    assert f["saturation_fluence_j_per_m2"] == pytest.approx(hv / (se + sa))
    # transparency pump intensity: steady-state beta of the pumped two-level manifold equals beta_tr
    hvp = sc.h * sc.c / q.wavelength
    sap, sep, tau = s.sigma.pump_absorption, s.sigma.pump_emission, s.upper_state_lifetime
    phi = f["pump_intensity_for_transparency_w_per_m2"] / hvp
    beta = sap * phi / ((sap + sep) * phi + 1 / tau)
    assert beta == pytest.approx(sa / (sa + se), rel=1e-9)
    assert out["simulated"] is True


def test_table_output_is_readable(capsys):
    assert main(["sample"]) == 0
    text = capsys.readouterr().out
    assert "[SIMULATED]" in text
    assert "transparency fraction" in text
    assert "kW/cm^2" in text


def test_bad_config_gives_a_clean_error(tmp_path, capsys):
    bad = tmp_path / "b.toml"
    bad.write_text("[bench]\nname = 1\n", encoding="utf-8")
    assert main(["sample", "--config", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bench.name" in err and "Traceback" not in err
