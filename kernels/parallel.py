"""Small compiled helpers shared by kernels: static work partitioning."""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from kernels.jit import build, inline


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


@inline
def unflatten4(item, counts):  # type: ignore[no-untyped-def]
    """Indices along the first four walked axes of flat item ``item`` (C order, ``counts`` extents)."""
    i3 = item % counts[3]
    r = item // counts[3]
    i2 = r % counts[2]
    r = r // counts[2]
    return r // counts[1], r % counts[1], i2, i3


@inline
def dot4(i0, i1, i2, i3, weights):  # type: ignore[no-untyped-def]
    """Weighted sum of four axis indices: an offset, or one logical coordinate."""
    return i0 * weights[0] + i1 * weights[1] + i2 * weights[2] + i3 * weights[3]


def _fill_blocks(buf, value, nchunks):  # type: ignore[no-untyped-def]
    n = buf.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(n, nchunks, t)
        for i in range(lo, hi):
            buf[np.uintp(i)] = value


def _copy_blocks(dst, src, nchunks):  # type: ignore[no-untyped-def]
    n = dst.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(n, nchunks, t)
        for i in range(lo, hi):
            dst[np.uintp(i)] = src[np.uintp(i)]


def _sweep_buffer(buf, nchunks):  # type: ignore[no-untyped-def]
    """Read every cache line of ``buf`` (int64 words), each thread its own block. Read only: a
    sweep that wrote would leave its own dirty lines for the next timed kernel to write back."""
    n = buf.shape[0]
    total = 0
    for t in prange(nchunks):
        lo, hi = chunk(n, nchunks, t)
        for i in range(lo, hi, 8):
            total += buf[np.uintp(i)]
    return total


FILL = build(_fill_blocks)
COPY = build(_copy_blocks)
SWEEP = build(_sweep_buffer)


def first_touch(raw: np.ndarray) -> None:
    """Zero a fresh byte buffer with the threads of the current setting, each its own contiguous
    block, so its pages are placed near the threads whose block partition will use them."""
    words = raw.view(np.uint8)
    FILL.parallel(words, np.uint8(0), thread_count())


def parallel_copy(dst: np.ndarray, src: np.ndarray) -> None:
    """Copy equal-size byte buffers with the same per-thread block partition as first_touch."""
    COPY.parallel(dst.view(np.uint8).reshape(-1), src.view(np.uint8).reshape(-1), thread_count())


def evict_caches(buf: np.ndarray) -> int:
    """Read every line of a large int64 buffer (at least twice the last-level cache) on every
    thread, pushing kernel data out of cache; the kernel's dirty lines are written back here,
    outside any timed region."""
    return int(SWEEP.parallel(buf, thread_count()))
