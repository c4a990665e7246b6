"""The sampling policy of a sweep (a suite's ``[timing]``).

Kept apart from the suite grammar: workers of any code version (the side-by-side gate runs an
older ``kernels/`` under this harness) import it without the layout model.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Timing:
    """How each case is sampled."""

    warmup: int = 1  # rounds recorded with phase=warmup and left out of every statistic
    min_repeats: int = 7  # measured rounds at least
    min_seconds: float = 0.05  # and at least this much measured time per case
    max_rounds: int = 200
    cold_cache: bool = False  # evict caches between samples
    flush_bytes: int = 0  # eviction buffer size; 0 = twice the reported last-level cache per thread
    first_touch: bool = True  # buffers first written by a parallel loop at the worker's thread count
    serial_baseline: bool = True  # time parallel=False builds at 1 thread: the speedup denominator
    roof: bool = True  # measure the triad curve in every worker
    roof_max_bytes: int = 1 << 30  # largest triad footprint of the roof curve
    repetitions: int = 1  # run every group this many times, interleaved (rep 1 of all groups, then rep 2, ...)
    max_seconds: float = 0.0  # adaptive effort: budget per group for extra rounds when its leader is undecided

    def max_looks(self) -> int:
        """Looks at the data an adaptive group may take (1 when adaptive effort is off): after
        min_repeats measured rounds, then each time the rounds double, up to max_rounds."""
        if self.max_seconds <= 0:
            return 1
        looks, n = 1, max(self.min_repeats, 1)
        while n * 2 <= max(self.max_rounds, self.min_repeats):
            looks, n = looks + 1, n * 2
        return looks
