"""What a bench file and its ``--set`` overrides must pass before a run starts on them.

`record` and `live` read their bench through `load_for_run`; `check` runs `check_instruments`
too, so that whatever a run would refuse, `check` refuses first, naming the file, key and line.

- `check_instruments`: every instrument's driver is known and serves its role, its command
  profile exists and loads, and the driver accepts the option values (the same code that
  opens the instrument, run without a connection).
- `lowered_eyewear`: the eyewear OD the arming checklist requires, from the bench file as
  written and with the overrides; an override that lowers it (a smaller slope efficiency, a
  wider beam, a lower current limit...) lets weaker eyewear pass the checklist, so a run
  refuses it unless ``--accept-lower-od`` confirms it, and then says so loudly and records a
  ``setting`` event in the run (`override_events`).

A second layer only: the eyewear figures are a calculation aid (`bench.safety.exposure_limits`); they
never replace the laser safety officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

import argparse
import sys
from typing import TextIO

from bench.config import BenchConfig, line_of, load_bench, load_bench_text, parse_overrides
from bench.errors import ConfigError, GainbenchError
from bench.records import Event

ACCEPT_FLAG = "--accept-lower-od"


def check_instruments(cfg: BenchConfig) -> None:
    """Refuse instrument entries that opening the instruments would refuse (no I/O).

    Raises
    ------
    ConfigError
        ``FILE: instruments.ROLE.KEY (line N): what is wrong``.
    """
    from drivers.errors import InstrumentError, ProfileError
    from drivers.registry import check_instrument

    for role, inst in cfg.instruments.items():
        base = f"instruments.{role}"
        try:
            check_instrument(role, inst.driver, inst.profile, dict(inst.options))
        except ProfileError as exc:
            raise ConfigError(f"{_where(cfg, base + '.profile')}: {exc}") from None
        except InstrumentError as exc:
            raise ConfigError(f"{_where(cfg, base + '.driver')}: {exc.detail}") from None
        except ConfigError as exc:  # the driver's own words start with the option's key
            key, _, detail = str(exc).partition(": ")
            if not key.startswith(f"{base}.options."):
                key, detail = f"{base}.options", str(exc)
            raise ConfigError(f"{_where(cfg, key)}: {detail}") from None
    if cfg.simulated:
        _check_simulated_instruments(cfg)


def _check_simulated_instruments(cfg: BenchConfig) -> None:
    """The simulated instruments' own limits (e.g. their sample rates), met without serving them."""
    from simulated_instruments.device_errors import DeviceError
    from simulated_instruments.optical_setup import BenchModel
    from simulated_instruments.setup_config import SimulatorSetupError

    try:
        BenchModel(cfg)
    except SimulatorSetupError as exc:
        raise ConfigError(str(exc)) from None
    except DeviceError as exc:
        detail = exc.detail or str(exc)
        option = detail.split(":")[0].strip()
        key = next(
            (
                f"instruments.{role}.options.{option}"
                for role, inst in cfg.instruments.items()
                if option in inst.options
            ),
            "instruments",
        )
        raise ConfigError(f"{_where(cfg, key)}: the simulated instrument refuses it: {detail}") from None


def _where(cfg: BenchConfig, key: str) -> str:
    line = line_of(cfg.text, key)
    return f"{cfg.source}: {key}" + (f" (line {line})" if line else "")


def required_ods(cfg: BenchConfig) -> dict[str, tuple[float, int | None]]:
    """Laser (``"pump"``, ``"probe"``) -> (wavelength, OD the arming checklist requires there)."""
    from bench.safety.checklist import EYEWEAR, checklist_items

    out: dict[str, tuple[float, int | None]] = {}
    for item in checklist_items(cfg):
        if item.kind == EYEWEAR:
            for laser in item.lasers:
                out[laser] = (float(item.wavelength or 0.0), item.required_od)
    return out


