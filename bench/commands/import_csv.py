"""`gainbench import FILE --columns ...`: make a run from a CSV recorded elsewhere, and analyse it."""

from __future__ import annotations

import argparse

from bench.config import load_bench
from bench.errors import ConfigError
from bench.units import parse_quantity

NAME = "import"
HELP = "make a run from a CSV recorded elsewhere (an oscilloscope or another logger) and analyse it"

NEEDED = ("time", "probe", "reference", "pump_on")

#: Estimates printed at the end, in this order.
SHOWN = ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta", "tau_s")


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", help="CSV file with a header row")
    parser.add_argument(
        "--columns",
        required=True,
        metavar="time=COL,probe=COL,reference=COL,pump_on=COL",
        help="which CSV column holds each signal (time in s, probe and reference in V, pump_on 0/1)",
    )
    parser.add_argument(
        "--config", metavar="FILE", help="bench file describing the sample (default: built-in)"
    )
    parser.add_argument(
        "--logs", metavar="DIR", help="run store directory (default: the bench file's run.log_dir)"
    )
    parser.add_argument(
        "--mode",
        choices=("watch", "chopped", "decay", "sweep"),
        help="analysis mode; default: chopped when the pump column switches on more than "
        "once, else watch (the baseline is the pump-off data before the pump first "
        "switches on)",
    )
    dark = parser.add_mutually_exclusive_group()
    dark.add_argument(
        "--dark",
        metavar="probe=V,reference=V",
        help="dark levels measured with the probe blocked, e.g. probe=2mV,reference=3mV",
    )
    dark.add_argument(
        "--dark-window",
        metavar="START:END",
        help="a stretch of the file recorded with the probe blocked, in the file's time "
        "column, e.g. 0s:0.01s; its mean is the dark",
    )


def parse_columns(text: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for part in text.split(","):
        key, sep, col = part.partition("=")
        key, col = key.strip(), col.strip()
        if not sep or not key or not col:
            raise ConfigError(f"--columns: {part!r} is not NAME=COLUMN")
        if key not in NEEDED:
            raise ConfigError(f"--columns: unknown signal {key!r}; expected {', '.join(NEEDED)}")
        out[key] = col
    missing = [k for k in NEEDED if k not in out]
    if missing:
        raise ConfigError(f"--columns: missing {', '.join(missing)} (expected {'=COL,'.join(NEEDED)}=COL)")
    return out


def parse_dark(dark: str | None, window: str | None):
    """The `bench.run.import_analysis.DarkGiven` of ``--dark`` or ``--dark-window`` (None: neither)."""
    from bench.run.import_analysis import DarkGiven

    if window is not None:
        start, sep, end = window.partition(":")
        if not sep or not start.strip() or not end.strip():
            raise ConfigError(f"--dark-window {window!r}: expected START:END, e.g. 0s:0.01s")
        a = parse_quantity(start.strip(), "time", "--dark-window start")
        b = parse_quantity(end.strip(), "time", "--dark-window end")
        if not b > a:
            raise ConfigError(f"--dark-window {window!r}: the end must come after the start")
        return DarkGiven(window=(a, b), text=window)
    if dark is None:
        return None
    levels: dict[str, float] = {}
    for part in dark.split(","):
        key, sep, value = part.partition("=")
        key, value = key.strip(), value.strip()
        if not sep or key not in ("probe", "reference") or not value:
            raise ConfigError(
                f"--dark: {part.strip()!r} is not probe=VOLTAGE or reference=VOLTAGE "
                "(e.g. --dark probe=2mV,reference=3mV)"
            )
        if key in levels:
            raise ConfigError(f"--dark: {key} is given twice")
        levels[key] = parse_quantity(value, "voltage", f"--dark {key}")
    missing = [k for k in ("probe", "reference") if k not in levels]
    if missing:
        raise ConfigError(f"--dark: missing {', '.join(missing)} (e.g. --dark probe=2mV,reference=3mV)")
    return DarkGiven(probe_v=levels["probe"], reference_v=levels["reference"], text=dark)


def run(args: argparse.Namespace) -> int:
    from bench.store import RunReader
    from bench.store.csv_import import import_csv

    columns = parse_columns(args.columns)
    dark = parse_dark(args.dark, args.dark_window)
    cfg = load_bench(args.config)
    path = import_csv(args.file, columns, cfg, args.logs, mode=args.mode, dark=dark)
    with RunReader(path) as reader:
        info = reader.meta.get("import") or {}
        final = reader.final_estimate()
        events = reader.events()
        mode = reader.meta.get("mode")
    print(
        f"imported {info.get('samples')} samples from {args.file} as a {mode} run "
        f"(sample interval {info.get('dt_s', 0):.6g} s)"
    )
    if dark is None:
        print("  no dark given (--dark or --dark-window): the probe and reference are taken as 0 V dark")
    for ev in events:
        if ev.kind == "procedure":
            print(f"  {ev.text}")
    if final is None or not any(k in final.values for k in SHOWN):
        print(
            "  no estimate: "
            + (", ".join(sorted(final.flags)) if final is not None and final.flags else "the data give none")
        )
    else:
        print(f"  estimates of all the data (t = {final.t:.4g} s, {final.n_samples} samples):")
        for key in SHOWN:
            q = final.values.get(key)
            if q is not None:
                print(f"  {key:<24} {q.value:>12.6g} ± {q.sigma:.3g}  (noise {q.sigma_noise:.2g})")
        if final.flags:
            print(f"  flags: {', '.join(sorted(final.flags))}")
    print(path.stem)
    return 0
