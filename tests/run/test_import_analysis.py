"""An imported CSV is analysed like a recorded run: its estimates are in the run, the baseline is
the pump-off data, the darks are the ones the user measured.

The CSV files come from a generator written here from first principles, sharing no code with
the estimator or the simulator:

- a two-level (quasi-three-level) medium in a few slices along the sample, each obeying the
  rate equation dN2/dt = (sigma_a I / h nu)(N - N2) - (sigma_e I / h nu) N2 - N2 / tau summed
  over the pump and the probe (O. Svelto, *Principles of Lasers*, 5th ed., Springer 2010,
  ch. 7, rate equations of a quasi-three-level laser). With the intensities held for one
  sample interval h it is linear with constant coefficients, dN2/dt = A - B N2, solved
  exactly: N2(t + h) = A/B + (N2(t) - A/B) exp(-B h);
- the pump attenuated slice by slice and the probe transmitted as
  exp(sum (sigma_e N2 - sigma_a (N - N2)) dz) (Beer-Lambert law, same chapter);
- the reference proportional to the probe source power, a relative intensity noise common to
  both detectors, independent detector noise and the generator's own dark offsets, from
  numpy's Generator. Photon energies from scipy.constants (CODATA).

The true excited fraction is the generator's own N2/N averaged over the slices. It is the
absolute fraction, including the part the probe keeps excited by itself; the probe here is
weak (1 uW), and the test states that part and checks it is below 0.05 sigma_noise, so the
comparison holds whether beta is reported as the pump-induced or as the absolute fraction.
"""

from __future__ import annotations

import io
import json
import re
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from bench.cli import main
from bench.config import builtin_bench_path
from bench.run.replay import replay
from bench.store import RunReader, list_runs

# The sample and beams, SI; written into the bench file below (invented magnitudes of a
# Yb-doped crystal, as the demo bench).
L = 5e-3  # m
N = 2.0e26  # m^-3
TAU = 0.6e-3  # s
SE_S, SA_S = 2.2e-24, 0.12e-24  # m^2 at the probe, 1030 nm
SA_P, SE_P = 1.0e-24, 0.15e-24  # m^2 at the pump, 940 nm
LAMBDA_S, LAMBDA_P = 1030e-9, 940e-9
PROBE_POWER, PROBE_DIAMETER = 1e-6, 0.1e-3  # W, m (flat-top beam in the generator)
PUMP_POWER, PUMP_DIAMETER = 2.0, 0.2e-3
SLICES = 8
DT = 10e-6  # s, 100 kHz
DARK_PROBE, DARK_REFERENCE = 4.1e-3, 2.7e-3  # V, the generator's own offsets
NOISE_V, RIN = 0.5e-3, 1e-3

COLUMNS = "time=t (s),probe=ch1 (V),reference=ch2 (V),pump_on=pump"


def _bench_text() -> str:
    text = builtin_bench_path().read_text(encoding="utf-8")
    values = {
        "length": f'"{L * 1e3!r} mm"',
        "n_total": f'"{N!r} m^-3"',
        "upper_state_lifetime": f'"{TAU * 1e3!r} ms"',
        "probe_emission": f'"{SE_S!r} m^2"',
        "probe_absorption": f'"{SA_S!r} m^2"',
        "pump_absorption": f'"{SA_P!r} m^2"',
        "pump_emission": f'"{SE_P!r} m^2"',
        "power": f'"{PROBE_POWER * 1e6!r} uW"',
    }
    for key, value in values.items():
        text, n = re.subn(rf"(?m)^{key} = .*$", f"{key} = {value}", text, count=1)
        assert n == 1, key
    assert 'wavelength = "1030 nm"' in text and 'wavelength = "940 nm"' in text
    return text


