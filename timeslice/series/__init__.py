"""timeslice.series stage."""
