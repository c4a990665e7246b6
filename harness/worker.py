"""The worker: one spawned process per thread setting, which validates and times its groups.

numba fixes its thread pool (size, threading layer, placement) when the pool starts, so each
thread setting gets a fresh interpreter whose environment the parent set before spawning it.
The worker only measures; the parent writes every result.
"""

from __future__ import annotations

import os
import random
import signal
import time
import traceback
from dataclasses import dataclass
from typing import Any

from harness.cases import CaseKind, Group, whole_of
from harness.prepare import Context, prepare_group
from harness.sampling import Timing


@dataclass(frozen=True)
class WorkerPlan:
    threads: int
    groups: tuple[Group, ...]
    timing: Timing
    seed: int
    pin: bool
    kernel_options: tuple[tuple[str, tuple[tuple[str, int], ...]], ...]
    inspect_vectorisation: bool
    flush_bytes: int


def worker_environment(threads: int, layer: str, pin: bool) -> dict[str, str]:
    """Environment a worker must start with (numba reads it once, at import)."""
    env = {"NUMBA_NUM_THREADS": str(threads)}
    if layer != "default":
        env["NUMBA_THREADING_LAYER"] = layer
    if pin:
        env["OMP_PLACES"] = "cores"
        env["OMP_PROC_BIND"] = "close"
    return env


def worker_main(plan: WorkerPlan, queue: Any, stop: Any, rounds_done: Any) -> None:
    """Entry point of the spawned process. ``rounds_done`` (a shared-memory integer) counts the
    current group's finished rounds: nothing crosses the process boundary inside a group's rounds."""
    from harness.processes import exit_with_parent

    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent decides when to stop, via ``stop``
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    exit_with_parent()
    try:
        _run(plan, queue, stop, rounds_done)
    except BaseException:  # noqa: BLE001 - reported to the parent, which records it
        queue.put(("crash", traceback.format_exc()))
    finally:
        queue.put(("exit", None))


def start_worker(plan: WorkerPlan) -> dict[str, Any]:
    """Limit other thread pools, set numba's, pin if asked, start the pool; describe the result."""
    import numba
    import numpy as np
    from threadpoolctl import threadpool_info, threadpool_limits

    from kernels.parallel import FILL

    threadpool_limits(limits=1, user_api="blas")  # other libraries' pools cannot oversubscribe
    numba.set_num_threads(plan.threads)
    affinity = sorted(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else None
    if plan.pin and affinity and os.environ.get("NUMBA_THREADING_LAYER") != "omp":
        os.sched_setaffinity(0, affinity[: plan.threads])
        affinity = sorted(os.sched_getaffinity(0))
    FILL.parallel(np.zeros(64, np.uint8), np.uint8(0), plan.threads)  # starts the pool
    return {
        "threads": plan.threads,
        "pid": os.getpid(),
        "threading_layer": numba.threading_layer(),
        "numba_num_threads": numba.config.NUMBA_NUM_THREADS,
        "affinity": affinity,
        "pinned": plan.pin,
        "other_pools": [{k: p.get(k) for k in ("user_api", "internal_api", "num_threads")} for p in threadpool_info()],
    }


def compute_ceilings(threads: int, dtypes: list[str]) -> dict[str, dict[str, Any]]:
    """The FMA ceiling (``harness.compute_roof``) per dtype, at this worker's thread count."""
    from harness import compute_roof
    from harness.machine import numba_target, usable_cores

    features = numba_target()["features"]
    return {dt: compute_roof.measure(threads, dt, features, usable_cores()).as_dict() for dt in dtypes}


def _run(plan: WorkerPlan, queue: Any, stop: Any, rounds_done: Any) -> None:
    from harness.roof import measure_curve
    from harness.timing import Interrupted, evictor

    queue.put(("worker", start_worker(plan)))
    if plan.timing.roof:
        queue.put(("roof", measure_curve(plan.threads, plan.timing.roof_max_bytes).as_dict()))
        queue.put(("compute_roof", compute_ceilings(plan.threads, sorted({g.dtype for g in plan.groups}))))
    evict = evictor(plan.flush_bytes)  # every sample in cold mode; else only a sibling no order could avoid
    flush = evict if plan.timing.cold_cache else None

    seen_reports: dict[str, dict[str, Any]] = {}
    for group in plan.groups:
        if stop.is_set():
            break
        queue.put(("start", group.label))
        try:
            rounds_done.value = 0
            result = _run_group(group, plan, stop, flush, seen_reports, rounds_done, evict)
        except Interrupted:
            queue.put(("interrupted", group.label))
            break
        queue.put(("group", result))


def shared_buffers(records: dict[str, dict[str, Any]], calls: dict[str, Any]) -> dict[str, str]:
    """Which buffers each timed kernel case works on: the cases of one layout share one problem
    (every schedule, build and stage); conversions and probes have buffers of their own."""
    return {cid: f"{whole_of(r['kernel'])}|{r['layout']}" for cid, r in records.items()
            if cid in calls and CaseKind.of(r["kernel"]) in (CaseKind.KERNEL, CaseKind.STAGE)}


def context(plan: WorkerPlan, seen_reports: dict[str, dict[str, Any]], restore_inputs: bool = False) -> Context:
    """What the preparers need from a worker's plan."""
    return Context(plan.seed, plan.timing.first_touch, dict(plan.kernel_options), plan.inspect_vectorisation, seen_reports,
                   restore_inputs)


def _run_group(group: Group, plan: WorkerPlan, stop: Any, flush: Any, seen_reports: dict, rounds_done: Any,
               evict: Any = None) -> dict[str, Any]:
    from harness.timing import overhead_ns, sample_rounds

    prepared = prepare_group(group, context(plan, seen_reports))
    records, calls, prepare, compiles = prepared.records, prepared.calls, prepared.prepare, prepared.compiles
    seed = f"{plan.seed}:{group.label}"
    wants_more = None
    if group.kind is CaseKind.KERNEL and plan.timing.max_seconds > 0:
        from harness.adaptive import LOOK_ALPHA, leader_undecided

        layout_of = {cid: r["layout"] for cid, r in records.items()
                     if r["build"] == "parallel" and r["kernel"] == group.kernel and cid in calls}
        look_alpha = LOOK_ALPHA / plan.timing.max_looks()
        wants_more = lambda rows: leader_undecided(rows, layout_of, look_alpha)  # noqa: E731
    sampled = sample_rounds(  # raises Interrupted on stop
        dict(calls),
        plan.timing,
        random.Random(seed),
        stop.is_set,
        before_sample=flush,
        on_round=lambda r: setattr(rounds_done, "value", r),  # a store to shared memory: no message, no syscall
        prepare=prepare,
        first_round=group.repetition * REPETITION_ROUNDS,
        wants_more=wants_more,
        buffers=shared_buffers(records, calls),
        evict=evict,
    )
    return {
        "group": group.label,
        "threads": group.threads,
        "repetition": group.repetition,
        "looks": sampled.looks,
        "records": list(records.values()),
        "samples": sampled.rows,
        "rounds": sampled.rounds,
        "harness_overhead_ns": sampled.harness_overhead_ns,
        "timer_overhead_ns": overhead_ns(_noop, repeats=1001),
        "flush_ns": sampled.flush_ns,
        "sibling_evictions": sampled.sibling_evictions,
        "order_seed": seed,
        "compiles": compiles,
        "finished": time.time(),
    }


#: Round ids of repetition r start at r times this, so a case's rounds never collide across repetitions.
REPETITION_ROUNDS = 100_000


def _noop() -> None:
    return None
