"""Series stage: change through the slices, stability and refugia, movement, ensembles,
hindcast checks."""

from __future__ import annotations

from timeslice.series.change import (
    CHANGE_FLAG_MEANINGS,
    CHANGE_FLAG_VALUES,
    SUMMARY_COLUMNS,
    centroid,
    change_map,
    change_table,
    suitable_area,
)
from timeslice.series.stability import (
    geometric_mean,
    minimum_suitability,
    refugium,
    stability,
    static_stability,
)
from timeslice.series.summary import summarise

__all__ = [
    "CHANGE_FLAG_MEANINGS",
    "CHANGE_FLAG_VALUES",
    "SUMMARY_COLUMNS",
    "centroid",
    "change_map",
    "change_table",
    "geometric_mean",
    "minimum_suitability",
    "refugium",
    "stability",
    "static_stability",
    "suitable_area",
    "summarise",
]
