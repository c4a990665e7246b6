"""The worker of a side-by-side comparison: one code version's kernels, driven one sample at a time.

The parent starts one of these per code version and thread count (a fresh interpreter, not a
multiprocessing child, which would import the parent's main module and with it the parent's
kernels) and tells each, in turn, to prepare a group or to time one case of it; the other version
waits, so the two never run at the same time. Only the standard library is imported at module
level: the version's ``kernels`` directory must come first on ``sys.path`` before anything
imports ``kernels``. Started as ``python -P -m harness.versus_worker VERSION_DIR FD THREADS CPUS``,
CPUS being the comma-separated cores both versions' workers are bound to.
"""

from __future__ import annotations

import os
import signal
import sys
import traceback
from typing import Any


def main(argv: list[str]) -> None:
    """Entry point: answer the parent's commands on the inherited connection until told to stop."""
    from multiprocessing.connection import Connection

    version_dir, fd, threads = argv[0], int(argv[1]), int(argv[2])
    cpus = [int(c) for c in argv[3].split(",")] if len(argv) > 3 and argv[3] else []
    if cpus and hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, cpus)  # before any thread pool starts: its threads inherit the mask
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent decides when to stop
    sys.path.insert(0, version_dir)
    conn = Connection(fd)
    try:
        plan = conn.recv()
        _serve(version_dir, threads, plan, conn)
    except BaseException:  # noqa: BLE001 - reported to the parent, which records it
        conn.send(("crash", traceback.format_exc()))


def _serve(version_dir: str, threads: int, plan: dict[str, Any], conn: Any) -> None:
    import kernels

    here = os.path.realpath(os.path.dirname(kernels.__file__))
    wanted = os.path.realpath(os.path.join(version_dir, "kernels"))
    if here != wanted:
        raise RuntimeError(f"kernels were imported from {here}, not from the version under test at {wanted}")
    from harness.cases import CaseKey, Group
    from harness.sampling import Timing
    from harness.timing import _measure, evictor
    from harness.prepare import prepare_group
    from harness.shared_pages import Arena, placed_in
    from harness.worker import WorkerPlan, context, start_worker
    from kernels.jit import SOURCE_HASH

    timing = Timing(**plan["timing"])
    wplan = WorkerPlan(threads=threads, groups=(), timing=timing, seed=plan["seed"], pin=plan["pin"],
                       kernel_options=tuple((k, tuple(map(tuple, v))) for k, v in plan["kernel_options"]),
                       inspect_vectorisation=False, flush_bytes=plan["flush_bytes"])
    info = start_worker(wplan)
    conn.send(("hello", {**info, "kernels_dir": here, "kernels_source_hash": SOURCE_HASH}))
    flush = evictor(plan["flush_bytes"]) if timing.cold_cache else None
    prepared = group = arena = None
    shared = False
    last_round = None
    while True:
        message = conn.recv()
        if message[0] == "stop":
            return
        if message[0] == "prepare":
            g, arena_path = message[1], message[2]
            group = Group(g["kernel"], g["grid"], g["dtype"], g["threads"], tuple(CaseKey(**c) for c in g["cases"]))
            prepared = None  # release the previous group's buffers first
            if arena is not None:
                arena.close()
            arena = Arena(arena_path) if arena_path else None
            with placed_in(arena) as shared:
                prepared = prepare_group(group, context(wplan, {}, restore_inputs=shared), probes=False)
            conn.send(("prepared", {"records": list(prepared.records.values()), "compiles": prepared.compiles,
                                    "shared_pages": shared, "arena_digest": arena.digest() if shared else None}))
        elif message[0] == "sample":
            _, rnd, case_id, restore = message
            if not shared and rnd != last_round:
                # Private buffers: where a buffer lands (page alignment, huge pages, the offset
                # between input and output) can change a case's time by tens of percent and stays
                # fixed for its life, so fresh, revalidated buffers each round turn it into noise
                # instead of a bias of one version's process.
                prepared = None
                prepared = prepare_group(group, context(wplan, {}), probes=False)
            last_round = rnd
            # With shared pages the problems stay. When the two versions allocated differently, the
            # other version's last sample may have written into this one's inputs: the parent then
            # asks for them to be written back before each sample (as for a kernel that overwrites them).
            rows = []
            if case_id in prepared.calls:
                if restore and case_id in prepared.restorers:
                    prepared.restorers[case_id]()
                elif case_id in prepared.prepare:
                    prepared.prepare[case_id]()
                if flush is not None:
                    flush()
                rows.append((case_id, rnd, 0, _measure(prepared.calls[case_id])))
            conn.send(("samples", rows))
        else:
            raise RuntimeError(f"unknown command {message[0]!r}")


if __name__ == "__main__":
    main(sys.argv[1:])
