"""Kernels compiled outside numba: C (or Fortran, bind(C)) functions in a shared library.

The library exports one function per dtype (``<symbol>_f64`` on ``double``, ``<symbol>_f32`` on
``float``) with its family's signature below; numba's threads call it on each thread's share of
the work, so a native kernel runs under the same layouts, schedules, validation, interleaving and
reports as a numba one.

Stencils (``native_walk``) take the row walk the numba stencils use (``kernels.stencils.common``),
so one function serves every layout, tiled and padded included::

    void symbol_f64(const T *q, T *out,
                    const int64_t *counts,  /* 6 walked axes, outermost first; the last is the row */
                    const int64_t *strides, /* their element strides (the row's is 1) */
                    const int64_t *jmul,    /* logical y index contributed per index of each axis */
                    const int64_t *imul,    /* logical x index contributed per index of each axis */
                    const int64_t *dy,      /* (2h+1) x ny: offset(j+o) - offset(j), o = -h..h, periodic */
                    const int64_t *dx,      /* (2h+1) x nx */
                    int64_t ny, int64_t nx, int64_t halo,
                    int64_t edge,           /* row elements at each end whose x neighbours need dx lookups */
                    int64_t lo, int64_t hi) /* items [lo, hi): item = flat index over the first 4 axes */

Item ``m`` covers ``counts[4] x counts[5]`` elements; element ``(m, r, e)`` sits at
``sum(index * strides)`` and has logical ``y = sum(index * jmul)``, ``x = sum(index * imul)``.
Its neighbour at ``(y + oy, x + ox)`` sits ``dy[(oy + h) * ny + y] + dx[(ox + h) * nx + x]``
elements away (periodic wrap included). Rows or row ends past a partial last tile are not in the
grid: skip rows whose ``y >= ny`` or ``x >= nx``.

Column solves (``native_columns``) take the ``(outer, z, inner)`` view every layout reshapes to
without a copy (``kernels.columns.common.column_view``), with 3-D a, b, c, d and solution x::

    void symbol_f64(const T *a, const T *b, const T *c, const T *d, T *x,
                    int64_t outer, int64_t zext, int64_t inner, /* the view's extents (zext: padded z) */
                    int64_t nz,                                 /* levels to solve (the logical z) */
                    int64_t lo, int64_t hi,                     /* columns [lo, hi) of outer * inner */
                    T *scratch)                                 /* nz elements, this thread's own */

Column ``col`` is ``(o, i) = (col / inner, col % inner)``; its level ``k`` sits at
``(o * zext + k) * inner + i``.

Column solves with per-level coefficients (one matrix shared by every column, as ``levelcoef``)
take the same signature, with ``a``, ``b`` and ``c`` the ``nz`` values of that matrix: a library
may factorise it once per call into ``scratch`` (then ``2 nz`` elements) and substitute every
column of its range.

Column solves with one system per column shared by every variable (``sharedcoef``;
``native_shared_columns``) take the seven-axis view ``(A, V1, B1, z, B2, V2, C)`` of
``kernels.columns.common.shared_view``, in which var is V1 (outside z) or V2 (inside z)::

    void symbol_f64(const T *a, const T *b, const T *c, /* var extent 1 (padded var: 1 + pad) */
                    const T *d, T *x,                   /* (A, V1, B1, zext, B2, V2, C) */
                    const int64_t *ext,                 /* 14: the seven extents of d's view, then a's */
                    int64_t nz, int64_t nvar,           /* levels and variables to solve */
                    int64_t lo, int64_t hi,             /* columns [lo, hi) of A x B1 x B2 x C */
                    T *scratch)                         /* 2 nz elements, this thread's own */

Column ``col`` is ``(ia, ib, ic)`` over ``(A, B1 * B2, C)``, with ``ib`` indexing B1 when
``B1 > 1`` else B2; variable ``v`` is ``(v1, v2) = (v, 0)`` when ``V1 > 1`` else ``(0, v)``.
Element ``(ia, v1, ib1, k, ib2, v2, ic)`` sits at the C-order offset of those indices in those
extents; a, b, c use their own seven (their var axis holds 1 value, plus any padding).
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import shutil
import subprocess
from pathlib import Path
from typing import Any

from numba import prange

from kernels.base import Schedule
from kernels.errors import KernelError
from kernels.jit import Compiled, bound_copy, build, inline
from kernels.parallel import chunk

#: Schedules of a native column solve: how the columns are dealt to threads (the library decides the rest).
COLUMN_BLOCKS = Schedule("block", "threads take contiguous ranges of columns; the library solves each range")
COLUMN_CYCLIC = Schedule("cyclic", "runs of 64 columns dealt round-robin to threads; the library solves each run")

_ARGTYPES = [ctypes.c_void_p] * 8 + [ctypes.c_int64] * 6
_COLUMN_ARGTYPES = [ctypes.c_void_p] * 5 + [ctypes.c_int64] * 6 + [ctypes.c_void_p]
_SHARED_ARGTYPES = [ctypes.c_void_p] * 6 + [ctypes.c_int64] * 4 + [ctypes.c_void_p]

_c64: Any = None
_c32: Any = None


def _native_walk(q, out, extra, counts, strides, wstrides, jmul, imul, dy, dx, wdy, wdx, edge, consts, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """The row walk's signature; each thread hands its items to the library function."""
    nitems = counts[0] * counts[1] * counts[2] * counts[3]
    ny, nx, halo = dy.shape[1], dx.shape[1], dy.shape[0] // 2
    wide = out.itemsize == 8
    for t in prange(nchunks):
        lo, hi = chunk(nitems, nchunks, t)
        calls = nitems if cyclic else 1  # cyclic: one call per item dealt to this thread
        for n in range(t if cyclic else 0, calls, nchunks if cyclic else 1):
            first, end = (n, n + 1) if cyclic else (lo, hi)
            if wide:
                _c64(q.ctypes, out.ctypes, counts.ctypes, strides.ctypes, jmul.ctypes, imul.ctypes, dy.ctypes, dx.ctypes, ny, nx, halo, edge, first, end)
            else:
                _c32(q.ctypes, out.ctypes, counts.ctypes, strides.ctypes, jmul.ctypes, imul.ctypes, dy.ctypes, dx.ctypes, ny, nx, halo, edge, first, end)


