"""The exceptions gainbench shows to a user.

Every error a user can cause (a bad bench file, a missing run, a refused command) is a
`GainbenchError` whose message already says which file, key or line is wrong and what was
expected; the command line prints that message and exits with status 2, never a traceback.

The root is the drivers' own (`drivers.errors`), which import nothing from gainbench: an
instrument error is a `GainbenchError`, and a driver option or a quantity the drivers refuse is
a `ConfigError`, so ``except GainbenchError`` and ``except ConfigError`` catch them too.
"""

from drivers.errors import DriverConfigError, DriverError

#: An error with a message meant for the person at the bench: the drivers' root, so that
#: every `drivers.errors.InstrumentError` is one.
GainbenchError = DriverError

#: A bench file, a command-line quantity or a spectrum file is not what was expected: the
#: drivers' configuration error, so that a refused driver option or quantity is one.
ConfigError = DriverConfigError


class RunStoreError(GainbenchError):
    """A run file is missing, truncated, foreign or of a newer schema."""


class Terminated(BaseException):
    """The process was asked to end (SIGTERM, or SIGHUP when its terminal closed).

    Raised from the signal handler `bench.cli` installs, so that every ``finally`` and context
    manager runs: the pump output is commanded off and the run file closed, as on Ctrl-C. A
    `BaseException`, like `KeyboardInterrupt`, so that no ``except Exception`` swallows it.
    """

    def __init__(self, signal_name: str) -> None:
        super().__init__(signal_name)
        self.signal_name = signal_name
