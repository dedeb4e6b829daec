"""Instrument drivers: sans-I/O protocol code apart from pyvisa / pyserial transports."""
