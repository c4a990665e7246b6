"""Choosing a conversion's block width by measurement, before it is timed.

The blocked transpose's best block width depends on the pair of layouts and on the machine: on
the development VM (4x64x96x96 float64, 1 thread, fraction of a contiguous copy) var.z.y.x to
var.y.x.z ran 0.74 at width 32 and 0.81 at 64, y.x.z.var to var.z.y.x 0.35 at 32 and 0.44 at 8,
var.z.y.x to y.x.var.z 0.51 at 32 and 0.60 at 16. So each candidate width is run a few times,
interleaved, and the fastest median wins. The planning runs are never reported.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kernels.convert import conversion_args
from kernels.jit import Compiled
from kernels.state import State

#: Block widths tried for the blocked transpose (positions of the source's contiguous run).
TRANSPOSE_WIDTHS = (8, 16, 32, 64)
#: Interleaved planning runs of each candidate (after one warm-up run each).
PLAN_REPEATS = 3


@dataclass(frozen=True)
class ConversionPlan:
    """The conversion chosen for one pair of states and one build."""

    impl: Compiled
    args: tuple[Any, ...]
    width: int | None  # the transpose's block width; None where there is no width to choose
    medians_ns: dict[int, float] = field(default_factory=dict)  # planning median of each width

    def describe(self) -> str:
        """One line for a report: the chosen width and how the others compared with it."""
        if self.width is None or len(self.medians_ns) < 2:
            return ""
        best = self.medians_ns[self.width]
        others = ", ".join(f"{w} {m / best:.2f}x" for w, m in sorted(self.medians_ns.items()) if w != self.width)
        return f"block width {self.width} (planning runs, time relative to it: {others})"


def candidates(src: State, dst: State) -> list[tuple[int | None, Compiled, tuple[Any, ...]]]:
    """(width, compiled conversion, arguments) of every candidate for copying ``src`` into ``dst``."""
    if src.layout.is_tiled or dst.layout.is_tiled:
        return [(None, *conversion_args(src, dst))]
    return [(w, *conversion_args(src, dst, w)) for w in TRANSPOSE_WIDTHS]


def plan_conversion(src: State, dst: State, build: str = "parallel", repeats: int = PLAN_REPEATS) -> ConversionPlan:
    """Run each candidate once to warm up, then ``repeats`` interleaved times; keep the fastest.

    Every candidate writes the same values into ``dst``, so ``dst`` holds the converted state
    afterwards whichever wins.
    """
    found = candidates(src, dst)
    if len(found) == 1:
        width, impl, args = found[0]
        return ConversionPlan(impl, args, width)
    calls = [getattr(impl, build) for _, impl, args in found]
    for call, (_, _, args) in zip(calls, found):
        call(*args)
    times: list[list[int]] = [[] for _ in found]
    for r in range(repeats):
        for k in range(len(found)):
            i = (k + r) % len(found)  # rotate the order so no candidate always runs first
            start = time.perf_counter_ns()
            calls[i](*found[i][2])
            times[i].append(time.perf_counter_ns() - start)
    medians = {w: float(np.median(t)) for (w, _, _), t in zip(found, times)}
    best = min(range(len(found)), key=lambda i: medians[found[i][0]])
    width, impl, args = found[best]
    return ConversionPlan(impl, args, width, medians)
