"""timeslice.niche stage."""