def lowered_eyewear(cfg: BenchConfig) -> list[str]:
    """How the overrides lower the eyewear OD required, one sentence per laser (empty if not).

    The bench file as written must itself be valid: its OD is what the overrides are compared
    with. A laser whose OD cannot be computed with the overrides but could without counts as
    lowered too (the checklist then refuses arming anyway).
    """
    if not cfg.overrides:
        return []
    try:
        written = load_bench_text(cfg.text, cfg.source, base_dir=cfg.base_dir)
    except ConfigError as exc:
        raise ConfigError(
            f"{exc} (in the bench file as written, before --set: the eyewear OD it requires is "
            "what the overrides are checked against, so fix the file itself)"
        ) from None
    before = required_ods(written)
    lowered = _lowered(before, required_ods(cfg))
    if not lowered:
        return []
    # name the overrides that lower it by themselves, when some do (else all of them together)
    alone = [k for k, v in cfg.overrides.items() if _lowered(before, _ods_with(cfg, {k: v}) or before)]
    given = ", ".join(f"{k}={cfg.overrides[k]}" for k in (alone or cfg.overrides))
    out = []
    for laser, (wl0, od0), (wl1, od1) in lowered:
        now = "cannot be computed" if od1 is None else f"OD {od1} at {wl1 * 1e9:g} nm"
        out.append(
            f"--set {given} lowers the eyewear OD required against the {laser} from OD {od0} at "
            f"{wl0 * 1e9:g} nm (the bench file as written) to {now}"
        )
    return out


def _lowered(before, after) -> list[tuple[str, tuple[float, int | None], tuple[float, int | None]]]:
    out = []
    for laser, (wl0, od0) in before.items():
        wl1, od1 = after.get(laser, (wl0, None))
        if od0 is not None and (od1 is None or od1 < od0):
            out.append((laser, (wl0, od0), (wl1, od1)))
    return out


def _ods_with(cfg: BenchConfig, overrides: dict[str, str]) -> dict[str, tuple[float, int | None]] | None:
    try:
        return required_ods(load_bench_text(cfg.text, cfg.source, overrides=overrides, base_dir=cfg.base_dir))
    except ConfigError:  # valid only together with the other overrides
        return None


def add_run_options(parser: argparse.ArgumentParser) -> None:
    """The option that confirms overrides lowering the eyewear OD (for `record` and `live`)."""
    parser.add_argument(
        ACCEPT_FLAG,
        action="store_true",
        dest="accept_lower_od",
        help="accept --set values that lower the eyewear OD the arming checklist requires "
        "(e.g. a smaller pump.slope_efficiency or a wider pump.beam_diameter); the run "
        "records that you did",
    )


def load_for_run(args: argparse.Namespace, err: TextIO | None = None) -> BenchConfig:
    """The bench of ``args.config`` with ``args.overrides``, checked as a run needs it.

    Refuses (`ConfigError`) instrument mistakes (`check_instruments`) and overrides that lower
    the eyewear OD unless ``args.accept_lower_od``; when that confirms them, prints a warning
    to ``err`` (stderr).
    """
    cfg = load_bench(args.config, overrides=parse_overrides(getattr(args, "overrides", None)))
    check_instruments(cfg)
    lowered = lowered_eyewear(cfg)
    if lowered and not getattr(args, "accept_lower_od", False):
        raise ConfigError(
            "; ".join(lowered) + f". Weaker eyewear would pass the arming checklist. Fix the "
            f"bench file, or give {ACCEPT_FLAG} if these values are right (the run records it)"
        )
    if lowered:
        out = err if err is not None else sys.stderr
        for text in lowered:
            print(f"gainbench: WARNING: {text}; accepted with {ACCEPT_FLAG}", file=out, flush=True)
    return cfg


def override_events(cfg: BenchConfig, t: float, who: str) -> list[Event]:
    """``setting`` events for a run's record: each override that lowers the eyewear OD required."""
    try:
        lowered = lowered_eyewear(cfg)
    except GainbenchError as exc:  # a run started on it was checked already; never stop it here
        lowered = [f"the eyewear OD of the bench file as written could not be compared ({exc})"]
    return [
        Event(
            t,
            "setting",
            f"WARNING: {text}; accepted with {ACCEPT_FLAG}",
            who,
            data={"overrides": dict(cfg.overrides), "accepted_with": ACCEPT_FLAG},
        )
        for text in lowered
    ]
