"""The plane walk of layouts that block the flattened horizontal index (``yx/N`` ... ``yx%N``).

There a block of N columns may straddle grid rows, so a neighbour's offset is no sum of a y and
an x term and the row walk's tables cannot describe it. Each thread instead gathers a band of
grid rows of one variable and level, with the stencil's halo rows, into scratch as plain rows of
``nx + 2h`` (a row is copied in runs along the blocks it crosses, one offset-table read per run),
runs the stencil over those rows with constant offsets, and scatters the band's result back.
Fields walked alongside ``q`` (var extent 1) are gathered the same way.

Measured (hyperdiffusion, 4x137x96x96 float64, 1 thread): ``yx/32.var.z.yx%32`` takes 3.0x the
time of ``var.z.y.x``, and 18 of its 23 ms are the gather and scatter alone: a level's 256-byte
runs sit one block (140 KiB) apart, so every run waits on memory.
"""

from __future__ import annotations

import types
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from numba import prange

from kernels.jit import Compiled, build, inline
from kernels.layout import FLAT, WITHIN
from kernels.parallel import chunk, dot4, unflatten4
from kernels.state import State

#: Grid rows per band: scratch of (16 + 2h) rows of nx + 2h stays in L1/L2 for grids up to a few
#: hundred points wide, and bands of one level are visited one after another (halo rows cached).
BAND_ROWS = 16

_offsets: Callable[..., Any] | None = None
_point: Callable[..., Any] | None = None
#: Bound per stencil: whether it walks companion fields (var extent 1) alongside ``q``.
_companion = False


@dataclass(frozen=True)
class PlaneGeometry:
    """What the compiled plane walk needs about one state, as int64 arrays."""

    counts: np.ndarray  # (1, var or z, z or var, bands): var and z in memory order, bands innermost
    strides: np.ndarray  # element strides of those (0 for the band index)
    htab: np.ndarray  # element offset of each flattened horizontal index y * nx + x
    block: int  # points per block
    step: int  # element stride between neighbouring points of a block


