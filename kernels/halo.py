"""Halo faces of a limited-area subdomain: packing into contiguous buffers and unpacking, per layout.

A subdomain's state holds its halo: y and x extents include ``h`` cells on each side. Each of
the four faces (the ``h`` interior rows or columns next to a side, every variable and level) is
packed into one contiguous send buffer for the neighbour on that side, and the buffer received
from the opposite neighbour is unpacked into the halo on that side. Packing walks the face in
the sender's memory order, so the copy is a list of contiguous *runs* whose number and length
are set by the layout (an x-contiguous order sends its north face as rows of x, its east face as
runs of ``h``; variables innermost make every run var x z long). Unpacking reads the buffer in
the sender's order and writes runs that are contiguous in both buffer and state.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numba import prange

from kernels.errors import LayoutError
from kernels.grid import Extents
from kernels.jit import build
from kernels.layout import Layout
from kernels.notation import as_layout
from kernels.parallel import chunk, thread_count

#: Sides in the order faces sit in the buffers; a face packed for one side lands in the
#: neighbour's halo on the opposite side.
SIDES = ("north", "south", "east", "west")
OPPOSITE = {"north": "south", "south": "north", "east": "west", "west": "east"}
#: Step in (y, x) process-grid coordinates towards each side's neighbour.
STEP = {"north": (1, 0), "south": (-1, 0), "east": (0, 1), "west": (0, -1)}


def copy_runs(src, dst, src_start, src_step, dst_start, dst_step, length, count, nthreads):  # type: ignore[no-untyped-def]
    """Group g copies ``count[g]`` runs of ``length[g]`` elements, the k-th from
    ``src_start[g] + k src_step[g]`` to ``dst_start[g] + k dst_step[g]``."""
    ngroups = length.shape[0]
    for t in prange(nthreads):
        lo, hi = chunk(ngroups, nthreads, t)
        for g in range(lo, hi):
            s, d, n = np.uintp(src_start[g]), np.uintp(dst_start[g]), length[g]
            ss, ds = np.uintp(src_step[g]), np.uintp(dst_step[g])
            for _ in range(count[g]):
                for e in range(n):
                    u = np.uintp(e)  # unsigned: no negative-index wrap, so the copy packs
                    dst[d + u] = src[s + u]
                s += ss
                d += ds


COPY_RUNS = build(copy_runs)


@dataclass(frozen=True)
class Runs:
    """Contiguous copies in groups: group g is ``count[g]`` runs of ``length[g]`` elements, equally
    spaced in source and destination (a face's rows, or its columns of a few elements), so the
    copy reads a handful of numbers per group, not per run."""

    src_start: np.ndarray
    src_step: np.ndarray
    dst_start: np.ndarray
    dst_step: np.ndarray
    length: np.ndarray
    runs_per_group: np.ndarray

    @property
    def count(self) -> int:
        """Contiguous runs copied (the layout's figure), over all groups."""
        return int(self.runs_per_group.sum())

    @property
    def groups(self) -> int:
        return int(self.length.size)

    def args(self, src: np.ndarray, dst: np.ndarray) -> tuple[Any, ...]:
        """Arguments of ``COPY_RUNS`` for these runs between two flat buffers."""
        return (src, dst, self.src_start, self.src_step, self.dst_start, self.dst_step, self.length, self.runs_per_group,
                thread_count())


@dataclass(frozen=True)
class HaloPlan:
    """How one layout packs its four faces into a send buffer and unpacks a receive buffer."""

    layout: Layout
    extents: Extents  # the subdomain's extents, halo included
    halo: int
    pack: Runs  # state -> send buffer
    unpack: Runs  # receive buffer -> state
    face_start: dict[str, int]  # where each side's face starts in either buffer
    face_size: dict[str, int]  # elements of each side's face

    @property
    def buffer_size(self) -> int:
        return sum(self.face_size.values())


def boxes(extents: Extents, halo: int) -> dict[str, tuple[tuple[int, int, int, int], tuple[int, int, int, int]]]:
    """Per side: the interior face packed for that side's neighbour and the halo filled from it,
    as (j0, j1, i0, i1) half-open boxes; faces span the interior extent only (no corners)."""
    ny, nx, h = extents.y, extents.x, halo
    return {
        "north": ((ny - 2 * h, ny - h, h, nx - h), (ny - h, ny, h, nx - h)),
        "south": ((h, 2 * h, h, nx - h), (0, h, h, nx - h)),
        "east": ((h, ny - h, nx - 2 * h, nx - h), (h, ny - h, nx - h, nx)),
        "west": ((h, ny - h, h, 2 * h), (h, ny - h, 0, h)),
    }


def check_halo(extents: Extents, halo: int) -> None:
    """Refuse a halo that leaves no interior at least as wide as itself."""
    if halo < 1 or min(extents.y, extents.x) < 3 * halo:
        raise LayoutError(f"halo {halo} needs y and x of at least {3 * halo} (halo, interior of at least the halo, halo); "
                          f"got y={extents.y}, x={extents.x}; valid halos are 1..{max(min(extents.y, extents.x) // 3, 1)}")


def _offsets(layout: Layout, extents: Extents, dtype: Any, box: tuple[int, int, int, int]) -> np.ndarray:
    """Element offsets of a box of every variable and level, in logical (var, z, y, x) order."""
    j0, j1, i0, i1 = box
    v, k, j, i = np.meshgrid(np.arange(extents.var), np.arange(extents.z), np.arange(j0, j1), np.arange(i0, i1), indexing="ij")
    return (layout.byte_offset(extents, dtype, v, k, j, i) // np.dtype(dtype).itemsize).reshape(-1)


def _runs(src: np.ndarray, dst: np.ndarray) -> Runs:
    """Maximal runs where both ``src`` and ``dst`` step by one (pairs already in copy order),
    gathered into groups of equal length and equal spacing."""
    breaks = np.flatnonzero((np.diff(src) != 1) | (np.diff(dst) != 1)) + 1
    starts = np.concatenate(([0], breaks))
    lengths = np.diff(np.concatenate((starts, [src.size])))
    s0, d0 = src[starts].astype(np.int64), dst[starts].astype(np.int64)
    groups: list[list[int]] = []  # [first run, src step, dst step, runs]
    for r in range(len(starts)):
        if groups:
            g = groups[-1]
            first = g[0]
            if lengths[r] == lengths[first] and (g[3] == 1 or (s0[r] - s0[r - 1] == g[1] and d0[r] - d0[r - 1] == g[2])):
                if g[3] == 1:
                    g[1], g[2] = int(s0[r] - s0[first]), int(d0[r] - d0[first])
                if g[1] > 0 and g[2] > 0:
                    g[3] += 1
                    continue
        groups.append([r, 0, 0, 1])
    first = np.array([g[0] for g in groups], dtype=np.int64)
    as_i64 = lambda k: np.array([g[k] for g in groups], dtype=np.int64)  # noqa: E731
    return Runs(s0[first], as_i64(1), d0[first], as_i64(2), lengths[first].astype(np.int64), as_i64(3))


def halo_plan(layout: Layout | str, extents: Extents, dtype: Any, halo: int) -> HaloPlan:
    """The pack and unpack runs of ``layout`` for a subdomain of ``extents`` (halo included)."""
    layout = as_layout(layout)
    check_halo(extents, halo)
    layout.check(extents)
    src_all, buf_all, rbuf_all, dst_all = [], [], [], []
    start, size, at = {}, {}, 0
    box = boxes(extents, halo)
    for side in SIDES:
        send_box = box[side][0]
        recv_box = box[OPPOSITE[side]][1]  # this side's face lands in the neighbour's opposite halo
        sent = _offsets(layout, extents, dtype, send_box)
        order = np.argsort(sent, kind="stable")  # the sender's memory order
        position = np.empty(sent.size, dtype=np.int64)
        position[order] = np.arange(sent.size)
        src_all.append(sent[order])
        buf_all.append(at + np.arange(sent.size))
        landed = _offsets(layout, extents, dtype, recv_box)  # element c of the face lands at landed[c]
        back = np.argsort(landed, kind="stable")  # written in the receiver's memory order
        rbuf_all.append(at + position[back])
        dst_all.append(landed[back])
        start[side], size[side] = at, int(sent.size)
        at += int(sent.size)
    pack = _runs(np.concatenate(src_all), np.concatenate(buf_all))
    unpack = _runs(np.concatenate(rbuf_all), np.concatenate(dst_all))
    return HaloPlan(layout, extents, halo, pack, unpack, start, size)


def halo_reference(global_logical: np.ndarray, corner: tuple[int, int], interior: tuple[int, int], halo: int) -> np.ndarray:
    """A subdomain's logical array after an exchange of faces, cut from the doubly periodic global
    array with NumPy: interior and four faces of halo; corners left at NaN (not exchanged)."""
    (j0, i0), (ny, nx), h = corner, interior, halo
    gy, gx = global_logical.shape[2], global_logical.shape[3]
    rows = np.arange(j0 - h, j0 + ny + h) % gy
    cols = np.arange(i0 - h, i0 + nx + h) % gx
    out = global_logical[:, :, rows][:, :, :, cols].astype(np.float64)
    out[:, :, :h, :h] = out[:, :, :h, -h:] = out[:, :, -h:, :h] = out[:, :, -h:, -h:] = np.nan
    return out


def subdomain_state(global_logical: np.ndarray, layout: Layout | str, corner: tuple[int, int], interior: tuple[int, int],
                    halo: int, dtype: Any) -> Any:
    """A rank's state: its interior block of the global array, halo cells set to NaN (so an
    exchange that misses a cell shows)."""
    from kernels.state import State

    (j0, i0), (ny, nx), h = corner, interior, halo
    values = np.full((global_logical.shape[0], global_logical.shape[1], ny + 2 * h, nx + 2 * h), np.nan)
    values[:, :, h:h + ny, h:h + nx] = global_logical[:, :, j0:j0 + ny, i0:i0 + nx]
    state = State.zeros(layout, Extents(*values.shape), dtype)
    state.assign_logical(values)
    return state


def exchange_in_process(global_logical: np.ndarray, layout: Layout | str, dims: tuple[int, int], halo: int,
                        dtype: Any = "float64") -> dict[tuple[int, int], np.ndarray]:
    """Every rank of a periodic (py, px) process grid packs, "sends" by handing its buffer slices
    to its neighbours, and unpacks, all in this process; returns each rank's logical array.
    The same pack and unpack runs as an MPI exchange, without MPI."""
    py, px = dims
    gv, gz, gy, gx = global_logical.shape
    if gy % py or gx % px:
        raise LayoutError(f"global y={gy}, x={gx} do not split evenly over a {py} x {px} process grid")
    ny, nx = gy // py, gx // px
    ranks = [(cy, cx) for cy in range(py) for cx in range(px)]
    states = {r: subdomain_state(global_logical, layout, (r[0] * ny, r[1] * nx), (ny, nx), halo, dtype) for r in ranks}
    plan = halo_plan(layout, states[ranks[0]].extents, dtype, halo)
    send = {r: np.zeros(plan.buffer_size, dtype) for r in ranks}
    recv = {r: np.zeros(plan.buffer_size, dtype) for r in ranks}
    for r in ranks:
        COPY_RUNS.parallel(*plan.pack.args(states[r].data.reshape(-1), send[r]))
    for (cy, cx) in ranks:
        for side in SIDES:
            dy, dx = STEP[side]
            to = ((cy + dy) % py, (cx + dx) % px)
            a, n = plan.face_start[side], plan.face_size[side]
            recv[to][a:a + n] = send[(cy, cx)][a:a + n]
    for r in ranks:
        COPY_RUNS.parallel(*plan.unpack.args(recv[r], states[r].data.reshape(-1)))
    return {r: states[r].to_logical() for r in ranks}
