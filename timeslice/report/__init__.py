"""timeslice.report stage."""
