"""The simulated bench served on loopback: model, clock, instruments, servers, faults.

``cfg`` is a parsed bench file (gainbench's ``bench.config.load_bench()`` gives one)::

    with SimulatedBench(cfg, speed=10) as sim:
        sim.resources["detector"]                          # 'TCPIP::127.0.0.1::40123::SOCKET'

Instruments are served for the roles the bench file lists: the SCPI ones (detector, pump,
wavelength) as VISA ``TCPIP::127.0.0.1::PORT::SOCKET`` resources, the shutter controller as a
pyserial ``socket://127.0.0.1:PORT`` URL. Simulated time is a `SimClock` (``speed`` times real
time) from 0 when the bench starts; fault times count from there.

Every command brings the model up to the present before it runs (samples are generated lazily,
when someone asks). A background thread also catches the model up every `KEEP_UP` s of real
time, so that no command ever waits behind a long backlog of samples (the pump driver answers
promptly even while the digitiser acquires at 2 MHz and nobody fetches), and so that faults and
trips take effect on time with no client talking.
"""

from __future__ import annotations

import heapq
import threading
from collections.abc import Iterable

from simulated_instruments.clock import SimClock
from simulated_instruments.device_errors import DEVICE_FAULT, DeviceError
from simulated_instruments.digitiser_device import Digitiser
from simulated_instruments.faults import MODEL_KINDS, Fault, as_fault
from simulated_instruments.lockin_device import LockInDevice
from simulated_instruments.meter_device import Meter
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.pump_device import PumpDriverDevice
from simulated_instruments.scope_device import ScopeDevice
from simulated_instruments.server import HOST, InstrumentServer, ReplyFaults
from simulated_instruments.setup_config import BenchSetup, SimulatorSetupError
from simulated_instruments.shared_state import BenchCore
from simulated_instruments.shutter_device import ShutterController
from simulated_instruments.wavelength_device import WavelengthSource

#: How long `close` waits for each thread.
JOIN_TIMEOUT = 2.0
#: Real seconds between the background catch-ups of the model (see `SimulatedBench`).
KEEP_UP = 0.025
#: The detector's driver (bench file) -> the simulated instrument that serves it; the
#: digitiser for any other driver.


