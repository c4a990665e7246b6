"""Pointwise kernels: work at one grid point that reads many variables (column physics)."""
