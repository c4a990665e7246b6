"""``levelcoef``: coefficients depend on the level only (1-D); right-hand side and solution are 3-D.

The factorisation is done once per call (O(nz)); each column then only runs the substitutions,
so the kernel moves two fields instead of five and layouts rank differently than for varcoef.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Problem, Schedule
from kernels.columns.common import (COLUMN, PAIRED, QUADS, STRIP, STRIP_WIDTH, ColumnSolve, column_offset, column_view,
                                    diffusion_coefficients, interface_diffusivity, right_hand_side)
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, thread_count
from kernels.registry import register


@inline
def factorise_levels(a, b, c, nz, one, fac):  # type: ignore[no-untyped-def]
    """fac[0] = modified super-diagonal c', fac[1] = reciprocal pivots 1/m."""
    fac[1, 0] = one / b[0]
    fac[0, 0] = c[0] * fac[1, 0]
    for k in range(1, nz):
        fac[1, k] = one / (b[k] - a[k] * fac[0, k - 1])
        fac[0, k] = c[k] * fac[1, k]


def solve_columns(a, b, c, d, x, nz, one, fac, nchunks):  # type: ignore[no-untyped-def]
    """Substitutions along z, one column at a time, over (outer, z, inner) views."""
    factorise_levels(a, b, c, nz, one, fac)
    inner = d.shape[2]
    ncol = d.shape[0] * inner
    for t in prange(nchunks):
        lo, hi = chunk(ncol, nchunks, t)
        for col in range(lo, hi):
            o = col // inner
            i = col - o * inner
            x[o, 0, i] = d[o, 0, i] * fac[1, 0]
            for k in range(1, nz):
                x[o, k, i] = (d[o, k, i] - a[k] * x[o, k - 1, i]) * fac[1, k]
            for k in range(nz - 2, -1, -1):
                x[o, k, i] -= fac[0, k] * x[o, k + 1, i]


def solve_strips(a, b, c, d, x, nz, one, fac, nchunks, width):  # type: ignore[no-untyped-def]
    """Substitutions over strips of ``width`` adjacent columns; inner loop along the strip."""
    factorise_levels(a, b, c, nz, one, fac)
    inner = d.shape[2]
    nstrip = (inner + width - 1) // width
    nitems = d.shape[0] * nstrip
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            o = item // nstrip
            s0 = (item - o * nstrip) * width
            w = min(width, inner - s0)
            r0 = fac[1, 0]
            for ii in range(w):
                i = np.uintp(s0 + ii)  # unsigned: no negative-index wrap, so SIMD
                x[o, 0, i] = d[o, 0, i] * r0
            for k in range(1, nz):
                ak, rk = a[k], fac[1, k]
                for ii in range(w):
                    i = np.uintp(s0 + ii)
                    x[o, k, i] = (d[o, k, i] - ak * x[o, k - 1, i]) * rk
            for k in range(nz - 2, -1, -1):
                ck = fac[0, k]
                for ii in range(w):
                    i = np.uintp(s0 + ii)
                    x[o, k, i] -= ck * x[o, k + 1, i]


def solve_pairs(a, b, c, d, x, nz, one, fac, nchunks):  # type: ignore[no-untyped-def]
    """Substitutions for two columns at once, their recurrences interleaved, through flat offsets
    stepped by the level stride (see varcoef's pairs)."""
    factorise_levels(a, b, c, nz, one, fac)
    outer, zext, inner = d.shape[0], d.shape[1], d.shape[2]
    fd, fx = d.reshape(-1), x.reshape(-1)
    ncol = outer * inner
    npair = (ncol + 1) // 2
    step = np.uintp(inner)
    for t in prange(nchunks):
        lo, hi = chunk(npair, nchunks, t)
        for pair in range(lo, hi):
            u, v = column_offset(2 * pair, zext, inner), column_offset(min(2 * pair + 1, ncol - 1), zext, inner)
            x0, x1 = fd[u] * fac[1, 0], fd[v] * fac[1, 0]
            fx[u], fx[v] = x0, x1
            for kk in range(1, nz):
                k = np.uintp(kk)  # unsigned: no negative-index wrap
                u, v = u + step, v + step
                ak, rk = a[k], fac[1, k]
                x0, x1 = (fd[u] - ak * x0) * rk, (fd[v] - ak * x1) * rk
                fx[u], fx[v] = x0, x1
            for kk in range(nz - 2, -1, -1):
                k = np.uintp(kk)
                u, v = u - step, v - step
                ck = fac[0, k]
                x0, x1 = fx[u] - ck * x0, fx[v] - ck * x1
                fx[u], fx[v] = x0, x1


