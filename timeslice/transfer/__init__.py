"""Transfer stage: project a fitted niche model onto prepared slices and measure novelty."""

from __future__ import annotations

from timeslice.transfer.novelty import ReferenceSet, combined, exdet, mess, reference_table
from timeslice.transfer.project import auto_chunks, project, project_slice
from timeslice.transfer.scheduler import get_client, scheduler, set_chunk_cache

__all__ = [
    "ReferenceSet",
    "auto_chunks",
    "combined",
    "exdet",
    "get_client",
    "mess",
    "project",
    "project_slice",
    "reference_table",
    "scheduler",
    "set_chunk_cache",
]