def plane_geometry(state: State, bands: int, order: tuple[str, str] | None = None) -> PlaneGeometry:
    """Plane-walk description of a state whose layout blocks the flattened horizontal index.

    ``order`` fixes the order of var and z (a companion follows ``q``'s); a field of var extent 1
    gets var stride 0."""
    layout, ext = state.layout, state.extents
    elem = [s // state.data.itemsize for s in state.data.strides]
    order = order or tuple(t.axis for t in layout.tokens if t.axis in ("var", "z"))  # type: ignore[assignment]
    counts, strides = [1], [0]
    for axis in order:
        pos = layout.index_of(axis)
        counts.append(layout.tokens[pos].count(ext))
        strides.append(0 if ext[axis] == 1 and axis == "var" else elem[pos])
    h = np.arange(ext.y * ext.x, dtype=np.int64)
    htab = np.zeros(h.size, dtype=np.int64)
    for pos, tok in enumerate(layout.tokens):
        if tok.axis == FLAT:
            htab += tok.logical_index(h) * elem[pos]
    pos = layout.index_of(FLAT, WITHIN)
    return PlaneGeometry(np.array([*counts, bands], dtype=np.int64), np.array([*strides, 0], dtype=np.int64), htab,
                         layout.tokens[pos].tile, elem[pos])


@inline
def gather_row(dst, d0, src, s0, htab, hb, nx, block, step):  # type: ignore[no-untyped-def]
    """dst[d0 : d0 + nx] = the grid row whose first flattened index is ``hb``, copied in runs
    along the blocks it crosses (``step`` apart in ``src``: 1 when the position is innermost)."""
    u = np.uintp
    for b in range(hb // block, (hb + nx - 1) // block + 1):
        lo, hi = max(hb, b * block) - hb, min(hb + nx, b * block + block) - hb
        s = s0 + htab[hb + lo]
        for k in range(hi - lo):
            dst[u(d0 + lo + k)] = src[u(s + k * step)]


@inline
def scatter_row(dst, s0, src, d0, htab, hb, c0, c1, block, step):  # type: ignore[no-untyped-def]
    """Columns [c0, c1) of a plain row at src[d0:] back to the grid row starting at flattened ``hb``."""
    u = np.uintp
    for b in range((hb + c0) // block, (hb + c1 - 1) // block + 1):
        lo, hi = max(hb + c0, b * block) - hb, min(hb + c1, b * block + block) - hb
        s = s0 + htab[hb + lo]
        for k in range(hi - lo):
            dst[u(s + k * step)] = src[u(d0 + lo + k)]


def _plane_walk(q, out, wsrc, counts, strides, wstrides, htab, whtab, block, pstep, wstep, ny, nx, band, halo, bounds,  # type: ignore[no-untyped-def]
                periodic, sdy, sdx, qs, os, ws, consts, nchunks, cyclic):
    """Template of the plane walk; ``plane_walk`` binds ``_offsets``, ``_point`` and ``_companion``.

    Bands of ``band`` rows cover rows [bounds[0], bounds[1]); each writes columns [bounds[2],
    bounds[3]). ``periodic``: halo rows and columns wrap; else they are the stored neighbours
    (the bounds keep every read inside the grid). ``ws``: one scratch array per companion field,
    ``size`` elements per thread, read by the point at ``t * size + p``."""
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    j_lo, j_hi, i_lo, i_hi = bounds[0], bounds[1], bounds[2], bounds[3]
    frame = nx + 2 * halo
    size = (band + 2 * halo) * frame
    u = np.uintp
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        offs = _offsets(sdy, sdx, sdy, sdx, 0, 0)
        qt, ot = qs[t], os[t]
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            rest, wrest = dot4(i0, i1, i2, 0, strides), dot4(i0, i1, i2, 0, wstrides)
            j0 = j_lo + i3 * band
            rows = min(band, j_hi - j0)
            for r in range(rows + 2 * halo):
                j = j0 - halo + r
                if periodic:
                    j = j % ny
                hb, srow = j * nx, r * frame + halo
                gather_row(qt, srow, q, rest, htab, hb, nx, block, pstep)
                if periodic:  # the ring repeats the far end of the row (any nx, even below the halo)
                    for c in range(halo):
                        qt[u(srow - halo + c)] = qt[u(srow + (c - halo) % nx)]
                        qt[u(srow + nx + c)] = qt[u(srow + c % nx)]
                if _companion:
                    for e in range(len(wsrc)):
                        src, dst, tb = wsrc[e], ws[e], t * size + srow
                        gather_row(dst, tb, src, wrest, whtab, hb, nx, block, wstep)
                        if periodic:
                            for c in range(halo):
                                dst[u(tb - halo + c)] = dst[u(tb + (c - halo) % nx)]
                                dst[u(tb + nx + c)] = dst[u(tb + c % nx)]
            for r in range(rows):
                p0 = (r + halo) * frame + halo
                if _companion:
                    for c in range(i_lo, i_hi):
                        _point(qt, ot, ws, p0 + c, t * size + p0 + c, offs, consts)
                else:
                    for c in range(i_lo, i_hi):
                        _point(qt, ot, (), p0 + c, p0 + c, offs, consts)
                scatter_row(out, rest, ot, p0, htab, (j0 + r) * nx, i_lo, i_hi, block, pstep)


def plane_walk(name: str, offsets: Callable[..., Any], point: Callable[..., Any], companion: bool) -> Compiled:
    """The compiled plane walk of one stencil (pieces as in ``row_walk``, bound as globals)."""
    namespace = dict(_plane_walk.__globals__, _offsets=offsets, _point=point, _companion=companion)
    walk = types.FunctionType(_plane_walk.__code__, namespace, f"{name}_planes")
    walk.__qualname__ = walk.__name__
    walk.__module__ = _plane_walk.__module__
    return build(walk)
