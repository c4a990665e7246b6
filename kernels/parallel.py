"""Small compiled helpers shared by kernels: static work partitioning."""

from __future__ import annotations

import numba

from kernels.jit import inline


def thread_count() -> int:
    """Threads the next parallel region will use (numba's current setting)."""
    return numba.get_num_threads()


@inline
def chunk(n_items, n_chunks, t):  # type: ignore[no-untyped-def]
    """Half-open range ``[lo, hi)`` of items owned by chunk ``t`` of ``n_chunks`` (balanced blocks)."""
    base = n_items // n_chunks
    extra = n_items - base * n_chunks
    lo = t * base + min(t, extra)
    hi = lo + base + (1 if t < extra else 0)
    return lo, hi
