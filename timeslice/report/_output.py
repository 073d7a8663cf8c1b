"""Atomic output files with one-line errors for the usual ways writing fails."""

from __future__ import annotations

import contextlib
import errno
import os
from collections.abc import Iterator
from pathlib import Path

from timeslice.errors import InputFileError
from timeslice.io import atomic_path

__all__ = ["output_path"]


@contextlib.contextmanager
def output_path(path: str | os.PathLike) -> Iterator[Path]:
    """:func:`timeslice.io.atomic_path` that names the output file when writing fails.

    A target that is a folder, a folder that cannot be created or written, a full disk:
    each becomes an :class:`~timeslice.errors.InputFileError` naming the file and what to do;
    any earlier file at `path` stays as it was and no partial file is left behind.
    """
    target = Path(path)
    if target.is_dir():
        raise InputFileError(f"{target}: is a folder; give a file name for this output")
    try:
        with atomic_path(target) as tmp:
            yield tmp
    except OSError as err:
        if err.errno == errno.ENOSPC:
            hint = "free some disk space and run again"
        elif err.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
            hint = "choose an output folder you can write to (-o/--out)"
        else:
            hint = "check the output folder and run again"
        raise InputFileError(f"{target}: could not write ({err.strerror or err}); {hint}") from err
