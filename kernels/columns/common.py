"""Shared parts of the column solves: canonical views, the vertical-diffusion source, the oracle.

Any layout's C-contiguous buffer reshapes without a copy to ``(outer, z, inner)``: the product
of the physical axes outside z, the (padded) z axis, and the product of those inside it. One
compiled specialisation per schedule therefore serves every layout, tiled and padded included.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from kernels.base import Kernel, Problem, Schedule
from kernels.grid import Extents
from kernels.jit import inline
from kernels.state import State

#: Default strip width (columns swept together) of the strip schedules. With the horizontal
#: axes contiguous, each z step of a strip reads one short run per field at a new page; 128
#: columns make that run 1 KiB in float64, long enough for the hardware prefetchers, while a
#: thread's scratch (at most 3 x nz x 128 values, 192 KiB at nz=64) stays in L2. Measured on the
#: development machine (4x64x128x128, float64, 1 thread): widths 32..512 on var.z.y.x,
#: y/8.x/16.var.z.y%8.x%16 and z.var.y.x; 128 was within noise of the best for all three kernels.
STRIP_WIDTH = 128

COLUMN = Schedule("column", "one column at a time; z innermost; threads split the columns")
STRIP = Schedule(
    "strip",
    "a strip of columns per z step; innermost loop along the contiguous non-z axis; threads split the strips",
    (("width", STRIP_WIDTH),),
)

PAIRED = Schedule(
    "pairs",
    "two columns at a time, their z recurrences interleaved to hide division latency; threads split the pairs",
)
#: The interleaved solve's other block width: the choosing rounds pick W = 2 or 4 per layout.
QUADS = Schedule(
    "quads",
    "four columns at a time, their z recurrences interleaved (block width 4); threads split the groups of four",
)

#: Columns solved together by each interleaved schedule (its block width W).
INTERLEAVED = {"pairs": 2, "quads": 4}


@inline
def column_at(col, inner):  # type: ignore[no-untyped-def]
    """``(outer, inner)`` indices of flat column ``col`` of an ``(outer, z, inner)`` view, unsigned."""
    o = col // inner
    return np.uintp(o), np.uintp(col - o * inner)


@inline
def column_offset(col, zext, inner):  # type: ignore[no-untyped-def]
    """Flat offset of level 0 of flat column ``col`` of an ``(outer, zext, inner)`` view, unsigned."""
    o, i = column_at(col, inner)
    return o * np.uintp(zext) * np.uintp(inner) + i


@inline
def split_column(col, nb, nc, b_outside):  # type: ignore[no-untyped-def]
    """``(ia, ib1, ib2, ic)`` of flat item ``col`` over (A, B, C) of the seven-axis views of
    ``shared_view``, where B is B1 when ``b_outside`` else B2. With ``nc`` = nz, the last index is
    a level instead (items over (A, B, z))."""
    ia = col // (nb * nc)
    rem = col - ia * nb * nc
    ib = rem // nc
    ib1 = ib if b_outside else 0
    return ia, ib1, ib - ib1, rem - ib * nc


def column_view(state: State) -> np.ndarray:
    """``(outer, z_padded, inner)`` view of a state's buffer (no copy)."""
    shape = state.data.shape
    pz = state.layout.index_of("z")
    outer = int(np.prod(shape[:pz], dtype=np.int64))
    inner = int(np.prod(shape[pz + 1 :], dtype=np.int64))
    return state.data.reshape(outer, shape[pz], inner)


