"""Layout conversion as a compiled, threaded copy: the cost of switching layouts between kernels.

The destination is walked in memory order (rows along its innermost axis, written contiguously);
each element's source offset is a sum of per-logical-axis table entries, which holds for any
pair of layouts, tiled or padded.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.grid import LOGICAL_AXES
from kernels.jit import Compiled, build
from kernels.parallel import chunk, thread_count
from kernels.state import State

NDIM = 6


def convert_rows(src, dst, counts, strides, mul, tables, row_axis, nchunks):  # type: ignore[no-untyped-def]
    """dst axes: counts/strides (6); mul[a, d]: step of logical axis a per index of dst axis d;
    tables[a, n]: source element offset of logical index n along axis a (padded with zeros);
    row_axis: the logical axis that dst's innermost axis runs along."""
    n1, n2, n3, n4, n5 = counts[1], counts[2], counts[3], counts[4], counts[5]
    step = mul[row_axis, 5]
    nitems = counts[0] * n1 * n2 * n3
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            i3 = item % n3
            r = item // n3
            i2 = r % n2
            r = r // n2
            i1 = r % n1
            i0 = r // n1
            base = i0 * strides[0] + i1 * strides[1] + i2 * strides[2] + i3 * strides[3]
            c0 = i0 * mul[0, 0] + i1 * mul[0, 1] + i2 * mul[0, 2] + i3 * mul[0, 3]
            c1 = i0 * mul[1, 0] + i1 * mul[1, 1] + i2 * mul[1, 2] + i3 * mul[1, 3]
            c2 = i0 * mul[2, 0] + i1 * mul[2, 1] + i2 * mul[2, 2] + i3 * mul[2, 3]
            c3 = i0 * mul[3, 0] + i1 * mul[3, 1] + i2 * mul[3, 2] + i3 * mul[3, 3]
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                a0, a1, a2, a3 = c0 + i4 * mul[0, 4], c1 + i4 * mul[1, 4], c2 + i4 * mul[2, 4], c3 + i4 * mul[3, 4]
                total = tables[0, a0] + tables[1, a1] + tables[2, a2] + tables[3, a3]
                start = a0 if row_axis == 0 else a1 if row_axis == 1 else a2 if row_axis == 2 else a3
                others = total - tables[row_axis, start]  # only the row's own axis moves along the row
                for i5 in range(n5):
                    s = others + tables[row_axis, start + i5 * step]
                    dst[np.uintp(rb + i5)] = src[np.uintp(s)]


CONVERT = build(convert_rows)


def conversion_args(src: State, dst: State) -> tuple[Compiled, tuple[Any, ...]]:
    """The compiled conversion and its arguments for copying ``src`` into ``dst``."""
    if src.extents != dst.extents or src.dtype != dst.dtype:
        from kernels.errors import KernelError

        raise KernelError(f"cannot convert {src} into {dst}: extents and dtype must match")
    elem = [s // dst.data.itemsize for s in dst.data.strides]
    axes = []
    for pos, tok in enumerate(dst.layout.tokens):
        step = [0, 0, 0, 0]
        step[LOGICAL_AXES.index(tok.axis)] = tok.tile if tok.part == "tiles" else 1
        axes.append((tok.count(dst.extents), elem[pos], step))
    while len(axes) < NDIM:
        axes.insert(0, (1, 0, [0, 0, 0, 0]))
    counts = np.array([a[0] for a in axes], dtype=np.int64)
    strides = np.array([a[1] for a in axes], dtype=np.int64)
    mul = np.array([[a[2][k] for a in axes] for k in range(4)], dtype=np.int64)
    longest = max(src.extents.shape)
    tables = np.zeros((4, longest), dtype=np.int64)
    src_elem = [s // src.data.itemsize for s in src.data.strides]
    for k, axis in enumerate(LOGICAL_AXES):
        idx = np.arange(src.extents[axis])
        for pos, tok in enumerate(src.layout.tokens):
            if tok.axis == axis:
                tables[k, : idx.size] += tok.logical_index(idx) * src_elem[pos]
    row_axis = LOGICAL_AXES.index(dst.layout.tokens[-1].axis)
    args = (src.data.reshape(-1), dst.data.reshape(-1), counts, strides, mul, tables, row_axis, thread_count())
    return CONVERT, args
