"""Whole steps: several kernels run back to back on one state, timed as one call."""
