"""timeslice.report: CF NetCDF, GeoTIFF, CSV tables, maps, plots, the HTML report and the
run manifest."""

from __future__ import annotations

from timeslice.report.geotiff import check_regular, export, export_file, north_up_transform
from timeslice.report.html import (
    DEFAULT_CAUTIONS,
    ReportContext,
    key_numbers,
    render_report,
    write_report,
)
from timeslice.report.manifest import hash_file, package_versions, read_manifest, write_manifest
from timeslice.report.maps import (
    CHANGE_COLOURS,
    EXDET_COLOURS,
    FLAG_COLOURS,
    REACH_COLOURS,
    agreement_map,
    change_map,
    dominant_source_map,
    most_dissimilar_map,
    novelty_map,
    reach_map,
    series_panel,
    slice_maps,
    stability_map,
)
from timeslice.report.netcdf import open_series, prepare_cf, restore_series, write_series
from timeslice.report.plots import (
    area_through_time,
    centroid_track,
    gain_loss_bars,
    importance_bars,
    response_curves,
    shift_plot,
    threshold_plot,
)
from timeslice.report.tables import write_csv

__all__ = [
    "CHANGE_COLOURS",
    "DEFAULT_CAUTIONS",
    "EXDET_COLOURS",
    "FLAG_COLOURS",
    "REACH_COLOURS",
    "ReportContext",
    "agreement_map",
    "area_through_time",
    "centroid_track",
    "change_map",
    "check_regular",
    "dominant_source_map",
    "export",
    "export_file",
    "gain_loss_bars",
    "hash_file",
    "importance_bars",
    "key_numbers",
    "most_dissimilar_map",
    "north_up_transform",
    "novelty_map",
    "open_series",
    "package_versions",
    "prepare_cf",
    "reach_map",
    "read_manifest",
    "render_report",
    "response_curves",
    "restore_series",
    "series_panel",
    "shift_plot",
    "slice_maps",
    "stability_map",
    "threshold_plot",
    "write_csv",
    "write_manifest",
    "write_report",
    "write_series",
]
