"""Niche stage: records, calibration area, background, screening, estimators, evaluation."""

from __future__ import annotations

from timeslice.niche.data import (
    calibration_area,
    calibration_area_from_mask,
    clean_records,
    extract,
    read_background_file,
    sample_background,
    thin,
)
from timeslice.niche.evaluate import auc, boyce, cross_validate, spatial_folds, threshold, tss
from timeslice.niche.models import MODEL_NAMES, EllipsoidNiche, EnvelopeNiche, make_model
from timeslice.niche.persist import load_model, save_model
from timeslice.niche.select import screen
from timeslice.niche.workflow import NicheFit, fit_niche

__all__ = [
    "MODEL_NAMES",
    "EllipsoidNiche",
    "EnvelopeNiche",
    "NicheFit",
    "auc",
    "boyce",
    "calibration_area",
    "calibration_area_from_mask",
    "clean_records",
    "cross_validate",
    "extract",
    "fit_niche",
    "load_model",
    "make_model",
    "read_background_file",
    "sample_background",
    "save_model",
    "screen",
    "spatial_folds",
    "thin",
    "threshold",
    "tss",
]
