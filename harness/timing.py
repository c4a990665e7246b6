"""Interleaved sampling: every case of a group once per round, in a seeded shuffled order."""

from __future__ import annotations

import random
import statistics
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from harness.sampling import Timing


class Interrupted(Exception):
    """The stop signal arrived; the group's samples are incomplete."""


@dataclass
class GroupSamples:
    """Samples of one group: (case_id, round, position, phase, ns) rows, plus what the rounds cost."""

    rows: list[tuple[str, int, int, str, int]] = field(default_factory=list)
    rounds: int = 0
    harness_overhead_ns: float = 0.0  # median per-sample time spent outside the kernel call
    flush_ns: float = 0.0  # median per-sample cold-cache eviction time (0 when off)
    looks: int = 1  # times the adaptive rule was consulted (1: never extended)
    sibling_evictions: int = 0  # samples preceded by a case on the same buffers, so evicted first


def spread(order: list[str], owner: dict[str, str], last: str | None) -> list[str]:
    """``order`` rearranged so that no two neighbours (nor ``last``, the owner of the sample
    before it) share buffers, where that is possible: each step takes the first case in the given
    (shuffled) order that differs from its predecessor and leaves the rest arrangeable."""
    from collections import Counter

    remaining, out = list(order), []
    counts = Counter(owner[c] for c in remaining if c in owner)

    def arrangeable(n: int, after: str | None) -> bool:
        """n cases can follow ``after`` with no two neighbours on the same buffers."""
        return all(k <= (n + 1) // 2 for k in counts.values()) and counts.get(after, 0) <= n // 2

    while remaining:
        pick = None
        for c in remaining:
            key = owner.get(c)
            if key is not None and key == last:
                continue
            if key is not None:
                counts[key] -= 1
            ok = arrangeable(len(remaining) - 1, key)
            if key is not None:
                counts[key] += 1
            if ok:
                pick = c
                break
        if pick is None:  # no arrangement avoids every same-buffers neighbour: thin out the largest set
            others = [c for c in remaining if owner.get(c) is None or owner.get(c) != last]
            pick = max(others, key=lambda c: counts.get(owner.get(c), 0)) if others else remaining[0]
        remaining.remove(pick)
        key = owner.get(pick)
        if key is not None:
            counts[key] -= 1
            if counts[key] == 0:
                del counts[key]
        out.append(pick)
        last = key
    return out


def evictor(nbytes: int) -> Callable[[], int]:
    """A call that pushes kernel data out of cache: a read-only sweep over ``nbytes`` of memory.

    The buffer is allocated on the first call (most sweeps never evict) and written once: pages
    that were never written all map the one shared zero page, so reading them evicts nothing.
    """
    from kernels.parallel import evict_caches

    buffer: list[Any] = []

    def evict() -> int:
        if not buffer:
            import numpy as np

            buffer.append(np.ones(max(nbytes // 8, 8), dtype=np.int64))
        return evict_caches(buffer[0])

    return evict


def _measure(call: Callable[[], Any]) -> int:
    start = time.perf_counter_ns()
    call()
    return time.perf_counter_ns() - start


def sample_rounds(
    calls: dict[str, Callable[[], Any]],
    timing: Timing,
    rng: random.Random,
    should_stop: Callable[[], bool],
    before_sample: Callable[[], Any] | None = None,
    on_round: Callable[[int], None] | None = None,
    prepare: dict[str, Callable[[], Any]] | None = None,
    first_round: int = 0,
    wants_more: Callable[[list[tuple[str, int, int, str, int]]], bool] | None = None,
    measure: Callable[[Callable[[], Any]], int] = _measure,
    buffers: dict[str, str] | None = None,
    evict: Callable[[], Any] | None = None,
) -> GroupSamples:
    """Warm-up rounds, then measured rounds until every case has ``min_repeats`` samples and at
    least ``min_seconds`` of measured time (or ``max_rounds``). Raises Interrupted on stop.

    ``before_sample`` runs before every sample (cache eviction), ``prepare[case]`` before each
    sample of that case (restoring inputs it overwrites); neither is inside the timed region.
    Round ids start at ``first_round`` (repetitions of a group get disjoint ids).

    ``buffers[case]`` names the buffers a case works on (cases of one layout share them). A sample
    whose predecessor worked on the same buffers would find them warm in cache, and clean of
    another case's dirty lines, a bonus no other sample gets: each shuffled round is rearranged
    (``spread``) so that no case follows one on its own buffers, and where no arrangement can
    avoid it, ``evict`` runs before the sample, outside the timed region. With ``before_sample``
    every sample is evicted anyway.

    Adaptive effort: when ``timing.max_seconds`` > 0 and ``wants_more`` is given, the stopping
    point is a look: ``wants_more(rows)`` decides whether to double the measured rounds, as long
    as the doubled count stays within ``max_rounds`` and the time measured so far, doubled, within
    ``max_seconds``. Looks happen only at min_repeats x 2**k rounds, so their number is bounded
    by ``Timing.max_looks()``, which the ranking's significance level accounts for.
    """
    prepare = prepare or {}
    out = GroupSamples()
    ids = list(calls)
    if not ids:
        return out
    spent = dict.fromkeys(ids, 0)
    overheads: list[float] = []
    flushes: list[int] = []
    total_rounds = 0
    measured = 0
    target = timing.min_repeats
    out.looks = 1
    started = time.perf_counter_ns()
    previous: str | None = None
    while True:
        phase = "warmup" if total_rounds < timing.warmup else "measure"
        rng.shuffle(ids)
        if buffers:
            ids = spread(ids, {c: buffers[c] for c in ids if buffers.get(c) is not None},
                         buffers.get(previous) if previous is not None else None)
        round_start = time.perf_counter_ns()
        kernel_ns = 0
        flush_ns = 0
        for position, case_id in enumerate(ids):
            sibling = (evict is not None and before_sample is None and buffers is not None and previous is not None
                       and buffers.get(case_id) is not None and buffers.get(case_id) == buffers.get(previous))
            previous = case_id
            if before_sample is not None or case_id in prepare or sibling:
                f0 = time.perf_counter_ns()
                if case_id in prepare:
                    prepare[case_id]()
                if before_sample is not None:
                    before_sample()
                if sibling:
                    evict()  # type: ignore[misc]
                    out.sibling_evictions += 1
                flush_ns += time.perf_counter_ns() - f0
            ns = measure(calls[case_id])
            kernel_ns += ns
            out.rows.append((case_id, first_round + total_rounds, position, phase, ns))
            if phase == "measure":
                spent[case_id] += ns
            if should_stop():
                raise Interrupted
        round_ns = time.perf_counter_ns() - round_start
        overheads.append((round_ns - kernel_ns - flush_ns) / len(ids))
        if before_sample is not None:
            flushes.append(flush_ns // len(ids))
        total_rounds += 1
        if phase == "measure":
            measured += 1
        if on_round is not None:
            on_round(total_rounds)
        enough = measured >= target and min(spent.values()) >= timing.min_seconds * 1e9
        if enough and wants_more is not None and timing.max_seconds > 0:
            elapsed = (time.perf_counter_ns() - started) * 1e-9
            if measured * 2 <= timing.max_rounds and elapsed * 2 <= timing.max_seconds and wants_more(out.rows):
                target = measured * 2
                out.looks += 1
                continue
        if enough or measured >= max(timing.max_rounds, timing.min_repeats):
            break
    out.rounds = measured
    out.harness_overhead_ns = statistics.median(overheads)
    out.flush_ns = statistics.median(flushes) if flushes else 0.0
    return out


def overhead_ns(call: Callable[[], Any], repeats: int = 51) -> float:
    """Median time of an (empty) call: dispatch plus fork/join of the thread pool."""
    call()
    return float(statistics.median(_measure(call) for _ in range(repeats)))
