"""Campaigns: property-based fault cases drawn by hypothesis, run in lockstep batches and
checked against the invariants."""
