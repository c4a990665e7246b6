"""Test-only kernel: the Laplacian doing a set fraction of extra work (the side-by-side gate's knob).

A copy of this module sits beside each version's kernels/ in the side-by-side tests and trials,
with EXTRA set per version: 0.0 does the Laplacian once; 0.10 then sweeps about a tenth of the
rows again (same answer, 10 % more real work); 3.0 sweeps everything three more times.
Registered as ``extra_work`` through STRIDEWISE_KERNEL_MODULES.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.base import Problem, Schedule
from kernels.jit import Compiled
from kernels.registry import register
from kernels.stencils.laplacian import Laplacian

EXTRA = 0.0  # extra sweeps: whole repeats, then a fraction of the rows


class _Twice:
    """Calls a compiled build on the whole problem, then again with each of ``extra_args``."""

    def __init__(self, dispatcher: Any, extra_args: list[tuple[Any, ...]]) -> None:
        self.dispatcher, self.extra_args = dispatcher, extra_args
        self.py_func = dispatcher.py_func
        self.overloads = dispatcher.overloads
        self.stats = dispatcher.stats

    def compile(self, sig: Any) -> Any:
        return self.dispatcher.compile(sig)

    def __call__(self, *args: Any) -> Any:
        result = self.dispatcher(*args)
        for extra in self.extra_args:
            self.dispatcher(*extra)
        return result


class ExtraWork(Laplacian):
    name = "extra_work"
    summary = "the Laplacian plus a test-only fraction of repeated work"

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        impl, args = super().implementation(problem, schedule)
        extra = [args] * int(EXTRA)
        fraction = EXTRA - int(EXTRA)
        if fraction > 0:
            # The walk (q, out, extra, counts, ...) covers prod(counts[:4]) rows; shrinking its longest
            # axis to the fraction of itself makes a call that sweeps that fraction of the rows again.
            counts = np.array(args[3], copy=True)
            axis = int(np.argmax(counts[:4]))
            counts[axis] = max(1, int(round(counts[axis] * fraction)))
            extra.append(args[:3] + (counts,) + args[4:])
        return Compiled(impl.name, impl.py_func, _Twice(impl.parallel, extra), _Twice(impl.serial, extra), impl.empty), args


register(ExtraWork())
