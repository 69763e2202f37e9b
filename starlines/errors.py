"""Exceptions and warnings of starlines.

Every error the package raises on purpose derives from :class:`StarlinesError`, so a batch
driver can catch one class, record the one-line message against the file, and go on with
the rest of the night.
"""

from __future__ import annotations

__all__ = [
    "StarlinesError",
    "InputFormatError",
    "MeasurementError",
    "ClassificationError",
    "VelocityError",
    "ArchiveError",
    "ConfigError",
    "StarlinesWarning",
]


class StarlinesError(Exception):
    """Base class of all starlines errors.

    Parameters
    ----------
    message : str
        One line: what went wrong and why.
    path : str, optional
        The file the error concerns; it is prefixed to the message.
    partial : object, optional
        Whatever was computed before the failure (for example a partly filled result row).
    """

    def __init__(self, message: str, *, path: str | None = None, partial: object = None):
        self.path = None if path is None else str(path)
        self.reason = message
        self.partial = partial
        super().__init__(f"{self.path}: {message}" if self.path else message)


class InputFormatError(StarlinesError):
    """A spectrum file cannot be read or does not hold a usable spectrum."""


class MeasurementError(StarlinesError):
    """Lines cannot be measured (for example no catalogue line falls in the spectrum)."""


class ClassificationError(StarlinesError):
    """A spectrum cannot be placed on the MK grid honestly."""


class VelocityError(StarlinesError):
    """A radial velocity cannot be measured or corrected."""


class ArchiveError(StarlinesError):
    """The archive database is missing, foreign, corrupt or locked."""


class ConfigError(StarlinesError):
    """An option, a target list or a configuration file is invalid."""


class StarlinesWarning(UserWarning):
    """Something was assumed or degraded but the result is still usable."""
