"""One exception family for every user-facing failure.

The command line turns any :class:`TimesliceError` into one line on stderr and exit
code 2. A message names the file, key or variable, what was expected, what was got,
and what to do.
"""

from __future__ import annotations

__all__ = [
    "ConfigError",
    "DataError",
    "InputFileError",
    "TimesliceError",
    "TimesliceWarning",
    "shorten",
]


class TimesliceError(Exception):
    """Base class of every error the tool reports to a user."""


class ConfigError(TimesliceError):
    """A configuration key or value is missing, misspelled or out of range."""


class InputFileError(TimesliceError):
    """An input file is missing, unreadable or of the wrong format."""


class DataError(TimesliceError):
    """Input data are readable but unusable (wrong units, no overlap, too few records, ...)."""


class TimesliceWarning(UserWarning):
    """Something was repaired or skipped; the run goes on."""


def shorten(text: str, width: int = 300) -> str:
    """`text` on one line, cut at a word boundary to at most `width` characters (with "…").

    Examples
    --------
    >>> shorten("cannot be read as NetCDF because the header is damaged", 30)
    'cannot be read as NetCDF…'
    """
    one = " ".join(str(text).split())
    if len(one) <= width:
        return one
    cut = one[: width - 1]
    space = cut.rfind(" ")
    if space > width // 2:
        cut = cut[:space]
    return cut.rstrip(" ,;:") + "…"
