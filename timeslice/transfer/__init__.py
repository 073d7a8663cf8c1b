"""timeslice.transfer stage."""
