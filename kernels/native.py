"""Stencils compiled outside numba: a C (or Fortran, bind(C)) function in a shared library.

The library exports one function per dtype with the row-walk signature below; numba's threads
call it on each thread's share of the walk, so a native stencil runs under the same layouts,
schedules, validation, interleaving and reports as a numba one. The walk is the one the numba
stencils use (``kernels.stencils.common``): the same geometry serves every layout.

C signature of the stencil family (``T`` is ``double`` for ``<symbol>_f64``, ``float`` for
``<symbol>_f32``)::

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
elements away (periodic wrap included).
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import shutil
import subprocess
import types
from pathlib import Path
from typing import Any

from numba import prange

from kernels.errors import KernelError
from kernels.jit import Compiled, build
from kernels.parallel import chunk

_ARGTYPES = [ctypes.c_void_p] * 8 + [ctypes.c_int64] * 6

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


def native_walk(library: str | Path, symbol: str) -> Compiled:
    """The walk calling ``symbol``_f64 / ``symbol``_f32 of the shared library at ``library``.

    Not cached on disk: numba cannot cache code that calls a library loaded at run time, and
    this wrapper compiles in well under a second.
    """
    try:
        lib = ctypes.CDLL(str(library))
    except OSError as exc:
        raise KernelError(f"cannot load native library '{library}': {exc}") from None
    functions = {}
    for suffix in ("f64", "f32"):
        try:
            fn = getattr(lib, f"{symbol}_{suffix}")
        except AttributeError:
            raise KernelError(f"native library '{library}' has no function '{symbol}_{suffix}'; it must export {symbol}_f64 and {symbol}_f32") from None
        fn.argtypes, fn.restype = _ARGTYPES, None
        functions[f"_c{suffix[1:]}"] = fn
    namespace = dict(_native_walk.__globals__, **functions)
    walk = types.FunctionType(_native_walk.__code__, namespace, f"{symbol}_native")
    walk.__qualname__ = walk.__name__
    walk.__module__ = _native_walk.__module__
    return build(walk, cache=False, native=(str(library), symbol))


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
