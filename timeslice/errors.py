"""One exception family for every user-facing failure.

The command line turns any :class:`TimesliceError` into one line on stderr and exit
code 2. A message names the file, key or variable, what was expected, what was got,
and what to do.
"""

from __future__ import annotations

import errno
import os
import shutil
from pathlib import Path

__all__ = [
    "ConfigError",
    "DataError",
    "InputFileError",
    "TimesliceError",
    "TimesliceWarning",
    "shorten",
    "write_failure",
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

    Parameters
    ----------
    text : str
        Any message.
    width : int
        Largest length kept.

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


#: Text by which the netCDF-C and HDF5 libraries report a write that failed on the disk (a full
#: disk shows up as "NetCDF: HDF error" rather than as an OS error number).
_LIBRARY_WRITE_ERRORS = ("HDF error", "NetCDF: ", "Write failed", "No space left")


def _free_space(path: Path) -> str:
    """', N MB free on that disk' for the nearest existing folder of `path`, or ''."""
    folder = path
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return ""
    return f", {free / 2**20:.1f} MB free on that disk"


def write_failure(target: str | os.PathLike, err: BaseException, *,
                  what: str = "") -> InputFileError | None:
    """The one-line :class:`InputFileError` for a failed write of `target`, or None when `err`
    is not a write failure (a programming error must not be disguised as one).

    A full disk, a read-only or forbidden folder, and the netCDF/HDF5 libraries' own write
    errors each get the file, the cause and what to do. `what` follows "could not write" (with
    its leading space), e.g. ``" the stage cache entry"``.

    Parameters
    ----------
    target : str or os.PathLike
        The file that could not be written.
    err : BaseException
        The error met.
    what : str
        What was being written (follows "could not write").

    Examples
    --------
    >>> e = write_failure("/out/series.nc", OSError(errno.EROFS, "Read-only file system"))
    >>> str(e).startswith("/out/series.nc: could not write (Read-only file system)")
    True
    """
    path = Path(target)
    if isinstance(err, OSError) and err.errno is not None:
        if err.errno in (errno.ENOSPC, errno.EDQUOT):
            hint = f"free some disk space{_free_space(path)} and run again"
        elif err.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
            hint = "choose an output folder you can write to (-o/--out)"
        elif err.errno == errno.ENAMETOOLONG:
            hint = "use shorter names (slice labels, output folder)"
        else:
            hint = "check the output folder and run again"
        cause = err.strerror or str(err)
        return InputFileError(shorten(f"{path}: could not write{what} ({cause}); {hint}"))
    text = str(err)
    if isinstance(err, (OSError, RuntimeError)) and any(k in text for k in _LIBRARY_WRITE_ERRORS):
        return InputFileError(shorten(
            f"{path}: could not write{what} ({shorten(text, 80)}), most often a full disk"
            f"{_free_space(path)}; free disk space or choose another output folder (-o/--out), "
            "then run again"))
    return None