def solve_quads(a, b, c, d, x, nz, one, fac, nchunks):  # type: ignore[no-untyped-def]
    """``solve_pairs`` with four columns interleaved (block width 4); the last group repeats the
    last column to make four."""
    factorise_levels(a, b, c, nz, one, fac)
    outer, zext, inner = d.shape[0], d.shape[1], d.shape[2]
    fd, fx = d.reshape(-1), x.reshape(-1)
    ncol = outer * inner
    nquad = (ncol + 3) // 4
    step = np.uintp(inner)
    for t in prange(nchunks):
        lo, hi = chunk(nquad, nchunks, t)
        for quad in range(lo, hi):
            last = ncol - 1
            u0, u1 = column_offset(4 * quad, zext, inner), column_offset(min(4 * quad + 1, last), zext, inner)
            u2, u3 = column_offset(min(4 * quad + 2, last), zext, inner), column_offset(min(4 * quad + 3, last), zext, inner)
            r0 = fac[1, 0]
            x0, x1, x2, x3 = fd[u0] * r0, fd[u1] * r0, fd[u2] * r0, fd[u3] * r0
            fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3
            for kk in range(1, nz):
                k = np.uintp(kk)  # unsigned: no negative-index wrap
                u0, u1, u2, u3 = u0 + step, u1 + step, u2 + step, u3 + step
                ak, rk = a[k], fac[1, k]
                x0, x1 = (fd[u0] - ak * x0) * rk, (fd[u1] - ak * x1) * rk
                x2, x3 = (fd[u2] - ak * x2) * rk, (fd[u3] - ak * x3) * rk
                fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3
            for kk in range(nz - 2, -1, -1):
                k = np.uintp(kk)
                u0, u1, u2, u3 = u0 - step, u1 - step, u2 - step, u3 - step
                ck = fac[0, k]
                x0, x1, x2, x3 = fx[u0] - ck * x0, fx[u1] - ck * x1, fx[u2] - ck * x2, fx[u3] - ck * x3
                fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3


COLUMNS = build(solve_columns)
STRIPS = build(solve_strips)
PAIRS = build(solve_pairs)
QUADS_SOLVE = build(solve_quads)


class LevelCoef(ColumnSolve):
    name = "levelcoef"
    summary = "tridiagonal solve per (variable, column); a, b, c per level only (1-D), d 3-D"
    schedules = (COLUMN, STRIP, PAIRED, QUADS)

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"a": extents.z, "b": extents.z, "c": extents.z, "d": extents}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        a, b, c = diffusion_coefficients(interface_diffusivity(extents.z).reshape(1, -1), dt=600.0)
        d = right_hand_side(extents, seed + 1)
        return {"a": a[0].astype(dtype), "b": b[0].astype(dtype), "c": c[0].astype(dtype), "d": d.astype(dtype)}

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        arr, ext, dt = problem.arrays, problem.extents, problem.dtype
        common = (arr["a"], arr["b"], arr["c"], column_view(problem.fields["d"]), column_view(problem.output))
        fac = np.zeros((2, ext.z), dt)
        if schedule.name == "column":
            return COLUMNS, (*common, ext.z, dt.type(1), fac, thread_count())
        if schedule.name == "pairs":
            return PAIRS, (*common, ext.z, dt.type(1), fac, thread_count())
        if schedule.name == "quads":
            return QUADS_SOLVE, (*common, ext.z, dt.type(1), fac, thread_count())
        return STRIPS, (*common, ext.z, dt.type(1), fac, thread_count(), schedule.param("width", STRIP_WIDTH))

    def factorised_systems(self, extents: Extents) -> int:
        return 1


register(LevelCoef())
