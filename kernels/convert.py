"""Layout conversion as a compiled, threaded copy: the cost of switching layouts between kernels.

The destination is walked in memory order (rows along its innermost axis, written contiguously);
each element's source offset is a sum of per-logical-axis table entries, which holds for any
pair of layouts, tiled or padded.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.grid import LOGICAL_AXES
from kernels.layout import TILES, WHOLE, WITHIN
from kernels.jit import Compiled, bound_copy, build
from kernels.parallel import chunk, dot4, thread_count, unflatten4
from kernels.prefetch import prefetch
from kernels.state import State

NDIM = 6
#: Values an item of the transpose copies when both layouts share their contiguous axis: short
#: runs (a 16-wide x tile) are grouped so the item's index arithmetic is not paid per run;
#: var.z.y.x to y/8.x/16.var.z.y%8.x%16 went from 0.36 to 0.55 of a copy (4x137x96x96, 1 thread).
SAME_ITEM = 1024
#: Bytes of an item the transpose copies straight across, without its scratch (see there).
SMALL_ITEM_BYTES = 32768
#: Bound per compiled copy of ``transpose_blocks``: whether its read loop asks for each source
#: row's continuation ahead of time (a constant, so the other copy compiles no such code).
_ahead = False


def convert_rows(src, dst, counts, strides, mul0, mul1, mul2, mul3, tables, row_axis, unit, extents, nchunks):  # type: ignore[no-untyped-def]
    """dst axes: counts/strides (6); mulA[d]: step of logical axis A (var, z, y, x) per index of dst axis d;
    tables[a, n]: source element offset of logical index n along axis a (padded with zeros);
    row_axis: the logical axis that dst's innermost axis runs along; unit: the source's element
    stride along it when the source holds that axis whole (offsets linear in the index), else 0;
    extents: the logical extents (rows and row ends in the unused part of a partial last tile are
    skipped)."""
    n4, n5 = counts[4], counts[5]
    step = (mul0[5], mul1[5], mul2[5], mul3[5])[row_axis]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base = dot4(i0, i1, i2, i3, strides)
            c0, c1 = dot4(i0, i1, i2, i3, mul0), dot4(i0, i1, i2, i3, mul1)
            c2, c3 = dot4(i0, i1, i2, i3, mul2), dot4(i0, i1, i2, i3, mul3)
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                a0, a1, a2, a3 = c0 + i4 * mul0[4], c1 + i4 * mul1[4], c2 + i4 * mul2[4], c3 + i4 * mul3[4]
                if a0 >= extents[0] or a1 >= extents[1] or a2 >= extents[2] or a3 >= extents[3]:
                    continue
                total = tables[0, a0] + tables[1, a1] + tables[2, a2] + tables[3, a3]
                start = a0 if row_axis == 0 else a1 if row_axis == 1 else a2 if row_axis == 2 else a3
                others = total - tables[row_axis, start]  # only the row's own axis moves along the row
                nrow = min(n5, (extents[row_axis] - start + step - 1) // step)
                if unit * step == 1:  # both contiguous along the row: a plain copy (SIMD)
                    for i5 in range(nrow):
                        dst[np.uintp(rb + i5)] = src[np.uintp(total + i5)]
                elif unit > 0:
                    for i5 in range(nrow):
                        dst[np.uintp(rb + i5)] = src[np.uintp(total + i5 * step * unit)]
                else:
                    for i5 in range(nrow):
                        s = others + tables[row_axis, start + i5 * step]
                        dst[np.uintp(rb + i5)] = src[np.uintp(s)]


def convert_flat_rows(src, dst, counts, strides, mul, tv, tz, th, row_coord, extents, nchunks):  # type: ignore[no-untyped-def]
    """The row conversion for pairs where either side blocks the flattened horizontal index.

    mul[c, d]: step of coordinate c (var, z, y, x, h = y * nx + x) per index of dst axis d (a
    ``yx`` token moves h alone; y and x stay 0 there); tv, tz, th: source element offset of each
    var, level and flattened horizontal index; row_coord: the table coordinate (0 var, 1 z, 4 h)
    dst's innermost axis moves; extents: var, z, y, x and y * x (positions past any of them lie
    in the unused part of a partial last tile or block and are skipped)."""
    n4, n5 = counts[4], counts[5]
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            i0, i1, i2, i3 = unflatten4(item, counts)
            base = dot4(i0, i1, i2, i3, strides)
            c0, c1, c2 = dot4(i0, i1, i2, i3, mul[0]), dot4(i0, i1, i2, i3, mul[1]), dot4(i0, i1, i2, i3, mul[2])
            c3, c4 = dot4(i0, i1, i2, i3, mul[3]), dot4(i0, i1, i2, i3, mul[4])
            for i4 in range(n4):
                rb = base + i4 * strides[4]
                a = (c0 + i4 * mul[0, 4], c1 + i4 * mul[1, 4], c2 + i4 * mul[2, 4], c3 + i4 * mul[3, 4], c4 + i4 * mul[4, 4])
                nrow = n5
                for c in range(5):
                    if a[c] >= extents[c]:
                        nrow = 0
                    elif mul[c, 5] > 0:
                        nrow = min(nrow, (extents[c] - a[c] + mul[c, 5] - 1) // mul[c, 5])
                if nrow == 0:
                    continue
                step = mul[row_coord, 5]
                if row_coord == 0:
                    others, table, start = tz[a[1]] + th[a[4]], tv, a[0]
                elif row_coord == 1:
                    others, table, start = tv[a[0]] + th[a[4]], tz, a[1]
                else:
                    others, table, start = tv[a[0]] + tz[a[1]], th, a[4]
                for i5 in range(nrow):
                    dst[np.uintp(rb + i5)] = src[np.uintp(others + table[start + i5 * step])]


def transpose_blocks(src, dst, n, ss, ds, axes, same, buf, nchunks):  # type: ignore[no-untyped-def]
    """Copy between two untiled layouts. n, ss, ds: logical extents and element strides (src, dst)
    of the axes var, z, y, x and two more of extent 1; axes = (a1, a2, b1, b2, c, e): the
    destination's contiguous axis a1 and the one outside it, a2 (an axis of extent 1 when a1 alone
    fills a block), likewise the source's b1 and b2, and the rest in the destination's order. A
    block holds up to bs positions of (a2, a1) by bsb of (b2, b1): read along b1 (contiguous in
    src) into per-thread scratch buf (threads, bs, bsb), written along a1. ``same``: both are
    contiguous along a1, and b1 is an outer axis: each item copies one whole run. ``_ahead``
    (bound per compiled copy): while reading a block of many rows, prefetch the part of each row
    the next block reads."""
    a1, a2, b1, b2, o1, o2, o3, o4 = axes[0], axes[1], axes[2], axes[3], axes[4], axes[5], axes[6], axes[7]
    bs, bsb = buf.shape[1], buf.shape[2]
    # An item whose whole (a, b) square holds at most SMALL_ITEM_BYTES, packed together in the
    # source, is a transposition within L1/L2: one block, copied straight across without the
    # scratch. Measured at 4x137x96x96 float64, 1 thread, fraction of a copy: y.x.z.var to
    # y.x.var.z (548 values per item) 0.36 -> 0.77 when the limit went from 4 to 32 KiB; at
    # 128 variables (140 KiB per item) straight across ran half as fast as the scratch. (Rows
    # far apart in the source still go through the scratch: measured faster.)
    count = n[a1] * n[a2] * n[b1] * n[b2]
    span = (n[a1] - 1) * ss[a1] + (n[a2] - 1) * ss[a2] + (n[b1] - 1) * ss[b1] + (n[b2] - 1) * ss[b2] + 1
    small = not same and count * src.itemsize <= SMALL_ITEM_BYTES and span <= 2 * count
    if small:
        bs, bsb = n[a1] * n[a2], n[b1] * n[b2]
    k1 = min(bs, n[a1])  # block of a is k2 x k1 (a2 by a1), at most bs positions
    k2 = max(1, bs // k1)
    j1 = min(bsb, n[b1])  # block of b is j2 x j1 (b2 by b1), at most bsb positions
    j2 = max(1, bsb // j1)
    nb1, nb2 = (n[a1] + k1 - 1) // k1, (n[a2] + k2 - 1) // k2
    mb1, mb2 = (n[b1] + j1 - 1) // j1, (n[b2] + j2 - 1) // j2
    runs = max(1, SAME_ITEM // n[a1])  # same: runs along b1 per item, so short runs share an item's set-up
    nba = 1 if same else nb1 * nb2
    nbb = (n[b1] + runs - 1) // runs if same else mb1 * mb2
    nitems = n[o1] * n[o2] * n[o3] * n[o4] * nba * nbb
    u = np.uintp
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        for item in range(lo, hi):
            blk_b = item % nbb
            r = item // nbb
            blk_a = r % nba
            r = r // nba
            q4 = r % n[o4]
            r = r // n[o4]
            q3 = r % n[o3]
            r = r // n[o3]
            q2, q1 = r % n[o2], r // n[o2]
            sbase = q1 * ss[o1] + q2 * ss[o2] + q3 * ss[o3] + q4 * ss[o4]
            dbase = q1 * ds[o1] + q2 * ds[o2] + q3 * ds[o3] + q4 * ds[o4]
            if same:
                for ib in range(blk_b * runs, min(blk_b * runs + runs, n[b1])):
                    s0, d0 = sbase + ib * ss[b1], dbase + ib * ds[b1]
                    for ia in range(n[a1]):
                        dst[u(d0 + ia)] = src[u(s0 + ia)]
                continue
            lo1, lo2 = (blk_a % nb1) * k1, (blk_a // nb1) * k2
            hi1, hi2 = min(lo1 + k1, n[a1]), min(lo2 + k2, n[a2])
            lb1, lb2 = (blk_b % mb1) * j1, (blk_b // mb1) * j2
            hb1, hb2 = min(lb1 + j1, n[b1]), min(lb2 + j2, n[b2])
            if small:  # the item is one block that fits in L1: copy straight across, no scratch,
                for g2 in range(lb2, hb2):  # the longer of the two contiguous runs innermost
                    for i2 in range(lo2, hi2):
                        s2, d2 = sbase + g2 * ss[b2] + i2 * ss[a2], dbase + g2 * ds[b2] + i2 * ds[a2]
                        if hi1 - lo1 >= hb1 - lb1:
                            for g1 in range(lb1, hb1):
                                for i1 in range(lo1, hi1):
                                    dst[u(d2 + g1 * ds[b1] + i1)] = src[u(s2 + g1 + i1 * ss[a1])]
                        else:
                            for i1 in range(lo1, hi1):
                                for g1 in range(lb1, hb1):
                                    dst[u(d2 + g1 * ds[b1] + i1)] = src[u(s2 + g1 + i1 * ss[a1])]
                continue
            ahead = _ahead and hb1 < n[b1]
            line = max(1, 64 // src.itemsize)
            for i2 in range(lo2, hi2):  # read rows along b1 (contiguous in src)
                for i1 in range(lo1, hi1):
                    row = u((i2 - lo2) * k1 + i1 - lo1)
                    s0 = sbase + i2 * ss[a2] + i1 * ss[a1]
                    for g2 in range(lb2, hb2):
                        s2, c0 = s0 + g2 * ss[b2], (g2 - lb2) * j1 - lb1
                        if ahead:
                            for g1 in range(hb1, 2 * hb1 - lb1, line):
                                prefetch(src, u(s2 + g1))
                        for g1 in range(lb1, hb1):
                            buf[t, row, u(c0 + g1)] = src[u(s2 + g1)]
            for g2 in range(lb2, hb2):  # write runs along a1 (contiguous in dst)
                for g1 in range(lb1, hb1):
                    col = u((g2 - lb2) * j1 + g1 - lb1)
                    d0 = dbase + g2 * ds[b2] + g1 * ds[b1]
                    for i2 in range(lo2, hi2):
                        d2 = d0 + i2 * ds[a2]
                        r0 = (i2 - lo2) * k1 - lo1
                        for i1 in range(lo1, hi1):
                            dst[u(d2 + i1)] = buf[t, u(r0 + i1), col]


CONVERT = build(convert_rows)
CONVERT_FLAT = build(convert_flat_rows)
TRANSPOSE = build(transpose_blocks)
TRANSPOSE_AHEAD = build(bound_copy(transpose_blocks, "transpose_blocks_ahead", _ahead=True))

#: Positions of the source's contiguous run per block of the blocked transpose, and the longest
#: destination run a block spans (elements). Measured on the development VM at 4x137x96x96
#: float64, as a fraction of a contiguous copy in the same rounds: var.z.y.x to var.y.x.z went
#: from 0.38 (32 x 32 blocks) to 0.59 (137 x 32: every block writes whole columns) at 1 thread,
#: to y.x.z.var from 0.39 to 0.49 (548 x 32); 64 or 128 source positions were slower. Joining a
#: short source run (var innermost) with the next source axis took y.x.z.var to var.z.y.x from
#: 0.25 to 0.38-0.40 (4x64x96x96); copying an item that is one small block straight across took
#: y.x.z.var to y.x.var.z from 0.57-0.64 to 0.98, y.x.var.z to y.x.z.var from 0.62-0.80 to 0.84-1.08.
TRANSPOSE_BLOCK = 32
TRANSPOSE_RUN = 640
#: Longest source run a whole-run block spans, and the scratch it may fill (bytes): blocks of the
#: whole source run and 64-128 destination positions took var.y.x.z to var.z.y.x from 0.41 to
#: 0.56-0.57 of a copy and y.x.z.var to var.z.y.x from 0.39 to 0.51-0.52 (4x137x96x96 float64,
#: 1 thread, development VM).
WHOLE_RUN_MAX = 1024
WHOLE_RUN_BUFFER = 256 * 1024
#: Rows per block from which the transpose prefetches each row's continuation, when the rows lie
#: a page or more apart: then there are more streams than the hardware prefetcher follows.
#: Paired on the development VM (4x64x96x96 float64, fraction of a copy, 1 thread): var.z.y.x
#: to var.y.x.z 0.49 -> 0.57, to y.x.z.var 0.35 -> 0.40, z.var.y.x to var.y.x.z 0.45 -> 0.54
#: (1.14-1.23x on the ten pairs it serves; 1.02-1.20x at 2 threads). Rows closer together (z
#: innermost sources) ran up to 17 % slower with it at 2 threads, so they keep the plain copy.
PREFETCH_ROWS = 16


def conversion_args(src: State, dst: State, width: int = TRANSPOSE_BLOCK) -> tuple[Compiled, tuple[Any, ...]]:
    """The compiled conversion and its arguments for copying ``src`` into ``dst``; ``width``: the
    blocked transpose's block width (positions of the source's contiguous run per block)."""
    if src.extents != dst.extents or src.dtype != dst.dtype:
        from kernels.errors import KernelError

        raise KernelError(f"cannot convert {src} into {dst}: extents and dtype must match")
    geometry = split_geometry(src, dst)
    if geometry is not None:
        return _transpose_args(src, dst, width, geometry)
    if src.layout.flat_block or dst.layout.flat_block:
        return _flat_conversion_args(src, dst)
    return row_conversion_args(src, dst)


def _flat_conversion_args(src: State, dst: State) -> tuple[Compiled, tuple[Any, ...]]:
    """``convert_flat_rows`` and its arguments: dst walked in memory order, source offsets from
    tables over var, z and the flattened horizontal index."""
    ext, nx = dst.extents, dst.extents.x
    elem = [s // dst.data.itemsize for s in dst.data.strides]
    axes = []
    for pos, tok in enumerate(dst.layout.tokens):
        step = [0] * 5
        unit = tok.tile if tok.part == "tiles" else 1
        if tok.axis in ("var", "z"):
            step[LOGICAL_AXES.index(tok.axis)] = unit
        elif tok.axis == "y":
            step[2], step[4] = unit, unit * nx
        elif tok.axis == "x":
            step[3], step[4] = unit, unit
        else:
            step[4] = unit
        axes.append((tok.count(ext), elem[pos], step))
    while len(axes) < NDIM:
        axes.insert(0, (1, 0, [0] * 5))
    counts = np.array([a[0] for a in axes], dtype=np.int64)
    strides = np.array([a[1] for a in axes], dtype=np.int64)
    mul = np.array([[a[2][c] for a in axes] for c in range(5)], dtype=np.int64)
    src_elem = [s // src.data.itemsize for s in src.data.strides]
    tv, tz = (np.arange(ext[a], dtype=np.int64) * src_elem[src.layout.index_of(a)] for a in ("var", "z"))
    th = src.horizontal_offsets()
    last = dst.layout.tokens[-1].axis
    row_coord = LOGICAL_AXES.index(last) if last in ("var", "z") else 4
    extents = np.array((*ext.shape, ext.y * nx), dtype=np.int64)
    args = (src.data.reshape(-1), dst.data.reshape(-1), counts, strides, mul, tv, tz, th, row_coord, extents, thread_count())
    return CONVERT_FLAT, args


def row_conversion_args(src: State, dst: State) -> tuple[Compiled, tuple[Any, ...]]:
    """The row conversion, which serves any pair (tiled included): dst rows, per-element source lookups."""
    elem = [s // dst.data.itemsize for s in dst.data.strides]
    axes = []
    for pos, tok in enumerate(dst.layout.tokens):
        step = [0, 0, 0, 0]
        step[LOGICAL_AXES.index(tok.axis)] = tok.tile if tok.part == "tiles" else 1
        axes.append((tok.count(dst.extents), elem[pos], step))
    while len(axes) < NDIM:
        axes.insert(0, (1, 0, [0, 0, 0, 0]))
    counts = np.array([a[0] for a in axes], dtype=np.int64)
    strides = np.array([a[1] for a in axes], dtype=np.int64)
    mul = np.array([[a[2][k] for a in axes] for k in range(4)], dtype=np.int64)
    longest = max(src.extents.shape)
    tables = np.zeros((4, longest), dtype=np.int64)
    src_elem = [s // src.data.itemsize for s in src.data.strides]
    for k, axis in enumerate(LOGICAL_AXES):
        idx = np.arange(src.extents[axis])
        for pos, tok in enumerate(src.layout.tokens):
            if tok.axis == axis:
                tables[k, : idx.size] += tok.logical_index(idx) * src_elem[pos]
    row_axis = LOGICAL_AXES.index(dst.layout.tokens[-1].axis)
    row_name = LOGICAL_AXES[row_axis]
    unit = src_elem[src.layout.index_of(row_name)] if row_name not in src.layout.tiles else 0
    extents = np.array(src.extents.shape, dtype=np.int64)
    args = (src.data.reshape(-1), dst.data.reshape(-1), counts, strides, *mul, tables, row_axis, unit, extents, thread_count())
    return CONVERT, args


#: Slots of the blocked transpose's axes: var, z, then y and x each as (tile index, position in
#: a tile) (an axis no layout of the pair tiles uses its second slot alone), then two of extent 1.
SLOTS = 8
_SLOT = {("var", WHOLE): 0, ("z", WHOLE): 1, ("y", TILES): 2, ("y", WITHIN): 3, ("y", WHOLE): 3, ("x", TILES): 4,
         ("x", WITHIN): 5, ("x", WHOLE): 5}


#: Extents, source strides, destination strides, source order, destination order (``split_geometry``).
Geometry = tuple[list[int], list[int], list[int], list[int], list[int]]


def split_geometry(src: State, dst: State) -> Geometry | None:
    """Extents and element strides (src, dst) of the transpose's slots and each layout's slots in
    memory order, or None when the pair has no such form: a flattened horizontal block, tiles of
    different sizes along one axis, or a tile that leaves a partial last tile."""
    tiles: dict[str, int] = {}
    for state in (src, dst):
        if state.layout.flat_block:
            return None
        for axis, tile in state.layout.tiles.items():
            if tiles.setdefault(axis, tile) != tile or state.extents[axis] % tile:
                return None
    n = [1] * SLOTS
    n[0], n[1] = src.extents.var, src.extents.z
    for axis, first in (("y", 2), ("x", 4)):
        tile = tiles.get(axis)
        n[first], n[first + 1] = (src.extents[axis] // tile, tile) if tile else (1, src.extents[axis])
    strides, orders = [], []
    for state in (src, dst):
        elem = [st // state.data.itemsize for st in state.data.strides]
        stride, order = [0] * SLOTS, []
        for pos, tok in enumerate(state.layout.tokens):
            if tok.part == WHOLE and tok.axis in tiles:  # untiled here, tiled in the other layout
                first = _SLOT[(tok.axis, TILES)]
                stride[first], stride[first + 1] = elem[pos] * tiles[tok.axis], elem[pos]
                order += [first, first + 1]
            else:  # an untiled y or x takes the second slot of its pair alone
                slot = _SLOT[(tok.axis, tok.part)]
                stride[slot] = elem[pos]
                order.append(slot)
        strides.append(stride)
        orders.append(order)
    return n, strides[0], strides[1], orders[0], orders[1]


def whole_run_args(src: State, dst: State) -> tuple[Compiled, tuple[Any, ...]] | None:
    """The blocked transpose with blocks spanning the source's whole contiguous run (after the
    joins) and a short stretch of the destination's, or None when that run is a block or less,
    longer than ``WHOLE_RUN_MAX``, or the layouts share their contiguous axis."""
    geometry = split_geometry(src, dst)
    return None if geometry is None else _transpose_args(src, dst, 0, geometry)


def _transpose_args(src: State, dst: State, width: int, geometry: Geometry) -> Any:
    """The blocked transpose, outer axes in the destination's order. A tiled axis and its
    counterpart in the other layout are both split into (tile index, position in a tile).

    Axes that are adjacent and contiguous in both layouts are first merged into one (``var.z.y.x``
    to ``z.var.y.x`` copies whole y-x planes). A short contiguous axis (shorter than a block, e.g.
    var innermost) is joined with the next axis of its layout into one run, on either side. A
    block spans the destination's whole contiguous run (up to ``TRANSPOSE_RUN``) when the
    source's run is long, so every write of a block continues the previous one.
    ``geometry``: the pair's ``split_geometry``. ``width`` 0: blocks span the source's whole run
    instead (``whole_run_args``), or None.
    """
    whole, width = width == 0, width or TRANSPOSE_BLOCK
    n, ss, ds, src_order, dst_order = geometry
    merged = True
    while merged:
        merged = False
        for p, q in zip(dst_order, dst_order[1:]):
            i = src_order.index(p)
            if i + 1 < len(src_order) and src_order[i + 1] == q and ss[p] == ss[q] * n[q] and ds[p] == ds[q] * n[q]:
                n[p], ss[p], ds[p] = n[p] * n[q], ss[q], ds[q]
                n[q], ss[q], ds[q] = 1, 0, 0
                src_order.remove(q)
                dst_order.remove(q)
                merged = True
                break
    spare = [i for i in range(SLOTS) if i not in dst_order]  # axes of extent 1
    a1, b1 = dst_order[-1], src_order[-1]
    a2 = b2 = -1
    others = [i for i in dst_order[:-1] if i != b1]
    same = a1 == b1
    if same:  # the innermost outer axis of dst takes the role of b1
        b1 = others.pop() if others else spare.pop()
    else:
        if n[a1] < width and len(dst_order) > 1 and dst_order[-2] != b1:
            a2 = dst_order[-2]
            others.remove(a2)
        if n[b1] < width and len(src_order) > 1 and src_order[-2] not in (a1, a2):
            b2 = src_order[-2]
            others.remove(b2)
    a2 = a2 if a2 >= 0 else spare.pop()
    b2 = b2 if b2 >= 0 else spare.pop()
    others = spare[: 4 - len(others)] + others
    long_source = n[b1] * n[b2] >= width
    run = min(max(n[a1] * n[a2], width), TRANSPOSE_RUN) if long_source else width
    if whole:
        if same or not TRANSPOSE_BLOCK < n[b1] * n[b2] <= WHOLE_RUN_MAX:
            return None
        width = n[b1] * n[b2]
        run = min(n[a1] * n[a2], max(16, min(128, WHOLE_RUN_BUFFER // (width * src.dtype.itemsize))))
    buf = np.zeros((thread_count(), run, width), src.dtype)
    axes = np.array((a1, a2, b1, b2, *others), dtype=np.int64)
    as_i64 = lambda v: np.array(v, dtype=np.int64)  # noqa: E731
    args = (src.data.reshape(-1), dst.data.reshape(-1), as_i64(n), as_i64(ss), as_i64(ds), axes, same, buf, thread_count())
    k1 = min(run, n[a1])
    rows = k1 * min(max(1, run // k1), n[a2])
    ahead = not same and rows >= PREFETCH_ROWS and n[b1] > width and ss[a1] * src.dtype.itemsize >= 4096
    return (TRANSPOSE_AHEAD if ahead else TRANSPOSE), args
