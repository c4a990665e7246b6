"""``lam_hyperdiffusion``: the fused 13-point Laplacian squared on a limited-area subdomain, halo stored."""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.grid import Extents
from kernels.registry import register
from kernels.stencils.common import stencil_tolerance
from kernels.stencils.hyperdiffusion import offsets, point
from kernels.stencils.lam_laplacian import interior_laplacian
from kernels.stencils.laplacian import SPACING
from kernels.stencils.limited import LimitedArea, limited_walk


class LimitedHyperdiffusion(LimitedArea):
    name = "lam_hyperdiffusion"
    summary = "4th-order hyperdiffusion (fused 13 points) on a limited-area subdomain: halo stored and read, interior written"
    radius = 2
    halo = 2
    walk = limited_walk("lam_hyperdiffusion", offsets, point)

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return dtype.type(20), dtype.type(8), dtype.type(2), dtype.type(1.0 / SPACING**4)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        """The Laplacian of the Laplacian, each by NumPy slicing without wrap: defined two cells in."""
        return interior_laplacian(interior_laplacian(logical["q"], SPACING), SPACING)

    def flops(self, extents: Extents) -> int:
        return 16 * self.interior_points(extents)  # as hyperdiffusion, on the interior

    def tolerance(self, dtype: Any) -> float:
        return stencil_tolerance(dtype, terms=13 * 20)


register(LimitedHyperdiffusion())
