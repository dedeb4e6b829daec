"""Instrument drivers: sans-I/O protocol code apart from pyvisa / pyserial transports.

The package imports nothing from the application that uses it. Layers, from the wire up (each
module has one job):

- `drivers.transports` holds the transports, the only code that touches I/O:
  `drivers.transports.base` (the interface, the registry, the choice from the resource string),
  `drivers.transports.visa` (pyvisa), `drivers.transports.serial` (pyserial), and the sans-I/O
  framing both use, `drivers.transports.line_buffer`.
- `drivers.ieee488` parses IEEE 488.2 replies (definite-length blocks, numbers,
  ``SYST:ERR?``, ``*IDN?``) without I/O; `drivers.codec` applies a profile's commands.
- `drivers.profile` reads command profiles (TOML, built-in ones in ``drivers/profiles/``);
  `drivers.roles` lists the operations of each role.
- `drivers.session` is the exchange loop: retry policy, error-queue drain, stats.
- `drivers.instruments` holds the role drivers, one module each (digitiser, pump, shutter,
  wavelength), on `drivers.base.Driver`; `drivers.registry` finds them by scanning that
  package, and `drivers.registry.open_instrument` builds one from a bench file's entry.
- `drivers.errors` holds the typed errors (root `DriverError`, `DriverConfigError` for bad
  profiles and options) and the one function that translates transport exceptions into them;
  `drivers.units` reads quantities with units (the one pint registry).
"""
