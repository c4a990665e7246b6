"""One set of physical pages for both versions' state buffers in a side-by-side run.

Where a buffer lands in physical memory (which pages, whether huge pages back them, how its
streams fall on cache sets) changes a case's time by tens of percent and stays fixed for the
buffer's life. Two worker processes that allocate their own buffers therefore differ by a bias
that pairing rounds cannot remove (measured here: up to +32 % between two processes running
identical code). So the parent makes one shared file-backed arena per group, and both workers
place their state buffers in it, in allocation order: the same code gets the very same pages,
and the two versions are timed on equal terms.

Only the standard library and NumPy are imported: the worker side runs under any version's
``kernels/``. A version whose ``kernels.state`` has no ``aligned_empty`` keeps private buffers
(``placed_in`` says so).
"""

from __future__ import annotations

import mmap
import os
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
import numpy as np

PAGE = 4096
#: Spare room per case beyond the group's estimated resident bytes (page rounding of each buffer).
SLACK_PER_CASE = 64 * PAGE


class Arena:
    """A shared byte arena; buffers are taken from it in order, each starting on a page."""

    def __init__(self, path: str) -> None:
        with open(path, "r+b") as fh:
            self._map = mmap.mmap(fh.fileno(), 0)
        self.bytes = np.frombuffer(self._map, dtype=np.uint8)
        self.used = 0
        self.allocations: list[tuple[int, int]] = []  # (first byte, end) of each buffer handed out

    def reset(self) -> None:
        """Start again at the arena's first page (the previous buffers must no longer be used)."""
        self.used = 0
        self.allocations = []

    def aligned_empty(self, nbytes: int, base_offset: int = 0, toucher: Callable[[np.ndarray], None] | None = None) -> np.ndarray:
        """Stands in for ``kernels.state.aligned_empty``: a zeroed buffer ``base_offset`` bytes past a page."""
        start = -(-self.used // PAGE) * PAGE
        end = start + base_offset + nbytes
        if end > self.bytes.size:
            raise MemoryError(f"shared arena of {self.bytes.size} bytes is full ({end} needed); the group's size estimate is short")
        self.used = end
        self.allocations.append((start, end))
        raw = self.bytes[start:end]
        if toucher is None:
            raw[...] = 0
        else:
            toucher(raw)
        return raw[base_offset:]

    def digest(self) -> str:
        """A hash of where every buffer lies and of all the bytes handed out so far."""
        import hashlib

        h = hashlib.blake2b(repr(self.allocations).encode(), digest_size=16)
        h.update(memoryview(self.bytes[: self.used]))
        return h.hexdigest()

    def close(self) -> None:
        self.bytes = np.empty(0, np.uint8)
        try:
            self._map.close()
        except BufferError:  # a kernel's buffer still points into it; the mapping goes with the process
            pass


@contextmanager
def placed_in(arena: Arena | None) -> Iterator[bool]:
    """While inside, ``kernels.state`` allocates state buffers from ``arena``; yields whether it could."""
    import kernels.state as state

    original = getattr(state, "aligned_empty", None)
    if arena is None or original is None:
        yield False
        return
    state.aligned_empty = arena.aligned_empty
    try:
        yield True
    finally:
        state.aligned_empty = original


def shared_directory() -> str:
    """Where arenas live: memory-backed ``/dev/shm`` when present (no disk writes), else the temp dir."""
    return "/dev/shm" if os.path.isdir("/dev/shm") and os.access("/dev/shm", os.W_OK) else tempfile.gettempdir()


@contextmanager
def arena_file(size: int, label: str) -> Iterator[str]:
    """Create a zero-filled arena file of ``size`` bytes for one group; remove it afterwards."""
    fd, path = tempfile.mkstemp(prefix=f"stridewise-{label}-", dir=shared_directory())
    try:
        os.ftruncate(fd, -(-size // PAGE) * PAGE)
        os.close(fd)
        yield path
    finally:
        Path(path).unlink(missing_ok=True)


def arena_size(resident_bytes: int, cases: int) -> int:
    """Bytes of the arena of a group with this resident estimate and number of cases."""
    return int(resident_bytes) + cases * SLACK_PER_CASE
