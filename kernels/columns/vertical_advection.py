"""``vertical_advection``: flux-form upwind transport of every variable along z, closed top and bottom.

The vertical velocity ``w`` (var extent 1, shared by every variable) at level k is the velocity
through the interface below level k; level 0's is the closed bottom and is never read. The flux
through interface k is ``max(w,0) q[k-1] + min(w,0) q[k]`` (first-order upwind), zero at the
bottom and top, and ``out[k] = q[k] - r[k] (F[k+1] - F[k])`` with ``r = dt/dz`` per level.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.columns.common import STRIP_WIDTH, shared_view, split_column, stretched_levels
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, thread_count
from kernels.registry import register

COLUMN = Schedule("column", "one column at a time, z innermost, every variable in turn; threads split the columns")
LEVEL = Schedule(
    "level",
    "level by level over a strip of columns along the contiguous non-z axis (every variable of the strip when var "
    "is inside z); threads split the strips",
    (("width", STRIP_WIDTH),),
)


@inline
def upwind(w, below, above, zero):  # type: ignore[no-untyped-def]
    """Flux through an interface with velocity ``w`` between values ``below`` and ``above``."""
    return max(w, zero) * below + min(w, zero) * above


def by_column(q, w, r, out, nz, nvar, nthreads):  # type: ignore[no-untyped-def]
    """Views (A, V1, B1, z, B2, V2, C); w's var extent is 1."""
    var_outside = q.shape[1] > 1
    b_outside = q.shape[2] > 1
    nb, nc = q.shape[2] * q.shape[4], q.shape[6]
    ncol = q.shape[0] * nb * nc
    zero = r[0] - r[0]
    for t in prange(nthreads):
        lo, hi = chunk(ncol, nthreads, t)
        for col in range(lo, hi):
            ia, ib1, ib2, ic = split_column(col, nb, nc, b_outside)
            for v in range(nvar):
                v1 = v if var_outside else 0
                v2 = v - v1
                flo = zero
                for k in range(nz - 1):
                    fhi = upwind(w[ia, 0, ib1, k + 1, ib2, 0, ic], q[ia, v1, ib1, k, ib2, v2, ic], q[ia, v1, ib1, k + 1, ib2, v2, ic], zero)
                    out[ia, v1, ib1, k, ib2, v2, ic] = q[ia, v1, ib1, k, ib2, v2, ic] - r[k] * (fhi - flo)
                    flo = fhi
                top = nz - 1
                out[ia, v1, ib1, top, ib2, v2, ic] = q[ia, v1, ib1, top, ib2, v2, ic] - r[top] * (zero - flo)


def by_level(q, w, r, out, nz, nvar, flux):  # type: ignore[no-untyped-def]
    """Strips of (V2, C) elements level by level: ``flux.shape[2]`` adjacent columns along C, all
    of V2 when var is inside z. flux is per-thread scratch (threads, V2, width) holding the flux
    through the bottom interface of the current level. Strips, not whole rows, are the work
    items, so layouts with nothing outside z still give every thread work."""
    var_outside = q.shape[1] > 1
    b_outside = q.shape[2] > 1
    nb, nc = q.shape[2] * q.shape[4], q.shape[6]
    nv1 = nvar if var_outside else 1
    nv2 = nvar // nv1
    width = flux.shape[2]
    nstrip = (nc + width - 1) // width
    nitems = q.shape[0] * nv1 * nb * nstrip
    nthreads = flux.shape[0]
    zero = r[0] - r[0]
    for t in prange(nthreads):
        lo, hi = chunk(nitems, nthreads, t)
        f = flux[t]
        for item in range(lo, hi):
            ia = item // (nv1 * nb * nstrip)
            rem = item - ia * nv1 * nb * nstrip
            v1 = rem // (nb * nstrip)
            rem = rem - v1 * nb * nstrip
            ib = rem // nstrip
            s0 = (rem - ib * nstrip) * width
            n = min(width, nc - s0)
            ib1 = ib if b_outside else 0
            ib2 = ib - ib1
            for v2 in range(nv2):
                for s in range(n):
                    f[v2, s] = zero
            for k in range(nz - 1):
                wk, rk = w[ia, 0, ib1, k + 1, ib2, 0, s0 : s0 + n], r[k]
                for v2 in range(nv2):
                    qk, qu = q[ia, v1, ib1, k, ib2, v2, s0 : s0 + n], q[ia, v1, ib1, k + 1, ib2, v2, s0 : s0 + n]
                    ok, fv = out[ia, v1, ib1, k, ib2, v2, s0 : s0 + n], f[v2]
                    for s in range(n):
                        fhi = upwind(wk[s], qk[s], qu[s], zero)
                        ok[s] = qk[s] - rk * (fhi - fv[s])
                        fv[s] = fhi
            top, rt = nz - 1, r[nz - 1]
            for v2 in range(nv2):
                qk, ok, fv = q[ia, v1, ib1, top, ib2, v2, s0 : s0 + n], out[ia, v1, ib1, top, ib2, v2, s0 : s0 + n], f[v2]
                for s in range(n):
                    ok[s] = qk[s] - rt * (zero - fv[s])


