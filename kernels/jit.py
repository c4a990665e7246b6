"""Compilation policy shared by every kernel: options, on-disk cache, serial twins, empty twins.

numba's cache only notices edits to the file defining a function, so the cache directory is
keyed by a hash of the whole ``kernels/`` source: stale machine code is never loaded.
"""

from __future__ import annotations

import hashlib
import inspect
import json
import os
import re
import time
import types
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numba
from numba import config as numba_config

#: Options of every compiled kernel. ``error_model="numpy"`` drops the zero-divisor check that
#: blocks SIMD; fastmath stays off so results match the references.
JIT_OPTIONS: dict[str, Any] = {"error_model": "numpy", "fastmath": False, "cache": True, "nogil": True, "boundscheck": False}

_KERNELS_DIR = Path(__file__).resolve().parent


def source_hash() -> str:
    """SHA-256 (first 16 hex digits) of every ``.py`` file under ``kernels/``."""
    digest = hashlib.sha256()
    for path in sorted(_KERNELS_DIR.rglob("*.py")):
        digest.update(str(path.relative_to(_KERNELS_DIR)).encode())
        digest.update(path.read_bytes())
    return digest.hexdigest()[:16]


SOURCE_HASH = source_hash()


def cache_dir() -> str:
    """Where compiled kernels are cached: ``$NUMBA_CACHE_DIR`` or ``~/.cache/stridewise``, then the source hash."""
    base = os.environ.get("NUMBA_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME", os.path.expanduser("~/.cache")), "stridewise", "numba"
    )
    return os.path.join(base, SOURCE_HASH)


# Must be set before any kernel is decorated: numba reads it when caching is enabled.
numba_config.CACHE_DIR = cache_dir()


def bound_copy(template: Callable[..., Any], name: str, **pieces: Any) -> Callable[..., Any]:
    """A copy of ``template`` named ``name`` whose globals also hold ``pieces``: how a compiled
    template gets its inlined parts. Its own name means its own cache files and compile records."""
    fn = types.FunctionType(template.__code__, dict(template.__globals__, **pieces), name)
    fn.__qualname__ = name
    fn.__module__ = template.__module__
    fn.__doc__ = template.__doc__
    return fn


def _twin(fn: Callable[..., Any], suffix: str) -> Callable[..., Any]:
    """A copy of ``fn`` under another name, so its cache entries never collide with the original's."""
    twin = types.FunctionType(fn.__code__, fn.__globals__, fn.__name__ + suffix, fn.__defaults__, fn.__closure__)
    twin.__qualname__ = fn.__qualname__ + suffix
    twin.__module__ = fn.__module__
    twin.__doc__ = fn.__doc__
    return twin


def _empty_of(fn: Callable[..., Any]) -> Callable[..., Any]:
    """A parallel function of the same parameters whose loop body does nothing but exist.

    The prange still forks and joins the thread pool, so timing it measures dispatch plus
    fork/join overhead for the same argument types.
    """
    params = ", ".join(inspect.signature(fn).parameters)
    src = (
        f"def empty_{fn.__name__}({params}):\n"
        "    total = 0\n"
        "    for t in prange(get_num_threads()):\n"
        "        total += t\n"
        "    return total\n"
    )
    namespace: dict[str, Any] = {"prange": numba.prange, "get_num_threads": numba.get_num_threads}
    exec(compile(src, f"<empty twin of {fn.__qualname__}>", "exec"), namespace)  # noqa: S102 - trusted template
    return namespace[f"empty_{fn.__name__}"]


@dataclass(frozen=True)
class Compiled:
    """The builds of one kernel implementation: threaded, single-threaded and empty."""

    name: str
    py_func: Callable[..., Any]
    parallel: Any
    serial: Any
    empty: Any
    #: ``(library path, symbol)`` when the work is done by a native library (``kernels.native``).
    native: tuple[str, str] | None = None


def build(fn: Callable[..., Any], cache: bool = True, native: tuple[str, str] | None = None) -> Compiled:
    """Compile lazily ``fn`` as a threaded build, a ``parallel=False`` twin and an empty twin.

    ``cache=False`` for code numba cannot cache (e.g. calling a library loaded at run time).
    """
    opts = dict(JIT_OPTIONS, cache=cache)
    return Compiled(
        name=fn.__qualname__,
        py_func=fn,
        parallel=numba.njit(parallel=True, **opts)(fn),
        serial=numba.njit(parallel=False, **opts)(_twin(fn, "_serial")),
        empty=numba.njit(parallel=True, error_model="numpy", cache=False)(_empty_of(fn)),
        native=native,
    )


@dataclass(frozen=True)
class ChainCall:
    """One build of every part of a chain, called in order; its arguments are one tuple per part."""

    builds: tuple[Any, ...]

    def __call__(self, *args: tuple[Any, ...]) -> None:
        for fn, part_args in zip(self.builds, args):
            fn(*part_args)


@dataclass(frozen=True)
class Chain:
    """Implementations run back to back as one call (a whole step). Each part keeps its own
    compiled builds; the chain's arguments are one tuple per part. Its empty build runs every
    part's empty twin, so its overhead counts one fork/join per part, as the real call has."""

    name: str
    parts: tuple[Compiled, ...]
    native: None = None

    @property
    def parallel(self) -> ChainCall:
        return ChainCall(tuple(p.parallel for p in self.parts))

    @property
    def serial(self) -> ChainCall:
        return ChainCall(tuple(p.serial for p in self.parts))

    @property
    def empty(self) -> ChainCall:
        return ChainCall(tuple(p.empty for p in self.parts))


