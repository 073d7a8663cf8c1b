"""Readers: files to canonical xarray Datasets and pandas DataFrames."""

from __future__ import annotations

from timeslice.readers.netcdf import open_climate
from timeslice.readers.occurrences import read_dated_records, read_occurrences
from timeslice.readers.raster import open_raster

__all__ = ["open_climate", "open_raster", "read_dated_records", "read_occurrences"]
