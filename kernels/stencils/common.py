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

import numpy as np

from kernels.base import Schedule
from kernels.grid import Extents
from kernels.layout import TILES
from kernels.state import State

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


def _axis_offsets(state: State, axis: str) -> np.ndarray:
    """Element offset contributed by each logical index along a horizontal axis."""
    n = state.extents[axis]
    idx = np.arange(n)
    elem = np.array(state.data.strides) // state.data.itemsize
    out = np.zeros(n, dtype=np.int64)
    for pos, tok in enumerate(state.layout.tokens):
        if tok.axis == axis:
            out += tok.logical_index(idx).astype(np.int64) * elem[pos]
    return out


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
        dy=_displacements(_axis_offsets(state, "y"), halo),
        dx=_displacements(_axis_offsets(state, "x"), halo),
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
