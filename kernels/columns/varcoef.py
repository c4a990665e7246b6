"""``varcoef``: every (variable, column) has its own tridiagonal system, all four 3-D fields.

Source: backward-Euler vertical diffusion on a stretched grid, with a diffusivity varying with
height, horizontally and per variable.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Problem, Schedule
from kernels.columns.common import (COLUMN, PAIRED, QUADS, STRIP, STRIP_WIDTH, ColumnSolve, column_offset, column_view,
                                    field_coefficient_inputs)
from kernels.grid import Extents
from kernels.jit import Compiled, build
from kernels.parallel import chunk, thread_count
from kernels.registry import register


def solve_columns(a, b, c, d, x, nz, one, cp):  # type: ignore[no-untyped-def]
    """Thomas along z for each column of the (outer, z, inner) views; cp is (threads, nz) scratch."""
    inner = a.shape[2]
    ncol = a.shape[0] * inner
    nchunks = cp.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(ncol, nchunks, t)
        for col in range(lo, hi):
            o = col // inner
            i = col - o * inner
            inv = one / b[o, 0, i]
            cp[t, 0] = c[o, 0, i] * inv
            x[o, 0, i] = d[o, 0, i] * inv
            for k in range(1, nz):
                m = one / (b[o, k, i] - a[o, k, i] * cp[t, k - 1])
                cp[t, k] = c[o, k, i] * m
                x[o, k, i] = (d[o, k, i] - a[o, k, i] * x[o, k - 1, i]) * m
            for k in range(nz - 2, -1, -1):
                x[o, k, i] -= cp[t, k] * x[o, k + 1, i]


def solve_strips(a, b, c, d, x, nz, one, cp):  # type: ignore[no-untyped-def]
    """Thomas over strips of ``cp.shape[2]`` adjacent columns; inner loop along the strip."""
    inner = a.shape[2]
    width = cp.shape[2]
    nstrip = (inner + width - 1) // width
    nitems = a.shape[0] * nstrip
    nchunks = cp.shape[0]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            o = item // nstrip
            s0 = (item - o * nstrip) * width
            w = min(width, inner - s0)
            for ii in range(w):
                s, i = np.uintp(ii), np.uintp(s0 + ii)  # unsigned: no negative-index wrap, so SIMD
                inv = one / b[o, 0, i]
                cp[t, 0, s] = c[o, 0, i] * inv
                x[o, 0, i] = d[o, 0, i] * inv
            for k in range(1, nz):
                for ii in range(w):
                    s, i = np.uintp(ii), np.uintp(s0 + ii)
                    m = one / (b[o, k, i] - a[o, k, i] * cp[t, k - 1, s])
                    cp[t, k, s] = c[o, k, i] * m
                    x[o, k, i] = (d[o, k, i] - a[o, k, i] * x[o, k - 1, i]) * m
            for k in range(nz - 2, -1, -1):
                for ii in range(w):
                    s, i = np.uintp(ii), np.uintp(s0 + ii)
                    x[o, k, i] -= cp[t, k, s] * x[o, k + 1, i]


def solve_pairs(a, b, c, d, x, nz, one, cp):  # type: ignore[no-untyped-def]
    """Thomas along z for two columns at once, their recurrences interleaved; cp is (threads, 2 * nz).

    One column's chain waits on a division every level; two independent chains in one loop let
    the core overlap them. The views are walked through flat offsets stepped by the level stride
    (as a C loop would), which measured faster than 3-D indexing. With an odd count the last pair
    is one column twice (same values).
    """
    outer, zext, inner = a.shape[0], a.shape[1], a.shape[2]
    fa, fb, fc, fd, fx = a.reshape(-1), b.reshape(-1), c.reshape(-1), d.reshape(-1), x.reshape(-1)
    ncol = outer * inner
    npair = (ncol + 1) // 2
    nchunks = cp.shape[0]
    step = np.uintp(inner)
    for t in prange(nchunks):
        lo, hi = chunk(npair, nchunks, t)
        ws = cp[t]
        for pair in range(lo, hi):
            u, v = column_offset(2 * pair, zext, inner), column_offset(min(2 * pair + 1, ncol - 1), zext, inner)
            r0, r1 = one / fb[u], one / fb[v]
            c0, c1 = fc[u] * r0, fc[v] * r1
            x0, x1 = fd[u] * r0, fd[v] * r1
            ws[0], ws[nz] = c0, c1
            fx[u], fx[v] = x0, x1
            for kk in range(1, nz):
                k = np.uintp(kk)  # unsigned: no negative-index wrap
                u, v = u + step, v + step
                r0, r1 = one / (fb[u] - fa[u] * c0), one / (fb[v] - fa[v] * c1)
                x0, x1 = (fd[u] - fa[u] * x0) * r0, (fd[v] - fa[v] * x1) * r1
                c0, c1 = fc[u] * r0, fc[v] * r1
                ws[k], ws[k + np.uintp(nz)] = c0, c1
                fx[u], fx[v] = x0, x1
            for kk in range(nz - 2, -1, -1):
                k = np.uintp(kk)
                u, v = u - step, v - step
                x0, x1 = fx[u] - ws[k] * x0, fx[v] - ws[k + np.uintp(nz)] * x1
                fx[u], fx[v] = x0, x1


def solve_quads(a, b, c, d, x, nz, one, cp):  # type: ignore[no-untyped-def]
    """``solve_pairs`` with four columns interleaved (block width 4); cp is (threads, 4 * nz). The
    last group repeats the last column to make four."""
    outer, zext, inner = a.shape[0], a.shape[1], a.shape[2]
    fa, fb, fc, fd, fx = a.reshape(-1), b.reshape(-1), c.reshape(-1), d.reshape(-1), x.reshape(-1)
    ncol = outer * inner
    nquad = (ncol + 3) // 4
    nchunks = cp.shape[0]
    step, n = np.uintp(inner), np.uintp(nz)
    for t in prange(nchunks):
        lo, hi = chunk(nquad, nchunks, t)
        ws = cp[t]
        for quad in range(lo, hi):
            last = ncol - 1
            u0, u1 = column_offset(4 * quad, zext, inner), column_offset(min(4 * quad + 1, last), zext, inner)
            u2, u3 = column_offset(min(4 * quad + 2, last), zext, inner), column_offset(min(4 * quad + 3, last), zext, inner)
            r0, r1, r2, r3 = one / fb[u0], one / fb[u1], one / fb[u2], one / fb[u3]
            c0, c1, c2, c3 = fc[u0] * r0, fc[u1] * r1, fc[u2] * r2, fc[u3] * r3
            x0, x1, x2, x3 = fd[u0] * r0, fd[u1] * r1, fd[u2] * r2, fd[u3] * r3
            ws[0], ws[n], ws[2 * n], ws[3 * n] = c0, c1, c2, c3
            fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3
            for kk in range(1, nz):
                k = np.uintp(kk)  # unsigned: no negative-index wrap
                u0, u1, u2, u3 = u0 + step, u1 + step, u2 + step, u3 + step
                r0, r1 = one / (fb[u0] - fa[u0] * c0), one / (fb[u1] - fa[u1] * c1)
                r2, r3 = one / (fb[u2] - fa[u2] * c2), one / (fb[u3] - fa[u3] * c3)
                x0, x1 = (fd[u0] - fa[u0] * x0) * r0, (fd[u1] - fa[u1] * x1) * r1
                x2, x3 = (fd[u2] - fa[u2] * x2) * r2, (fd[u3] - fa[u3] * x3) * r3
                c0, c1, c2, c3 = fc[u0] * r0, fc[u1] * r1, fc[u2] * r2, fc[u3] * r3
                ws[k], ws[k + n], ws[k + 2 * n], ws[k + 3 * n] = c0, c1, c2, c3
                fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3
            for kk in range(nz - 2, -1, -1):
                k = np.uintp(kk)
                u0, u1, u2, u3 = u0 - step, u1 - step, u2 - step, u3 - step
                x0, x1 = fx[u0] - ws[k] * x0, fx[u1] - ws[k + n] * x1
                x2, x3 = fx[u2] - ws[k + 2 * n] * x2, fx[u3] - ws[k + 3 * n] * x3
                fx[u0], fx[u1], fx[u2], fx[u3] = x0, x1, x2, x3


COLUMNS = build(solve_columns)
STRIPS = build(solve_strips)
PAIRS = build(solve_pairs)
QUADS_SOLVE = build(solve_quads)


class VarCoef(ColumnSolve):
    name = "varcoef"
    summary = "tridiagonal solve per (variable, column); a, b, c, d all 3-D fields"
    schedules = (COLUMN, STRIP, PAIRED, QUADS)
    padding_value = {"b": 1.0}  # padded columns solve x = d = 0 instead of dividing by zero

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {k: extents for k in "abcd"}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return field_coefficient_inputs(extents, dtype, seed, coefficient_var=extents.var)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        f, ext, dt = problem.fields, problem.extents, problem.dtype
        views = tuple(column_view(f[k]) for k in "abcd") + (column_view(problem.output),)
        if schedule.name == "column":
            return COLUMNS, (*views, ext.z, dt.type(1), np.zeros((thread_count(), ext.z), dt))
        if schedule.name == "pairs":
            return PAIRS, (*views, ext.z, dt.type(1), np.zeros((thread_count(), 2 * ext.z), dt))
        if schedule.name == "quads":
            return QUADS_SOLVE, (*views, ext.z, dt.type(1), np.zeros((thread_count(), 4 * ext.z), dt))
        width = schedule.param("width", STRIP_WIDTH)
        return STRIPS, (*views, ext.z, dt.type(1), np.zeros((thread_count(), ext.z, width), dt))

    def factorised_systems(self, extents: Extents) -> int:
        return extents.var * extents.y * extents.x


register(VarCoef())
