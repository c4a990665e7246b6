"""Shards: a suite's groups split into N deterministic parts, balanced by expected time.

A group (the cases ranked against each other) is the unit: it must run in one process on one
machine, so it is never split, and its repetitions stay with it. Parts are balanced greedily:
groups in order of decreasing expected time, each to the part with the least expected time so
far (the longest-processing-time rule; ties go to the lower part, then to the group label), so
every machine computes the same split.
"""

from __future__ import annotations

import re
from dataclasses import replace

from harness.cases import CaseKind, Group, part_of
from harness.suite import Suite
from kernels.errors import StridewiseError
from kernels.grid import Extents

#: Expected time outside the timed samples, per case: compile or cache load, validation.
SECONDS_PER_CASE = 0.5
#: Bandwidth assumed per thread when estimating a group's time from its byte model (bytes/s).
BANDWIDTH_PER_THREAD = 10e9


def parse_shard(text: str) -> tuple[int, int]:
    """``K/N`` (1 <= K <= N) as (K, N); a one-line error otherwise."""
    m = re.fullmatch(r"\s*(\d+)\s*/\s*(\d+)\s*", text or "")
    if not m or not 1 <= int(m[1]) <= int(m[2]):
        raise StridewiseError(f"bad shard '{text}'; write K/N with 1 <= K <= N, e.g. --shard 2/3")
    return int(m[1]), int(m[2])


def expected_seconds(group: Group, suite: Suite) -> float:
    """A rough time for one group: a fixed cost per case plus its rounds at an assumed bandwidth."""
    from harness.prepare import kernel_with_options
    from kernels.registry import get_kernel

    extents = Extents.parse(group.grid)
    rounds = suite.timing.warmup + suite.timing.min_repeats
    traffic, options = 0.0, dict(suite.kernel_options)
    for case in group.cases:
        if group.kind is CaseKind.KERNEL:
            traffic += kernel_with_options(get_kernel(part_of(case.kernel)), options).traffic_bytes(extents, case.dtype)
        else:
            traffic += 2.0 * extents.points * (4 if case.dtype == "float32" else 8)
    return len(group.cases) * SECONDS_PER_CASE + rounds * traffic / (BANDWIDTH_PER_THREAD * group.threads)


def assign(groups: list[Group], suite: Suite, count: int) -> dict[str, int]:
    """Part number (1..count) of each group (keyed by its label without the repetition)."""
    cost: dict[str, float] = {}
    for g in groups:  # a group's repetitions share its part
        cost[group_key(g)] = cost.get(group_key(g), 0.0) + expected_seconds(g, suite)
    loads = [0.0] * count
    part = {}
    for label in sorted(cost, key=lambda lab: (-cost[lab], lab)):
        k = min(range(count), key=lambda i: (loads[i], i))
        part[label] = k + 1
        loads[k] += cost[label]
    return part


def group_key(group: Group) -> str:
    """A group's label without its repetition: what must stay on one machine."""
    return replace(group, repetition=0).label


def shard_groups(groups: list[Group], suite: Suite, shard: tuple[int, int]) -> list[Group]:
    """The groups of part K of N, in plan order."""
    k, n = shard
    part = assign(groups, suite, n)
    return [g for g in groups if part[group_key(g)] == k]
