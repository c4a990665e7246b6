"""Limited-area stencils: the subdomain's halo is stored in the state and read, never wrapped.

The grid's y and x are the stored extents, halo included; a stencil writes the interior, ``halo``
cells in from every side, and leaves the halo of its output alone (an exchange refills it). The
walks are the periodic stencils' row walk and band walk, clipped to the interior: interior points
never reach past the halo, so the periodic tables (and wrapped scratch rows) give their plain
neighbours and the wrapped values are never read.
"""

from __future__ import annotations

import copy
from typing import Any, Callable

import numpy as np
from numba import prange

from kernels.base import Problem, Schedule
from kernels.errors import KernelError
from kernels.grid import Extents
from kernels.jit import Compiled, bound_copy, build
from kernels.parallel import chunk, dot4, thread_count, unflatten4
from kernels.stencils.bands import band_geometry, copy_band_rows, scratch_offsets
from kernels.stencils.common import _PIECES, CYCLIC, Stencil, row_geometry, row_length

_offsets: Callable[..., Any] | None = None
_point: Callable[..., Any] | None = None


def _limited(q, out, extra, counts, strides, jmul, imul, dy, dx, edge, bounds, consts, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """The row walk with every row clipped to the interior box ``bounds`` = (j0, j1, i0, i1)."""
    n4 = counts[4]
    ny, nx = dy.shape[1], dx.shape[1]
    j_lo, j_hi, i_lo, i_hi = bounds[0], bounds[1], bounds[2], bounds[3]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    tj, ti = jmul[5], imul[5]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base = dot4(i0, i1, i2, i3, strides)
            j0, x0 = dot4(i0, i1, i2, i3, jmul), dot4(i0, i1, i2, i3, imul)
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                j, i = j0 + i4 * jmul[4], x0 + i4 * imul[4]
                if j >= ny or i >= nx:  # a row in the unused part of a partial last tile
                    continue
                nrow = row_length(counts[5], j, i, tj, ti, ny, nx)
                first, last = 0, nrow  # the row's elements inside the interior box
                if tj > 0:
                    first, last = max(first, (j_lo - j + tj - 1) // tj), min(last, (j_hi - j + tj - 1) // tj)
                elif j < j_lo or j >= j_hi:
                    continue
                if ti > 0:
                    first, last = max(first, (i_lo - i + ti - 1) // ti), min(last, (i_hi - i + ti - 1) // ti)
                elif i < i_lo or i >= i_hi:
                    continue
                a, b = max(first, edge), min(last, nrow - edge)
                if b > a:  # constant displacements: a plain SIMD loop
                    offs = _offsets(dy, dx, dy, dx, j + a * tj, i + a * ti)
                    for tt in range(a, b):
                        _point(q, out, extra, rb + tt, rb + tt, offs, consts)
                for tt in range(first, min(a, last)):  # near a tile edge: per element
                    offs = _offsets(dy, dx, dy, dx, j + tt * tj, i + tt * ti)
                    _point(q, out, extra, rb + tt, rb + tt, offs, consts)
                for tt in range(max(a, b), last):
                    offs = _offsets(dy, dx, dy, dx, j + tt * tj, i + tt * ti)
                    _point(q, out, extra, rb + tt, rb + tt, offs, consts)


def _limited_bands(q, out, extra, counts, strides, jmul, yoff, runs, nx, tile_y, tile_x, halo, bounds, sdy, sdx, qs, os, consts, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """The band walk for tiled layouts, clipped to the interior ``bounds`` = (j0, j1, i0, i1):
    each band (one tile row of a level, all of x, ``halo`` rows above and below) is copied into
    scratch as plain rows; interior points are computed there and only they are copied back."""
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    ny = yoff.shape[0] - 2 * halo
    frame = nx + 2 * halo
    j_lo, j_hi, i_lo, i_hi = bounds[0], bounds[1], bounds[2], bounds[3]
    u = np.uintp
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        offs = _offsets(sdy, sdx, sdy, sdx, 0, 0)
        qt, ot = qs[t], os[t]
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            rest = dot4(i0, i1, i2, i3, strides)
            j0 = dot4(i0, i1, i2, i3, jmul)
            r_lo, r_hi = max(j_lo - j0, 0), min(j_hi - j0, tile_y, ny - j0)  # the band's interior rows
            if r_hi <= r_lo:
                continue
            # those rows and their halo rows (stored, never wrapped)
            copy_band_rows(q, qt, rest, yoff, runs, j0, r_lo, r_hi + 2 * halo, frame, halo, tile_x, nx)
            for r in range(r_lo, r_hi):
                p0 = (r + halo) * frame + halo
                for c in range(i_lo, i_hi):
                    _point(qt, ot, extra, p0 + c, p0 + c, offs, consts)
                yo = rest + yoff[j0 + halo + r]
                for run in range(runs.shape[0]):
                    c0, c1 = max(i_lo, run * tile_x), min(i_hi, run * tile_x + tile_x, nx)
                    for c in range(c0, c1):
                        out[u(yo + runs[run] + c - run * tile_x)] = ot[u(p0 + c)]


def limited_walk(name: str, offsets: Callable[..., Any], point: Callable[..., Any]) -> Compiled:
    """The compiled limited-area walk of one stencil, from the same two pieces as ``row_walk``."""
    compiled = build(bound_copy(_limited, f"{name}_interior_rows", _offsets=offsets, _point=point))
    _BANDS[compiled.name] = build(bound_copy(_limited_bands, f"{name}_interior_bands", _offsets=offsets, _point=point))
    _PIECES[compiled.name] = (f"{name}_interior", offsets, point)
    return compiled


#: The clipped band walk of each limited-area stencil, by its row walk's compiled name.
_BANDS: dict[str, Compiled] = {}


class LimitedArea(Stencil):
    """A stencil of radius ``radius`` on a subdomain with a stored halo of ``halo`` cells (the
    suite sets it: ``kernels.options.NAME.halo``; at least the radius)."""

    radius = 1
    halo = 1
    walk: Compiled

    def with_options(self, **options: Any) -> LimitedArea:
        """A copy with another halo width."""
        halo = options.get("halo", self.halo)
        if isinstance(halo, bool) or not isinstance(halo, int) or halo < self.radius:
            raise KernelError(f"{self.name}: halo must be an integer of at least the stencil's radius {self.radius}, got {halo!r}")
        configured = copy.copy(self)
        configured.halo = halo
        return configured

    @property
    def min_horizontal(self) -> int:  # type: ignore[override]
        return 2 * self.halo + 1

    def interior(self, extents: Extents) -> tuple[int, int, int, int]:
        h = self.halo
        return h, extents.y - h, h, extents.x - h

    def defined_output(self, extents: Extents) -> np.ndarray:
        j0, j1, i0, i1 = self.interior(extents)
        mask = np.zeros((1, 1, extents.y, extents.x), dtype=bool)
        mask[:, :, j0:j1, i0:i1] = True
        return mask

    def interior_points(self, extents: Extents) -> int:
        j0, j1, i0, i1 = self.interior(extents)
        return extents.var * extents.z * (j1 - j0) * (i1 - i0)

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """A row along var or z runs whole; a row of all of x runs its interior; a row of one
        x tile runs between the edge elements looked up one by one."""
        if self._walks_bands(problem) or problem.fields["q"].layout.flat_block:
            return problem.extents.x - 2 * self.halo
        g = row_geometry(problem.fields["q"], self.radius, self.merge_vertical)
        row = int(g.counts[-1])
        if g.edge == 0:
            return row
        if row >= problem.extents.x:
            return problem.extents.x - 2 * self.halo
        return max(row - 2 * g.edge, 0)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        q = problem.fields["q"]
        if q.layout.flat_block:
            return self.plane_implementation(problem, schedule, self.interior(problem.extents), self.radius, False)
        bounds = np.array(self.interior(problem.extents), dtype=np.int64)
        if self._walks_bands(problem):
            h = self.radius
            g = band_geometry(q, h)
            frame = problem.extents.x + 2 * h
            sdy, sdx = scratch_offsets(h, frame)
            scratch = lambda: np.zeros((thread_count(), (q.layout.tiles["y"] + 2 * h) * frame), problem.dtype)  # noqa: E731
            args = (q.data.reshape(-1), problem.output.data.reshape(-1), (), g.counts, g.strides, g.jmul, g.yoff, g.runs,
                    problem.extents.x, q.layout.tiles["y"], q.layout.tiles["x"], h, bounds, sdy, sdx, scratch(), scratch(),
                    self.constants(problem.dtype), thread_count(), int(schedule.name == CYCLIC.name))
            return _BANDS[self.walk.name], args
        g = row_geometry(q, self.radius, self.merge_vertical)
        args = (q.data.reshape(-1), problem.output.data.reshape(-1), (), g.counts, g.strides, g.jmul, g.imul, g.dy, g.dx,
                g.edge, bounds, self.constants(problem.dtype), thread_count(), int(schedule.name == CYCLIC.name))
        return self.walk, args
