"""Exception types that map onto the CLI's exit codes.

Every error that reaches a user is one of these; the CLI prints ``str(exc)`` on one line
and exits with ``exc.exit_code``. Anything else is a bug and shows a traceback.
"""

from __future__ import annotations

__all__ = [
    "CrossflockError",
    "ConfigError",
    "InputError",
    "NumericalError",
    "CheckFailed",
    "NotBuiltError",
]


class CrossflockError(Exception):
    """Base class of crossflock's user-facing errors."""

    exit_code = 2


class ConfigError(CrossflockError, ValueError):
    """A config key is missing, unknown, of the wrong type or out of range."""

    exit_code = 2


class InputError(CrossflockError, ValueError):
    """A file or command-line argument cannot be used (missing, foreign, corrupt)."""

    exit_code = 2


class NotBuiltError(CrossflockError):
    """A command whose engine or feature has not been built yet."""

    exit_code = 2


class NumericalError(CrossflockError, ArithmeticError):
    """A run diverged (NaN/Inf, negative density, blow-up).

    Attributes
    ----------
    time : float
        Simulated time of the failure.
    last_good : object
        Whatever the engine kept of the last good state (an ``xarray.Dataset`` or None).
    """

    exit_code = 3

    def __init__(self, message: str, time: float = float("nan"), last_good=None):
        super().__init__(message)
        self.time = time
        self.last_good = last_good


class CheckFailed(CrossflockError):
    """A statistical check or a verdict failed (exit code 1)."""

    exit_code = 1
