"""Instrument drivers: sans-I/O protocol code apart from pyvisa / pyserial transports.

Layers, from the wire up (each module has one job):

- `drivers.transport` picks a transport from the resource string; `drivers.transport_visa`
  (pyvisa) and `drivers.transport_serial` (pyserial) are the only code that touches I/O.
- `drivers.ieee488` parses IEEE 488.2 replies (definite-length blocks, numbers,
  ``SYST:ERR?``, ``*IDN?``) without I/O; `drivers.codec` applies a profile's commands.
- `drivers.profile` reads command profiles (TOML, built-in ones in ``drivers/profiles/``);
  `drivers.roles` lists the operations of each role.
- `drivers.session` is the exchange loop: retry policy, error-queue drain, stats.
- `drivers.digitiser`, `drivers.pump`, `drivers.shutter`, `drivers.wavelength` are the role
  drivers; `drivers.registry.open_instrument` builds one from a bench file's entry.
- `drivers.errors` holds the typed errors and the one function that translates transport
  exceptions into them.
"""
