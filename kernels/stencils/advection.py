"""``advection``: flux-form advection of every variable by a horizontal wind, doubly periodic.

Fluxes are 2nd-order centred: the face value is the mean of the two cells and the face wind the
mean of the two cell-centred winds, so the tendency at a cell is

    T = -(1/(4h)) [ (u_c+u_e)(q_c+q_e) - (u_w+u_c)(q_w+q_c) + (v_c+v_n)(q_c+q_n) - (v_s+v_c)(q_s+q_c) ].

Each face flux enters two cells with opposite signs, so the domain total of T telescopes to zero
(conservation); a constant field in a uniform wind has T = 0 exactly. The wind components are
fields of var extent 1 stored in the state's layout.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.grid import Extents
from kernels.jit import inline
from kernels.registry import register
from kernels.stencils.common import Stencil, periodic_pad, row_walk, shifted, smooth_field, stencil_tolerance

SPACING = 1.0  # grid spacing h (grid units)


@inline
def point(q, out, extra, p, pw, offs, consts):  # type: ignore[no-untyped-def]
    qe, qw, qn, qs, we, ww, wn, ws = offs
    u, v = extra
    k = np.uintp
    qc, uc, vc = q[k(p)], u[k(pw)], v[k(pw)]
    fx = (uc + u[k(pw + we)]) * (qc + q[k(p + qe)]) - (u[k(pw + ww)] + uc) * (q[k(p + qw)] + qc)
    fy = (vc + v[k(pw + wn)]) * (qc + q[k(p + qn)]) - (v[k(pw + ws)] + vc) * (q[k(p + qs)] + qc)
    out[k(p)] = consts[0] * (fx + fy)


@inline
def offsets(dy, dx, wdy, wdx, j, i):  # type: ignore[no-untyped-def]
    # East, west, north, south in q's walk, then the same in the wind's.
    return dx[2, i], dx[0, i], dy[2, j], dy[0, j], wdx[2, i], wdx[0, i], wdy[2, j], wdy[0, j]


class Advection(Stencil):
    name = "advection"
    summary = "flux-form advection of every variable by a horizontal wind; 2nd-order centred fluxes, doubly periodic"
    walk = row_walk("advection", offsets, point, companion=True)
    companion = "u"  # the wind (u, v) has var extent 1: walked with var stride 0
    merge_vertical = False

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents, "u": extents.replace(var=1), "v": extents.replace(var=1)}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        return {
            "q": smooth_field(extents, seed).astype(dtype),
            "u": (10.0 + 5.0 * smooth_field(extents, seed + 1, nvar=1)).astype(dtype),
            "v": (-3.0 + 5.0 * smooth_field(extents, seed + 2, nvar=1)).astype(dtype),
        }

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        return (dtype.type(-0.25 / SPACING),)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        q, u, v = (logical[k].astype(np.float64) for k in "quv")
        return advection_reference(q, u, v, SPACING)

    def flops(self, extents: Extents) -> int:
        # Per point: 7 for the x flux difference, 7 for y, 1 add, 1 multiply.
        return 16 * extents.points

    def tolerance(self, dtype: Any) -> float:
        # Products of sums of winds (~15) and values (~2) in a difference: ~8 terms of size ~30.
        return stencil_tolerance(dtype, terms=8 * 30)


def advection_reference(q: np.ndarray, u: np.ndarray, v: np.ndarray, h: float) -> np.ndarray:
    """Centred flux-form tendency with NumPy: shifted views of periodically padded arrays, no loops."""
    qp, up, vp = periodic_pad(q, 1), periodic_pad(u, 1), periodic_pad(v, 1)
    s = shifted
    fx = (u + s(up, 1, 0, 1)) * (q + s(qp, 1, 0, 1)) - (s(up, 1, 0, -1) + u) * (s(qp, 1, 0, -1) + q)
    fy = (v + s(vp, 1, 1, 0)) * (q + s(qp, 1, 1, 0)) - (s(vp, 1, -1, 0) + v) * (s(qp, 1, -1, 0) + q)
    return -(fx + fy) / (4.0 * h)


register(Advection())
