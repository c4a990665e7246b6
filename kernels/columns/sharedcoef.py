"""``sharedcoef``: one tridiagonal system per column, shared by every variable (several right-hand sides).

The coefficient fields have var extent 1 and the state's layout. Each column is factorised once
into per-thread scratch and reused for every variable; where the var axis sits decides how far
apart in memory those right-hand sides are.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Problem, Schedule
from kernels.columns.common import ColumnSolve, STRIP_WIDTH, field_coefficient_inputs, shared_view
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, thread_count
from kernels.registry import register
from kernels.state import State


def solve_columns(a, b, c, d, x, nz, nvar, one, ws):  # type: ignore[no-untyped-def]
    """Views are (A, V1, B1, z, B2, V2, C), one of V1, V2 the var axis; ws is (threads, 3, nz).

    B1 and B2 are never both above 1, so one index ``ib`` serves whichever exists.
    """
    var_outside = d.shape[1] > 1  # else var is V2 (or has extent 1)
    b_outside = a.shape[2] > 1  # else B is B2 (or has extent 1)
    nb, nc = a.shape[2] * a.shape[4], a.shape[6]
    ncol = a.shape[0] * nb * nc
    nchunks = ws.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(ncol, nchunks, t)
        for col in range(lo, hi):
            ia = col // (nb * nc)
            rem = col - ia * nb * nc
            ib = rem // nc
            ic = rem - ib * nc
            ib1 = ib if b_outside else 0
            ib2 = ib - ib1
            r = one / b[ia, 0, ib1, 0, ib2, 0, ic]
            ws[t, 0, 0] = c[ia, 0, ib1, 0, ib2, 0, ic] * r
            ws[t, 1, 0] = r
            for k in range(1, nz):
                ak = a[ia, 0, ib1, k, ib2, 0, ic]
                r = one / (b[ia, 0, ib1, k, ib2, 0, ic] - ak * ws[t, 0, k - 1])
                ws[t, 0, k] = c[ia, 0, ib1, k, ib2, 0, ic] * r
                ws[t, 1, k] = r
                ws[t, 2, k] = ak
            for v in range(nvar):
                v1 = v if var_outside else 0
                v2 = v - v1
                x[ia, v1, ib1, 0, ib2, v2, ic] = d[ia, v1, ib1, 0, ib2, v2, ic] * ws[t, 1, 0]
                for k in range(1, nz):
                    x[ia, v1, ib1, k, ib2, v2, ic] = (d[ia, v1, ib1, k, ib2, v2, ic] - ws[t, 2, k] * x[ia, v1, ib1, k - 1, ib2, v2, ic]) * ws[t, 1, k]
                for k in range(nz - 2, -1, -1):
                    x[ia, v1, ib1, k, ib2, v2, ic] -= ws[t, 0, k] * x[ia, v1, ib1, k + 1, ib2, v2, ic]


def solve_strips(a, b, c, d, x, nz, nvar, one, ws):  # type: ignore[no-untyped-def]
    """Strips of ws.shape[3] adjacent columns along C; ws is (threads, 3, nz, width)."""
    var_outside = d.shape[1] > 1  # else var is V2 (or has extent 1)
    b_outside = a.shape[2] > 1  # else B is B2 (or has extent 1)
    nb, nc = a.shape[2] * a.shape[4], a.shape[6]
    width = ws.shape[3]
    nstrip = (nc + width - 1) // width
    nitems = a.shape[0] * nb * nstrip
    nchunks = ws.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            ia = item // (nb * nstrip)
            rem = item - ia * nb * nstrip
            ib = rem // nstrip
            s0 = (rem - ib * nstrip) * width
            w = min(width, nc - s0)
            ib1 = ib if b_outside else 0
            ib2 = ib - ib1
            for ii in range(w):
                s, i = np.uintp(ii), np.uintp(s0 + ii)  # unsigned: no negative-index wrap, so SIMD
                r = one / b[ia, 0, ib1, 0, ib2, 0, i]
                ws[t, 0, 0, s] = c[ia, 0, ib1, 0, ib2, 0, i] * r
                ws[t, 1, 0, s] = r
            for k in range(1, nz):
                for ii in range(w):
                    s, i = np.uintp(ii), np.uintp(s0 + ii)
                    ak = a[ia, 0, ib1, k, ib2, 0, i]
                    r = one / (b[ia, 0, ib1, k, ib2, 0, i] - ak * ws[t, 0, k - 1, s])
                    ws[t, 0, k, s] = c[ia, 0, ib1, k, ib2, 0, i] * r
                    ws[t, 1, k, s] = r
                    ws[t, 2, k, s] = ak
            for v in range(nvar):
                v1 = v if var_outside else 0
                v2 = v - v1
                for ii in range(w):
                    s, i = np.uintp(ii), np.uintp(s0 + ii)
                    x[ia, v1, ib1, 0, ib2, v2, i] = d[ia, v1, ib1, 0, ib2, v2, i] * ws[t, 1, 0, s]
                for k in range(1, nz):
                    for ii in range(w):
                        s, i = np.uintp(ii), np.uintp(s0 + ii)
                        x[ia, v1, ib1, k, ib2, v2, i] = (d[ia, v1, ib1, k, ib2, v2, i] - ws[t, 2, k, s] * x[ia, v1, ib1, k - 1, ib2, v2, i]) * ws[t, 1, k, s]
                for k in range(nz - 2, -1, -1):
                    for ii in range(w):
                        s, i = np.uintp(ii), np.uintp(s0 + ii)
                        x[ia, v1, ib1, k, ib2, v2, i] -= ws[t, 0, k, s] * x[ia, v1, ib1, k + 1, ib2, v2, i]


@inline
def column_indices(col, nb, nc, b_outside):  # type: ignore[no-untyped-def]
    """``(ia, ib1, ib2, ic)`` of flat column ``col`` of the (A, V1, B1, z, B2, V2, C) views, unsigned."""
    ia = col // (nb * nc)
    rem = col - ia * nb * nc
    ib = rem // nc
    ib1 = ib if b_outside else 0
    u = np.uintp
    return u(ia), u(ib1), u(ib - ib1), u(rem - ib * nc)


def solve_pairs(a, b, c, d, x, nz, nvar, one, ws):  # type: ignore[no-untyped-def]
    """Two columns at once: factorisations interleaved, then each variable's substitutions
    interleaved (see varcoef's pairs); ws is (threads, 2, 3, nz)."""
    var_outside = d.shape[1] > 1
    b_outside = a.shape[2] > 1
    nb, nc = a.shape[2] * a.shape[4], a.shape[6]
    ncol = a.shape[0] * nb * nc
    npair = (ncol + 1) // 2
    nchunks = ws.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(npair, nchunks, t)
        for pair in range(lo, hi):
            ia, ib1, ib2, ic = column_indices(2 * pair, nb, nc, b_outside)
            ja, jb1, jb2, jc = column_indices(min(2 * pair + 1, ncol - 1), nb, nc, b_outside)
            r0, r1 = one / b[ia, 0, ib1, 0, ib2, 0, ic], one / b[ja, 0, jb1, 0, jb2, 0, jc]
            c0, c1 = c[ia, 0, ib1, 0, ib2, 0, ic] * r0, c[ja, 0, jb1, 0, jb2, 0, jc] * r1
            ws[t, 0, 0, 0], ws[t, 1, 0, 0], ws[t, 0, 1, 0], ws[t, 1, 1, 0] = c0, c1, r0, r1
            for kk in range(1, nz):
                k = np.uintp(kk)  # unsigned: no negative-index wrap
                a0, a1 = a[ia, 0, ib1, k, ib2, 0, ic], a[ja, 0, jb1, k, jb2, 0, jc]
                r0, r1 = one / (b[ia, 0, ib1, k, ib2, 0, ic] - a0 * c0), one / (b[ja, 0, jb1, k, jb2, 0, jc] - a1 * c1)
                c0, c1 = c[ia, 0, ib1, k, ib2, 0, ic] * r0, c[ja, 0, jb1, k, jb2, 0, jc] * r1
                ws[t, 0, 0, k], ws[t, 1, 0, k], ws[t, 0, 1, k], ws[t, 1, 1, k] = c0, c1, r0, r1
                ws[t, 0, 2, k], ws[t, 1, 2, k] = a0, a1
            for v in range(nvar):
                v1 = np.uintp(v if var_outside else 0)
                v2 = np.uintp(v) - v1
                x0, x1 = d[ia, v1, ib1, 0, ib2, v2, ic] * ws[t, 0, 1, 0], d[ja, v1, jb1, 0, jb2, v2, jc] * ws[t, 1, 1, 0]
                x[ia, v1, ib1, 0, ib2, v2, ic], x[ja, v1, jb1, 0, jb2, v2, jc] = x0, x1
                for kk in range(1, nz):
                    k = np.uintp(kk)
                    x0 = (d[ia, v1, ib1, k, ib2, v2, ic] - ws[t, 0, 2, k] * x0) * ws[t, 0, 1, k]
                    x1 = (d[ja, v1, jb1, k, jb2, v2, jc] - ws[t, 1, 2, k] * x1) * ws[t, 1, 1, k]
                    x[ia, v1, ib1, k, ib2, v2, ic], x[ja, v1, jb1, k, jb2, v2, jc] = x0, x1
                for kk in range(nz - 2, -1, -1):
                    k = np.uintp(kk)
                    x0 = x[ia, v1, ib1, k, ib2, v2, ic] - ws[t, 0, 0, k] * x0
                    x1 = x[ja, v1, jb1, k, jb2, v2, jc] - ws[t, 1, 0, k] * x1
                    x[ia, v1, ib1, k, ib2, v2, ic], x[ja, v1, jb1, k, jb2, v2, jc] = x0, x1


COLUMNS = build(solve_columns)
STRIPS = build(solve_strips)
PAIRS = build(solve_pairs)


class SharedCoef(ColumnSolve):
    name = "sharedcoef"
    summary = "one tridiagonal system per column shared by all variables; a, b, c 3-D with var extent 1"
    padding_value = {"b": 1.0}

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        shared = extents.replace(var=1)
        return {"a": shared, "b": shared, "c": shared, "d": extents}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return field_coefficient_inputs(extents, dtype, seed, coefficient_var=1)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        f, ext, dt = problem.fields, problem.extents, problem.dtype
        views = tuple(shared_view(f[k]) for k in "abcd") + (shared_view(problem.output),)
        if schedule.name == "column":
            return COLUMNS, (*views, ext.z, ext.var, dt.type(1), np.zeros((thread_count(), 3, ext.z), dt))
        if schedule.name == "pairs":
            return PAIRS, (*views, ext.z, ext.var, dt.type(1), np.zeros((thread_count(), 2, 3, ext.z), dt))
        width = schedule.param("width", STRIP_WIDTH)
        return STRIPS, (*views, ext.z, ext.var, dt.type(1), np.zeros((thread_count(), 3, ext.z, width), dt))

    def strip_extent(self, state: State) -> int:
        """Strips sweep C, the storage extent inside both z and var."""
        shape, layout = state.data.shape, state.layout
        return int(np.prod(shape[max(layout.index_of("z"), layout.index_of("var")) + 1 :], dtype=np.int64))

    def factorised_systems(self, extents: Extents) -> int:
        return extents.y * extents.x


register(SharedCoef())
