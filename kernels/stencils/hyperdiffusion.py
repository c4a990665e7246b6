"""``hyperdiffusion``: the Laplacian applied twice, fused into one 13-point pass, doubly periodic."""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, dot4, thread_count, unflatten4
from kernels.registry import register
from kernels.stencils.common import BLOCK, CYCLIC, row_geometry, smooth_field, stencil_tolerance
from kernels.stencils.laplacian import SPACING, laplacian_reference


@inline
def point(q, out, p, ex, wx, eex, wwx, ny_, sy, nny, ssy, w20, w8, w2, scale):  # type: ignore[no-untyped-def]
    """Weights of the squared 5-point Laplacian: centre 20, axis neighbours -8, diagonals 2, distance-2 axis 1."""
    u = np.uintp
    axis = q[u(p + ex)] + q[u(p + wx)] + q[u(p + ny_)] + q[u(p + sy)]
    diag = q[u(p + ny_ + ex)] + q[u(p + ny_ + wx)] + q[u(p + sy + ex)] + q[u(p + sy + wx)]
    far = q[u(p + eex)] + q[u(p + wwx)] + q[u(p + nny)] + q[u(p + ssy)]
    out[u(p)] = (w20 * q[u(p)] - w8 * axis + w2 * diag + far) * scale


def hyperdiffusion_rows(q, out, counts, strides, jmul, imul, dy, dx, edge, w20, w8, w2, scale, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Walk the rows of flat ``q``/``out`` (see stencils.common); dy/dx rows are offsets -2..2."""
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
                    ex, wx, eex, wwx = dx[3, it], dx[1, it], dx[4, it], dx[0, it]
                    ny_, sy, nny, ssy = dy[3, jt], dy[1, jt], dy[4, jt], dy[0, jt]
                    for tt in range(lo_in, hi_in):
                        point(q, out, rb + tt, ex, wx, eex, wwx, ny_, sy, nny, ssy, w20, w8, w2, scale)
                for tt in range(min(lo_in, n5)):  # row start: a tile edge or the periodic seam
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, out, rb + tt, dx[3, it], dx[1, it], dx[4, it], dx[0, it],
                          dy[3, jt], dy[1, jt], dy[4, jt], dy[0, jt], w20, w8, w2, scale)
                for tt in range(max(hi_in, lo_in), n5):  # row end
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, out, rb + tt, dx[3, it], dx[1, it], dx[4, it], dx[0, it],
                          dy[3, jt], dy[1, jt], dy[4, jt], dy[0, jt], w20, w8, w2, scale)


ROWS = build(hyperdiffusion_rows)


class Hyperdiffusion(Kernel):
    name = "hyperdiffusion"
    family = "stencils"
    summary = "4th-order hyperdiffusion (Laplacian squared) as one fused 13-point pass, doubly periodic"
    schedules = (BLOCK, CYCLIC)
    halo = 2

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return {"q": smooth_field(extents, seed).astype(dtype)}

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        q = logical["q"].astype(np.float64)
        return laplacian_reference(laplacian_reference(q, SPACING), SPACING)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        q = problem.fields["q"]
        g = row_geometry(q, self.halo, merge_vertical=True)
        dt = problem.dtype.type
        args = (
            q.data.reshape(-1),
            problem.output.data.reshape(-1),
            g.counts, g.strides, g.jmul, g.imul, g.dy, g.dx, g.edge,
            dt(20), dt(8), dt(2), dt(1.0 / SPACING**4),
            thread_count(),
            int(schedule.name == "cyclic"),
        )
        return ROWS, args

    def flops(self, extents: Extents) -> int:
        # 3 adds for each of the three groups of 4, 3 weight multiplies, 3 combining add/subs, 1 scale.
        return 16 * extents.points

    def traffic_bytes(self, extents: Extents, dtype: Any) -> int:
        # Read q, write out.
        return 2 * extents.points * np.dtype(dtype).itemsize

    def tolerance(self, dtype: Any) -> float:
        # Weights up to 20 on 13 terms: the rounding of the weighted sum is ~20x that of a plain sum.
        return stencil_tolerance(dtype, terms=13 * 20)


register(Hyperdiffusion())
