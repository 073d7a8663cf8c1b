"""Niche stage: records, calibration area, background, screening, estimators, evaluation."""

from __future__ import annotations

from timeslice.niche.data import (
    CLEANING_REASONS,
    calibration_area,
    calibration_area_from_mask,
    clean_records,
    extract,
    read_background_file,
    sample_background,
    thin,
)
from timeslice.niche.evaluate import (
    THRESHOLD_RULES,
    auc,
    boyce,
    cross_validate,
    omission,
    spatial_folds,
    threshold,
    training_scores,
    tss,
)
from timeslice.niche.learners import EnsembleNiche, ForestNiche, PointProcessNiche, SplineNiche
from timeslice.niche.models import MODEL_NAMES, EllipsoidNiche, EnvelopeNiche, make_model
from timeslice.niche.persist import load_model, save_model
from timeslice.niche.select import screen, vif
from timeslice.niche.workflow import MIN_RECORDS, NicheFit, fit_niche, permutation_table, response_curves

__all__ = [
    "CLEANING_REASONS",
    "EllipsoidNiche",
    "EnsembleNiche",
    "EnvelopeNiche",
    "ForestNiche",
    "MIN_RECORDS",
    "MODEL_NAMES",
    "NicheFit",
    "PointProcessNiche",
    "SplineNiche",
    "THRESHOLD_RULES",
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
    "omission",
    "permutation_table",
    "read_background_file",
    "response_curves",
    "sample_background",
    "save_model",
    "screen",
    "spatial_folds",
    "thin",
    "threshold",
    "training_scores",
    "tss",
    "vif",
]
