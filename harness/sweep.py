"""``stridewise sweep``: run a suite's cases in per-thread-count worker processes and record them."""

from __future__ import annotations

from dataclasses import replace

import multiprocessing
import queue as queue_module
import sys
import time
import tomllib
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from harness import machine
from harness.cases import CaseKind, Group, of_kind
from harness.plan import group_bytes, plan, power_warnings, working_set_warnings
from harness.processes import EXIT_INTERRUPTED, StopRequest, environment, signals_held
from kernels.errors import StridewiseError
from harness.store import DiskFull, RunMetadata, RunStore, RunStoreError
from harness.conversions import auto_conversions
from harness.recording import compile_totals, drain
from harness.shards import shard_groups
from harness.suite import Suite, SuiteError, load_suite, parse_suite, read_suite_text
from harness.summary import render_summary
from harness.worker import WorkerPlan, worker_environment, worker_main

FAILED_BASE = 10  # exit status 10 + N when N cases failed validation or raised (N capped at 100)
MEMORY_SHARE = 0.8  # a group may use at most this share of the memory available at start


#: Exit status of a sweep stopped by a full disk (resumable); sysexits.h's EX_TEMPFAIL, from memory.
EXIT_DISK_FULL = 75
#: Seconds a worker gets to finish its current sample after a stop, before it is terminated.
WORKER_STOP_S = 60.0


def default_run_dir(label: str, machine_id: str) -> Path:
    """``results/runs/<UTC time>-<label>-<machine id>``."""
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    return Path("results") / "runs" / f"{stamp}-{label}-{machine_id}"


def check_memory(groups: list[Group], suite: Suite) -> None:
    """Refuse groups whose resident buffers would not fit in the memory available now."""
    available = machine.available_memory_bytes()
    if not available:
        return
    flush = suite.timing.flush_bytes if suite.timing.cold_cache else 0
    roof = suite.timing.roof_max_bytes
    if suite.timing.roof and roof > MEMORY_SHARE * available:
        raise SuiteError(
            f"timing.roof_max_bytes asks for a {roof / 2**30:.1f} GiB triad (the roof curve's largest point), more than "
            f"{MEMORY_SHARE:.0%} of the {available / 2**30:.1f} GiB available; lower it or set timing.roof = false"
        )
    for group in groups:
        need = group_bytes(group) + flush
        if need > MEMORY_SHARE * available:
            raise SuiteError(
                f"group '{group.label}' needs {need / 2**30:.1f} GiB resident (all its layouts at once), "
                f"more than {MEMORY_SHARE:.0%} of the {available / 2**30:.1f} GiB available; use fewer layouts or a smaller grid"
            )