def shared_view(state: State) -> np.ndarray:
    """``(A, V1, B1, z_padded, B2, V2, C)`` view (no copy) with the var axis as V1 or V2.

    var outside z: ``A.var.B1.z.C`` (B2 = V2 = 1); var inside z: ``A.z.B2.var.C`` (V1 = B1 = 1).
    Works for a field of var extent 1 (shared coefficients) too.
    """
    shape = state.data.shape
    pz, pv = state.layout.index_of("z"), state.layout.index_of("var")
    prod = lambda s: int(np.prod(s, dtype=np.int64))  # noqa: E731
    if pv < pz:
        dims = (prod(shape[:pv]), shape[pv], prod(shape[pv + 1 : pz]), shape[pz], 1, 1, prod(shape[pz + 1 :]))
    else:
        dims = (prod(shape[:pz]), 1, 1, shape[pz], prod(shape[pz + 1 : pv]), shape[pv], prod(shape[pv + 1 :]))
    return state.data.reshape(dims)


def stretched_levels(nz: int) -> tuple[np.ndarray, np.ndarray]:
    """Layer thicknesses growing 4 % per level upward, and the distances between layer centres."""
    dz = 20.0 * 1.04 ** np.arange(nz)
    centres = np.cumsum(dz) - dz / 2
    return dz, np.diff(centres)


