"""The compute ceiling: chains of fused multiply-adds on data that stays in L1.

Each thread sweeps its own row of ``LANES_IN_FLIGHT`` values; each value takes eight dependent
FMAs ``v = v * a + b`` per sweep. The sweep loop vectorises, and the out-of-order core overlaps
the chains of neighbouring vectors, so both FMA pipes stay busy while one load and one store per
eight FMAs never limit. One FMA is 2 flops (the usual convention).
"""

from __future__ import annotations

import time

import numba
import numpy as np
from numba import prange

#: Values per thread: 128 float64 are 32 AVX2 vectors, enough independent chains to cover the
#: FMA latency on two pipes (measured on the development machine: 32 values reach 77 % of the
#: rate of 128, 128 and 256 the same).
LANES_IN_FLIGHT = 128
FMAS_PER_VALUE = 8


#: "contract" lets LLVM fuse v * a + b into one FMA; nothing else is relaxed.
FMA_OPTIONS = {"parallel": True, "fastmath": {"contract"}, "error_model": "numpy", "cache": True, "nogil": True}


@numba.njit(**FMA_OPTIONS)
def _fma_sweeps(acc, a, b, sweeps):  # type: ignore[no-untyped-def]
    n = acc.shape[1]
    for t in prange(acc.shape[0]):
        x = acc[t]
        for _ in range(sweeps):
            for j in range(n):
                u = np.uintp(j)
                v = x[u]
                v = v * a + b
                v = v * a + b
                v = v * a + b
                v = v * a + b
                v = v * a + b
                v = v * a + b
                v = v * a + b
                v = v * a + b
                x[u] = v


def fma_rates(threads: int, dtype: str = "float64", repeats: int = 5, min_seconds: float = 0.02) -> list[float]:
    """Measured rates (flop/s) of ``repeats`` calls on ``threads`` threads (the caller sets numba's
    thread count), each call sized to take at least ``min_seconds``."""
    dt = np.dtype(dtype)
    acc = np.ones((threads, LANES_IN_FLIGHT), dt)
    a, b = dt.type(0.5), dt.type(0.5)  # v -> 0.5 v + 0.5 keeps v in [0.5, 1]: no overflow, no denormals
    sweeps = 16
    _fma_sweeps(acc, a, b, sweeps)
    while True:
        start = time.perf_counter()
        _fma_sweeps(acc, a, b, sweeps)
        if time.perf_counter() - start >= min_seconds or sweeps > 1 << 30:
            break
        sweeps *= 2
    flops = 2.0 * FMAS_PER_VALUE * LANES_IN_FLIGHT * sweeps * threads
    rates = []
    for _ in range(repeats):
        start = time.perf_counter_ns()
        _fma_sweeps(acc, a, b, sweeps)
        rates.append(flops / ((time.perf_counter_ns() - start) * 1e-9))
    if not np.isfinite(acc).all():
        raise ArithmeticError("the FMA chains left the finite range")
    return rates
