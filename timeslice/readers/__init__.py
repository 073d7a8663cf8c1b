"""Readers: files to canonical xarray Datasets and pandas DataFrames.

The names below are imported on first use, so importing one reader module (or the file-set
helpers at config load) does not import the others.
"""

from __future__ import annotations

import importlib

__all__ = ["open_climate", "open_raster", "read_dated_records", "read_occurrences"]

_HOMES = {
    "open_climate": "timeslice.readers.climate",
    "open_raster": "timeslice.readers.raster",
    "read_dated_records": "timeslice.readers.occurrences",
    "read_occurrences": "timeslice.readers.occurrences",
}


def __getattr__(name: str):
    if name in _HOMES:
        return getattr(importlib.import_module(_HOMES[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
