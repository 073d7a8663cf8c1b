"""Harmonise stage: one grid, one variable set, one land mask per slice."""

from __future__ import annotations

from timeslice.harmonise.bioclim import BIO_NAMES, from_monthly
from timeslice.harmonise.downscale import anomalies, delta
from timeslice.harmonise.interpolate import between
from timeslice.harmonise.landmask import STANDARD_LAPSE_RATE, fill_exposed, land_mask
from timeslice.harmonise.prepare import prepare_slice, write_prepared
from timeslice.harmonise.regrid import regrid
from timeslice.harmonise.report import input_table

__all__ = [
    "BIO_NAMES",
    "STANDARD_LAPSE_RATE",
    "anomalies",
    "between",
    "delta",
    "fill_exposed",
    "from_monthly",
    "input_table",
    "land_mask",
    "prepare_slice",
    "regrid",
    "write_prepared",
]
