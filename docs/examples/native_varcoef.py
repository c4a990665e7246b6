"""``native_varcoef``: the ``varcoef`` column solve compiled from C (native_varcoef.c).

An example of a native column solve: the C file implements the column family's signature
(``kernels/native.py``); this module builds it with ``cc -O3 -march=native`` on first use and
registers it with varcoef's inputs, reference, flop count and tolerance. Load it with
``STRIDEWISE_KERNEL_MODULES=native_varcoef`` and this directory on ``PYTHONPATH``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from kernels import register, thread_count
from kernels.base import Problem, Schedule
from kernels.columns.common import column_view
from kernels.columns.varcoef import VarCoef
from kernels.jit import Compiled
from kernels.native import COLUMN_BLOCKS, COLUMN_CYCLIC, compile_c, native_columns

SOLVE = native_columns(compile_c(Path(__file__).with_suffix(".c")), "native_varcoef")


class NativeVarCoef(VarCoef):
    name = "native_varcoef"
    summary = "the varcoef column solve in C (-O3 -march=native), two columns interleaved, threads from numba"
    schedules = (COLUMN_BLOCKS, COLUMN_CYCLIC)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        views = tuple(column_view(problem.fields[k]) for k in "abcd") + (column_view(problem.output),)
        scratch = np.zeros((thread_count(), 2 * problem.extents.z), problem.dtype)
        return SOLVE, (*views, problem.extents.z, int(schedule.name == COLUMN_CYCLIC.name), scratch)

    def thread_working_set(self, extents: Any, dtype: Any, schedule: Schedule) -> int | None:
        return 2 * extents.z * 6 * np.dtype(dtype).itemsize


register(NativeVarCoef())
