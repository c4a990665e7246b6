"""Test-only kernel registrations (imported through STRIDEWISE_KERNEL_MODULES in a worker).

``broken``: the Laplacian with one correct schedule and one deliberately wrong one.
``slowed``: the Laplacian whose ``block`` schedule can be made to do its work eight times (the gate's knob).
"""

from __future__ import annotations

import os
from typing import Any

from kernels.base import Problem, Schedule
from kernels.jit import Compiled
from kernels.registry import register
from kernels.stencils.common import BLOCK
from kernels.stencils.laplacian import Laplacian

WRONG = Schedule("wrong", "the block schedule with its scale doubled: a wrong answer")


class Broken(Laplacian):
    name = "broken"
    schedules = (BLOCK, WRONG)

    wrong = False

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        self.wrong = schedule.name == "wrong"  # read by constants() while the walk's arguments are built
        return super().implementation(problem, BLOCK)

    def constants(self, dtype: Any) -> tuple[Any, ...]:
        four, scale = super().constants(dtype)
        return (four, scale * 2) if self.wrong else (four, scale)


class _Repeated:
    """Calls a compiled build several times: deliberately extra work, same answer."""

    def __init__(self, dispatcher: Any, times: int) -> None:
        self.dispatcher, self.times = dispatcher, times
        self.py_func = dispatcher.py_func
        self.overloads = dispatcher.overloads
        self.stats = dispatcher.stats

    def compile(self, sig: Any) -> Any:
        return self.dispatcher.compile(sig)

    def __call__(self, *args: Any) -> Any:
        for _ in range(self.times):
            result = self.dispatcher(*args)
        return result


class Slowed(Laplacian):
    """With STRIDEWISE_TEST_SLOW_KNOB=1 in the environment, ``block`` does its work eight times: far
    beyond the 2x that runs on a shared VM drift apart, which a stored baseline cannot tell from a change."""

    name = "slowed"

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        impl, args = super().implementation(problem, schedule)
        if schedule.name == "block" and os.environ.get("STRIDEWISE_TEST_SLOW_KNOB") == "1":
            impl = Compiled(impl.name, impl.py_func, _Repeated(impl.parallel, 8), _Repeated(impl.serial, 8), impl.empty)
        return impl, args


register(Broken())
register(Slowed())
