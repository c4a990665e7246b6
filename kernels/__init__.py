"""stridewise kernels: the layout model, state storage and the compiled kernels.

What a kernel author needs is importable from here: ``from kernels import Stencil, row_walk,
inline, register``. The compiled parts (numba) load on first use, so importing the layout model
stays cheap. This package never imports ``harness``.
"""

from importlib import import_module
from typing import Any

from kernels.errors import KernelError, LayoutError, StridewiseError
from kernels.grid import LOGICAL_AXES, SUPPORTED_DTYPES, Extents
from kernels.families import paddings, permutations, tilings
from kernels.layout import Layout
from kernels.notation import parse_layout
from kernels.state import State

#: Names served lazily, and the module each comes from.
_LAZY = {
    "Kernel": "kernels.base", "Problem": "kernels.base", "Schedule": "kernels.base", "Validation": "kernels.base",
    "Compiled": "kernels.jit", "build": "kernels.jit", "inline": "kernels.jit",
    "register": "kernels.registry", "get_kernel": "kernels.registry", "all_kernels": "kernels.registry",
    "thread_count": "kernels.parallel",
    "Stencil": "kernels.stencils.common", "row_walk": "kernels.stencils.common",
    "ColumnSolve": "kernels.columns.common",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'kernels' has no attribute '{name}'")


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
    *_LAZY,
]
