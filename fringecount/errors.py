"""Exceptions that carry a one-line, user-facing message: the problem and the fix.

The CLI prints ``str(error)`` on one line and exits non-zero; the library raises
these for bad input so callers can catch a single base class.
"""

from __future__ import annotations

__all__ = [
    "FringecountError",
    "InputError",
    "ClipError",
    "SettingsError",
    "UnitError",
    "NoFringesError",
    "ResultExistsError",
]


class FringecountError(Exception):
    """Base class for every error fringecount raises on purpose."""

    exit_code = 2


class InputError(FringecountError, ValueError):
    """Bad input: a missing file, a wrong value, an option that cannot apply."""


class ClipError(InputError):
    """A recording that cannot be read: missing, empty, truncated or corrupt."""


class SettingsError(InputError):
    """Settings that do not fit the recording (ROI off the frame, absurd fps...)."""


class UnitError(InputError):
    """A quantity given without a unit, or with a unit of the wrong kind."""


class NoFringesError(InputError):
    """The recording shows no fringes that can be followed."""


class ResultExistsError(FringecountError, FileExistsError):
    """A result folder already holds a result; pass ``force`` to replace it."""

    exit_code = 3
