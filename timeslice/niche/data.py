"""Records to model inputs: cleaning, spatial thinning, calibration area, background, extraction.

One import place for the record and area steps, which live in
:mod:`timeslice.niche.records` (cleaning and the taxon choice), :mod:`timeslice.niche.spatial`
(geometry on the sphere, cell look-up, thinning) and :mod:`timeslice.niche.area` (calibration
area, background, values at points).
"""

from __future__ import annotations

from timeslice.niche.area import (
    calibration_area,
    calibration_area_from_mask,
    extract,
    read_background_file,
    sample_background,
)
from timeslice.niche.records import (
    BASIS_KINDS,
    CLEANING_REASONS,
    CONDITIONAL_REASONS,
    INVALID_COORDINATE_FLAGS,
    RECORD_REASONS,
    basis_kind,
    centroid_like,
    clean_records,
    dated_fossils,
    select_taxon,
    taxon_name,
)
from timeslice.niche.spatial import land_of, parse_thin, thin

__all__ = [
    "BASIS_KINDS",
    "CLEANING_REASONS",
    "CONDITIONAL_REASONS",
    "INVALID_COORDINATE_FLAGS",
    "RECORD_REASONS",
    "basis_kind",
    "calibration_area",
    "calibration_area_from_mask",
    "centroid_like",
    "clean_records",
    "dated_fossils",
    "extract",
    "land_of",
    "parse_thin",
    "read_background_file",
    "sample_background",
    "select_taxon",
    "taxon_name",
    "thin",
]
