"""Row geometry shared by the stencils: one compiled walk serves every layout.

A *row* is a run of elements along the innermost physical axis (unit stride, contiguous). The
walk visits rows in memory order. Because a layout's byte offset is a sum of one term per logical
axis, the displacement to a horizontal neighbour is ``dy[o, j] + dx[o, i]``, read from small
per-axis tables that already hold the periodic wrap. Along a row those displacements are
constant except within ``halo`` elements of its ends (where a tile edge or the periodic seam may
lie), so the interior of each row is a plain contiguous loop with constant offsets (SIMD), and
only the ends use per-element table lookups. No modulo and no negative-index wrap in the hot loop.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.grid import Extents
from kernels.jit import Compiled, bound_copy, build, inline
from kernels.layout import TILES, Layout
from kernels.parallel import chunk, dot4, thread_count, unflatten4
from kernels.state import State
from kernels.errors import KernelError
from kernels.stencils.bands import axis_offsets, band_geometry, band_walk, has_band_form, scratch_offsets
from kernels.stencils.planes import plane_arguments, plane_walk

NDIM = 6  # rows are walked as a 6-axis nest (axes of count 1 pad shorter layouts)

BLOCK = Schedule("block", "threads take contiguous blocks of rows (split the outermost axes); rows run along the contiguous axis")
CYCLIC = Schedule(
    "cyclic",
    "rows dealt round-robin to threads (split along the fastest outer axis); rows run along the contiguous axis",
)


@dataclass(frozen=True)
class RowGeometry:
    """Everything the compiled walk needs about one state's layout, as int64 arrays."""

    counts: np.ndarray  # logical count of each walked axis (the last is the row)
    strides: np.ndarray  # element stride of each walked axis (the last is 1)
    jmul: np.ndarray  # contribution of each axis index to the logical y index
    imul: np.ndarray  # ... and to the logical x index
    dy: np.ndarray  # (2*halo+1, ny): offset(j+o) - offset(j), periodic, for o in -halo..halo
    dx: np.ndarray  # (2*halo+1, nx)
    edge: int  # elements at each row end handled per element (0 when the row is not horizontal)


def _displacements(offsets: np.ndarray, halo: int) -> np.ndarray:
    n = offsets.shape[0]
    idx = np.arange(n)
    return np.stack([offsets[(idx + o) % n] - offsets for o in range(-halo, halo + 1)]).astype(np.int64)


