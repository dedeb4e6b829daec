"""A simulated pump-probe bench served on loopback through the device side of real protocols.

Everything here is invented for the demo (the instrument maker, its models, the medium's
numbers come from the bench file); see COMMANDS.md for the instruments' command set.

* `BenchModel` - the whole bench as a deterministic model, used directly (no sockets).
* `SimulatedBench` - the model served as VISA / pyserial resources on 127.0.0.1.
* `parse_fault`, `Fault` - fault specs ``KIND[:ROLE][@TIME][+DURATION]``.
* `BenchSetup`, `SimulatorSetupError` - what the simulator reads of a bench file, and the error
  it raises when it cannot run it (`setup_config`). The package imports nothing from ``bench``.
"""

from simulated_instruments.clock import SimClock
from simulated_instruments.device_errors import DeviceError
from simulated_instruments.faults import Fault, parse_fault
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.optical_setup import BenchModel, TruthBlock
from simulated_instruments.setup_config import BenchSetup, SimulatorSetupError

__all__ = [
    "BenchModel",
    "BenchSetup",
    "DeviceError",
    "Fault",
    "SimClock",
    "SimulatedBench",
    "SimulatorSetupError",
    "TruthBlock",
    "parse_fault",
]
