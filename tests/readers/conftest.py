"""Fixtures writing tiny CF NetCDF files in raw model conventions."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

_FACTORIES = str(Path(__file__).resolve().parents[1] / "harmonise")
if _FACTORIES not in sys.path:
    sys.path.insert(0, _FACTORIES)
from harmonise_factories import model_dataset  # noqa: E402


@pytest.fixture
def model_file(tmp_path):
    def _write(name="m.nc", **kw):
        path = tmp_path / name
        model_dataset(**kw).to_netcdf(path)
        return path

    return _write
