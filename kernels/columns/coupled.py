"""``coupled``: a 2x2 block-tridiagonal solve along z, coupling variables 2m and 2m+1 of each column.

Two unknowns per level, as in an implicit vertical acoustic step (velocity and pressure solved
together). Field ``aN`` at variable 2m+r holds entry (r, N) of pair m's sub-diagonal block (``b``
the diagonal block, ``c`` the super-diagonal one), so each block's rows sit where its unknowns
do. Solved by the block Thomas algorithm with explicit 2x2 inverses; the matrices are strictly
diagonally dominant by rows, so no pivoting is needed.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import prange

from kernels.base import Kernel, Problem, Schedule
from kernels.columns.common import STRIP_WIDTH, split_column, diffusion_coefficients, interface_diffusivity, right_hand_side, shared_view
from kernels.grid import Extents
from kernels.jit import Compiled, build, inline
from kernels.parallel import chunk, thread_count
from kernels.registry import register

FIELDS = ("a0", "a1", "b0", "b1", "c0", "c1", "d")

COLUMN = Schedule("column", "one column's pair at a time, z sequential, the 2x2 algebra in registers; threads split (column, pair) items")
STRIP = Schedule(
    "strip",
    "a strip of adjacent columns per level; innermost loop along the contiguous non-z axis; threads split the strips",
    (("width", STRIP_WIDTH),),
)


@inline
def inverse(m00, m01, m10, m11, one):  # type: ignore[no-untyped-def]
    """Entries of the inverse of a 2x2 matrix."""
    r = one / (m00 * m11 - m01 * m10)
    return m11 * r, -m01 * r, -m10 * r, m00 * r


@inline
def times(i00, i01, i10, i11, c00, c01, c10, c11):  # type: ignore[no-untyped-def]
    """Product of two 2x2 matrices."""
    return i00 * c00 + i01 * c10, i00 * c01 + i01 * c11, i10 * c00 + i11 * c10, i10 * c01 + i11 * c11


@inline
def pair_index(v, var_outside):  # type: ignore[no-untyped-def]
    """(V1, V2) indices of variable ``v`` in the seven-axis views."""
    return (v, 0) if var_outside else (0, v)


def by_column(a0, a1, b0, b1, c0, c1, d, x, nz, npair, one, ws):  # type: ignore[no-untyped-def]
    """Views (A, V1, B1, z, B2, V2, C); ws is (threads, nz, 4): the eliminated super-diagonal blocks."""
    var_outside = d.shape[1] > 1
    b_outside = d.shape[2] > 1
    nb, nc = d.shape[2] * d.shape[4], d.shape[6]
    nitems = d.shape[0] * nb * nc * npair
    nthreads = ws.shape[0]
    for t in prange(nthreads):
        lo, hi = chunk(nitems, nthreads, t)
        p = ws[t]
        for item in range(lo, hi):
            col = item // npair
            m = item - col * npair
            ia, ib1, ib2, ic = split_column(col, nb, nc, b_outside)
            u1, u2 = pair_index(2 * m, var_outside)
            w1, w2 = pair_index(2 * m + 1, var_outside)
            i00, i01, i10, i11 = inverse(b0[ia, u1, ib1, 0, ib2, u2, ic], b1[ia, u1, ib1, 0, ib2, u2, ic],
                                         b0[ia, w1, ib1, 0, ib2, w2, ic], b1[ia, w1, ib1, 0, ib2, w2, ic], one)
            p00, p01, p10, p11 = times(i00, i01, i10, i11, c0[ia, u1, ib1, 0, ib2, u2, ic], c1[ia, u1, ib1, 0, ib2, u2, ic],
                                       c0[ia, w1, ib1, 0, ib2, w2, ic], c1[ia, w1, ib1, 0, ib2, w2, ic])
            r0, r1 = d[ia, u1, ib1, 0, ib2, u2, ic], d[ia, w1, ib1, 0, ib2, w2, ic]
            y0, y1 = i00 * r0 + i01 * r1, i10 * r0 + i11 * r1
            p[0, 0], p[0, 1], p[0, 2], p[0, 3] = p00, p01, p10, p11
            x[ia, u1, ib1, 0, ib2, u2, ic], x[ia, w1, ib1, 0, ib2, w2, ic] = y0, y1
            for k in range(1, nz):
                e00, e01 = a0[ia, u1, ib1, k, ib2, u2, ic], a1[ia, u1, ib1, k, ib2, u2, ic]
                e10, e11 = a0[ia, w1, ib1, k, ib2, w2, ic], a1[ia, w1, ib1, k, ib2, w2, ic]
                q00, q01, q10, q11 = times(e00, e01, e10, e11, p00, p01, p10, p11)
                i00, i01, i10, i11 = inverse(b0[ia, u1, ib1, k, ib2, u2, ic] - q00, b1[ia, u1, ib1, k, ib2, u2, ic] - q01,
                                             b0[ia, w1, ib1, k, ib2, w2, ic] - q10, b1[ia, w1, ib1, k, ib2, w2, ic] - q11, one)
                r0 = d[ia, u1, ib1, k, ib2, u2, ic] - (e00 * y0 + e01 * y1)
                r1 = d[ia, w1, ib1, k, ib2, w2, ic] - (e10 * y0 + e11 * y1)
                p00, p01, p10, p11 = times(i00, i01, i10, i11, c0[ia, u1, ib1, k, ib2, u2, ic], c1[ia, u1, ib1, k, ib2, u2, ic],
                                           c0[ia, w1, ib1, k, ib2, w2, ic], c1[ia, w1, ib1, k, ib2, w2, ic])
                y0, y1 = i00 * r0 + i01 * r1, i10 * r0 + i11 * r1
                p[k, 0], p[k, 1], p[k, 2], p[k, 3] = p00, p01, p10, p11
                x[ia, u1, ib1, k, ib2, u2, ic], x[ia, w1, ib1, k, ib2, w2, ic] = y0, y1
            for k in range(nz - 2, -1, -1):
                n0 = x[ia, u1, ib1, k, ib2, u2, ic] - (p[k, 0] * y0 + p[k, 1] * y1)
                n1 = x[ia, w1, ib1, k, ib2, w2, ic] - (p[k, 2] * y0 + p[k, 3] * y1)
                y0, y1 = n0, n1
                x[ia, u1, ib1, k, ib2, u2, ic], x[ia, w1, ib1, k, ib2, w2, ic] = y0, y1


def by_strip(a0, a1, b0, b1, c0, c1, d, x, nz, npair, one, ws):  # type: ignore[no-untyped-def]
    """Strips of ws.shape[3] adjacent columns along C; ws is (threads, nz, 4, width)."""
    var_outside = d.shape[1] > 1
    b_outside = d.shape[2] > 1
    nb, nc = d.shape[2] * d.shape[4], d.shape[6]
    width = ws.shape[3]
    nstrip = (nc + width - 1) // width
    nitems = d.shape[0] * nb * npair * nstrip
    nthreads = ws.shape[0]
    for t in prange(nthreads):
        lo, hi = chunk(nitems, nthreads, t)
        p = ws[t]
        for item in range(lo, hi):
            ia = item // (nb * npair * nstrip)
            rem = item - ia * nb * npair * nstrip
            ib = rem // (npair * nstrip)
            rem = rem - ib * npair * nstrip
            m = rem // nstrip
            s0 = (rem - m * nstrip) * width
            w = min(width, nc - s0)
            ib1 = ib if b_outside else 0
            ib2 = ib - ib1
            u1, u2 = pair_index(2 * m, var_outside)
            w1, w2 = pair_index(2 * m + 1, var_outside)
            for k in range(nz):
                ea0, ea1, eb0, eb1 = a0[ia, u1, ib1, k, ib2, u2], a1[ia, u1, ib1, k, ib2, u2], a0[ia, w1, ib1, k, ib2, w2], a1[ia, w1, ib1, k, ib2, w2]
                fa0, fa1, fb0, fb1 = b0[ia, u1, ib1, k, ib2, u2], b1[ia, u1, ib1, k, ib2, u2], b0[ia, w1, ib1, k, ib2, w2], b1[ia, w1, ib1, k, ib2, w2]
                ga0, ga1, gb0, gb1 = c0[ia, u1, ib1, k, ib2, u2], c1[ia, u1, ib1, k, ib2, u2], c0[ia, w1, ib1, k, ib2, w2], c1[ia, w1, ib1, k, ib2, w2]
                da, db = d[ia, u1, ib1, k, ib2, u2], d[ia, w1, ib1, k, ib2, w2]
                xa, xb = x[ia, u1, ib1, k, ib2, u2], x[ia, w1, ib1, k, ib2, w2]
                pk, pm = p[k], p[max(k - 1, 0)]
                if k == 0:
                    for jj in range(w):
                        j, i = np.uintp(jj), np.uintp(s0 + jj)  # unsigned: no negative-index wrap, so SIMD
                        i00, i01, i10, i11 = inverse(fa0[i], fa1[i], fb0[i], fb1[i], one)
                        pk[0, j], pk[1, j], pk[2, j], pk[3, j] = times(i00, i01, i10, i11, ga0[i], ga1[i], gb0[i], gb1[i])
                        xa[i], xb[i] = i00 * da[i] + i01 * db[i], i10 * da[i] + i11 * db[i]
                else:
                    xa_, xb_ = x[ia, u1, ib1, k - 1, ib2, u2], x[ia, w1, ib1, k - 1, ib2, w2]
                    for jj in range(w):
                        j, i = np.uintp(jj), np.uintp(s0 + jj)
                        e00, e01, e10, e11 = ea0[i], ea1[i], eb0[i], eb1[i]
                        q00, q01, q10, q11 = times(e00, e01, e10, e11, pm[0, j], pm[1, j], pm[2, j], pm[3, j])
                        i00, i01, i10, i11 = inverse(fa0[i] - q00, fa1[i] - q01, fb0[i] - q10, fb1[i] - q11, one)
                        y0, y1 = xa_[i], xb_[i]
                        r0 = da[i] - (e00 * y0 + e01 * y1)
                        r1 = db[i] - (e10 * y0 + e11 * y1)
                        pk[0, j], pk[1, j], pk[2, j], pk[3, j] = times(i00, i01, i10, i11, ga0[i], ga1[i], gb0[i], gb1[i])
                        xa[i], xb[i] = i00 * r0 + i01 * r1, i10 * r0 + i11 * r1
            for k in range(nz - 2, -1, -1):
                xa, xb = x[ia, u1, ib1, k, ib2, u2], x[ia, w1, ib1, k, ib2, w2]
                na, nb_ = x[ia, u1, ib1, k + 1, ib2, u2], x[ia, w1, ib1, k + 1, ib2, w2]
                pk = p[k]
                for jj in range(w):
                    j, i = np.uintp(jj), np.uintp(s0 + jj)
                    y0, y1 = na[i], nb_[i]
                    xa[i], xb[i] = xa[i] - (pk[0, j] * y0 + pk[1, j] * y1), xb[i] - (pk[2, j] * y0 + pk[3, j] * y1)


BY_COLUMN = build(by_column)
BY_STRIP = build(by_strip)


def banded_reference(blocks: dict[str, np.ndarray]) -> np.ndarray:
    """Solve every (pair, column) with ``scipy.linalg.solve_banded`` on the interleaved matrix.

    Unknown 2k+r is variable 2m+r at level k; entry (r, N) of the blocks at level k sits in
    column 2(k-1)+N (sub-diagonal block), 2k+N (diagonal) or 2(k+1)+N (super-diagonal), so the
    matrix has 3 bands below and 3 above the diagonal. Computed in float64.
    """
    from scipy.linalg import solve_banded

    v = {k: np.asarray(a, dtype=np.float64) for k, a in blocks.items()}
    nvar, nz, ny, nx = v["d"].shape
    npair = nvar // 2
    # (pair, y, x, 2 nz): unknown 2k+r of each system, and its row of each block entry
    interleave = lambda f: f.reshape(npair, 2, nz, ny, nx).transpose(0, 3, 4, 2, 1).reshape(npair, ny, nx, 2 * nz)  # noqa: E731
    rows = np.arange(2 * nz)
    level = rows // 2
    band = np.zeros((npair, ny, nx, 7, 2 * nz))
    for name, shift in (("a", -1), ("b", 0), ("c", 1)):
        for n in (0, 1):
            col = 2 * (level + shift) + n
            ok = (col >= 0) & (col < 2 * nz)
            band[..., 3 + rows[ok] - col[ok], col[ok]] = interleave(v[f"{name}{n}"])[..., rows[ok]]
    rhs = interleave(v["d"])
    solved = np.empty_like(rhs)
    for idx in np.ndindex(npair, ny, nx):
        solved[idx] = solve_banded((3, 3), band[idx], rhs[idx])
    return solved.reshape(npair, ny, nx, nz, 2).transpose(0, 4, 3, 1, 2).reshape(nvar, nz, ny, nx)


class Coupled(Kernel):
    name = "coupled"
    family = "columns"
    summary = "2x2 block-tridiagonal solve per column coupling variables in pairs (block Thomas)"
    schedules = (COLUMN, STRIP)
    min_var, var_step = 2, 2
    var_rule = "couples variables in pairs"
    # A padded column holds two equal rows whatever its padding value, so it is singular: its
    # outputs are inf/NaN, stored in padding that nothing reads.

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {k: extents for k in FIELDS}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        """Each row is backward-Euler vertical diffusion (as in the scalar solves, diffusivity x
        [0.5, 1.5) per point) plus coupling to the partner unknown in [-0.15, 0.15) in each of
        the three blocks: row sums of the off-diagonal magnitudes stay at least 0.55 under the
        diagonal."""
        rng = np.random.default_rng(seed)
        shape = (extents.var, extents.z, extents.y, extents.x)
        profile = interface_diffusivity(extents.z).reshape(1, -1, 1, 1)
        a, b, c = diffusion_coefficients(profile * rng.uniform(0.5, 1.5, (extents.var, extents.z - 1, extents.y, extents.x)), dt=600.0)
        a, b, c = (np.broadcast_to(v, shape) for v in (a, b, c))
        couple = {k: rng.uniform(-0.15, 0.15, shape) for k in "abc"}
        couple["a"][:, 0] = 0.0  # no level below the first
        couple["c"][:, -1] = 0.0  # nor above the last
        row = np.arange(extents.var).reshape(-1, 1, 1, 1) % 2  # r: the block row each variable holds
        out = {}
        for name, diag in (("a", a), ("b", b), ("c", c)):
            out[f"{name}0"] = np.where(row == 0, diag, couple[name])  # entry (r, 0): diagonal when r = 0
            out[f"{name}1"] = np.where(row == 1, diag, couple[name])
        out["d"] = right_hand_side(extents, seed + 1)
        return {k: np.ascontiguousarray(v, dtype=dtype) for k, v in out.items()}

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return banded_reference(logical)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        views = tuple(shared_view(problem.fields[k]) for k in FIELDS) + (shared_view(problem.output),)
        ext, dt = problem.extents, problem.dtype
        if schedule.name == "column":
            return BY_COLUMN, (*views, ext.z, ext.var // 2, dt.type(1), np.zeros((thread_count(), ext.z, 4), dt))
        width = schedule.param("width", STRIP_WIDTH)
        return BY_STRIP, (*views, ext.z, ext.var // 2, dt.type(1), np.zeros((thread_count(), ext.z, 4, width), dt))

    def flops(self, extents: Extents) -> int:
        # Per (pair, column): level 0 inverse 8 (det 3, reciprocal 1, 4 products), P 12, y 6 = 26;
        # each further level adds A.P 12, B - A.P 4, the right-hand side 8, inverse 8, P 12, y 6
        # = 50; back substitution 8 per level below the top.
        n = extents.z
        return extents.var // 2 * extents.y * extents.x * (26 + 58 * (n - 1))

    def tolerance(self, dtype: Any) -> float:
        """Diagonally dominant like the scalar solves. Measured worst cases over the contract
        layouts (var=4, z=5 and 7): 1.0e-15 and 3.3e-7; the bounds leave a factor of 30-100."""
        return 1e-13 if np.dtype(dtype) == np.float64 else 1e-5

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        if schedule.name == "column":
            return 1
        return min(schedule.param("width", STRIP_WIDTH), int(shared_view(problem.output).shape[6]))

    def thread_working_set(self, extents: Extents, dtype: Any, schedule: Schedule) -> int | None:
        """Columns in flight x levels x (two variables of seven inputs and the output + 4 scratch)."""
        columns = 1 if schedule.name == "column" else schedule.param("width", STRIP_WIDTH)
        return columns * extents.z * (2 * 8 + 4) * np.dtype(dtype).itemsize


register(Coupled())
