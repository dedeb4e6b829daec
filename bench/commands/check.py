"""`gainbench check FILE`: validate a bench file and say what it describes."""

from __future__ import annotations

import argparse

from bench.config import load_bench
from bench.run.preflight import check_instruments

NAME = "check"
HELP = "validate a bench file (units, ranges, instruments) and summarise it"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", nargs="?", help="bench file (TOML); default: the built-in simulated bench")


def run(args: argparse.Namespace) -> int:
    cfg = load_bench(args.file)
    check_instruments(cfg)  # what opening the instruments would refuse, refused here first
    s, p, q = cfg.sample, cfg.probe, cfg.pump
    print(f"{cfg.source}: ok")
    print(f"  bench       {cfg.name}{'  [SIMULATED]' if cfg.simulated else ''}")
    print(
        f"  sample      {s.label}, {s.length * 1e3:g} mm, N_total {s.n_total * 1e-6:.3g} cm^-3, "
        f"tau {s.upper_state_lifetime * 1e3:g} ms"
    )
    print(f"  probe       {p.wavelength * 1e9:g} nm, {p.power * 1e3:g} mW, {p.kind}")
    print(f"  pump        {q.wavelength * 1e9:g} nm, up to {q.max_current:g} A ({q.max_power:.3g} W)")
    for role, inst in cfg.instruments.items():
        print(f"  {role:<11} {inst.driver} via {inst.resource} (profile {inst.profile})")
    return 0
