"""The simulated bench in a process of its own, reached only through its loopback transports.

`SimulatorProcess` runs ``gainbench sim serve`` as a child process and reads the resources it
prints. Measurements on the simulated bench use it by default: the simulator then gets a core
of its own (on a 2-core lab PC that is what lets 2 channels at 1 M samples/s keep up), and
nothing in the measurement touches the simulator except through pyvisa and pyserial, exactly as
with real instruments. The simulator-only queries (its ground truth, fault injection) go over a
second connection to the simulated digitiser, and whether the simulated pump really emits is
asked over a second connection to the simulated driver.
"""

from __future__ import annotations

import contextlib
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from bench.config import BenchConfig
from bench.errors import GainbenchError

ROLES = ("detector", "pump", "shutter", "wavelength")

#: Bench-file keys a ``--set`` changes for the tool only, not for the simulated bench: the pump
#: calibration is what the tool believes of the pump; the simulated pump (and its driver's own
#: power reading) stays as the bench file describes it, as a real pump would.
BELIEF_ONLY = frozenset({"pump.slope_efficiency", "pump.threshold_current"})


class SimulatorError(GainbenchError):
    """The simulated bench did not start, or stopped."""


class SimulatorProcess:
    """``gainbench sim serve`` as a child process (context manager)."""

    def __init__(
        self,
        cfg: BenchConfig,
        *,
        speed: float = 1.0,
        faults=(),
        seed: int | None = None,
        start_timeout: float = 60.0,
    ):
        self.cfg = cfg
        self.speed = float(speed)
        self.faults = tuple(str(f) for f in faults)
        self.seed = seed
        self.start_timeout = start_timeout
        self.resources: dict[str, str] = {}
        self._proc: subprocess.Popen | None = None
        self._dir: tempfile.TemporaryDirectory | None = None
        self._lock = threading.Lock()  # the truth connection and fault injection
        self._pump_lock = threading.Lock()  # the pump connection: never waits behind a slow injection
        self._truth_conn = None
        self._pump_conn = None
        self._stderr: list[str] = []

    def __enter__(self) -> SimulatorProcess:
        try:
            self.start()
        except BaseException:
            self.close()
            raise
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def start(self) -> None:
        self._dir = tempfile.TemporaryDirectory(prefix="gainbench-sim-")
        bench = Path(self._dir.name) / "bench.toml"
        bench.write_text(self.cfg.text, encoding="utf-8")
        # -P: the current directory is not put on sys.path, so a folder named "bench" there is never
        # imported in place of this package
        cmd = [
            sys.executable,
            "-P",
            "-m",
            "bench",
            "sim",
            "serve",
            "--config",
            str(bench),
            "--speed",
            repr(self.speed),
            "--until-stdin-closes",
        ]
        if self.seed is not None:
            cmd += ["--seed", str(self.seed)]
        for f in self.faults:
            cmd += ["--fault", f]
        for key, value in self.cfg.overrides.items():  # e.g. --set simulation.drift_per_hour=0
            if key in BELIEF_ONLY:
                continue
            cmd += ["--set", f"{key}={value}"]
        env = dict(os.environ, PYTHONUNBUFFERED="1")
        # The child's standard input is a pipe nobody writes to: it closes when this process
        # ends, however it ends (even kill -9), and the simulator then stops by itself.
        self._proc = subprocess.Popen(
            cmd, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env
        )
        threading.Thread(target=self._collect_stderr, daemon=True, name="sim-stderr").start()
        wanted = {r for r in ROLES if r in self.cfg.instruments}
        deadline = time.monotonic() + self.start_timeout
        assert self._proc.stdout is not None
        while not wanted <= set(self.resources):
            if time.monotonic() > deadline:
                raise SimulatorError(f"the simulated bench did not start within {self.start_timeout:.0f} s")
            line = self._proc.stdout.readline()
            if not line:
                self._proc.wait(5)
                detail = "".join(self._stderr[-20:]).strip()
                raise SimulatorError(
                    f"the simulated bench stopped at start (exit {self._proc.returncode}): {detail}"
                )
            parts = line.split()
            if len(parts) == 2 and parts[0] in ROLES:
                self.resources[parts[0]] = parts[1]

    def _collect_stderr(self) -> None:
        assert self._proc is not None and self._proc.stderr is not None
        for line in self._proc.stderr:
            self._stderr.append(line)
            del self._stderr[:-200]

    # -- simulator-only access over second connections ----------------------------------------
    def _driver(self, role: str):
        from drivers.registry import open_instrument

        inst = self.cfg.instruments[role]
        return open_instrument(
            role, inst.driver, self.resources[role], inst.profile, inst.timeout, dict(inst.options)
        )

    def truth(self) -> dict[str, float]:
        """The simulator's true state now (``SIM:TRUTH?``); ``t`` is simulated s since start."""
        with self._lock:
            if self._truth_conn is None:
                self._truth_conn = self._driver("detector")
            return self._truth_conn.sim_truth()

    def pump_output_on(self) -> bool:
        """Whether the simulated pump driver's output is on (asked over its own connection)."""
        with self._pump_lock:
            if self._pump_conn is None:
                self._pump_conn = self._driver("pump")
            return self._pump_conn.output_is_on()

    def inject(self, spec: str) -> None:
        """Inject a fault now (``SIM:FAULT``), e.g. ``"interlock+1s"``.

        Each injection goes over a connection of its own, opened for it: a connection kept
        from before may have been closed by an earlier dropped-connection fault, and the
        fault command (which is not safe to resend) would then be lost without a word.
        """
        from drivers.errors import InstrumentError, InstrumentReportedError

        with self._lock:
            conn = self._driver("detector")
            try:
                conn.session.write("sim_fault", spec=spec)
            except InstrumentReportedError as exc:
                # the fault was injected; what it caused at once (e.g. "Input over range")
                # is already in the error queue. Only a refusal of the fault itself is an error.
                if exc.code != 101:
                    raise
            except InstrumentError:
                # a fault of the digitiser itself (slow, garbled, dropped replies) also hits
                # this connection's own error-queue check: the command was sent
                if not spec.split("@")[0].split("+")[0].endswith(":detector"):
                    raise
            finally:
                with contextlib.suppress(Exception):
                    conn.close()

    def close(self) -> None:
        with self._lock, self._pump_lock:
            for conn in (self._truth_conn, self._pump_conn):
                if conn is not None:
                    with contextlib.suppress(Exception):
                        conn.close()
            self._truth_conn = self._pump_conn = None
        proc = self._proc
        if proc is not None and proc.stdin is not None:
            with contextlib.suppress(Exception):
                proc.stdin.close()
        if proc is not None and proc.poll() is None:
            with contextlib.suppress(Exception):
                proc.terminate()  # the simulator switches its pump off and closes
            try:
                proc.wait(10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(5)
        if self._dir is not None:
            with contextlib.suppress(Exception):
                self._dir.cleanup()
            self._dir = None