class SimulatedBench:
    """Start the simulated bench (context manager; `close` stops it with the pump off).

    Parameters
    ----------
    cfg : BenchSetup
        A bench file with a ``[simulation]`` table (gainbench's ``load_bench()`` gives the
        built-in one).
    speed : float
        Simulated seconds per real second.
    faults : iterable of Fault or str
        Faults to schedule at start (specs as in `simulated_instruments.faults`).
    seed : int, optional
        Random seed (default: the bench file's ``simulation.seed``).
    """

    def __init__(
        self,
        cfg: BenchSetup,
        *,
        speed: float = 1.0,
        faults: Iterable[Fault | str] = (),
        seed: int | None = None,
    ):
        if cfg.simulation is None:
            raise SimulatorSetupError(f"{cfg.source}: no [simulation] table, so there is nothing to simulate")
        parsed = [as_fault(f) for f in faults]  # bad specs fail before anything starts
        self.cfg = cfg
        self.clock = SimClock(speed)
        self.model = BenchModel(cfg, seed=seed)
        self.core = BenchCore(self.model, self.clock)
        self.lock = self.core.lock
        self.roles = tuple(
            role for role in ("detector", "pump", "shutter", "wavelength") if role in cfg.instruments
        )
        for f in parsed:
            self._check_role(f)
        #: The detector device by the bench file's driver (a digitiser unless it names another).
        detector_devices = {"meter": Meter, "lockin": LockInDevice, "scope": ScopeDevice}
        detector = detector_devices.get(getattr(cfg.instruments.get("detector"), "driver", ""), Digitiser)
        devices = {
            "detector": lambda: detector(self.core, inject=self.inject),
            "pump": lambda: PumpDriverDevice(self.core),
            "shutter": lambda: ShutterController(self.core),
            "wavelength": lambda: WavelengthSource(self.core),
        }
        self._reply_faults = {role: ReplyFaults(self.clock) for role in self.roles}
        self._servers: dict[str, InstrumentServer] = {}
        self._pending: list[tuple[float, int, str, str]] = []  # (time, seq, action, role)
        self._seq = 0
        self._wake = threading.Condition()
        self._closed = False
        self._scheduler = threading.Thread(target=self._run_scheduler, name="sim-faults", daemon=True)
        try:
            for role in self.roles:
                device = devices[role]()
                self._servers[role] = InstrumentServer(
                    role, device.session, self.lock, self._reply_faults[role]
                )
            self._scheduler.start()
            for f in parsed:
                self.inject(f)
        except BaseException:
            self.close()
            raise

    # -- what tests and callers see ----------------------------------------------------------------
    @property
    def resources(self) -> dict[str, str]:
        """role -> VISA resource string (SCPI instruments) or pyserial URL (shutter)."""
        out = {}
        for role, server in self._servers.items():
            if role == "shutter":
                out[role] = f"socket://{HOST}:{server.port}"
            else:
                out[role] = f"TCPIP::{HOST}::{server.port}::SOCKET"
        return out

    def now(self) -> float:
        """Simulated seconds since the bench started."""
        return self.clock.now()

    def truth(self) -> dict[str, float]:
        """The model's true state now (see `BenchModel.truth`); ``t`` is s since the start."""
        with self.lock:
            self.core.sync()
            return self.model.truth()

    def pump_output_on(self) -> bool:
        """Whether the simulated driver's output is on now (what it really does)."""
        with self.lock:
            self.core.sync()
            return self.model.pump_output_on

    def client_count(self, role: str) -> int:
        return self._servers[role].client_count

    # -- faults ---------------------------------------------------------------------------------
    def _check_role(self, fault: Fault) -> None:
        if fault.role not in self.roles:
            raise SimulatorSetupError(
                f"fault {fault.spec()!r}: this bench has no {fault.role} instrument "
                f"(it has: {', '.join(self.roles)})"
            )

    def inject(self, fault: Fault | str) -> None:
        """Schedule a fault at its time (simulated s since start; no time: now)."""
        f = as_fault(fault)
        self._check_role(f)
        with self.lock:
            self.core.sync()
            now = self.model.t
            start = now if f.time is None else max(f.time, now)
            f = Fault(f.kind, f.role, start, f.duration)
            if f.kind in MODEL_KINDS:
                self.model.schedule(f)
                self.core.route_errors()
                self._later(start, "sync", f.role)  # make it visible even with no client talking
                if f.duration is not None:
                    self._later(start + f.duration, "sync", f.role)
            elif f.kind in ("garble", "slow"):
                end = None if f.duration is None else start + f.duration
                self._reply_faults[f.role].add(f.kind, start, end)
            elif f.kind == "error" and start <= now:
                # due now: queued before the injecting command returns, so that the very next
                # command to the instrument meets it (through the scheduler thread it could come late)
                self.core.errors[f.role].push(DEVICE_FAULT)
            else:
                self._later(start, f.kind, f.role)

    def _later(self, t: float, action: str, role: str) -> None:
        with self._wake:
            self._seq += 1
            heapq.heappush(self._pending, (t, self._seq, action, role))
            self._wake.notify()

    def _run_scheduler(self) -> None:
        while True:
            due = None
            with self._wake:
                if self._closed:
                    return
                if self._pending and self.clock.real_seconds_until(self._pending[0][0]) <= 0:
                    _, _, action, role = heapq.heappop(self._pending)
                    due = (action, role)
                else:
                    wait = KEEP_UP
                    if self._pending:
                        wait = min(wait, self.clock.real_seconds_until(self._pending[0][0]))
                    self._wake.wait(wait)
            if due is not None:
                self._act(*due)
            else:
                with self.lock:
                    self.core.sync()

    def _act(self, action: str, role: str) -> None:
        if action == "drop":
            self._servers[role].drop_clients()
            return
        with self.lock:
            self.core.sync()
            if action == "error":
                self.core.errors[role].push(DEVICE_FAULT)

    # -- life cycle -------------------------------------------------------------------------------
    def close(self) -> None:
        """Switch the pump off, stop the servers and the fault thread (idempotent)."""
        with self._wake:
            if self._closed:
                return
            self._closed = True
            self._wake.notify_all()
        with self.lock:
            try:
                self.core.sync()
            finally:
                try:
                    self.model.set_pump(on=False)
                except DeviceError:  # switching off is never refused; keep closing regardless
                    pass
        for server in self._servers.values():
            server.stop()
        for server in self._servers.values():
            server.join(JOIN_TIMEOUT)
        if self._scheduler.is_alive():
            self._scheduler.join(JOIN_TIMEOUT)

    def __enter__(self) -> SimulatedBench:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
