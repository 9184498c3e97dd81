"""The exception and warning family for bad input.

Every message names the thing at fault (file, variable, dimension or option), what was found,
what was expected, and how to fix it. Build messages with `InputError.make` so they read alike.
"""

from __future__ import annotations

__all__ = [
    "CalendarError",
    "ConfigError",
    "CoordinateError",
    "GridError",
    "InputError",
    "InputWarning",
    "MissingValueError",
    "TimeStepError",
    "UnitsError",
]


class InputError(ValueError):
    """Something is wrong with the data or the configuration given to westerlies.

    Subclasses say which kind of problem; catch `InputError` to catch them all.
    """

    @classmethod
    def make(cls, where: str, found: str, expected: str, fix: str) -> InputError:
        """Build an error whose message has the four parts every message here has.

        Parameters
        ----------
        where : the file, variable, dimension or option at fault, e.g. "variable 'z500'".
        found : what was found.
        expected : what was expected instead.
        fix : what the caller can do about it.
        """
        return cls(f"{where}: found {found}; expected {expected}. Fix: {fix}")


class CoordinateError(InputError):
    """A coordinate (latitude, longitude, pressure, time, member) is missing or ambiguous."""


class GridError(InputError):
    """The horizontal grid is not a regular latitude-longitude grid, or does not cover a domain."""


class UnitsError(InputError):
    """Units are missing, unknown or inconsistent with the variable."""


class CalendarError(InputError):
    """The calendar or time axis cannot be handled."""


class TimeStepError(InputError):
    """The time step does not suit the diagnostic (sub-daily or monthly data for a daily one)."""


class MissingValueError(InputError):
    """Missing values where a diagnostic cannot take them."""


class ConfigError(InputError):
    """A keyword, option or configuration entry is invalid."""


class InputWarning(UserWarning):
    """Input that westerlies can use, but with an assumption the user should know about."""
