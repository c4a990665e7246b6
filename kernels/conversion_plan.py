"""Choosing how to convert a pair of states by measurement, before the conversion is timed.

The blocked transpose's best block width depends on the pair of layouts and on the machine: on
the development VM (4x64x96x96 float64, 1 thread, fraction of a contiguous copy) var.z.y.x to
var.y.x.z ran 0.74 at width 32 and 0.81 at 64, y.x.z.var to var.z.y.x 0.35 at 32 and 0.44 at 8,
var.z.y.x to y.x.var.z 0.51 at 32 and 0.60 at 16. And on one thread NumPy's strided copy
(``np.copyto`` between the two logical views) beat every width on a few pairs, e.g.
var.z.y+1.x to y.x.var.z 0.69 against 0.48 at 4x137x96x96. Between a tiled and an untiled
layout the transpose over split axes won most pairs (y/8.x/16.var.z.y%8.x%16 to y.x.z.var 0.26
-> 0.38) but the row conversion kept others (the same tiled layout to var.z.y.x 0.90 against
0.55), and at 2 threads it beat both on some untiled pairs (var.z.y+1.x to y.x.var.z 0.67
against 0.45 and NumPy's single thread 0.38). So each candidate runs a few times,
interleaved, and the fastest median wins: a conversion is never slower than the best of them
(up to the planning runs' noise). The planning runs are never reported.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kernels.convert import conversion_args, row_conversion_args, split_geometry, whole_run_args
from kernels.grid import LOGICAL_AXES
from kernels.jit import Compiled
from kernels.state import State

#: Block widths tried for the blocked transpose (positions of the source's contiguous run).
TRANSPOSE_WIDTHS = (8, 16, 32, 64)
#: Interleaved planning runs of each candidate (after one warm-up run each).
PLAN_REPEATS = 3
#: States smaller than this (bytes) are not planned: they convert within the caches in
#: microseconds, where three runs measure mostly noise, and planning would compile every
#: candidate for nothing. They take the default: block width 32, or the row conversion.
PLAN_MIN_BYTES = 4 << 20


#: The labels of NumPy's strided copy, the row conversion and the whole-run transpose.
NUMPY_COPY = "numpy strided copy"
ROW_COPY = "row copy"
WHOLE_RUN = "whole source run"

#: A candidate conversion: its label, the compiled conversion (or NumPy's copy), its arguments.
Candidate = tuple[str, Compiled, tuple[Any, ...]]


def _copyto(dst: np.ndarray, src: np.ndarray) -> None:
    np.copyto(dst, src)


def _nothing(dst: np.ndarray, src: np.ndarray) -> None:
    return None


#: NumPy's strided copy with the call shape of a compiled conversion (single-threaded in every
#: build; its empty twin does nothing, for the call overhead).
STRIDED_COPY = Compiled(NUMPY_COPY, _copyto, _copyto, _copyto, _nothing)


def is_compiled(impl: Compiled) -> bool:
    """False for NumPy's strided copy, which has nothing to compile."""
    return impl is not STRIDED_COPY


@dataclass(frozen=True)
class ConversionPlan:
    """The conversion chosen for one pair of states and one build."""

    impl: Compiled
    args: tuple[Any, ...]
    choice: str  # e.g. "block width 32" or NUMPY_COPY; "" where there was nothing to choose
    medians_ns: dict[str, float] = field(default_factory=dict)  # planning median of each candidate

    def describe(self) -> str:
        """One line for a report: the chosen candidate and how the others compared with it."""
        if len(self.medians_ns) < 2:
            return ""
        best = self.medians_ns[self.choice]
        others = ", ".join(f"{c} {m / best:.2f}x" for c, m in self.medians_ns.items() if c != self.choice)
        return f"{self.choice} (planning runs, time relative to it: {others})"


def _logical_view(state: State) -> np.ndarray:
    return state.interior().transpose([state.layout.index_of(a) for a in LOGICAL_AXES])


def candidates(src: State, dst: State) -> list[Candidate]:
    """(label, conversion, arguments) of every candidate for copying ``src`` into ``dst``: each
    block width of the blocked transpose, its blocks over the source's whole run where that run
    is long, the row conversion, and NumPy's strided copy between untiled layouts; the row
    conversion alone for a pair the transpose cannot take (``split_geometry``)."""
    if split_geometry(src, dst) is None:
        return [("", *conversion_args(src, dst))]
    found = [(f"block width {w}", *conversion_args(src, dst, w)) for w in TRANSPOSE_WIDTHS]
    whole = whole_run_args(src, dst)
    if whole is not None:
        found.append((WHOLE_RUN, *whole))
    found.append((ROW_COPY, *row_conversion_args(src, dst)))
    if src.layout.is_tiled or dst.layout.is_tiled:
        return found
    return found + [(NUMPY_COPY, STRIDED_COPY, (_logical_view(dst), _logical_view(src)))]


def planned_candidates(src: State, dst: State, min_bytes: int = PLAN_MIN_BYTES) -> list[Candidate]:
    """The candidates ``plan_conversion`` runs: the default conversion alone for a state under
    ``min_bytes``, else ``candidates``."""
    if src.data.nbytes < min_bytes:
        return [("", *conversion_args(src, dst))]
    return candidates(src, dst)


def choose(found: list[Candidate], build: str = "parallel",
           repeats: int = PLAN_REPEATS) -> ConversionPlan:
    """Run each candidate once to warm up, then ``repeats`` interleaved times; keep the fastest.
    A lone candidate is kept unrun.

    Every candidate writes the same values into its destination, so the destination holds the
    converted state afterwards whichever wins.
    """
    if len(found) == 1:
        return ConversionPlan(found[0][1], found[0][2], found[0][0])
    calls = [getattr(impl, build) for _, impl, _ in found]
    for call, (_, _, args) in zip(calls, found):
        call(*args)
    times: list[list[int]] = [[] for _ in found]
    for r in range(repeats):
        for k in range(len(found)):
            i = (k + r) % len(found)  # rotate the order so no candidate always runs first
            start = time.perf_counter_ns()
            calls[i](*found[i][2])
            times[i].append(time.perf_counter_ns() - start)
    medians = {label: float(np.median(t)) for (label, _, _), t in zip(found, times)}
    label, impl, args = min(found, key=lambda c: medians[c[0]])
    return ConversionPlan(impl, args, label, medians)


def plan_conversion(src: State, dst: State, build: str = "parallel", repeats: int = PLAN_REPEATS,
                    min_bytes: int = PLAN_MIN_BYTES) -> ConversionPlan:
    """``choose`` among the ``planned_candidates`` of copying ``src`` into ``dst``."""
    return choose(planned_candidates(src, dst, min_bytes), build, repeats)
