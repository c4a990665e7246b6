"""``native_levelcoef``: the ``levelcoef`` column solve compiled from C (native_levelcoef.c).

The per-level form of the column family's C signature (``kernels/native.py``): ``a``, ``b``, ``c``
are the nz values of the one matrix every column shares. The module builds the C file with
``cc -O3 -march=native`` on first use and registers it with levelcoef's inputs, reference and
tolerance. Load it with ``STRIDEWISE_KERNEL_MODULES=native_levelcoef`` and this directory on
``PYTHONPATH``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from kernels import register, thread_count
from kernels.base import Problem, Schedule
from kernels.columns.common import column_view
from kernels.columns.levelcoef import LevelCoef
from kernels.grid import Extents
from kernels.jit import Compiled
from kernels.native import COLUMN_BLOCKS, COLUMN_CYCLIC, compile_c, native_columns

SOLVE = native_columns(compile_c(Path(__file__).with_suffix(".c")), "native_levelcoef")


class NativeLevelCoef(LevelCoef):
    name = "native_levelcoef"
    summary = "the levelcoef column solve in C (-O3 -march=native): one factorisation per call, two columns at a time"
    schedules = (COLUMN_BLOCKS, COLUMN_CYCLIC)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        coefficients = tuple(problem.arrays[k] for k in "abc")
        d, x = column_view(problem.fields["d"]), column_view(problem.output)
        scratch = np.zeros((thread_count(), 2 * problem.extents.z), problem.dtype)
        return SOLVE, (*coefficients, d, x, problem.extents.z, int(schedule.name == COLUMN_CYCLIC.name), scratch)

    def flops(self, extents: Extents) -> int:
        """levelcoef's count: one factorisation (the library repeats it once per call, at most
        once per thread or per 64 columns: a few per cent at most, not counted)."""
        return super().flops(extents)

    def thread_working_set(self, extents: Any, dtype: Any, schedule: Schedule) -> int | None:
        return 2 * extents.z * 4 * np.dtype(dtype).itemsize


register(NativeLevelCoef())