def row_geometry(state: State, halo: int, merge_vertical: bool, zero_var_stride: bool = False) -> RowGeometry:
    """Walk description of ``state``'s layout for a stencil of half-width ``halo``.

    ``merge_vertical`` fuses trailing var/z axes into one longer row when the inner one is
    unpadded. ``zero_var_stride`` gives the var axis stride 0 (for a field shared by all variables,
    indexed with the walk of a full state).
    """
    elem = [s // state.data.itemsize for s in state.data.strides]
    axes = []  # (count, stride, jmul, imul, vertical)
    for pos, tok in enumerate(state.layout.tokens):
        count = tok.count(state.extents)
        jm = (tok.tile if tok.part == TILES else 1) if tok.axis == "y" else 0
        im = (tok.tile if tok.part == TILES else 1) if tok.axis == "x" else 0
        stride = 0 if (zero_var_stride and tok.axis == "var") else elem[pos]
        axes.append([count, stride, jm, im, tok.axis in ("var", "z"), tok.pad])
    while merge_vertical and len(axes) > 1 and axes[-1][4] and axes[-2][4] and axes[-1][5] == 0:
        inner = axes.pop()
        axes[-1] = [axes[-1][0] * inner[0], 1, 0, 0, True, 0]
    while len(axes) < NDIM:
        axes.insert(0, [1, 0, 0, 0, True, 0])
    as_i64 = lambda k: np.array([a[k] for a in axes], dtype=np.int64)  # noqa: E731
    return RowGeometry(
        counts=as_i64(0),
        strides=as_i64(1),
        jmul=as_i64(2),
        imul=as_i64(3),
        dy=_displacements(axis_offsets(state, "y"), halo),
        dx=_displacements(axis_offsets(state, "x"), halo),
        edge=0 if axes[-1][4] else halo,
    )


def periodic_pad(q: np.ndarray, halo: int) -> np.ndarray:
    """Logical ``(var, z, y, x)`` array with a periodic halo of width ``halo`` in y and x."""
    return np.pad(q, ((0, 0), (0, 0), (halo, halo), (halo, halo)), mode="wrap")


def shifted(qp: np.ndarray, halo: int, oy: int, ox: int) -> np.ndarray:
    """View of the halo-padded array shifted by (oy, ox): element (j, i) holds q[j+oy, i+ox]."""
    ny, nx = qp.shape[2] - 2 * halo, qp.shape[3] - 2 * halo
    return qp[:, :, halo + oy : halo + oy + ny, halo + ox : halo + ox + nx]


def smooth_field(extents: Extents, seed: int, nvar: int | None = None) -> np.ndarray:
    """A seeded field of a few periodic Fourier modes plus 10 % noise, shape (var, z, y, x)."""
    rng = np.random.default_rng(seed)
    nv = extents.var if nvar is None else nvar
    y = np.arange(extents.y).reshape(1, 1, -1, 1) * 2 * np.pi / extents.y
    x = np.arange(extents.x).reshape(1, 1, 1, -1) * 2 * np.pi / extents.x
    amp = rng.uniform(0.5, 1.5, size=(nv, extents.z, 1, 1))
    phase = rng.uniform(0, 2 * np.pi, size=(nv, extents.z, 1, 1))
    field = amp * np.sin(x + phase) * np.cos(2 * y) + 0.5 * np.cos(3 * x - y + phase)
    return field + 0.1 * rng.standard_normal((nv, extents.z, extents.y, extents.x))


def stencil_tolerance(dtype: np.dtype, terms: int) -> float:
    """Relative tolerance for a stencil summing ``terms`` weighted values against a float64 oracle.

    Each addition can lose half an ulp of the largest term; summed terms of size ~|q| against a
    result scaled by max|ref| (same order for these rough inputs) gives ~terms * eps. A factor of
    8 of room over that bound.
    """
    eps = np.finfo(np.dtype(dtype)).eps
    return 8.0 * terms * float(eps)


#: Placeholders of the template's two pieces; ``row_walk`` binds them in a copy of its globals.
_offsets: Callable[..., Any] | None = None
_point: Callable[..., Any] | None = None
#: Bound per stencil: whether its companion can stand still along a row (var stride 0); a
#: constant, so stencils without a companion compile no loop for that case.
_companion_may_stand = False


def _walk(q, out, extra, counts, strides, wstrides, jmul, imul, dy, dx, wdy, wdx, edge, consts, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Template of every stencil's row walk; ``row_walk`` binds ``_offsets`` and ``_point``."""
    n4 = counts[4]
    ny, nx = dy.shape[1], dx.shape[1]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    tj, ti, wstep = jmul[5], imul[5], wstrides[5]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        start, stop, step = (t, nitems, nchunks) if cyclic else (lo, hi, 1)
        for item in range(start, stop, step):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base, wbase = dot4(i0, i1, i2, i3, strides), dot4(i0, i1, i2, i3, wstrides)
            j0, x0 = dot4(i0, i1, i2, i3, jmul), dot4(i0, i1, i2, i3, imul)
            for i4 in range(n4):
                rb, wb = base + i4 * strides[4], wbase + i4 * wstrides[4]
                j, i = j0 + i4 * jmul[4], x0 + i4 * imul[4]
                if j >= ny or i >= nx:  # a row in the unused part of a partial last tile
                    continue
                nrow = row_length(counts[5], j, i, tj, ti, ny, nx)
                lo_in, hi_in = edge, nrow - edge
                if hi_in > lo_in:  # the interior: constant displacements, a plain SIMD loop
                    offs = _offsets(dy, dx, wdy, wdx, j + lo_in * tj, i + lo_in * ti)
                    if _companion_may_stand and wstep == 0:  # var innermost: one companion point per row
                        for tt in range(lo_in, hi_in):
                            _point(q, out, extra, rb + tt, wb, offs, consts)
                    else:
                        for tt in range(lo_in, hi_in):
                            _point(q, out, extra, rb + tt, wb + tt, offs, consts)
                for tt in range(min(lo_in, nrow)):  # row start: a tile edge or the periodic seam
                    offs = _offsets(dy, dx, wdy, wdx, j + tt * tj, i + tt * ti)
                    _point(q, out, extra, rb + tt, wb + tt * wstep, offs, consts)
                for tt in range(max(hi_in, lo_in), nrow):  # row end
                    offs = _offsets(dy, dx, wdy, wdx, j + tt * tj, i + tt * ti)
                    _point(q, out, extra, rb + tt, wb + tt * wstep, offs, consts)


@inline
def row_length(count, j, i, tj, ti, ny, nx):  # type: ignore[no-untyped-def]
    """Elements of a row starting at logical (j, i) that lie in the grid (a partial last tile ends early)."""
    n = count
    if tj > 0:
        n = min(n, (ny - j + tj - 1) // tj)
    if ti > 0:
        n = min(n, (nx - i + ti - 1) // ti)
    return n


@inline
def axis_neighbours(dy, dx, wdy, wdx, j, i):  # type: ignore[no-untyped-def]
    """The ``offsets`` piece of a stencil reading q's four axis neighbours: east, west, north, south."""
    return dx[2, i], dx[0, i], dy[2, j], dy[0, j]


def row_walk(name: str, offsets: Callable[..., Any], point: Callable[..., Any], companion: bool = False) -> Compiled:
    """The compiled row walk of one stencil: the shared template with its two inlined pieces.

    ``offsets(dy, dx, wdy, wdx, j, i)`` returns the neighbour displacements at logical (j, i);
    ``point(q, out, extra, p, pw, offs, consts)`` computes one output element at flat position
    ``p``; ``extra`` holds further read-only inputs, walked at ``pw`` (the same point in the
    companion walk: fields of var extent 1, or ``q`` itself). Both are ``@inline`` functions, so
    the walk compiles to the loop a hand-written stencil would. ``companion``: the stencil walks
    fields of var extent 1 (``Stencil.companion``).

    The pieces are bound as globals of a copy of the template, not as closure cells: numba keys
    its disk cache on pickled closure cells, which differ in every process for a compiled
    function, so a closure would recompile in every worker. ``out`` is a parameter of its own
    because numba's parallel loops drop stores into an array taken from a tuple.
    """
    walk = bound_copy(_walk, f"{name}_rows", _offsets=offsets, _point=point, _companion_may_stand=companion)
    compiled = build(walk)
    _PIECES[compiled.name] = (name, offsets, point)
    return compiled


#: The pieces of every row walk, by its compiled name, for building the same stencil's band walk.
_PIECES: dict[str, tuple[str, Callable[..., Any], Callable[..., Any]]] = {}
_BAND_WALKS: dict[str, Compiled] = {}
_PLANE_WALKS: dict[tuple[str, bool], Compiled] = {}


def plane_walk_of(walk: Compiled, companion: bool) -> Compiled:
    """The plane walk with the same pieces as the row walk ``walk`` (built once, lazily)."""
    if (walk.name, companion) not in _PLANE_WALKS:
        _PLANE_WALKS[(walk.name, companion)] = plane_walk(*_PIECES[walk.name], companion)
    return _PLANE_WALKS[(walk.name, companion)]


def band_walk_of(walk: Compiled) -> Compiled:
    """The band walk with the same pieces as the row walk ``walk`` (built once, lazily)."""
    if walk.name not in _BAND_WALKS:
        _BAND_WALKS[walk.name] = band_walk(*_PIECES[walk.name])
    return _BAND_WALKS[walk.name]


class Stencil(Kernel):
    """A horizontal stencil over every variable and level, doubly periodic.

    A subclass gives ``walk`` (from ``row_walk``), ``halo``, ``constants``, ``reference``,
    ``flops`` and ``tolerance``; it reads ``q`` unless it overrides the inputs. Fields of var
    extent 1 (``companion``) are walked with var stride 0 alongside ``q``.
    """

    family = "stencils"
    schedules = (BLOCK, CYCLIC)
    halo = 1
    walk: Compiled
    #: Input field walked in step with ``q`` but with var stride 0; None: ``q`` itself.
    companion: str | None = None
    #: Fuse trailing var/z axes into longer rows (only when every field has the full var extent).
    merge_vertical = True

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return {"q": smooth_field(extents, seed).astype(dtype)}

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        """Scalars the point function reads, in the state's dtype."""
        raise NotImplementedError

    def refuses(self, layout: Layout) -> str | None:
        if layout.flat_block and self.walk.native is not None:
            return (f"native stencil '{self.name}' takes the row walk, whose neighbour offsets are a y term plus an x term; "
                    f"layout '{layout.spec}' blocks the flattened horizontal index, where they are not")
        return None

    def _walks_bands(self, problem: Problem) -> bool:
        """The band walk serves tiled layouts whose x extent holds the halo; its scratch rows wrap x
        by copying ``halo`` elements from each end, which needs x >= halo (the row walk's tables
        handle any extent)."""
        fields = problem.fields
        return (self.walk.native is None and self.companion is None and len(fields) == 1 and has_band_form(fields["q"])
                and min(problem.extents.x, problem.extents.y) >= self.halo)

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """The interior of a row: a full x row in the band or plane walk's scratch, else the
        walked row less the edge elements handled one by one."""
        if self._walks_bands(problem) or problem.fields["q"].layout.flat_block:
            return problem.extents.x
        g = row_geometry(problem.fields["q"], self.halo, self.merge_vertical)
        return max(int(g.counts[-1]) - 2 * g.edge, 0)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        fields = problem.fields
        if fields["q"].layout.flat_block:
            return self.plane_implementation(problem, schedule, (0, problem.extents.y, 0, problem.extents.x), self.halo, True)
        if self._walks_bands(problem):
            return self._band_implementation(problem, schedule)
        g = row_geometry(fields["q"], self.halo, self.merge_vertical)
        w = g if self.companion is None else row_geometry(fields[self.companion], self.halo, False, zero_var_stride=True)
        extra = tuple(st.data.reshape(-1) for key, st in fields.items() if key != "q")
        args = (
            fields["q"].data.reshape(-1), problem.output.data.reshape(-1), extra, g.counts, g.strides, w.strides, g.jmul, g.imul, g.dy, g.dx, w.dy, w.dx, g.edge,
            self.constants(problem.dtype), thread_count(), int(schedule.name == CYCLIC.name),
        )
        return self.walk, args

    def plane_implementation(self, problem: Problem, schedule: Schedule, bounds: tuple[int, int, int, int], halo: int,
                             periodic: bool) -> tuple[Compiled, tuple[Any, ...]]:
        """Layouts blocking the flattened horizontal index: the plane walk over bands of plain rows in
        scratch, writing rows [bounds[0], bounds[1]) and columns [bounds[2], bounds[3])."""
        reason = self.refuses(problem.layout)
        if reason:
            raise KernelError(reason)
        args = plane_arguments(problem, bounds, halo, periodic, thread_count())
        args += (self.constants(problem.dtype), thread_count(), int(schedule.name == CYCLIC.name))
        return plane_walk_of(self.walk, len(problem.fields) > 1), args

    def _band_implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        """Layouts ending in an x tile, y tiled: the band walk over plain rows in scratch."""
        q, h = problem.fields["q"], self.halo
        g = band_geometry(q, h)
        ty, tx = q.layout.tiles["y"], q.layout.tiles["x"]
        frame = problem.extents.x + 2 * h
        sdy, sdx = scratch_offsets(h, frame)
        scratch = lambda: np.zeros((thread_count(), (ty + 2 * h) * frame), problem.dtype)  # noqa: E731
        args = (
            q.data.reshape(-1), problem.output.data.reshape(-1), (), g.counts, g.strides, g.jmul, g.yoff, g.runs, problem.extents.x,
            ty, tx, h, sdy, sdx, scratch(), scratch(), self.constants(problem.dtype), thread_count(), int(schedule.name == CYCLIC.name),
        )
        return band_walk_of(self.walk), args
