"""A STREAM-style triad ``a = b + s*c``: the bandwidth yardstick measured beside the kernels.

Counting follows STREAM's published rule: per element, read b and c and write a, so 3 words
(24 bytes in float64) per element, with no write-allocate traffic counted.
"""

from __future__ import annotations

import time

import numpy as np
from numba import prange

from kernels.jit import build
from kernels.parallel import chunk, thread_count
from kernels.state import aligned_empty

STREAM_WORDS_PER_ELEMENT = 3


def triad_chunks(a, b, c, s, nchunks):  # type: ignore[no-untyped-def]
    """a[i] = b[i] + s*c[i], the elements split in contiguous blocks, one per thread."""
    n = a.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(n, nchunks, t)
        for i in range(lo, hi):
            u = np.uintp(i)
            a[u] = b[u] + s * c[u]


def triad_repeated(a, b, c, s, nchunks, reps):  # type: ignore[no-untyped-def]
    """``reps`` triads inside one parallel region: each thread repeats its own block, so small
    (in-cache) footprints are not swamped by dispatch and fork/join. The scalar changes with the
    repetition so no repetition is redundant for the compiler."""
    n = a.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(n, nchunks, t)
        for r in range(reps):
            sr = s + r
            for i in range(lo, hi):
                u = np.uintp(i)
                a[u] = b[u] + sr * c[u]


TRIAD = build(triad_chunks)
TRIAD_REPEATED = build(triad_repeated)


def triad_arrays(footprint_bytes: int, dtype: str = "float64") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Three aligned arrays whose total size is ``footprint_bytes``, first-touched by the triad itself."""
    dt = np.dtype(dtype)
    n = max(footprint_bytes // (STREAM_WORDS_PER_ELEMENT * dt.itemsize), 64)
    arrays = []
    for _ in range(3):
        arrays.append(aligned_empty(n * dt.itemsize).view(dt))
    a, b, c = arrays
    nchunks = thread_count()
    TRIAD.parallel(b, a, a, dt.type(0), nchunks)  # first touch with the triad's own partition
    TRIAD.parallel(c, a, a, dt.type(0), nchunks)
    b[:] = 1.0
    c[:] = 2.0
    return a, b, c


def triad_bytes(n: int, itemsize: int) -> int:
    """Bytes moved by one triad over n elements (STREAM counting)."""
    return STREAM_WORDS_PER_ELEMENT * n * itemsize


def measure_triad(footprint_bytes: int, repeats: int = 10, min_seconds: float = 0.05, dtype: str = "float64") -> list[float]:
    """Bandwidth samples in bytes/s at the current thread count for one footprint (one per repeat).

    Each sample runs enough repetitions inside one compiled call to last about a millisecond.
    """
    a, b, c = triad_arrays(footprint_bytes, dtype)
    s = a.dtype.type(3.0)
    nchunks = thread_count()
    fn = TRIAD_REPEATED.parallel
    fn(a, b, c, s, nchunks, 1)
    start = time.perf_counter_ns()
    fn(a, b, c, s, nchunks, 1)
    once = max(time.perf_counter_ns() - start, 1)
    reps = max(1, int(1_000_000 // once))
    moved = triad_bytes(a.shape[0], a.itemsize) * reps
    samples: list[float] = []
    began = time.perf_counter()
    while len(samples) < repeats or time.perf_counter() - began < min_seconds:
        start = time.perf_counter_ns()
        fn(a, b, c, s, nchunks, reps)
        samples.append(moved / ((time.perf_counter_ns() - start) * 1e-9))
    return samples
