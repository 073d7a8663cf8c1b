"""CF NetCDF climate reader (placeholder until implemented)."""

from __future__ import annotations


def open_climate(path, **kwargs):  # pragma: no cover - replaced by the implementation
    raise NotImplementedError
