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

from harness.plan import ARROW, CONVERT, Group
from harness.suite import Timing


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


def worker_main(plan: WorkerPlan, queue: Any, stop: Any) -> None:
    """Entry point of the spawned process."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent decides when to stop, via ``stop``
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    try:
        _run(plan, queue, stop)
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


def _run(plan: WorkerPlan, queue: Any, stop: Any) -> None:
    import numpy as np

    from harness.roof import measure_curve
    from harness.timing import Interrupted
    from kernels.parallel import evict_caches

    queue.put(("worker", start_worker(plan)))
    if plan.timing.roof:
        queue.put(("roof", measure_curve(plan.threads, plan.timing.roof_max_bytes).as_dict()))
    flush = None
    if plan.timing.cold_cache:
        flush_buf = np.zeros(plan.flush_bytes // 8, dtype=np.int64)
        flush = lambda: evict_caches(flush_buf)  # noqa: E731

    seen_reports: dict[str, dict[str, Any]] = {}
    for group in plan.groups:
        if stop.is_set():
            break
        queue.put(("start", group.label))
        try:
            result = _run_group(group, plan, stop, flush, seen_reports, queue)
        except Interrupted:
            queue.put(("interrupted", group.label))
            break
        queue.put(("group", result))


def _schedule(kernel: Any, name: str, options: dict[str, tuple[tuple[str, int], ...]]) -> Any:
    from kernels.base import Schedule

    schedule = kernel.schedule(name)
    if kernel.name in options and schedule.params:
        given = dict(options[kernel.name])
        params = tuple((k, given.get(k, v)) for k, v in schedule.params)
        schedule = Schedule(schedule.name, schedule.summary, params)
    return schedule


@dataclass
class Prepared:
    """A group ready to time: a record per case, the bound calls of the valid ones, input restorers."""

    records: dict[str, dict[str, Any]]
    calls: dict[str, Any]
    prepare: dict[str, Any]
    compiles: list[dict[str, Any]]


def prepare_group(group: Group, plan: WorkerPlan, seen_reports: dict, probes: bool = True) -> Prepared:
    """Build, compile and validate every case of a group (never timed); add roof probes if asked."""
    import numpy as np

    from harness.timing import overhead_ns
    from kernels.base import Bound
    from kernels.grid import Extents
    from kernels.jit import ensure_compiled, vector_report
    from kernels.parallel import first_touch
    from kernels.registry import get_kernel

    extents = Extents.parse(group.grid)
    toucher = first_touch if plan.timing.first_touch else None
    records: dict[str, dict[str, Any]] = {}
    calls: dict[str, Bound] = {}
    prepare: dict[str, Any] = {}
    compiles: list[dict[str, Any]] = []
    options = dict(plan.kernel_options)

    def compile_for(dispatcher: Any, args: tuple) -> dict[str, Any] | None:
        rec = ensure_compiled(dispatcher, args)
        if rec is not None:
            compiles.append({"name": rec.name, "signature": rec.signature, "seconds": rec.seconds, "from_cache": rec.from_cache})
        return None if rec is None else {"seconds": rec.seconds, "from_cache": rec.from_cache}

    if group.kernel == CONVERT:
        from kernels.convert import conversion_args
        from kernels.state import State

        itemsize = np.dtype(group.dtype).itemsize
        logical = np.random.default_rng(plan.seed).standard_normal(extents.shape).astype(group.dtype)
        for case in group.cases:
            rec = _base_record(case, "conversion", 0, 2 * extents.points * itemsize, 0)
            records[case.id] = rec
            try:
                src_spec, dst_spec = case.layout.split(ARROW)
                src = State.zeros(src_spec, extents, group.dtype, toucher)
                src.assign_logical(logical)
                dst = State.zeros(dst_spec, extents, group.dtype, toucher)
                rec["footprint_bytes"] = src.data.nbytes + dst.data.nbytes
                impl, args = conversion_args(src, dst)
                dispatcher = getattr(impl, case.build)
                info = compile_for(dispatcher, args)
                rec.update(_compile_fields(info))
                dispatcher(*args)
                if not np.array_equal(dst.to_logical(), logical):
                    rec.update(status="failed", message="conversion is not bit-exact")
                    continue
                rec.update(status="ok", max_rel_error=0.0, tolerance=0.0)
                compile_for(impl.empty, args)
                rec["overhead_ns"] = overhead_ns(lambda: impl.empty(*args))
                calls[case.id] = Bound(dispatcher, args)
            except Exception as exc:  # noqa: BLE001 - recorded as the case's error
                rec.update(status="error", message=f"{type(exc).__name__}: {exc}")
    else:
        kernel = get_kernel(group.kernel)
        problems: dict[str, Any] = {}
        for case in group.cases:
            traffic = kernel.traffic_bytes(extents, group.dtype)
            rec = _base_record(case, kernel.family, kernel.footprint(case.layout, extents, group.dtype), traffic, kernel.flops(extents))
            records[case.id] = rec
            try:
                if case.layout not in problems:
                    problems[case.layout] = kernel.make_problem(case.layout, extents, group.dtype, plan.seed, toucher)
                problem = problems[case.layout]
                schedule = _schedule(kernel, case.schedule, options)
                impl, args = kernel.implementation(problem, schedule)
                dispatcher = getattr(impl, case.build)
                rec.update(_compile_fields(compile_for(dispatcher, args)))
                check = kernel.validate(problem, schedule, case.build)
                rec.update(max_rel_error=check.max_rel_error, tolerance=check.tolerance)
                if not check.ok:
                    rec.update(status="failed", message=check.message)
                    continue
                compile_for(impl.empty, args)
                rec["overhead_ns"] = overhead_ns(lambda impl=impl, args=args: impl.empty(*args))
                if plan.inspect_vectorisation:
                    import numba

                    key = impl.name + str(tuple(numba.typeof(a) for a in args))
                    if key not in seen_reports:
                        seen_reports[key] = vector_report(impl, args, parallel=False)
                    rec.update({k: seen_reports[key][k] for k in ("vectorised", "vector_bits")})
                rec["status"] = "ok"
                calls[case.id] = Bound(dispatcher, args)
                if kernel.overwrites_inputs:
                    prepare[case.id] = _restorer(problem)
            except Exception as exc:  # noqa: BLE001 - recorded as the case's error
                rec.update(status="error", message=f"{type(exc).__name__}: {exc}")
    if probes:
        _add_roof_probes(group, records, calls)
    return Prepared(records, calls, prepare, compiles)


def _run_group(group: Group, plan: WorkerPlan, stop: Any, flush: Any, seen_reports: dict, queue: Any) -> dict[str, Any]:
    from harness.timing import overhead_ns, sample_rounds

    prepared = prepare_group(group, plan, seen_reports)
    records, calls, prepare, compiles = prepared.records, prepared.calls, prepared.prepare, prepared.compiles
    seed = f"{plan.seed}:{group.label}"
    wants_more = None
    if group.kernel != CONVERT and plan.timing.max_seconds > 0:
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
        on_round=lambda r: queue.put(("round", r)),
        prepare=prepare,
        first_round=group.repetition * REPETITION_ROUNDS,
        wants_more=wants_more,
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
        "order_seed": seed,
        "compiles": compiles,
        "finished": time.time(),
    }


def _restorer(problem: Any) -> Any:
    """Copies of a problem's input buffers and a function that writes them back with the same
    per-thread block partition as first touch (so restores neither move pages nor warm one core)."""
    import numpy as np

    from kernels.parallel import parallel_copy

    saved = [(st.data, st.data.copy()) for st in problem.fields.values()]
    saved += [(arr, arr.copy()) for arr in problem.arrays.values()]

    def restore() -> None:
        for live, pristine in saved:
            parallel_copy(np.asarray(live), pristine)

    return restore


#: Round ids of repetition r start at r times this, so a case's rounds never collide across repetitions.
REPETITION_ROUNDS = 100_000

#: At most this many triad probes per group (distinct footprints beyond it share the nearest).
MAX_PROBES = 3


def _noop() -> None:
    return None


def _add_roof_probes(group: Group, records: dict[str, dict[str, Any]], calls: dict[str, Any]) -> None:
    """Add STREAM-triad cases sized like the group's footprints to the group's own rounds.

    Timed interleaved with the kernels, a probe sees the same cache and machine state they do,
    so a case's percent of roof compares like with like.
    """
    import numpy as np

    from harness.plan import CaseKey
    from kernels.parallel import thread_count
    from kernels.triad import TRIAD, triad_arrays, triad_bytes

    sizes = sorted({r["footprint_bytes"] for r in records.values() if r["status"] == "ok" and r["footprint_bytes"]})
    if len(sizes) > MAX_PROBES:
        sizes = [sizes[round(i * (len(sizes) - 1) / (MAX_PROBES - 1))] for i in range(MAX_PROBES)]
    for size in sizes:
        a, b, c = triad_arrays(size, group.dtype)
        # The schedule field names the group, so probes of different groups never share an id.
        key = CaseKey("triad", f"probe-{group.kernel}{group.tag}", "parallel", f"{a.nbytes * 3}B", group.dtype, group.grid, group.threads)
        rec = _base_record(key, "roof", 3 * a.nbytes, triad_bytes(a.shape[0], a.itemsize), 2 * a.shape[0])
        rec.update(status="ok", message="roof probe")
        records[key.id] = rec
        nchunks = thread_count()
        scalar = np.dtype(group.dtype).type(3)
        calls[key.id] = lambda a=a, b=b, c=c: TRIAD.parallel(a, b, c, scalar, nchunks)


def _base_record(case: Any, family: str, footprint: int, traffic: int, flops: int) -> dict[str, Any]:
    rec = case.as_dict()
    rec.update(
        family=family,
        status="pending",
        message="",
        max_rel_error=None,
        tolerance=None,
        footprint_bytes=footprint,
        traffic_bytes=traffic,
        flops=flops,
        overhead_ns=None,
        compile_s=None,
        loaded_from_cache=None,
        vectorised=None,
        vector_bits=None,
    )
    return rec


def _compile_fields(info: dict[str, Any] | None) -> dict[str, Any]:
    if info is None:
        return {}
    return {"compile_s": info["seconds"], "loaded_from_cache": info["from_cache"]}
