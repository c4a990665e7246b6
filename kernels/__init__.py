"""stridewise kernels: the layout model, state storage and the compiled kernels.

This package never imports ``harness``.
"""

from kernels.errors import KernelError, LayoutError, StridewiseError
from kernels.grid import LOGICAL_AXES, SUPPORTED_DTYPES, Extents
from kernels.layout import Layout, paddings, parse_layout, permutations, tilings
from kernels.state import State

__all__ = [
    "LOGICAL_AXES",
    "SUPPORTED_DTYPES",
    "Extents",
    "KernelError",
    "Layout",
    "LayoutError",
    "State",
    "StridewiseError",
    "paddings",
    "parse_layout",
    "permutations",
    "tilings",
]