inline = numba.njit(inline="always", **{k: v for k, v in JIT_OPTIONS.items() if k != "cache"})


@dataclass(frozen=True)
class CompileRecord:
    """How one specialisation got its machine code."""

    name: str
    signature: str
    seconds: float
    from_cache: bool


def ensure_compiled(dispatcher: Any, args: tuple[Any, ...]) -> CompileRecord | None:
    """Compile (or load from cache) ``dispatcher`` for ``args``; None if it was ready already.

    A chain's parts are compiled in turn and reported as one record.
    """
    if isinstance(dispatcher, ChainCall):
        done = [r for r in (ensure_compiled(fn, a) for fn, a in zip(dispatcher.builds, args)) if r is not None]
        if not done:
            return None
        return CompileRecord(" + ".join(r.name for r in done), " + ".join(r.signature for r in done),
                             sum(r.seconds for r in done), all(r.from_cache for r in done))
    sig = tuple(numba.typeof(a) for a in args)
    if sig in dispatcher.overloads:
        return None
    hits_before = sum(dispatcher.stats.cache_hits.values())
    start = time.perf_counter()
    dispatcher.compile(sig)
    seconds = time.perf_counter() - start
    from_cache = sum(dispatcher.stats.cache_hits.values()) > hits_before
    return CompileRecord(dispatcher.py_func.__qualname__, str(sig), seconds, from_cache)


_PACKED = re.compile(r"^\s*v?(?:add|sub|mul|div|fmadd\d*|fnmadd\d*|fmsub\d*|fnmsub\d*|min|max)p[sd]\s", re.M)
_SCALAR = re.compile(r"^\s*v?(?:add|sub|mul|div|fmadd\d*|fnmadd\d*|fmsub\d*|fnmsub\d*)s[sd]\s", re.M)
_WIDEST = re.compile(r"%([xyz])mm\d+")


def vector_report(compiled: Compiled | Chain, args: tuple[Any, ...], parallel: bool = True) -> dict[str, Any]:
    """Count packed (SIMD) and scalar floating-point arithmetic in the machine code for ``args``.

    numba cannot show the assembly of code loaded from its cache, so this compiles a private,
    uncached copy with the same options. ``vectorised`` is true when packed arithmetic appears
    (the threaded build's outlined loop body included); the widest register class used by packed
    code gives the vector width (xmm 128, ymm 256, zmm 512 bits). Reports are kept in the
    source-hash-keyed cache directory, so each specialisation is inspected once per source.
    A chain's report sums its parts' counts and takes their widest registers.
    """
    if isinstance(compiled, Chain):
        parts = [vector_report(c, a, parallel) for c, a in zip(compiled.parts, args)]
        return {
            "packed_fp_ops": sum(r["packed_fp_ops"] for r in parts),
            "scalar_fp_ops": sum(r["scalar_fp_ops"] for r in parts),
            "vector_bits": max(r["vector_bits"] for r in parts),
            "vectorised": any(r["vectorised"] for r in parts),
        }
    key = f"{compiled.name}|{parallel}|{tuple(numba.typeof(a) for a in args)}|{numba_config.CPU_NAME or ''}"
    if compiled.native:  # the library may be rebuilt under the same name
        key += f"|{compiled.native[0]}|{os.stat(compiled.native[0]).st_mtime_ns}"
    store = Path(cache_dir()) / "vector_reports.json"
    try:
        known = json.loads(store.read_text())
    except (OSError, ValueError):
        known = {}
    if key in known:
        return known[key]
    report = _inspect(compiled, args, parallel)
    known[key] = report
    try:
        store.parent.mkdir(parents=True, exist_ok=True)
        tmp = store.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps(known))
        os.replace(tmp, store)
    except OSError:
        pass  # a read-only cache only costs the re-inspection next time
    return report


def _inspect(compiled: Compiled, args: tuple[Any, ...], parallel: bool) -> dict[str, Any]:
    if compiled.native:
        asm = _disassemble(*compiled.native, args)
    else:
        opts = {k: v for k, v in JIT_OPTIONS.items() if k != "cache"}
        dispatcher = numba.njit(parallel=parallel, **opts)(compiled.py_func)
        sig = tuple(numba.typeof(a) for a in args)
        dispatcher.compile(sig)
        asm = dispatcher.inspect_asm(sig)
    packed_lines = [line for line in asm.splitlines() if _PACKED.match(line)]
    regs = {m for line in packed_lines for m in _WIDEST.findall(line)}
    width = {"z": 512, "y": 256, "x": 128}
    return {
        "packed_fp_ops": len(packed_lines),
        "scalar_fp_ops": len(_SCALAR.findall(asm)),
        "vector_bits": max((width[r] for r in regs), default=0),
        "vectorised": bool(packed_lines),
    }


def _disassemble(library: str, symbol: str, args: tuple[Any, ...]) -> str:
    """Machine code of a native kernel's function for the dtype of ``args[1]`` (objdump, AT&T)."""
    import subprocess

    name = f"{symbol}_{'f64' if args[1].itemsize == 8 else 'f32'}"
    try:
        done = subprocess.run(["objdump", "-d", "--no-show-raw-insn", f"--disassemble={name}", library], capture_output=True, text=True, check=True)
    except (OSError, subprocess.CalledProcessError) as exc:
        raise RuntimeError(f"cannot disassemble {name} in {library} (objdump from binutils is needed): {exc}") from None
    # "  1100:\tvaddpd ..." -> "\tvaddpd ...": the instruction alone, as numba's assembly shows it
    return "\n".join("\t" + line.split(":", 1)[1].strip() for line in done.stdout.splitlines() if ":\t" in line)
