"""A simulated pump-probe bench served on loopback through the device side of real protocols.

Everything here is invented for the demo (the instrument maker, its models, the medium's
numbers come from the bench file); see COMMANDS.md for the instruments' command set.

* `BenchModel` - the whole bench as a deterministic model, used directly (no sockets).
* `SimulatedBench` - the model served as VISA / pyserial resources on 127.0.0.1.
* `parse_fault`, `Fault` - fault specs ``KIND[:ROLE][@TIME][+DURATION]``.
"""

from simulated_instruments.clock import SimClock
from simulated_instruments.device_errors import DeviceError
from simulated_instruments.faults import Fault, parse_fault
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.optical_setup import BenchModel, TruthBlock

__all__ = ["BenchModel", "DeviceError", "Fault", "SimClock", "SimulatedBench", "TruthBlock", "parse_fault"]
