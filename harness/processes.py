"""Child processes of the harness: their environment, stop requests, and waiting on them safely."""

from __future__ import annotations

import os
import queue as queue_module
import signal
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from kernels.errors import StridewiseError

EXIT_INTERRUPTED = {signal.SIGINT: 130, signal.SIGTERM: 143}


class ChildError(StridewiseError):
    """A child process crashed, or did not answer in time."""


@contextmanager
def environment(extra: dict[str, str]) -> Iterator[None]:
    """Set environment variables while a child is spawned (numba reads them once, at import)."""
    saved = {k: os.environ.get(k) for k in extra}
    os.environ.update(extra)
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


@contextmanager
def signals_held() -> Iterator[None]:
    """Block SIGINT and SIGTERM while a child process starts. The child inherits the blocked mask
    through exec, so a Ctrl-C to the whole process group cannot raise KeyboardInterrupt in it while
    it is still importing (it stops only when the parent asks); the parent gets any signal that
    arrived in the meantime as soon as the block ends."""
    held = {signal.SIGINT, signal.SIGTERM}
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


class StopRequest:
    """Turns SIGINT/SIGTERM into a request to stop after the current sample."""

    def __init__(self, event: Any) -> None:
        self.event = event
        self.signal: int | None = None

    def __call__(self, signum: int, frame: Any) -> None:
        self.signal = signum
        self.event.set()

    @contextmanager
    def installed(self) -> Iterator[None]:
        old = {s: signal.signal(s, self) for s in (signal.SIGINT, signal.SIGTERM)}
        try:
            yield
        finally:
            for s, handler in old.items():
                signal.signal(s, handler)


def receive(q: Any, proc: Any, timeout_s: float, what: str) -> Any:
    """The next message from a child's queue; a ChildError if the child dies or ``timeout_s`` passes."""
    deadline = time.monotonic() + timeout_s
    while True:
        try:
            return q.get(timeout=0.5)
        except queue_module.Empty:
            if not proc.is_alive():
                raise ChildError(f"{what}: the child process exited with status {proc.exitcode} without answering") from None
            if time.monotonic() > deadline:
                proc.terminate()
                proc.join(5)
                raise ChildError(f"{what}: no answer from the child process in {timeout_s:.0f} s; it was stopped") from None


#: Exit status of a child that found its parent gone.
EXIT_ORPHANED = 70


def exit_with_parent() -> None:
    """In a multiprocessing child: exit at once when the parent process is gone (crashed or killed
    with SIGKILL), so no worker outlives the command that started it. A daemon thread waits on the
    parent's sentinel, which becomes ready only when the parent exits: no polling, no wake-ups
    while kernels are timed."""
    import multiprocessing
    import threading
    from multiprocessing.connection import wait

    parent = multiprocessing.parent_process()
    if parent is None:
        return

    def watch() -> None:
        wait([parent.sentinel])
        os._exit(EXIT_ORPHANED)

    threading.Thread(target=watch, name="stridewise-parent-watch", daemon=True).start()
