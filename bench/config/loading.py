"""Reading a bench file: from a path or text, with ``--set`` overrides, into a `BenchConfig`."""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from dataclasses import replace
from importlib import resources
from pathlib import Path

from bench.config.model import BenchConfig
from bench.config.sections import build_bench
from bench.config.toml_reader import BenchFileReader, apply_overrides
from bench.config.visa_library import KEY as VISA_LIBRARY_KEY
from bench.config.visa_library import check_visa_library, split_library
from bench.errors import ConfigError

#: A bench file is a few kB; more than this is the wrong file (or a device that never ends).
BENCH_FILE_MAX_BYTES = 1_000_000


def builtin_bench_path() -> Path:
    """The built-in bench file for the simulated bench (package data)."""
    return Path(str(resources.files("bench") / "data" / "demo_bench.toml"))


def load_bench(path: str | Path | None = None, overrides: Mapping[str, str] | None = None) -> BenchConfig:
    """Read a bench file (the built-in simulated bench when ``path`` is None).

    ``overrides`` maps dotted keys to values written as in the file (``{"sample.length":
    "5.1 mm"}``); they replace the file's values before validation, as ``--set`` does.
    """
    if path is None:
        p = builtin_bench_path()
        source = "<built-in demo bench>"
    else:
        p = Path(path)
        source = str(path)
    try:
        with p.open("rb") as f:
            data = f.read(BENCH_FILE_MAX_BYTES + 1)  # bounded: a device such as /dev/zero never ends
        if len(data) > BENCH_FILE_MAX_BYTES:
            raise ConfigError(
                f"{source}: larger than {BENCH_FILE_MAX_BYTES // 1000} kB; a bench file is a few kB "
                "of TOML (is this the right file?)"
            )
        text = data.decode("utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{source}: no such bench file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{source}: cannot read the bench file ({exc})") from None
    cfg = load_bench_text(text, source, overrides=overrides, base_dir=p.parent)
    spectrum = cfg.sample.spectrum_file
    if spectrum is not None and "sample.spectrum" not in cfg.overrides:
        # A relative spectrum path is relative to the bench file's folder. Processes given
        # only the text and the overrides (the simulated bench, the bench process) read the
        # text elsewhere, so the resolved path goes with the overrides.
        cfg = replace(cfg, overrides={**cfg.overrides, "sample.spectrum": str(spectrum.resolve())})
    check_visa_library(cfg.visa_library, source, text, overridden=VISA_LIBRARY_KEY in cfg.overrides)
    if split_library(cfg.visa_library)[0]:
        # a library file's path made absolute goes with the overrides too, for the same reason
        cfg = replace(cfg, overrides={**cfg.overrides, VISA_LIBRARY_KEY: cfg.visa_library})
    return cfg


def load_bench_text(
    text: str,
    source: str,
    overrides: Mapping[str, str] | None = None,
    base_dir: Path | None = None,
) -> BenchConfig:
    """Parse bench-file text; ``source`` names it in errors. See `load_bench`."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    if overrides:
        raw = apply_overrides(raw, overrides, source)
    reader = BenchFileReader(raw, source, text, overridden=set(overrides or ()))
    cfg = build_bench(reader, text, base_dir or Path.cwd())
    reader.reject_unknown()
    return replace(cfg, overrides=dict(overrides or {}), base_dir=base_dir)


def parse_overrides(items: list[str] | None) -> dict[str, str]:
    """``["sample.length=5.1mm", ...]`` (command-line ``--set``) -> ``{"sample.length": "5.1mm"}``."""
    out: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise ConfigError(f"--set {item!r}: expected KEY=VALUE, e.g. sample.length=5.1mm")
        out[key.strip()] = value.strip()
    return out
