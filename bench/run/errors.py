"""The error of a live measurement that could not go on."""

from __future__ import annotations

from bench.errors import GainbenchError


class MeasurementError(GainbenchError):
    """A procedure could not be carried out (e.g. no data arrived)."""