@inline
def _calls(t, ncol, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """(start, stop, step) of the library calls thread ``t`` makes: one for its contiguous range
    (block), or one per run of 64 columns dealt round-robin (cyclic)."""
    return (t, (ncol + 63) // 64, nchunks) if cyclic else (0, 1, 1)


@inline
def _columns_of(n, t, ncol, nchunks, cyclic):  # type: ignore[no-untyped-def]
    """Columns [first, end) of call ``n`` of thread ``t``."""
    lo, hi = chunk(ncol, nchunks, t)
    return (n * 64, min(n * 64 + 64, ncol)) if cyclic else (lo, hi)


def _native_columns(a, b, c, d, x, nz, cyclic, scratch):  # type: ignore[no-untyped-def]
    """Column solves over (outer, z, inner) views; each thread hands its columns to the library.
    The view's extents come from d (a, b, c may be the nz values of a per-level matrix)."""
    outer, zext, inner = d.shape[0], d.shape[1], d.shape[2]
    nchunks = scratch.shape[0]
    for t in prange(nchunks):
        start, stop, step = _calls(t, outer * inner, nchunks, cyclic)
        for n in range(start, stop, step):
            lo, hi = _columns_of(n, t, outer * inner, nchunks, cyclic)
            if x.itemsize == 8:
                _c64(a.ctypes, b.ctypes, c.ctypes, d.ctypes, x.ctypes, outer, zext, inner, nz, lo, hi, scratch[t].ctypes)
            else:
                _c32(a.ctypes, b.ctypes, c.ctypes, d.ctypes, x.ctypes, outer, zext, inner, nz, lo, hi, scratch[t].ctypes)


def _native_shared_columns(a, b, c, d, x, ext, nz, nvar, cyclic, scratch):  # type: ignore[no-untyped-def]
    """Shared-system column solves over the seven-axis views (``ext``: d's extents, then a's)."""
    ncol = ext[0] * ext[2] * ext[4] * ext[6]
    for t in prange(scratch.shape[0]):
        start, stop, step = _calls(t, ncol, scratch.shape[0], cyclic)
        for n in range(start, stop, step):
            lo, hi = _columns_of(n, t, ncol, scratch.shape[0], cyclic)
            if x.itemsize == 8:
                _c64(a.ctypes, b.ctypes, c.ctypes, d.ctypes, x.ctypes, ext.ctypes, nz, nvar, lo, hi, scratch[t].ctypes)
            else:
                _c32(a.ctypes, b.ctypes, c.ctypes, d.ctypes, x.ctypes, ext.ctypes, nz, nvar, lo, hi, scratch[t].ctypes)


def _bind(template: Any, library: str | Path, symbol: str, argtypes: list[Any], suffix: str) -> Compiled:
    try:
        lib = ctypes.CDLL(str(library))
    except OSError as exc:
        raise KernelError(f"cannot load native library '{library}': {exc}") from None
    functions = {}
    for dtype in ("f64", "f32"):
        try:
            fn = getattr(lib, f"{symbol}_{dtype}")
        except AttributeError:
            raise KernelError(f"native library '{library}' has no function '{symbol}_{dtype}'; it must export {symbol}_f64 and {symbol}_f32") from None
        fn.argtypes, fn.restype = argtypes, None
        functions[f"_c{dtype[1:]}"] = fn
    walk = bound_copy(template, f"{symbol}_{suffix}", **functions)
    return build(walk, cache=False, native=(str(library), symbol))


def native_walk(library: str | Path, symbol: str) -> Compiled:
    """The stencil walk calling ``symbol``_f64 / ``symbol``_f32 of the shared library at ``library``.

    Not cached on disk: numba cannot cache code that calls a library loaded at run time, and
    this wrapper compiles in well under a second.
    """
    return _bind(_native_walk, library, symbol, _ARGTYPES, "native")


def native_columns(library: str | Path, symbol: str) -> Compiled:
    """The column-solve driver calling ``symbol``_f64 / ``symbol``_f32 (column family signature)."""
    return _bind(_native_columns, library, symbol, _COLUMN_ARGTYPES, "native_columns")


def native_shared_columns(library: str | Path, symbol: str) -> Compiled:
    """The shared-system column-solve driver calling ``symbol``_f64 / ``symbol``_f32 (its signature above)."""
    return _bind(_native_shared_columns, library, symbol, _SHARED_ARGTYPES, "native_shared_columns")


#: Flags of ``compile_c``: full optimisation for the machine that runs the sweep.
C_FLAGS = ("-O3", "-march=native", "-shared", "-fPIC")


def c_compiler() -> str | None:
    """The C compiler to use: ``$CC``, else the first of cc, gcc, clang on PATH; None if none."""
    for name in (os.environ.get("CC"), "cc", "gcc", "clang"):
        if name and shutil.which(name):
            return name
    return None


def compile_c(source: str | Path, flags: tuple[str, ...] = C_FLAGS) -> Path:
    """Build ``source`` into a shared library (once per source text, compiler and flags) and return its path.

    Libraries go under the compiled-kernel cache (``kernels.jit.cache_dir``), keyed by a hash.
    """
    from kernels.jit import cache_dir

    cc = c_compiler()
    if cc is None:
        raise KernelError("no C compiler found (looked for $CC, cc, gcc, clang); install one or build the library yourself")
    text = Path(source).read_bytes()
    key = hashlib.sha256(text + cc.encode() + " ".join(flags).encode()).hexdigest()[:16]
    out = Path(cache_dir()) / "native" / f"{Path(source).stem}-{key}.so"
    if not out.exists():
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = out.with_suffix(f".{os.getpid()}.tmp")
        done = subprocess.run([cc, *flags, "-o", str(tmp), str(source)], capture_output=True, text=True)
        if done.returncode != 0:
            raise KernelError(f"{cc} could not build {source}: {done.stderr.strip().splitlines()[-1] if done.stderr.strip() else 'exit ' + str(done.returncode)}")
        os.replace(tmp, out)
    return out
