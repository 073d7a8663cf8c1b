"""Atomic output writing: write to a temporary name in the target folder, rename when done; the
one rule that turns a label into a file name."""

from __future__ import annotations

import contextlib
import os
import re
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "file_stem", "writable_folder"]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside `path`; rename it onto `path` when the block succeeds.

    A failure (or a kill) leaves any previous file at `path` untouched; the temporary file is
    removed on an exception.

    Parameters
    ----------
    path : str or os.PathLike
        The file to write.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    # mkstemp creates 0600 files; outputs get the permissions of an ordinary new file
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp_path, 0o666 & ~umask)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


_NOT_IN_NAMES = re.compile(r"[^A-Za-z0-9._-]+")


def file_stem(text: str) -> str:
    """The file-name part for a label: runs of characters other than ASCII letters, digits,
    ``.``, ``_`` and ``-`` become one ``_`` (so no folder separator, colon or space reaches a
    path), without leading or trailing ``_``; ``"unnamed"`` if nothing is left.

    Every output named after a slice label, layer or model uses this one function, and the
    config refuses labels whose stems coincide (:meth:`timeslice.config.Config.slice_specs`).

    Parameters
    ----------
    text : str
        A slice label, layer or model name.

    Examples
    --------
    >>> file_stem("21ka/a"), file_stem("21ka:a"), file_stem("..")
    ('21ka_a', '21ka_a', 'unnamed')
    """
    stem = _NOT_IN_NAMES.sub("_", str(text)).strip("_") or "unnamed"
    # "." and ".." are folders, not names
    return stem if stem.strip(".") else "unnamed"


def writable_folder(path: str | os.PathLike, *, what: str = "--out") -> Path:
    """Create `path` if needed and check it is a writable folder; one-line error naming `what`.

    Parameters
    ----------
    path : str or os.PathLike
        The folder.
    what : str
        The option or key named in the error.

    Raises
    ------
    timeslice.errors.InputFileError
        The path is a file, cannot be created, or is not writable.
    """
    from timeslice.errors import InputFileError

    out = Path(path)
    if out.exists() and not out.is_dir():
        raise InputFileError(f"{what} {str(out)!r} is a file; give a folder path")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise InputFileError(
            f"{what} {str(out)!r}: cannot create the folder ({err.strerror or err}); choose a "
            "writable folder") from err
    if not os.access(out, os.W_OK):
        raise InputFileError(f"{what} {str(out)!r}: the folder is not writable; choose another")
    return out

