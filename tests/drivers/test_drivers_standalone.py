"""The drivers and the simulator stand on their own: they import nothing from ``bench``, and a
driver is found by the file it is in.

The first check imports every module of both packages in a fresh interpreter and reads
Python's own record of what got imported (``sys.modules``); the second adds a driver module
in a folder of its own to the search path of ``drivers.instruments`` (Python's package
``__path__``, which ``pkgutil.iter_modules`` walks) and asks the registry for it.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import drivers.instruments
from drivers import registry
from drivers.registry import known_drivers

ROOT = Path(__file__).resolve().parents[2]

IMPORT_ALL = textwrap.dedent("""
    import importlib, pkgutil, sys
    import drivers, simulated_instruments
    names = []
    for package in (drivers, simulated_instruments):
        for info in pkgutil.walk_packages(package.__path__, package.__name__ + "."):
            importlib.import_module(info.name)
            names.append(info.name)
    print(len(names))
    print(" ".join(sorted(m for m in sys.modules if m == "bench" or m.startswith("bench."))))
""")


def test_drivers_and_simulator_import_nothing_from_bench():
    out = subprocess.run(
        [sys.executable, "-P", "-c", IMPORT_ALL],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    ).stdout.splitlines()
    assert int(out[0]) >= 30  # every module was imported (the two packages have more than 30)
    assert out[1:] == [""], f"modules of bench imported by drivers / simulated_instruments: {out[1:]}"


DRIVER_FILE = '''
from drivers.base import Driver


class LockIn(Driver):
    """Lock-in amplifier read as one value per poll."""

    DRIVER_NAME = "lock-in-test"
    ROLE = "detector"
    OPTIONS = frozenset({"time_constant"})
'''


def test_a_driver_is_found_by_adding_its_file(tmp_path, monkeypatch):
    (tmp_path / "lock_in_test.py").write_text(DRIVER_FILE, encoding="utf-8")
    monkeypatch.setattr(drivers.instruments, "__path__", [*drivers.instruments.__path__, str(tmp_path)])
    monkeypatch.setattr(registry, "_DRIVERS", {})
    monkeypatch.setattr(registry, "_loaded", False)
    monkeypatch.delitem(sys.modules, "drivers.instruments.lock_in_test", raising=False)
    assert "drivers.instruments.lock_in_test" in registry.builtin_driver_modules()
    found = known_drivers()
    assert found["lock-in-test"].role == "detector"
    assert found["lock-in-test"].summary == "Lock-in amplifier read as one value per poll."
    assert {"digitiser", "pump-driver", "shutter", "wavelength-source"} <= set(found)
    cls = registry.driver_class("lock-in-test", role="detector")
    assert cls.__name__ == "LockIn" and cls.__module__ == "drivers.instruments.lock_in_test"
