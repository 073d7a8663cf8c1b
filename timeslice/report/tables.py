"""Tables: atomic CSV writing and small helpers shared by the report."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from timeslice.errors import DataError, InputFileError
from timeslice.report._output import output_path

__all__ = ["write_csv"]


def write_csv(df: pd.DataFrame, path: str | os.PathLike, *, float_format: str | None = None) -> Path:
    """Write `df` as UTF-8 CSV (no index) to a temporary file and rename it onto `path`.

    Parameters
    ----------
    df : pandas.DataFrame
        The table; its columns become the header row.
    path : path-like
        Target file.
    float_format : str, optional
        printf-style format for floats (default: full precision, so values round-trip).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"write_csv: expected a pandas.DataFrame for {path}, got {type(df).__name__}")
    target = Path(path)
    if target.is_dir():
        raise InputFileError(f"{target}: is a folder; give a file name ending in .csv")
    with output_path(target) as tmp:
        df.to_csv(tmp, index=False, float_format=float_format, encoding="utf-8", lineterminator="\n")
    return target
