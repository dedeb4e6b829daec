"""The QS-2 shutter controller (role ``shutter``), bound to the shared bench core."""

from __future__ import annotations

from simulated_instruments.shared_state import BenchCore
from simulated_instruments.shutter_protocol import ShutterSession


class ShutterController:
    """The shutters' hardware side for `ShutterSession` (positions live in the model)."""

    def __init__(self, core: BenchCore):
        self.core = core

    def session(self) -> ShutterSession:
        return ShutterSession(self, before=self.core.sync)

    def set_open(self, shutter: int, is_open: bool) -> None:
        self.core.model.set_shutter(shutter, open=is_open)

    def is_open(self, shutter: int) -> bool:
        return self.core.model.shutter_open(shutter)

    def chop(self, shutter: int, hz: float) -> None:
        self.core.model.set_shutter(shutter, chop_hz=hz)
