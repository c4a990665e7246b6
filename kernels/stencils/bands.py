"""The band walk of layouts whose innermost axis is the position in an x tile (``...x%B``) with y tiled.

There a row walk runs rows of only B elements whose ends need per-element lookups, and a tile's
neighbours lie in other tiles. Instead each thread copies one band (the A rows of a y tile, all of
x, for one variable and level) plus its halo rows into scratch as plain row-major rows of
``nx + 2h``: B-element runs copied contiguously, one table lookup per run, the periodic x ring
copied within scratch. The stencil then runs over long rows with constant offsets (SIMD), and the
result goes back in B-element runs. Reads grow by ``(A + 2h) / A``, all from cache.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from numba import prange

from kernels.jit import Compiled, bound_copy, build, inline
from kernels.layout import TILES, WITHIN
from kernels.parallel import chunk, dot4, unflatten4
from kernels.state import State

_offsets: Callable[..., Any] | None = None
_point: Callable[..., Any] | None = None


def has_band_form(state: State) -> bool:
    """True when the innermost axis is the position in an x tile and y is tiled too."""
    layout = state.layout
    last = layout.tokens[-1]
    return (last.axis, last.part) == ("x", WITHIN) and "y" in layout.tiles


def axis_offsets(state: State, axis: str) -> np.ndarray:
    """Element offset contributed by each logical index along a horizontal axis."""
    n = state.extents[axis]
    idx = np.arange(n)
    elem = np.array(state.data.strides) // state.data.itemsize
    out = np.zeros(n, dtype=np.int64)
    for pos, tok in enumerate(state.layout.tokens):
        if tok.axis == axis:
            out += tok.logical_index(idx).astype(np.int64) * elem[pos]
    return out


@dataclass(frozen=True)
class BandGeometry:
    """What the compiled band walk needs about one state's layout, as int64 arrays."""

    counts: np.ndarray  # var, z and the y tile index (var and z outermost), padded with count 1
    strides: np.ndarray  # element strides of var and z (0 for the y tile index: the tables hold y)
    jmul: np.ndarray  # contribution of each to the band's first logical y index
    yoff: np.ndarray  # element offset of logical y index j - halo, for j in 0..ny + 2*halo (periodic)
    runs: np.ndarray  # element offset of the start of each x tile


def band_geometry(state: State, halo: int) -> BandGeometry:
    """Band-walk description of a state whose layout ``has_band_form``."""
    elem = [s // state.data.itemsize for s in state.data.strides]
    outer = []
    for pos, tok in enumerate(state.layout.tokens):
        if tok.axis in ("var", "z"):
            outer.append((tok.count(state.extents), elem[pos], 0))
        elif (tok.axis, tok.part) == ("y", TILES):
            outer.append((tok.count(state.extents), 0, tok.tile))
    # var and z outermost, the bands of one level innermost: a band's halo rows come from the
    # bands visited just before and after it (in cache), not from a level far away in memory.
    outer.sort(key=lambda a: a[2] > 0)
    while len(outer) < 4:
        outer.insert(0, (1, 0, 0))
    col = lambda k: np.array([a[k] for a in outer], dtype=np.int64)  # noqa: E731
    yo = axis_offsets(state, "y")
    ny, tile_x = yo.shape[0], state.layout.tiles["x"]
    return BandGeometry(
        col(0), col(1), col(2), yo[np.arange(-halo, ny + halo) % ny].astype(np.int64), axis_offsets(state, "x")[::tile_x].astype(np.int64)
    )


@inline
def copy_band_rows(q, qt, rest, yoff, runs, j0, first, last, frame, halo, tile_x, nx):  # type: ignore[no-untyped-def]
    """Scratch rows [first, last) of the band starting at logical row j0 (row r holds j0 + r - halo),
    gathered from the tile runs of the state into plain rows of ``frame`` elements."""
    u = np.uintp
    for r in range(first, last):
        srow = r * frame + halo
        yo = rest + yoff[j0 + r]
        for run in range(runs.shape[0]):
            src, dst = yo + runs[run], srow + run * tile_x
            for c in range(min(tile_x, nx - run * tile_x)):
                qt[u(dst + c)] = q[u(src + c)]


def _band_walk(q, out, extra, counts, strides, jmul, yoff, runs, nx, tile_y, tile_x, halo, sdy, sdx, qs, os, consts, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Template of the band walk; ``band_walk`` binds ``_offsets`` and ``_point``. A partial last
    tile (along y or x) gives a shorter band or a shorter last run."""
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    ny = yoff.shape[0] - 2 * halo
    frame = nx + 2 * halo
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
            rows = min(tile_y, ny - j0)
            copy_band_rows(q, qt, rest, yoff, runs, j0, 0, rows + 2 * halo, frame, halo, tile_x, nx)
            for r in range(rows + 2 * halo):
                srow = r * frame + halo
                for c in range(halo):  # periodic in x: the ring repeats the far end of the row
                    qt[u(srow - halo + c)] = qt[u(srow + nx - halo + c)]
                    qt[u(srow + nx + c)] = qt[u(srow + c)]
            for r in range(rows):
                p0 = (r + halo) * frame + halo
                for c in range(nx):
                    _point(qt, ot, extra, p0 + c, p0 + c, offs, consts)
                yo = rest + yoff[j0 + halo + r]
                for run in range(runs.shape[0]):
                    src, dst = p0 + run * tile_x, yo + runs[run]
                    for c in range(min(tile_x, nx - run * tile_x)):
                        out[u(dst + c)] = ot[u(src + c)]


def band_walk(name: str, offsets: Callable[..., Any], point: Callable[..., Any]) -> Compiled:
    """The compiled band walk of one stencil (pieces as in ``row_walk``, bound as globals)."""
    return build(bound_copy(_band_walk, f"{name}_bands", _offsets=offsets, _point=point))


def scratch_offsets(halo: int, frame: int) -> tuple[np.ndarray, np.ndarray]:
    """Displacement tables of the scratch rows: offsets -halo..halo, one column (constant offsets)."""
    o = np.arange(-halo, halo + 1, dtype=np.int64).reshape(-1, 1)
    return o * frame, o.copy()