def _generate(path: Path, *, blocked: float, off: float, on: float, seed: int) -> dict[str, float]:
    """Write the CSV; return the true beta (pump on, settled) and the probe-held part (pump off)."""
    h = constants.h
    photon_s, photon_p = h * constants.c / LAMBDA_S, h * constants.c / LAMBDA_P
    i_probe = PROBE_POWER / (np.pi * (PROBE_DIAMETER / 2) ** 2)
    i_pump = PUMP_POWER / (np.pi * (PUMP_DIAMETER / 2) ** 2)
    dz = L / SLICES
    n_steps = int(round((blocked + off + on) / DT))
    t = np.arange(n_steps) * DT
    pump_on = t >= blocked + off
    n2 = np.zeros(SLICES)
    beta = np.empty(n_steps)
    transmission = np.empty(n_steps)
    for i in range(n_steps):
        # the pump through the slices with the state at the start of the step (Beer-Lambert)
        ip = np.empty(SLICES)
        ip[0] = i_pump if pump_on[i] else 0.0
        for k in range(1, SLICES):
            ip[k] = ip[k - 1] * np.exp(-(SA_P * (N - n2[k - 1]) - SE_P * n2[k - 1]) * dz)
        w_a = SA_P * ip / photon_p + SA_S * i_probe / photon_s
        w_e = SE_P * ip / photon_p + SE_S * i_probe / photon_s
        b = w_a + w_e + 1.0 / TAU
        steady = w_a * N / b
        n2 = steady + (n2 - steady) * np.exp(-b * DT)
        beta[i] = n2.mean() / N
        transmission[i] = np.exp(np.sum(SE_S * n2 - SA_S * (N - n2)) * dz)
    rng = np.random.default_rng(seed)
    source = 1.0 + RIN * rng.standard_normal(n_steps)
    lit = t >= blocked
    gain_p = 0.8 / transmission[lit][0]  # about 0.8 V unpumped at the probe detector
    probe = (
        DARK_PROBE
        + np.where(lit, gain_p * transmission * source, 0.0)
        + NOISE_V * rng.standard_normal(n_steps)
    )
    ref = DARK_REFERENCE + np.where(lit, 0.6 * source, 0.0) + NOISE_V * rng.standard_normal(n_steps)
    with open(path, "w", encoding="utf-8") as f:
        f.write("# generated by tests/run/test_import_analysis.py\n")
        f.write("t (s),ch1 (V),ch2 (V),pump\n")
        for row in zip(t, probe, ref, pump_on.astype(int), strict=True):
            f.write(f"{float(row[0])!r},{float(row[1])!r},{float(row[2])!r},{int(row[3])}\n")
    settled = t >= blocked + off + 0.5 * on  # long settled (on-stretch >> tau)
    return {
        "beta": float(beta[settled].mean()),
        "beta_spread": float(np.ptp(beta[settled])),
        "probe_held": float(beta[lit & ~pump_on][-1]),
    }


