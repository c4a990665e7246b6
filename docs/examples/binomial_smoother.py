"""``binomial_smoother``: a 1-2-1 filter along y and along x (9 points), doubly periodic.

An example of adding a stencil out of tree: load it with
``STRIDEWISE_KERNEL_MODULES=binomial_smoother`` and this directory on ``PYTHONPATH``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels import Extents, Stencil, inline, register, row_walk
from kernels.stencils.common import axis_neighbours, periodic_pad, shifted, stencil_tolerance


@inline
def point(q, out, extra, p, pw, offs, consts):  # type: ignore[no-untyped-def]
    e, w, n, s = offs
    two, scale = consts
    u = np.uintp
    row_n = q[u(p + n + w)] + two * q[u(p + n)] + q[u(p + n + e)]
    row_c = q[u(p + w)] + two * q[u(p)] + q[u(p + e)]
    row_s = q[u(p + s + w)] + two * q[u(p + s)] + q[u(p + s + e)]
    out[u(p)] = (row_n + two * row_c + row_s) * scale


class BinomialSmoother(Stencil):
    name = "binomial_smoother"
    summary = "1-2-1 binomial filter along y and x (9 points, weights sum to 1), doubly periodic"
    walk = row_walk("binomial_smoother", axis_neighbours, point)

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return dtype.type(2), dtype.type(1 / 16)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        qp = periodic_pad(logical["q"].astype(np.float64), 1)
        along_x = shifted(qp, 1, 0, -1) + 2 * shifted(qp, 1, 0, 0) + shifted(qp, 1, 0, 1)
        xp = periodic_pad(along_x, 1)
        return (shifted(xp, 1, -1, 0) + 2 * along_x + shifted(xp, 1, 1, 0)) / 16

    def flops(self, extents: Extents) -> int:
        # Per row of three: 2 adds, 1 multiply; three rows, then 2 adds, 1 multiply, 1 scale.
        return 13 * extents.points

    def tolerance(self, dtype: Any) -> float:
        return stencil_tolerance(dtype, terms=9 * 4)


register(BinomialSmoother())
