"""``saturation``: one saturation-adjustment step at every point, reading every variable.

Variables: 0 is temperature in °C, 1 water vapour and 2 cloud water in g/kg, 3.. further
condensate species in g/kg that only load the heat capacity. Vapour above saturation condenses
(and cloud water below it evaporates, never more than there is) by one Newton step on
``qv - dq = qs(T + L dq / cp)``, with the Magnus form of the saturation vapour pressure (constants
of Alduchov & Eliasson 1996, from memory) at the pressure of each level. Every point reads all
variables and writes them all: 0-2 updated, the rest copied. The exponential and divisions make
the per-point work heavy, so a schedule must pack points into vector lanes to keep up with memory.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.columns.common import shared_view, split_column, stretched_levels
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, thread_count
from kernels.registry import register

MAGNUS_E0, MAGNUS_A, MAGNUS_B = 610.94, 17.625, 243.04  # Pa, 1, °C
EPS_G = 622.0  # ratio of gas constants (water vapour/dry air) x 1000 g/kg
CP, CL, LV = 1004.0, 4186.0, 2.5e6  # J/(kg K) dry air and liquid water, J/kg latent heat
#: Per-point operations of ``adjust`` and the loading sum beyond the first three variables
#: (an exp, a division and a max count one each).
FLOPS_PER_POINT = 29

POINT = Schedule("point", "one point at a time, its variables read innermost; threads split rows of points")
RUN = Schedule("run", "a row of points along the contiguous axis per pass, one pass per variable; threads split the rows")
COLUMN = Schedule(
    "column",
    "a column's variables transposed into per-thread scratch, adjusted in unit-stride loops along z, copied back; "
    "threads split the columns",
)


@inline
def adjust(tc, qv, qc, load, p, k):  # type: ignore[no-untyped-def]
    """One Newton step of saturation adjustment at one point; ``k`` holds the constants."""
    e0, a, b, eps, ratio, cp, cpv, clg, lvg, one = k[0], k[1], k[2], k[3], k[4], k[5], k[6], k[7], k[8], k[9]
    tb = tc + b
    es = e0 * np.exp(a * tc / tb)
    qs = eps * es / (p - ratio * es)
    cpm = cp * (one + cpv * qv) + clg * (qc + load)
    heat = lvg / cpm  # K per g/kg condensed
    gamma = qs * (a * b) / (tb * tb) * heat
    dq = max((qv - qs) / (one + gamma), -qc)
    return tc + heat * dq, qv - dq, qc + dq


def by_point(q, out, p, nz, nvar, k, nthreads):  # type: ignore[no-untyped-def]
    """Views (A, V1, B1, z, B2, V2, C); rows are (A, B, z) and run along C; var innermost in a point."""
    var_outside = q.shape[1] > 1
    nb, nc = q.shape[2] * q.shape[4], q.shape[6]
    nrows = q.shape[0] * nb * nz
    zero = k[9] - k[9]
    for t in prange(nthreads):
        lo, hi = chunk(nrows, nthreads, t)
        for row in range(lo, hi):
            ia, ib1, ib2, kz = split_column(row, nb, nz, q.shape[2] > 1)
            for ic in range(nc):
                load = zero
                for v in range(3, nvar):
                    v1 = v if var_outside else 0
                    load += q[ia, v1, ib1, kz, ib2, v - v1, ic]
                    out[ia, v1, ib1, kz, ib2, v - v1, ic] = q[ia, v1, ib1, kz, ib2, v - v1, ic]
                u1, c1 = (1, 0) if var_outside else (0, 1)
                tc, qv, qc = adjust(q[ia, 0, ib1, kz, ib2, 0, ic], q[ia, u1, ib1, kz, ib2, c1, ic],
                                    q[ia, 2 * u1, ib1, kz, ib2, 2 * c1, ic], load, p[kz], k)
                out[ia, 0, ib1, kz, ib2, 0, ic] = tc
                out[ia, u1, ib1, kz, ib2, c1, ic] = qv
                out[ia, 2 * u1, ib1, kz, ib2, 2 * c1, ic] = qc


def by_run(q, out, p, nz, nvar, k, scratch):  # type: ignore[no-untyped-def]
    """Same rows as ``by_point``; each variable's row is one unit-stride pass along C. The
    loading is summed into per-thread scratch (threads, C) first."""
    var_outside = q.shape[1] > 1
    nb, nc = q.shape[2] * q.shape[4], q.shape[6]
    nrows = q.shape[0] * nb * nz
    nthreads = scratch.shape[0]
    zero = k[9] - k[9]
    for t in prange(nthreads):
        lo, hi = chunk(nrows, nthreads, t)
        load = scratch[t]
        for row in range(lo, hi):
            ia, ib1, ib2, kz = split_column(row, nb, nz, q.shape[2] > 1)
            for ic in range(nc):
                load[ic] = zero
            for v in range(3, nvar):
                v1 = v if var_outside else 0
                src, dst = q[ia, v1, ib1, kz, ib2, v - v1], out[ia, v1, ib1, kz, ib2, v - v1]
                for ic in range(nc):
                    load[ic] += src[ic]
                    dst[ic] = src[ic]
            u1, c1 = (1, 0) if var_outside else (0, 1)
            t0, t1, t2 = q[ia, 0, ib1, kz, ib2, 0], q[ia, u1, ib1, kz, ib2, c1], q[ia, 2 * u1, ib1, kz, ib2, 2 * c1]
            o0, o1, o2 = out[ia, 0, ib1, kz, ib2, 0], out[ia, u1, ib1, kz, ib2, c1], out[ia, 2 * u1, ib1, kz, ib2, 2 * c1]
            pk = p[kz]
            for ic in range(nc):
                o0[ic], o1[ic], o2[ic] = adjust(t0[ic], t1[ic], t2[ic], load[ic], pk, k)


def by_column(q, out, p, nz, nvar, k, scratch):  # type: ignore[no-untyped-def]
    """One column at a time: its variables copied into per-thread scratch (threads, var+1, nz)
    in the order memory holds them (a local transpose), adjusted in unit-stride loops along z,
    copied back. Row var of the scratch holds the loading."""
    var_outside = q.shape[1] > 1
    b_outside = q.shape[2] > 1
    nb, nc = q.shape[2] * q.shape[4], q.shape[6]
    ncol = q.shape[0] * nb * nc
    nthreads = scratch.shape[0]
    zero = k[9] - k[9]
    for t in prange(nthreads):
        lo, hi = chunk(ncol, nthreads, t)
        s = scratch[t]
        for col in range(lo, hi):
            ia, ib1, ib2, ic = split_column(col, nb, nc, b_outside)
            if var_outside:
                for v in range(nvar):
                    for kz in range(nz):
                        s[v, kz] = q[ia, v, ib1, kz, ib2, 0, ic]
            else:
                for kz in range(nz):
                    for v in range(nvar):
                        s[v, kz] = q[ia, 0, ib1, kz, ib2, v, ic]
            for kz in range(nz):
                s[nvar, kz] = zero
            for v in range(3, nvar):
                for kz in range(nz):
                    s[nvar, kz] += s[v, kz]
            for kz in range(nz):
                s[0, kz], s[1, kz], s[2, kz] = adjust(s[0, kz], s[1, kz], s[2, kz], s[nvar, kz], p[kz], k)
            if var_outside:
                for v in range(nvar):
                    for kz in range(nz):
                        out[ia, v, ib1, kz, ib2, 0, ic] = s[v, kz]
            else:
                for kz in range(nz):
                    for v in range(nvar):
                        out[ia, 0, ib1, kz, ib2, v, ic] = s[v, kz]


BY_POINT = build(by_point)
BY_RUN = build(by_run)
BY_COLUMN = build(by_column)


def reference_adjust(q: np.ndarray, p: np.ndarray) -> np.ndarray:
    """The same step in NumPy, vectorised over the logical ``(var, z, y, x)`` array, in float64."""
    q = np.asarray(q, dtype=np.float64)
    tc, qv, qc = q[0], q[1], q[2]
    load = q[3:].sum(axis=0)
    pz = np.asarray(p, dtype=np.float64).reshape(-1, 1, 1)
    es = MAGNUS_E0 * np.exp(MAGNUS_A * tc / (tc + MAGNUS_B))
    qs = EPS_G * es / (pz - (1 - EPS_G / 1000.0) * es)
    heat = (LV / 1000.0) / (CP * (1 + 0.00087 * qv) + CL / 1000.0 * (qc + load))
    gamma = qs * MAGNUS_A * MAGNUS_B / (tc + MAGNUS_B) ** 2 * heat
    dq = np.maximum((qv - qs) / (1 + gamma), -qc)
    out = q.copy()
    out[0], out[1], out[2] = tc + heat * dq, qv - dq, qc + dq
    return out


#: Height (m) above which the input profile stops changing: the lapse rate would otherwise take
#: the temperature below the Magnus formula's pole (-243.5 °C) on deep grids.
LID_HEIGHT = 15000.0


class Saturation(Kernel):
    name = "saturation"
    family = "points"
    summary = "saturation adjustment at every point: reads all variables, updates temperature, vapour and cloud water"
    schedules = (POINT, RUN, COLUMN)
    min_var = 3
    var_rule = "reads temperature, vapour and cloud water as variables 0-2"

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents, "p": extents.z}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        """A moist column: 25 °C at the ground cooling 6.5 K/km, pressure e-folding over 8 km,
        humidity 70-110 % of saturation (so some points condense), a little cloud and other water.
        Levels above 15 km (deep grids: 137 stretched levels reach about 100 km) repeat the 15 km
        state, where the air is still far denser than its vapour pressure (-72 °C, 153 hPa)."""
        rng = np.random.default_rng(seed)
        dz, _ = stretched_levels(extents.z)
        height = np.minimum(np.cumsum(dz) - dz / 2, LID_HEIGHT)
        p = 1.0e5 * np.exp(-height / 8000.0)
        shape = (extents.z, extents.y, extents.x)
        tc = 25.0 - 0.0065 * height.reshape(-1, 1, 1) + rng.normal(0.0, 1.0, shape)
        es = MAGNUS_E0 * np.exp(MAGNUS_A * tc / (tc + MAGNUS_B))
        qs = EPS_G * es / (p.reshape(-1, 1, 1) - (1 - EPS_G / 1000.0) * es)
        q = np.empty(extents.shape)
        q[0] = tc
        q[1] = qs * rng.uniform(0.7, 1.1, shape)
        q[2] = rng.uniform(0.0, 1.0, shape)
        q[3:] = rng.uniform(0.0, 0.5, (extents.var - 3, *shape))
        return {"q": q.astype(dtype), "p": p.astype(dtype)}

    def constants(self, dtype: np.dtype) -> np.ndarray:
        """The order ``adjust`` reads: e0, a, b, eps, 1 - eps/1000, cp, 8.7e-4 (the extra heat
        capacity of vapour, per g/kg), cl/1000, lv/1000, 1."""
        values = (MAGNUS_E0, MAGNUS_A, MAGNUS_B, EPS_G, 1 - EPS_G / 1000.0, CP, 0.00087, CL / 1000.0, LV / 1000.0, 1.0)
        return np.array(values, dtype=dtype)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return reference_adjust(logical["q"], logical["p"])

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        q, out = shared_view(problem.fields["q"]), shared_view(problem.output)
        ext, k = problem.extents, self.constants(problem.dtype)
        p = problem.arrays["p"]
        if schedule.name == "point":
            return BY_POINT, (q, out, p, ext.z, ext.var, k, thread_count())
        if schedule.name == "column":
            return BY_COLUMN, (q, out, p, ext.z, ext.var, k, np.zeros((thread_count(), ext.var + 1, ext.z), problem.dtype))
        return BY_RUN, (q, out, p, ext.z, ext.var, k, np.zeros((thread_count(), q.shape[6]), problem.dtype))

    def flops(self, extents: Extents) -> int:
        # adjust: tb 1, es 4 (mul, div, exp, mul), qs 4, cpm 6, heat 1, gamma 5 (a*b counted
        # though the compiler may fold it), dq 4, outputs 4 = 29; the loading adds var-3 more.
        return extents.y * extents.x * extents.z * (FLOPS_PER_POINT + extents.var - 3)

    def tolerance(self, dtype: Any) -> float:
        """A few roundings and one exp per output against the scale of the temperature (~25 °C).
        Measured worst cases over the contract layouts: 1.3e-16 and 1.3e-7; the bounds leave ~15-80x."""
        return 1e-14 if np.dtype(dtype) == np.float64 else 2e-6

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """``run`` packs along C, the storage extent inside var, ``column`` along z in scratch;
        ``point`` runs one point at a time."""
        if schedule.name == "column":
            return problem.extents.z
        return int(shared_view(problem.output).shape[6]) if schedule.name == "run" else 1


register(Saturation())
