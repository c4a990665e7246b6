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
from kernels.jit import Compiled, build
from kernels.parallel import chunk, thread_count
from kernels.registry import register


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


COLUMNS = build(solve_columns)
STRIPS = build(solve_strips)


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
        width = schedule.param("width", STRIP_WIDTH)
        return STRIPS, (*views, ext.z, ext.var, dt.type(1), np.zeros((thread_count(), 3, ext.z, width), dt))

    def factorised_systems(self, extents: Extents) -> int:
        return extents.y * extents.x


register(SharedCoef())
