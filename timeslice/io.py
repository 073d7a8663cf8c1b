"""Atomic output writing: write to a temporary name in the target folder, rename when done."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path"]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside `path`; rename it onto `path` when the block succeeds.

    A failure (or a kill) leaves any previous file at `path` untouched; the temporary file is
    removed on an exception.
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
