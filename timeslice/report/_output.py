"""Atomic output files with one-line errors for the usual ways writing fails, the one rule that
turns labels into file names, and figures whose text is drawn as written."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path

from timeslice.errors import InputFileError, write_failure
from timeslice.io import atomic_path, file_stem

__all__ = ["file_stem", "output_path", "save_figure"]

def save_figure(fig, path: str | os.PathLike, *, dpi: int) -> None:
    """Save a matplotlib figure as PNG with every text drawn as written: a ``$`` in a slice label
    is a dollar sign, never the start of a mathematical formula (matplotlib's ``parse_math``).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    path : str or os.PathLike
        The file to write.
    dpi : int
        Resolution, dots per inch.
    """
    import matplotlib
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        text.set_parse_math(False)
    # tick labels made while drawing take the setting from rcParams
    with matplotlib.rc_context({"text.parse_math": False}):
        fig.savefig(path, format="png", dpi=dpi, bbox_inches="tight")


@contextlib.contextmanager
def output_path(path: str | os.PathLike) -> Iterator[Path]:
    """:func:`timeslice.io.atomic_path` that names the output file when writing fails.

    A target that is a folder, a folder that cannot be created or written, a full disk:
    each becomes an :class:`~timeslice.errors.InputFileError` naming the file and what to do;
    any earlier file at `path` stays as it was and no partial file is left behind.

    Parameters
    ----------
    path : str or os.PathLike
        The output file.
    """
    target = Path(path)
    if target.is_dir():
        raise InputFileError(f"{target}: is a folder; give a file name for this output")
    try:
        with atomic_path(target) as tmp:
            yield tmp
    except (OSError, RuntimeError) as err:
        failure = write_failure(target, err)
        if failure is None:
            raise
        raise failure from err