BY_COLUMN = build(by_column)
BY_LEVEL = build(by_level)


def upwind_reference(q: np.ndarray, w: np.ndarray, r: np.ndarray) -> np.ndarray:
    """NumPy differences on the logical arrays (vertical axis 1), in float64."""
    q, w, r = (np.asarray(v, dtype=np.float64) for v in (q, w, r))
    inner = np.maximum(w[:, 1:], 0) * q[:, :-1] + np.minimum(w[:, 1:], 0) * q[:, 1:]
    flux = np.pad(inner, ((0, 0), (1, 1), (0, 0), (0, 0)))  # zero flux through bottom and top
    return q - r.reshape(1, -1, 1, 1) * (flux[:, 1:] - flux[:, :-1])


class VerticalAdvection(Kernel):
    name = "vertical_advection"
    family = "columns"
    summary = "flux-form upwind transport along z with closed top and bottom; w shared by every variable"
    schedules = (COLUMN, LEVEL)

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents, "w": extents.replace(var=1), "r": extents.z}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        """Tracer mixing ratios, an updraft-and-downdraft velocity of up to 2 m/s, dt = 20 s on the
        stretched levels (Courant number under 1 on every level)."""
        rng = np.random.default_rng(seed)
        dz, _ = stretched_levels(extents.z)
        q = rng.uniform(0.0, 1.0, extents.shape) + 1.0
        w = rng.uniform(-2.0, 2.0, (1, extents.z, extents.y, extents.x))
        w[:, 0] = 0.0  # the closed bottom (never read)
        return {"q": q.astype(dtype), "w": w.astype(dtype), "r": (20.0 / dz).astype(dtype)}

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return upwind_reference(logical["q"], logical["w"], logical["r"])

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        q, w, out = shared_view(problem.fields["q"]), shared_view(problem.fields["w"]), shared_view(problem.output)
        ext, r = problem.extents, problem.arrays["r"]
        if schedule.name == "column":
            return BY_COLUMN, (q, w, r, out, ext.z, ext.var, thread_count())
        nv2 = 1 if q.shape[1] > 1 else ext.var
        width = schedule.param("width", STRIP_WIDTH)
        return BY_LEVEL, (q, w, r, out, ext.z, ext.var, np.zeros((thread_count(), nv2, width), problem.dtype))

    def flops(self, extents: Extents) -> int:
        # Each inner interface: max, min, two products, a sum (5); each level: difference,
        # product, difference (3). Per variable and column.
        return extents.var * extents.y * extents.x * (5 * (extents.z - 1) + 3 * extents.z)

    def tolerance(self, dtype: Any) -> float:
        """Three roundings per output of terms no larger than q (Courant number < 1). Measured worst
        cases over the contract layouts: 0 (the same operations as the reference) and 6.9e-8."""
        return 1e-14 if np.dtype(dtype) == np.float64 else 1e-6

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """``level`` packs its loop along a strip of C, the storage extent inside var; ``column`` runs one recurrence."""
        if schedule.name == "column":
            return 1
        return min(schedule.param("width", STRIP_WIDTH), int(shared_view(problem.output).shape[6]))


register(VerticalAdvection())
