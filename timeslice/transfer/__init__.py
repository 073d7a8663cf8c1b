"""Transfer stage: project a fitted niche model onto prepared slices and measure novelty."""

from __future__ import annotations

from timeslice.transfer.novelty import ReferenceSet, combined, exdet, mess, reference_table
from timeslice.transfer.project import auto_chunks, project, project_slice

__all__ = [
    "ReferenceSet",
    "auto_chunks",
    "combined",
    "exdet",
    "mess",
    "project",
    "project_slice",
    "reference_table",
]
