"""The public names of timeslice.report."""

from __future__ import annotations

import importlib

import timeslice.report as report


def test_all_is_sorted_and_complete():
    assert report.__all__ == sorted(report.__all__)
    for mod in ("geotiff", "html", "manifest", "maps", "netcdf", "plots", "tables"):
        sub = importlib.import_module(f"timeslice.report.{mod}")
        for name in sub.__all__:
            if name.isupper() and name not in report.__all__:
                continue  # module constants stay in their module
            assert name in report.__all__, f"{mod}.{name} is not re-exported"
            assert getattr(report, name) is getattr(sub, name)
