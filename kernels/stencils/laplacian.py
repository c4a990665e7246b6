"""``laplacian``: the 5-point Laplacian (2nd order), doubly periodic, on every variable and level."""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, dot4, thread_count, unflatten4
from kernels.registry import register
from kernels.stencils.common import BLOCK, CYCLIC, periodic_pad, row_geometry, shifted, smooth_field, stencil_tolerance

SPACING = 1.0  # grid spacing h in both directions (grid units)


@inline
def point(q, out, p, de, dw, dn, ds, four, scale):  # type: ignore[no-untyped-def]
    u = np.uintp
    out[u(p)] = (q[u(p + de)] + q[u(p + dw)] + q[u(p + dn)] + q[u(p + ds)] - four * q[u(p)]) * scale


def laplacian_rows(q, out, counts, strides, jmul, imul, dy, dx, edge, four, scale, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Walk the rows of flat ``q``/``out`` (see stencils.common); cyclic=1 deals rows round-robin."""
    n4, n5 = counts[4], counts[5]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    tj, ti = jmul[5], imul[5]
    lo_in, hi_in = edge, n5 - edge
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base = dot4(i0, i1, i2, i3, strides)
            j0, x0 = dot4(i0, i1, i2, i3, jmul), dot4(i0, i1, i2, i3, imul)
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                j = j0 + i4 * jmul[4]
                i = x0 + i4 * imul[4]
                if hi_in > lo_in:
                    jt, it = j + lo_in * tj, i + lo_in * ti
                    de, dw, dn, ds = dx[2, it], dx[0, it], dy[2, jt], dy[0, jt]
                    for tt in range(lo_in, hi_in):
                        point(q, out, rb + tt, de, dw, dn, ds, four, scale)
                for tt in range(min(lo_in, n5)):  # row start: a tile edge or the periodic seam
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, out, rb + tt, dx[2, it], dx[0, it], dy[2, jt], dy[0, jt], four, scale)
                for tt in range(max(hi_in, lo_in), n5):  # row end
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, out, rb + tt, dx[2, it], dx[0, it], dy[2, jt], dy[0, jt], four, scale)


ROWS = build(laplacian_rows)


class Laplacian(Kernel):
    name = "laplacian"
    family = "stencils"
    summary = "5-point Laplacian, doubly periodic in y and x, every variable and level"
    schedules = (BLOCK, CYCLIC)
    halo = 1

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return {"q": smooth_field(extents, seed).astype(dtype)}

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return laplacian_reference(logical["q"].astype(np.float64), SPACING)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        q = problem.fields["q"]
        g = row_geometry(q, self.halo, merge_vertical=True)
        dt = problem.dtype
        args = (
            q.data.reshape(-1),
            problem.output.data.reshape(-1),
            g.counts, g.strides, g.jmul, g.imul, g.dy, g.dx, g.edge,
            dt.type(4), dt.type(1.0 / SPACING**2),
            thread_count(),
            int(schedule.name == "cyclic"),
        )
        return ROWS, args

    def flops(self, extents: Extents) -> int:
        # 3 adds, 1 multiply by 4, 1 subtract, 1 multiply by 1/h^2 per point.
        return 6 * extents.points

    def traffic_bytes(self, extents: Extents, dtype: Any) -> int:
        # Read q, write out.
        return 2 * extents.points * np.dtype(dtype).itemsize

    def tolerance(self, dtype: Any) -> float:
        return stencil_tolerance(dtype, terms=5)


def laplacian_reference(q: np.ndarray, h: float) -> np.ndarray:
    """5-point Laplacian with NumPy: shifted views of a periodically padded array, no loops."""
    qp = periodic_pad(q, 1)
    return (shifted(qp, 1, 0, 1) + shifted(qp, 1, 0, -1) + shifted(qp, 1, 1, 0) + shifted(qp, 1, -1, 0) - 4.0 * q) / h**2


register(Laplacian())
