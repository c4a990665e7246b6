"""``native_laplacian``: the ``laplacian`` kernel's stencil compiled from C (native_laplacian.c).

An example of bringing a compiled kernel: the C file implements the stencil family's row-walk
signature (``kernels/native.py``); this module builds it with ``cc -O3 -march=native`` on first
use and registers it with the Laplacian's reference, flop count and tolerance. Load it with
``STRIDEWISE_KERNEL_MODULES=native_laplacian`` and this directory on ``PYTHONPATH``.
"""

from __future__ import annotations

from pathlib import Path

from kernels import register
from kernels.native import compile_c, native_walk
from kernels.stencils.laplacian import Laplacian


class NativeLaplacian(Laplacian):
    name = "native_laplacian"
    summary = "the laplacian kernel's 5-point stencil in C (-O3 -march=native), threads from numba"
    walk = native_walk(compile_c(Path(__file__).with_suffix(".c")), "native_laplacian")


register(NativeLaplacian())