def run_sweep(
    suite_arg: str | None,
    out: str | None = None,
    resume: str | None = None,
    quiet: bool = False,
    no_vector_report: bool = False,
    repeat: int | None = None,
    shard: tuple[int, int] | None = None,
) -> int:
    """Run (or resume) a sweep, or part K of N of it (``shard``); returns the exit status."""
    fingerprint = machine.fingerprint()
    if resume:
        store = RunStore(Path(resume))
        store.check_writable()
        old = store.metadata()
        suite_text = store.suite_text()
        suite = parse_suite(tomllib.loads(suite_text), old.get("suite", {}).get("name", "resumed"))
        if suite_arg is not None:
            given = load_suite(suite_arg)
            if given.digest() != suite.digest():
                raise SuiteError(
                    f"--resume {resume}: the run was made with suite '{suite.name}' ({suite.digest()}), "
                    f"not the given '{given.name}' ({given.digest()}); resume without a suite or start a new run"
                )
        if old.get("fingerprint", {}).get("machine_id") != fingerprint["machine_id"]:
            print(f"stridewise: warning: resuming on machine {fingerprint['machine_id']}, the run began on "
                  f"{old.get('fingerprint', {}).get('machine_id')}", file=sys.stderr)
        metadata = old
        if old.get("shard"):
            shard = (int(old["shard"]["index"]), int(old["shard"]["count"]))
        reps = int(old.get("suite", {}).get("timing", {}).get("repetitions", 1))
        suite = replace(suite, timing=replace(suite.timing, repetitions=reps))
    else:
        suite = load_suite(suite_arg)
        if repeat is not None:
            suite = replace(suite, timing=replace(suite.timing, repetitions=repeat))
        suite_text = read_suite_text(suite_arg)
        store = RunStore(Path(out) if out else default_run_dir(suite.name, fingerprint["machine_id"]))
        if (store.path / "cases.csv").exists():
            raise RunStoreError(f"'{store.path}' already holds a run; use --resume {store.path} or another --out")
        metadata = {}
    usable = machine.usable_cores()
    counts = suite.thread_counts(usable)
    physical = machine.usable_physical_cores()
    for count in counts:
        if count > physical:
            print(f"stridewise: warning: {count} threads exceed the {physical} usable physical cores"
                  + (f"; the worker's thread cap is raised to {count}" if count > usable else "")
                  + ", and its threads will share cores (its cases are flagged oversubscribed and left out of thread "
                  "scaling)", file=sys.stderr)
    groups = plan(suite, counts)
    if shard is not None:
        groups = shard_groups(groups, suite, shard)
        if suite.conversions_auto:
            print("stridewise: warning: conversions.auto is skipped in a shard (a shard does not see the other shards' "
                  "winners); list the conversions to price in [conversions] pairs", file=sys.stderr)
    check_memory(groups, suite)
    for line in power_warnings(groups, suite) + working_set_warnings(groups, suite, machine.private_cache_bytes(2)):
        print(f"stridewise: warning: {line}", file=sys.stderr)
    gov = machine.governor_warning(fingerprint["cpufreq"])
    if gov:
        print(f"stridewise: warning: {gov}", file=sys.stderr)
    done = store.finished_keys() if resume else set()
    todo = [g for g in groups if not all((c.id, g.repetition) in done for c in g.cases)]
    if not metadata:
        metadata = {
            "suite": suite.as_dict(),
            "suite_hash": suite.digest(),
            "fingerprint": fingerprint,
            "started": _now(),
            "status": "running",
            "workers": {},
            "groups": {},
            "compiles": [],
            "timing_policy": {"order": "seeded shuffle per round", "clock": "time.perf_counter_ns"},
            "jit": {"error_model": "numpy", "fastmath": False, "cache_dir": _cache_dir()},
        }
        if shard is not None:
            metadata["shard"] = {"index": shard[0], "count": shard[1], "groups": sorted({g.label for g in groups})}
        store.create(suite_text, metadata)
    else:
        metadata["status"] = "running"
        metadata.setdefault("resumed", []).append(_now())
        store.write_metadata(metadata)
    total_cases = sum(len(g.cases) for g in todo)
    if not quiet:
        print(f"stridewise: {len(todo)} groups, {total_cases} cases, threads {list(counts)} -> {store.path}", file=sys.stderr)
    ctx = multiprocessing.get_context("spawn")
    stop_event = ctx.Event()
    stopper = StopRequest(stop_event)
    progress = _progress(total_cases, quiet)
    crashed = []
    # Twice the last-level cache per thread: the threads of a virtual machine may sit on different
    # last-level caches (measured: at 2 threads, one reported cache's worth per thread left a
    # sample after a same-buffers sibling 2-3 % faster).
    flush_per_thread = 2 * (machine.last_level_cache_bytes() or 64 << 20)

    def run_worker(threads: int, groups_: tuple[Group, ...]) -> str | None:
        wplan = WorkerPlan(
            threads=threads,
            groups=groups_,
            timing=suite.timing,
            seed=suite.seed,
            pin=suite.threads.pin,
            kernel_options=suite.kernel_options,
            inspect_vectorisation=not no_vector_report,
            flush_bytes=suite.timing.flush_bytes or flush_per_thread * threads,
        )
        q = ctx.Queue()
        # Rounds done, in shared memory: a queue message per round woke the worker's feeder thread
        # and the parent's progress bar just as the next round's first kernel started.
        rounds_done = ctx.Value("q", 0, lock=False)
        proc = ctx.Process(target=worker_main, args=(wplan, q, stop_event, rounds_done), daemon=True)
        with environment(worker_environment(threads, suite.threads.layer, suite.threads.pin)), signals_held():
            proc.start()
        try:
            crash = drain(q, proc, store, metadata, progress, rounds_done)
        except DiskFull:
            stop_event.set()  # the worker stops after its current sample; nothing more can be written
            deadline = time.monotonic() + WORKER_STOP_S
            while proc.is_alive() and time.monotonic() < deadline:
                try:  # keep its queue moving, or it could wait forever to hand over its last messages
                    q.get(timeout=0.5)
                except queue_module.Empty:
                    pass
            if proc.is_alive():
                proc.terminate()
            proc.join()
            raise
        proc.join()
        return crash

    # The handler stays installed to the end: a signal while the summary is written must not kill
    # the process half way (the run's data are safe either way; the exit status tells of the signal).
    with stopper.installed():
        try:
            _run_thread_counts(counts, todo, suite if shard is None else replace(suite, conversions_auto=0), store,
                               stop_event, progress, run_worker, crashed)
        except DiskFull as exc:
            progress.close()
            metadata["status"] = "stopped: disk full"
            metadata["ended"] = _now()
            try:
                store.write_metadata(metadata)
            except StridewiseError:
                pass  # the previous metadata.json stays whole; the cases recorded so far are intact
            print(f"stridewise: {exc}: stopped after the last complete group; free some space, then "
                  f"`stridewise sweep --resume {store.path}` finishes the run", file=sys.stderr)
            return EXIT_DISK_FULL
        interrupted = stopper.signal is not None  # groups were left undone
        progress.close()
        metadata["ended"] = _now()
        metadata["status"] = "interrupted" if interrupted else ("crashed" if crashed else "complete")
        compile_totals(metadata)
        store.write_metadata(metadata)
        cases = store.cases()
        store.write_summary(_summary(store, cases, metadata))
        real = cases[~of_kind(cases, CaseKind.PROBE)] if len(cases) else cases
        failed = int((real["status"] != "ok").sum()) if len(real) else 0
        if not quiet or failed or interrupted:
            print(f"stridewise: {metadata['status']}: {len(real)} cases recorded, {failed} failed; summary in "
                  f"{store.path / 'summary.md'}", file=sys.stderr)
        for text in crashed:
            print(f"stridewise: worker crashed:\n{text}", file=sys.stderr)
        if stopper.signal is not None:
            return EXIT_INTERRUPTED.get(stopper.signal, 130)
        if crashed:
            return 1
        return FAILED_BASE + min(failed, 100) if failed else 0


