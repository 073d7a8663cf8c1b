"""Series stage: change through the slices, stability and refugia, movement, ensembles,
hindcast checks."""

from __future__ import annotations

from timeslice.series import dispersal, ensemble, hindcast
from timeslice.series.analysis import SeriesResult, analyse_series, change_rows, key_results
from timeslice.series.change import (
    CHANGE_FLAG_MEANINGS,
    CHANGE_FLAG_VALUES,
    bearing_deg,
    centroid,
    change_map,
    novel_mask,
    suitable_area,
)
from timeslice.series.dispersal import movement, parse_rate, reachable
from timeslice.series.ensemble import agreement, partition
from timeslice.series.stability import (
    dynamic_stability,
    geometric_mean,
    minimum_suitability,
    refugium,
    select_window,
    stability,
    static_stability,
)
from timeslice.series.stacking import chains, check_same_grid, stack_slices
from timeslice.series.summary import movement_table, summarise
from timeslice.series.table import DETAIL_COLUMNS, SUMMARY_COLUMNS, change_table

__all__ = [
    "CHANGE_FLAG_MEANINGS",
    "CHANGE_FLAG_VALUES",
    "DETAIL_COLUMNS",
    "SUMMARY_COLUMNS",
    "SeriesResult",
    "agreement",
    "analyse_series",
    "bearing_deg",
    "centroid",
    "chains",
    "change_map",
    "change_rows",
    "change_table",
    "check_same_grid",
    "dispersal",
    "dynamic_stability",
    "ensemble",
    "geometric_mean",
    "hindcast",
    "key_results",
    "minimum_suitability",
    "movement",
    "movement_table",
    "novel_mask",
    "parse_rate",
    "partition",
    "reachable",
    "refugium",
    "select_window",
    "stability",
    "stack_slices",
    "static_stability",
    "suitable_area",
    "summarise",
]