def diffusion_coefficients(diffusivity: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Backward-Euler vertical diffusion ``(I - dt D) x = d`` with zero-flux top and bottom.

    ``diffusivity`` has the vertical axis at position 1 and holds K at the nz-1 interfaces.
    Returns sub-, main- and super-diagonals with the vertical axis at position 1. The matrix is
    strictly diagonally dominant, so the Thomas algorithm is stable without pivoting.
    """
    nz = diffusivity.shape[1] + 1
    dz, dzc = stretched_levels(nz)
    shape = [1] * diffusivity.ndim
    shape[1] = nz - 1
    flux = dt * diffusivity / dzc.reshape(shape)  # dt*K/dzc at each interface
    pad = [(0, 0)] * diffusivity.ndim
    below, above = list(pad), list(pad)
    below[1], above[1] = (1, 0), (0, 1)
    dzs = dz.reshape([nz if i == 1 else 1 for i in range(diffusivity.ndim)])
    a = -np.pad(flux, below) / dzs
    c = -np.pad(flux, above) / dzs
    b = 1.0 - a - c
    return a, b, c


def interface_diffusivity(nz: int) -> np.ndarray:
    """K(z) in m²/s at the nz-1 interfaces: strong near the surface, decaying with height."""
    dz, dzc = stretched_levels(nz)
    height = np.cumsum(dz)[:-1]
    return 5.0 * np.exp(-height / 400.0) + 0.1


def thomas_reference(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Thomas algorithm in NumPy on logical arrays, vertical axis 1, vectorised over the rest.

    ``a``, ``b``, ``c`` broadcast against ``d``. Computed in float64 whatever the input dtype.
    """
    with np.errstate(all="ignore"):  # a singular system yields inf/NaN, reported by validation
        return _thomas(*(np.asarray(v, dtype=np.float64) for v in (a, b, c, d)))


def _thomas(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
    shape = np.broadcast_shapes(a.shape, b.shape, c.shape, d.shape)
    a, b, c, d = (np.broadcast_to(v, shape) for v in (a, b, c, d))
    nz = shape[1]
    cp = np.empty(shape)
    x = np.empty(shape)
    cp[:, 0] = c[:, 0] / b[:, 0]
    x[:, 0] = d[:, 0] / b[:, 0]
    for k in range(1, nz):
        m = b[:, k] - a[:, k] * cp[:, k - 1]
        cp[:, k] = c[:, k] / m
        x[:, k] = (d[:, k] - a[:, k] * x[:, k - 1]) / m
    for k in range(nz - 2, -1, -1):
        x[:, k] -= cp[:, k] * x[:, k + 1]
    return x


def right_hand_side(extents: Extents, seed: int) -> np.ndarray:
    """A seeded smooth-plus-noise field of shape (var, z, y, x)."""
    rng = np.random.default_rng(seed)
    return rng.standard_normal(extents.shape) + 1.0


def field_coefficient_inputs(extents: Extents, dtype: np.dtype, seed: int, coefficient_var: int) -> dict[str, np.ndarray]:
    """Seeded inputs of a solve with 3-D coefficients: a, b, c of var extent ``coefficient_var``
    (the state's var extent, or 1 when every variable shares its column's system) and d.

    The diffusivity is the height profile times a uniform factor in [0.5, 1.5) per point.
    """
    rng = np.random.default_rng(seed)
    profile = interface_diffusivity(extents.z).reshape(1, -1, 1, 1)
    noise = rng.uniform(0.5, 1.5, size=(coefficient_var, extents.z - 1, extents.y, extents.x))
    a, b, c = diffusion_coefficients(profile * noise, dt=600.0)
    d = right_hand_side(extents, seed + 1)
    return {k: v.astype(dtype) for k, v in {"a": a, "b": b, "c": c, "d": d}.items()}


def column_tolerance(dtype: np.dtype) -> float:
    """Relative tolerance of a column solve against the float64 oracle.

    The systems are strictly diagonally dominant with 2-norm condition numbers of about 34 at
    16-256 levels (measured with numpy.linalg.cond), so the forward error is a few units of
    rounding times 34: ~1e-14 in float64 and ~1e-5 in float32. Measured worst cases over the
    contract test's layouts: 4e-16 and 1.7e-7. The bounds below leave a factor of ~25-60.
    """
    return 1e-14 if np.dtype(dtype) == np.float64 else 1e-5


class ColumnSolve(Kernel):
    """A tridiagonal solve along z in every (variable, column), by the Thomas algorithm.

    A subclass gives its inputs, ``implementation`` and ``factorised_systems``; the flop count,
    traffic model, reference and tolerance are shared. ``a``, ``b``, ``c`` may be 1-D per level.
    """

    family = "columns"
    schedules = (COLUMN, STRIP, PAIRED)

    def factorised_systems(self, extents: Extents) -> int:
        """How many distinct matrices one call factorises (each right-hand side is solved once)."""
        raise NotImplementedError

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        full = lambda v: v.reshape(1, -1, 1, 1) if v.ndim == 1 else v  # noqa: E731 - per-level coefficients
        return thomas_reference(*(full(logical[k]) for k in "abc"), logical["d"])

    def flops(self, extents: Extents) -> int:
        # Factorisation of n levels: first row 2, rows 1..n-1 4 each. Per right-hand side: forward
        # 1 + 3(n-1), back substitution 2(n-1). Every (variable, column) is one right-hand side.
        n = extents.z
        return self.factorised_systems(extents) * (2 + 4 * (n - 1)) + extents.var * extents.y * extents.x * (5 * n - 4)

    def tolerance(self, dtype: Any) -> float:
        return column_tolerance(dtype)

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """Strips pack their inner loop across adjacent columns; column, pairs and quads run one,
        two or four recurrences along z, which leave nothing wider to pack."""
        if schedule.name == "column":
            return 1
        if schedule.name in INTERLEAVED:
            return INTERLEAVED[schedule.name]
        if schedule.name == "strip":
            return min(schedule.param("width", STRIP_WIDTH), self.strip_extent(problem.output))
        return None

    def strip_extent(self, state: State) -> int:
        """Columns adjacent in memory that one strip sweeps: the storage extent inside z."""
        shape = state.data.shape
        return int(np.prod(shape[state.layout.index_of("z") + 1 :], dtype=np.int64))

    def thread_working_set(self, extents: Extents, dtype: Any, schedule: Schedule) -> int | None:
        """Columns in flight (1, W or the strip width) x levels x (3-D inputs + output + one scratch row)."""
        columns = {"column": 1, **INTERLEAVED}.get(schedule.name) or schedule.param("width", STRIP_WIDTH)
        fields = sum(isinstance(v, Extents) for v in self.input_shapes(extents).values()) + 2
        return columns * extents.z * fields * np.dtype(dtype).itemsize