def _run_thread_counts(counts: Any, todo: list[Group], suite: Suite, store: RunStore, stop_event: Any, progress: Any,
                       run_worker: Any, crashed: list[str]) -> None:
    """One worker per thread count (and one more for automatic conversions), until a stop or a crash."""
    for threads in counts:
        mine = tuple(g for g in todo if g.threads == threads)
        if mine and not stop_event.is_set():
            crash = run_worker(threads, mine)
            if crash:
                crashed.append(crash)
                break
        if suite.conversions_auto and not stop_event.is_set():
            extra = auto_conversions(store, suite, threads)
            if extra:
                progress.total += sum(len(g.cases) for g in extra)
                progress.refresh()
                crash = run_worker(threads, tuple(extra))
                if crash:
                    crashed.append(crash)
                    break


def _summary(store: RunStore, cases: Any, metadata: dict[str, Any]) -> str:
    """The ranking report of this run; the plain case list when nothing can be ranked yet."""
    from harness.rank import RankOptions, rank_runs
    from harness.runs import load_runs
    from harness.report import render_markdown

    try:
        reference = metadata["suite"]["layouts"][0]  # speedups are also given over the suite's first layout
        ranking = rank_runs(load_runs([str(store.path)]), RankOptions(reference=reference))
    except StridewiseError:
        return render_summary(cases, RunMetadata(metadata))
    return render_markdown(ranking, title=f"Sweep `{metadata['suite']['name']}`: {metadata['status']}")


def _progress(total: int, quiet: bool) -> Any:
    from tqdm import tqdm

    return tqdm(total=total, unit="case", disable=quiet, dynamic_ncols=True, mininterval=0.5, file=sys.stderr)


def _cache_dir() -> str:
    from kernels.jit import cache_dir

    return cache_dir()


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")
