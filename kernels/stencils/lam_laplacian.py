"""``lam_laplacian``: the 5-point Laplacian on a limited-area subdomain, its halo stored and read."""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.grid import Extents
from kernels.registry import register
from kernels.stencils.common import axis_neighbours, stencil_tolerance
from kernels.stencils.laplacian import SPACING, point
from kernels.stencils.limited import LimitedArea, limited_walk


def interior_laplacian(q: np.ndarray, h: float) -> np.ndarray:
    """5-point Laplacian with NumPy slices of the stored array (no wrap); NaN on the outer ring."""
    q = np.asarray(q, dtype=np.float64)
    out = np.full(q.shape, np.nan)
    c = q[:, :, 1:-1, 1:-1]
    out[:, :, 1:-1, 1:-1] = (q[:, :, 2:, 1:-1] + q[:, :, :-2, 1:-1] + q[:, :, 1:-1, 2:] + q[:, :, 1:-1, :-2] - 4.0 * c) / h**2
    return out


class LimitedLaplacian(LimitedArea):
    name = "lam_laplacian"
    summary = "5-point Laplacian on a limited-area subdomain: halo stored in the state and read, interior written"
    radius = 1
    halo = 2
    walk = limited_walk("lam_laplacian", axis_neighbours, point)

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return dtype.type(4), dtype.type(1.0 / SPACING**2)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return interior_laplacian(logical["q"], SPACING)

    def flops(self, extents: Extents) -> int:
        return 6 * self.interior_points(extents)  # as laplacian, on the interior

    def tolerance(self, dtype: Any) -> float:
        return stencil_tolerance(dtype, terms=5)


register(LimitedLaplacian())
