"""``hyperdiffusion``: the Laplacian applied twice, fused into one 13-point pass, doubly periodic."""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.grid import Extents
from kernels.jit import inline
from kernels.registry import register
from kernels.stencils.common import Stencil, row_walk, stencil_tolerance
from kernels.stencils.laplacian import SPACING, laplacian_reference


@inline
def offsets(dy, dx, wdy, wdx, j, i):  # type: ignore[no-untyped-def]
    # Rows of dy/dx are displacements -2..2: east, west, 2 east, 2 west, north, south, 2 north, 2 south.
    return dx[3, i], dx[1, i], dx[4, i], dx[0, i], dy[3, j], dy[1, j], dy[4, j], dy[0, j]


@inline
def point(q, out, extra, p, pw, offs, consts):  # type: ignore[no-untyped-def]
    """Weights of the squared 5-point Laplacian: centre 20, axis neighbours -8, diagonals 2, distance-2 axis 1."""
    ex, wx, eex, wwx, ny_, sy, nny, ssy = offs
    w20, w8, w2, scale = consts
    u = np.uintp
    axis = q[u(p + ex)] + q[u(p + wx)] + q[u(p + ny_)] + q[u(p + sy)]
    diag = q[u(p + ny_ + ex)] + q[u(p + ny_ + wx)] + q[u(p + sy + ex)] + q[u(p + sy + wx)]
    far = q[u(p + eex)] + q[u(p + wwx)] + q[u(p + nny)] + q[u(p + ssy)]
    out[u(p)] = (w20 * q[u(p)] - w8 * axis + w2 * diag + far) * scale


class Hyperdiffusion(Stencil):
    name = "hyperdiffusion"
    summary = "4th-order hyperdiffusion (Laplacian squared) as one fused 13-point pass, doubly periodic"
    halo = 2
    walk = row_walk("hyperdiffusion", offsets, point)

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return dtype.type(20), dtype.type(8), dtype.type(2), dtype.type(1.0 / SPACING**4)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        q = logical["q"].astype(np.float64)
        return laplacian_reference(laplacian_reference(q, SPACING), SPACING)

    def flops(self, extents: Extents) -> int:
        # 3 adds for each of the three groups of 4, 3 weight multiplies, 3 combining add/subs, 1 scale.
        return 16 * extents.points

    def tolerance(self, dtype: Any) -> float:
        # Weights up to 20 on 13 terms: the rounding of the weighted sum is ~20x that of a plain sum.
        return stencil_tolerance(dtype, terms=13 * 20)


register(Hyperdiffusion())