@pytest.fixture(scope="module")
def bench(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("bench") / "weak-probe.toml"
    path.write_text(_bench_text(), encoding="utf-8")
    return path


def _import(bench: Path, csv: Path, logs: Path, *extra: str) -> tuple[str, str]:
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(
            ["import", str(csv), "--columns", COLUMNS, "--config", str(bench), "--logs", str(logs), *extra]
        )
    assert code == 0, buf.getvalue()
    return buf.getvalue().strip().splitlines()[-1], buf.getvalue()


def _summary(run_id: str, logs: Path, capsys) -> dict:
    capsys.readouterr()
    assert main(["summary", run_id, "--logs", str(logs), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_an_imported_csv_gives_the_generators_beta_once_its_darks_are_given(bench, tmp_path, capsys):
    csv = tmp_path / "watch.csv"
    truth = _generate(csv, blocked=0.0, off=0.05, on=0.25, seed=11)
    assert truth["beta_spread"] < 1e-9  # settled: one true value
    run_id, out = _import(
        bench,
        csv,
        tmp_path / "logs",
        "--dark",
        f"probe={DARK_PROBE * 1e3:.6g}mV,reference={DARK_REFERENCE * 1e3:.6g}mV",
    )
    assert "beta" in out and "dark given" in out and "baseline captured" in out  # printed at the end
    beta = _summary(run_id, tmp_path / "logs", capsys)["estimates"]["beta"]
    sigma = beta["sigma_noise"]
    assert 0 < sigma < 1e-4
    assert truth["probe_held"] < 0.05 * sigma  # the probe's own part: pump-induced = absolute here
    assert abs(beta["value"] - truth["beta"]) <= 3 * sigma, (beta, truth)
    # the run is like a recorded one: a replay reproduces its stored estimates
    path = tmp_path / "logs" / f"{run_id}.gbrun"
    again = replay(path)
    assert again.compared > 0 and again.max_relative_difference == 0.0
    # runs shows the data's duration, not the import's
    (row,) = list_runs(tmp_path / "logs")
    assert row["duration_s"] == pytest.approx(0.30 - DT, abs=1e-9)
    assert row["beta"] == beta["value"]

    # Without the darks the same data are biased by far more than the noise (why they are asked for).
    plain, _ = _import(bench, csv, tmp_path / "plain")
    biased = _summary(plain, tmp_path / "plain", capsys)["estimates"]["beta"]
    assert abs(biased["value"] - truth["beta"]) > 20 * sigma


def test_a_dark_window_of_the_file_gives_the_dark(bench, tmp_path, capsys):
    csv = tmp_path / "blocked.csv"
    truth = _generate(csv, blocked=0.02, off=0.05, on=0.25, seed=12)
    run_id, out = _import(bench, csv, tmp_path / "logs", "--dark-window", "0s:0.02s")
    assert "dark given" in out
    with RunReader(tmp_path / "logs" / f"{run_id}.gbrun") as r:
        (dark,) = [e for e in r.events() if e.data.get("control") == "dark"]
        (base,) = [e for e in r.events() if e.data.get("control") == "baseline"]
    # the generator's offsets, within 5 standard errors of a 2000-sample mean (noise 0.5 mV)
    assert abs(dark.data["probe_v"] - DARK_PROBE) < 5 * NOISE_V / np.sqrt(2000)
    assert abs(dark.data["reference_v"] - DARK_REFERENCE) < 5 * NOISE_V / np.sqrt(2000)
    assert base.data["t_start"] == pytest.approx(0.02)  # the baseline leaves the blocked stretch out
    beta = _summary(run_id, tmp_path / "logs", capsys)["estimates"]["beta"]
    assert abs(beta["value"] - truth["beta"]) <= 3 * beta["sigma_noise"], (beta, truth)


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--dark", "probe=2mV"], "--dark: missing reference"),
        (["--dark", "probe=2mV,reference=3kg"], "is not a voltage"),
        (["--dark", "probe=2mV,colour=3mV"], "is not probe=VOLTAGE or reference=VOLTAGE"),
        (["--dark-window", "0.01s"], "expected START:END"),
        (["--dark-window", "0.02s:0.01s"], "the end must come after the start"),
        (["--dark-window", "5s:6s"], "no sample of"),
    ],
)
def test_bad_dark_options_are_named(bench, tmp_path, capsys, args, message):
    csv = tmp_path / "short.csv"
    csv.write_text(
        "t (s),ch1 (V),ch2 (V),pump\n" + "".join(f"{i * DT!r},0.8,0.6,{int(i > 500)}\n" for i in range(1000)),
        encoding="utf-8",
    )
    assert (
        main(
            [
                "import",
                str(csv),
                "--columns",
                COLUMNS,
                "--config",
                str(bench),
                "--logs",
                str(tmp_path / "l"),
                *args,
            ]
        )
        == 2
    )
    assert message in capsys.readouterr().err
    assert not (tmp_path / "l").exists() or not any((tmp_path / "l").iterdir())


def test_help_states_the_default_mode(capsys):
    with pytest.raises(SystemExit):
        main(["import", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "default: chopped when the pump column switches on more than once, else watch" in text
