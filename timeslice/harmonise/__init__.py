"""timeslice.harmonise stage."""
