"""Transfer stage: project a fitted niche model onto prepared slices and measure novelty."""

from __future__ import annotations

from timeslice.transfer.metrics import (
    NoveltyMetric,
    OutputLayer,
    register_metric,
    registered_metrics,
    unregister_metric,
)
from timeslice.transfer.novelty import ExDet, Mess, combined, exdet, mess
from timeslice.transfer.project import auto_chunks, project, project_slice
from timeslice.transfer.reference import ReferenceSet, reference_table
from timeslice.transfer.scheduler import get_client, scheduler, set_chunk_cache

__all__ = [
    "ExDet",
    "Mess",
    "NoveltyMetric",
    "OutputLayer",
    "ReferenceSet",
    "auto_chunks",
    "combined",
    "exdet",
    "get_client",
    "mess",
    "project",
    "project_slice",
    "reference_table",
    "register_metric",
    "registered_metrics",
    "scheduler",
    "set_chunk_cache",
    "unregister_metric",
]
