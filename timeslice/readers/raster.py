"""GeoTIFF / ESRI ASCII reader (placeholder until implemented)."""

from __future__ import annotations


def open_raster(path, **kwargs):  # pragma: no cover - replaced by the implementation
    raise NotImplementedError
