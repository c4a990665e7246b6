"""``advection``: flux-form advection of every variable by a horizontal wind, doubly periodic.

Fluxes are 2nd-order centred: the face value is the mean of the two cells and the face wind the
mean of the two cell-centred winds, so the tendency at a cell is

    T = -(1/(4h)) [ (u_c+u_e)(q_c+q_e) - (u_w+u_c)(q_w+q_c) + (v_c+v_n)(q_c+q_n) - (v_s+v_c)(q_s+q_c) ].

Each face flux enters two cells with opposite signs, so the domain total of T telescopes to zero
(conservation); a constant field in a uniform wind has T = 0 exactly. The wind components are
fields of var extent 1 stored in the state's layout.
"""

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

SPACING = 1.0  # grid spacing h (grid units)


@inline
def point(q, u, v, out, p, pw, qe, qw, qn, qs, we, ww, wn, ws, coef):  # type: ignore[no-untyped-def]
    k = np.uintp
    qc, uc, vc = q[k(p)], u[k(pw)], v[k(pw)]
    fx = (uc + u[k(pw + we)]) * (qc + q[k(p + qe)]) - (u[k(pw + ww)] + uc) * (q[k(p + qw)] + qc)
    fy = (vc + v[k(pw + wn)]) * (qc + q[k(p + qn)]) - (v[k(pw + ws)] + vc) * (q[k(p + qs)] + qc)
    out[k(p)] = coef * (fx + fy)


def advection_rows(q, u, v, out, counts, strides, jmul, imul, dy, dx, wstrides, wdy, wdx, edge, coef, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Walk the rows of flat ``q``/``out``; the wind is walked with its own strides (var stride 0)."""
    n4, n5 = counts[4], counts[5]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    tj, ti, wstep = jmul[5], imul[5], wstrides[5]
    lo_in, hi_in = edge, n5 - edge
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base = dot4(i0, i1, i2, i3, strides)
            wbase = dot4(i0, i1, i2, i3, wstrides)
            j0, x0 = dot4(i0, i1, i2, i3, jmul), dot4(i0, i1, i2, i3, imul)
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                wb = wbase + i4 * wstrides[4]
                j = j0 + i4 * jmul[4]
                i = x0 + i4 * imul[4]
                if hi_in > lo_in:
                    jt, it = j + lo_in * tj, i + lo_in * ti
                    qe, qw, qn, qs = dx[2, it], dx[0, it], dy[2, jt], dy[0, jt]
                    we, ww, wn, ws = wdx[2, it], wdx[0, it], wdy[2, jt], wdy[0, jt]
                    if wstep == 0:  # var innermost: one wind column for the whole row
                        for tt in range(lo_in, hi_in):
                            point(q, u, v, out, rb + tt, wb, qe, qw, qn, qs, we, ww, wn, ws, coef)
                    else:
                        for tt in range(lo_in, hi_in):
                            point(q, u, v, out, rb + tt, wb + tt, qe, qw, qn, qs, we, ww, wn, ws, coef)
                for tt in range(min(lo_in, n5)):  # row start: a tile edge or the periodic seam
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, u, v, out, rb + tt, wb + tt * wstep, dx[2, it], dx[0, it], dy[2, jt], dy[0, jt],
                          wdx[2, it], wdx[0, it], wdy[2, jt], wdy[0, jt], coef)
                for tt in range(max(hi_in, lo_in), n5):  # row end
                    jt, it = j + tt * tj, i + tt * ti
                    point(q, u, v, out, rb + tt, wb + tt * wstep, dx[2, it], dx[0, it], dy[2, jt], dy[0, jt],
                          wdx[2, it], wdx[0, it], wdy[2, jt], wdy[0, jt], coef)


ROWS = build(advection_rows)


class Advection(Kernel):
    name = "advection"
    family = "stencils"
    summary = "flux-form advection of every variable by a horizontal wind; 2nd-order centred fluxes, doubly periodic"
    schedules = (BLOCK, CYCLIC)
    halo = 1

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents, "u": extents.replace(var=1), "v": extents.replace(var=1)}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return {
            "q": smooth_field(extents, seed).astype(dtype),
            "u": (10.0 + 5.0 * smooth_field(extents, seed + 1, nvar=1)).astype(dtype),
            "v": (-3.0 + 5.0 * smooth_field(extents, seed + 2, nvar=1)).astype(dtype),
        }

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        q, u, v = (logical[k].astype(np.float64) for k in "quv")
        return advection_reference(q, u, v, SPACING)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        f = problem.fields
        g = row_geometry(f["q"], self.halo, merge_vertical=False)
        w = row_geometry(f["u"], self.halo, merge_vertical=False, zero_var_stride=True)
        args = (
            f["q"].data.reshape(-1), f["u"].data.reshape(-1), f["v"].data.reshape(-1),
            problem.output.data.reshape(-1),
            g.counts, g.strides, g.jmul, g.imul, g.dy, g.dx,
            w.strides, w.dy, w.dx, g.edge,
            problem.dtype.type(-0.25 / SPACING),
            thread_count(),
            int(schedule.name == "cyclic"),
        )
        return ROWS, args

    def flops(self, extents: Extents) -> int:
        # Per point: 7 for the x flux difference, 7 for y, 1 add, 1 multiply.
        return 16 * extents.points

    def traffic_bytes(self, extents: Extents, dtype: Any) -> int:
        # Read q and write out (var*z*y*x each); read u and v (z*y*x each).
        item = np.dtype(dtype).itemsize
        return (2 * extents.points + 2 * extents.z * extents.y * extents.x) * item

    def tolerance(self, dtype: Any) -> float:
        # Products of sums of winds (~15) and values (~2) in a difference: ~8 terms of size ~30.
        return stencil_tolerance(dtype, terms=8 * 30)


def advection_reference(q: np.ndarray, u: np.ndarray, v: np.ndarray, h: float) -> np.ndarray:
    """Centred flux-form tendency with NumPy: shifted views of periodically padded arrays, no loops."""
    qp, up, vp = periodic_pad(q, 1), periodic_pad(u, 1), periodic_pad(v, 1)
    s = shifted
    fx = (u + s(up, 1, 0, 1)) * (q + s(qp, 1, 0, 1)) - (s(up, 1, 0, -1) + u) * (s(qp, 1, 0, -1) + q)
    fy = (v + s(vp, 1, 1, 0)) * (q + s(qp, 1, 1, 0)) - (s(vp, 1, -1, 0) + v) * (s(qp, 1, -1, 0) + q)
    return -(fx + fy) / (4.0 * h)


register(Advection())
