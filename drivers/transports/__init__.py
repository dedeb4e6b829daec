"""Transports: the only code that touches I/O.

`drivers.transports.base` holds the interface, the registry and the choice of a transport from
the resource string; `drivers.transports.visa` (pyvisa) and `drivers.transports.serial`
(pyserial) are the transports; `drivers.transports.line_buffer` is their shared sans-I/O
framing of reply lines and binary blocks.
"""
