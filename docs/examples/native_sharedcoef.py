"""``native_sharedcoef``: the ``sharedcoef`` column solve compiled from C (native_sharedcoef.c).

The shared-system signature of ``kernels/native.py`` (``native_shared_columns``): a, b, c have var
extent 1, d and x every variable, all as the seven-axis views of ``shared_view``. Built with
``cc -O3 -march=native`` on first use; load it with ``STRIDEWISE_KERNEL_MODULES=native_sharedcoef``
and this directory on ``PYTHONPATH``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from kernels import register, thread_count
from kernels.base import Problem, Schedule
from kernels.columns.common import shared_view
from kernels.columns.sharedcoef import SharedCoef
from kernels.jit import Compiled
from kernels.native import COLUMN_BLOCKS, COLUMN_CYCLIC, compile_c, native_shared_columns

SOLVE = native_shared_columns(compile_c(Path(__file__).with_suffix(".c")), "native_sharedcoef")


class NativeSharedCoef(SharedCoef):
    name = "native_sharedcoef"
    summary = "the sharedcoef column solve in C (-O3 -march=native): one factorisation per column, every variable substituted"
    schedules = (COLUMN_BLOCKS, COLUMN_CYCLIC)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        views = tuple(shared_view(problem.fields[k]) for k in "abcd") + (shared_view(problem.output),)
        ext = np.array(views[3].shape + views[0].shape, dtype=np.int64)  # d's seven extents, then a's
        scratch = np.zeros((thread_count(), 2 * problem.extents.z), problem.dtype)
        return SOLVE, (*views, ext, problem.extents.z, problem.extents.var, int(schedule.name == COLUMN_CYCLIC.name), scratch)

    def thread_working_set(self, extents: Any, dtype: Any, schedule: Schedule) -> int | None:
        return extents.z * (2 + 5) * np.dtype(dtype).itemsize


register(NativeSharedCoef())
