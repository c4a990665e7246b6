"""``laplacian``: the 5-point Laplacian (2nd order), doubly periodic, on every variable and level."""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.grid import Extents
from kernels.jit import inline
from kernels.registry import register
from kernels.stencils.common import Stencil, axis_neighbours, periodic_pad, row_walk, shifted, stencil_tolerance

SPACING = 1.0  # grid spacing h in both directions (grid units)


@inline
def point(q, out, extra, p, pw, offs, consts):  # type: ignore[no-untyped-def]
    de, dw, dn, ds = offs
    four, scale = consts
    u = np.uintp
    out[u(p)] = (q[u(p + de)] + q[u(p + dw)] + q[u(p + dn)] + q[u(p + ds)] - four * q[u(p)]) * scale


class Laplacian(Stencil):
    name = "laplacian"
    summary = "5-point Laplacian, doubly periodic in y and x, every variable and level"
    walk = row_walk("laplacian", axis_neighbours, point)

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return dtype.type(4), dtype.type(1.0 / SPACING**2)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return laplacian_reference(logical["q"].astype(np.float64), SPACING)

    def flops(self, extents: Extents) -> int:
        # 3 adds, 1 multiply by 4, 1 subtract, 1 multiply by 1/h^2 per point.
        return 6 * extents.points

    def tolerance(self, dtype: Any) -> float:
        return stencil_tolerance(dtype, terms=5)


def laplacian_reference(q: np.ndarray, h: float) -> np.ndarray:
    """5-point Laplacian with NumPy: shifted views of a periodically padded array, no loops."""
    qp = periodic_pad(q, 1)
    return (shifted(qp, 1, 0, 1) + shifted(qp, 1, 0, -1) + shifted(qp, 1, 1, 0) + shifted(qp, 1, -1, 0) - 4.0 * q) / h**2


register(Laplacian())
