"""The plane walk of layouts that block the flattened horizontal index (``yx/N`` ... ``yx%N``).

There a block of N columns may straddle grid rows, so a neighbour's offset is no sum of a y and
an x term and the row walk's tables cannot describe it. Each thread instead gathers a band of
grid rows, with the stencil's halo rows, for a chunk of planes (consecutive levels, or
variables: whichever of z and var has the smaller stride) into scratch as plain rows of
``nx + 2h``, runs the stencil over those rows with constant offsets, and scatters the result
back. A row is copied in runs along the blocks it crosses, one offset-table read per run, the
loop along memory innermost. Fields walked alongside ``q`` (var extent 1) are gathered the same way.

Why chunks of planes: with the position in a block innermost, one plane's run of a block is N
values (256 bytes at N = 32 in float64) and the next run a whole block away; the same run for
the next level follows it in memory. Measured (hyperdiffusion, 4x137x96x96 float64, 1 thread,
shuffled rounds), ``yx/32.var.z.yx%32`` against ``var.z.y.x``: one plane per item 3.0x, of which
the gather and scatter alone were 18 of 23 ms; 6 planes 1.94x; 12 planes 1.63-1.76x.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from numba import prange

from kernels.jit import Compiled, bound_copy, build, inline
from kernels.base import Problem
from kernels.layout import FLAT, WITHIN, Layout
from kernels.parallel import chunk, dot4, unflatten4
from kernels.state import State
from kernels.stencils.bands import scratch_offsets

#: Grid rows per band, and the scratch budget (bytes per array and thread) that sets how many
#: planes (levels, or variables) one item gathers at once: runs of that many planes are
#: contiguous in memory where the position in a block is innermost, long enough to stream.
BAND_ROWS = 16
PLANE_BUDGET = 192 * 1024

_offsets: Callable[..., Any] | None = None
_point: Callable[..., Any] | None = None
#: Bound per stencil: whether it walks companion fields (var extent 1) alongside ``q``.
_companion = False


@dataclass(frozen=True)
class PlaneGeometry:
    """What the compiled plane walk needs about one state, as int64 arrays and counts."""

    counts: np.ndarray  # (1, outer plane axis, chunks of the inner one, bands)
    strides: np.ndarray  # element strides of those (0 for the band index)
    cstride: int  # element stride between the planes of a chunk (0: a field of var extent 1 chunked along var)
    planes: int  # extent of the chunked axis
    htab: np.ndarray  # element offset of each flattened horizontal index y * nx + x
    block: int  # points per block
    step: int  # element stride between neighbouring points of a block


def plane_axes(layout: Layout) -> tuple[str, str]:
    """(outer, inner) of var and z by stride: a chunk of planes runs along the inner one."""
    order = [t.axis for t in layout.tokens if t.axis in ("var", "z")]
    return order[0], order[1]


def plane_geometry(state: State, bands: int, chunk_planes: int, axes: tuple[str, str]) -> PlaneGeometry:
    """Plane-walk description of a state whose layout blocks the flattened horizontal index, for
    items of ``chunk_planes`` planes along ``axes[1]`` (a field of var extent 1 has var stride 0)."""
    layout, ext = state.layout, state.extents
    elem = [s // state.data.itemsize for s in state.data.strides]
    stride = {a: 0 if (a == "var" and ext.var == 1) else elem[layout.index_of(a)] for a in axes}
    outer, inner = axes
    n_inner = ext[inner]
    counts = [1, ext[outer], -(-n_inner // chunk_planes), bands]
    strides = [0, stride[outer], stride[inner] * chunk_planes, 0]
    pos = layout.index_of(FLAT, WITHIN)
    return PlaneGeometry(np.array(counts, dtype=np.int64), np.array(strides, dtype=np.int64), stride[inner], n_inner,
                         state.horizontal_offsets(), layout.tokens[pos].tile, elem[pos])


@inline
def gather_rows(dst, d0, plane, nk, src, s0, cstride, htab, hb, nx, block, step):  # type: ignore[no-untyped-def]
    """For each of ``nk`` planes (``cstride`` apart in ``src``), dst[d0 + kk * plane :][:nx] = the
    grid row whose first flattened index is ``hb``, copied in runs along the blocks it crosses
    (``step`` apart in ``src``), the loop along memory innermost."""
    u = np.uintp
    for b in range(hb // block, (hb + nx - 1) // block + 1):
        lo, hi = max(hb, b * block) - hb, min(hb + nx, b * block + block) - hb
        s = s0 + htab[hb + lo]
        if step <= cstride:
            for kk in range(nk):
                for k in range(hi - lo):
                    dst[u(d0 + kk * plane + lo + k)] = src[u(s + kk * cstride + k * step)]
        else:
            for k in range(hi - lo):
                for kk in range(nk):
                    dst[u(d0 + kk * plane + lo + k)] = src[u(s + kk * cstride + k * step)]


@inline
def scatter_rows(dst, s0, cstride, nk, src, d0, plane, htab, hb, c0, c1, block, step):  # type: ignore[no-untyped-def]
    """Columns [c0, c1) of each plane's plain row at src[d0 + kk * plane :] back to the grid row
    starting at flattened index ``hb``."""
    u = np.uintp
    for b in range((hb + c0) // block, (hb + c1 - 1) // block + 1):
        lo, hi = max(hb + c0, b * block) - hb, min(hb + c1, b * block + block) - hb
        s = s0 + htab[hb + lo]
        if step <= cstride:
            for kk in range(nk):
                for k in range(hi - lo):
                    dst[u(s + kk * cstride + k * step)] = src[u(d0 + kk * plane + lo + k)]
        else:
            for k in range(hi - lo):
                for kk in range(nk):
                    dst[u(s + kk * cstride + k * step)] = src[u(d0 + kk * plane + lo + k)]


@inline
def wrap_ring(dst, row, nk, plane, nx, halo):  # type: ignore[no-untyped-def]
    """The periodic ring of each plane's row at dst[row + kk * plane]: the far end of the row (any
    nx, even below the halo)."""
    u = np.uintp
    for kk in range(nk):
        r = row + kk * plane
        for c in range(halo):
            dst[u(r - halo + c)] = dst[u(r + (c - halo) % nx)]
            dst[u(r + nx + c)] = dst[u(r + c % nx)]


def _plane_walk(q, out, wsrc, counts, strides, wstrides, cstride, wcstride, nplanes, chunk_planes, htab, whtab,  # type: ignore[no-untyped-def]
                block, pstep, wstep, ny, nx, band, halo, bounds, periodic, sdy, sdx, qs, os, ws, consts, nchunks, cyclic):
    """Template of the plane walk; ``plane_walk`` binds ``_offsets``, ``_point`` and ``_companion``.

    An item is a band of ``band`` rows of up to ``chunk_planes`` planes; bands cover rows
    [bounds[0], bounds[1]) and write columns [bounds[2], bounds[3]). ``periodic``: halo rows and
    columns wrap; else they are the stored neighbours (the bounds keep every read inside the
    grid). ``ws``: one scratch array per companion field, ``size`` elements per thread, read by
    the point at ``t * size + p`` (one plane for all when the companion does not vary along the
    chunked axis, ``wcstride`` 0)."""
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    j_lo, j_hi, i_lo, i_hi = bounds[0], bounds[1], bounds[2], bounds[3]
    frame = nx + 2 * halo
    plane = (band + 2 * halo) * frame
    size = chunk_planes * plane
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        offs = _offsets(sdy, sdx, sdy, sdx, 0, 0)
        qt, ot = qs[t], os[t]
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            rest, wrest = dot4(i0, i1, i2, 0, strides), dot4(i0, i1, i2, 0, wstrides)
            nk = min(chunk_planes, nplanes - i2 * chunk_planes)
            wk = nk if wcstride != 0 else 1
            j0 = j_lo + i3 * band
            rows = min(band, j_hi - j0)
            for r in range(rows + 2 * halo):
                j = j0 - halo + r
                if periodic:
                    j = j % ny
                hb, srow = j * nx, r * frame + halo
                gather_rows(qt, srow, plane, nk, q, rest, cstride, htab, hb, nx, block, pstep)
                if periodic:
                    wrap_ring(qt, srow, nk, plane, nx, halo)
                if _companion:
                    for e in range(len(wsrc)):
                        gather_rows(ws[e], t * size + srow, plane, wk, wsrc[e], wrest, wcstride, whtab, hb, nx, block, wstep)
                        if periodic:
                            wrap_ring(ws[e], t * size + srow, wk, plane, nx, halo)
            for kk in range(nk):
                for r in range(rows):
                    p0 = kk * plane + (r + halo) * frame + halo
                    if _companion:
                        pw0 = t * size + (kk * plane if wk > 1 else 0) + (r + halo) * frame + halo
                        for c in range(i_lo, i_hi):
                            _point(qt, ot, ws, p0 + c, pw0 + c, offs, consts)
                    else:
                        for c in range(i_lo, i_hi):
                            _point(qt, ot, (), p0 + c, p0 + c, offs, consts)
            for r in range(rows):
                scatter_rows(out, rest, cstride, nk, ot, (r + halo) * frame + halo, plane, htab, (j0 + r) * nx, i_lo, i_hi, block, pstep)


def plane_walk(name: str, offsets: Callable[..., Any], point: Callable[..., Any], companion: bool) -> Compiled:
    """The compiled plane walk of one stencil (pieces as in ``row_walk``, bound as globals)."""
    return build(bound_copy(_plane_walk, f"{name}_planes", _offsets=offsets, _point=point, _companion=companion))


def plane_arguments(problem: Problem, bounds: tuple[int, int, int, int], halo: int, periodic: bool,
                    threads: int) -> tuple[Any, ...]:
    """The plane walk's arguments up to the scratch (the caller adds constants, threads, cyclic):
    bands and chunks sized by ``BAND_ROWS`` and ``PLANE_BUDGET``."""
    q, ext = problem.fields["q"], problem.extents
    band = min(BAND_ROWS, bounds[1] - bounds[0])
    frame = ext.x + 2 * halo
    plane = (band + 2 * halo) * frame
    axes = plane_axes(q.layout)
    chunk_planes = max(1, min(ext[axes[1]], PLANE_BUDGET // (plane * problem.dtype.itemsize)))
    g = plane_geometry(q, -(-(bounds[1] - bounds[0]) // band), chunk_planes, axes)
    others = [st for key, st in problem.fields.items() if key != "q"]
    w = plane_geometry(others[0], 1, chunk_planes, axes) if others else g
    sdy, sdx = scratch_offsets(halo, frame)
    size = chunk_planes * plane
    return (
        q.data.reshape(-1), problem.output.data.reshape(-1), tuple(st.data.reshape(-1) for st in others), g.counts, g.strides,
        w.strides, g.cstride, w.cstride, g.planes, chunk_planes, g.htab, w.htab, g.block, g.step, w.step, ext.y, ext.x, band, halo,
        np.array(bounds, dtype=np.int64), int(periodic), sdy, sdx, np.zeros((threads, size), problem.dtype),
        np.zeros((threads, size), problem.dtype), tuple(np.zeros(threads * size, problem.dtype) for _ in others),
    )
