"""The parent's side of a sweep worker: receive its messages and write each finished group at once."""

from __future__ import annotations

import queue as queue_module
from collections import defaultdict
from typing import Any

from harness.cases import CaseKind
from harness.metrics import case_statistics, group_overhead, probe_best_bandwidth
from harness.roof import RoofCurve
from harness.store import RunStore


def drain(q: Any, proc: Any, store: RunStore, metadata: dict[str, Any], progress: Any, rounds_done: Any = None) -> str | None:
    """Receive one worker's messages until it exits; write each finished group at once. The round
    count of the group being timed is polled from ``rounds_done`` (shared memory) twice a second."""
    threads = str(None)
    crash = None
    current = ""
    shown = 0
    while True:
        try:
            kind, payload = q.get(timeout=0.5)
        except queue_module.Empty:
            if not proc.is_alive():
                return crash or f"worker exited with status {proc.exitcode} without reporting"
            if rounds_done is not None and current and rounds_done.value != shown:
                shown = rounds_done.value
                progress.set_postfix_str(f"{current} round {shown}")
            continue
        if kind == "worker":
            threads = str(payload["threads"])
            metadata["workers"][threads] = payload
            store.write_metadata(metadata)
        elif kind in ("roof", "compute_roof"):
            metadata["workers"][threads][kind] = payload
            store.write_metadata(metadata)
        elif kind == "start":
            current, shown = payload, 0
            progress.set_postfix_str(current)
        elif kind == "group":
            record_group(payload, store, metadata)
            progress.update(sum(1 for r in payload["records"] if CaseKind.of(r["kernel"]) is not CaseKind.PROBE))
        elif kind == "interrupted":
            metadata["groups"][payload] = {"status": "interrupted: not recorded, rerun by --resume"}
        elif kind == "crash":
            crash = payload
        elif kind == "exit":
            return crash


def record_group(result: dict[str, Any], store: RunStore, metadata: dict[str, Any]) -> None:
    worker = metadata["workers"].get(str(result["threads"]), {})
    roof = RoofCurve.from_dict(worker["roof"]) if "roof" in worker else None
    by_case: dict[str, list[int]] = defaultdict(list)
    keys = {r["case_id"]: r for r in result["records"]}
    samples = []
    for case_id, rnd, pos, phase, ns in result["samples"]:
        if phase == "measure":
            by_case[case_id].append(ns)
        rec = keys[case_id]
        samples.append({**{k: rec[k] for k in ("case_id", "kernel", "schedule", "build", "layout", "dtype", "grid", "threads")},
                        "round": rnd, "position": pos, "phase": phase, "ns": ns, "repetition": result["repetition"]})
    probes = []  # (footprint, best bytes/s) of the group's own triad probes
    for rec in result["records"]:
        ns = by_case.get(rec["case_id"], [])
        if CaseKind.of(rec["kernel"]) is CaseKind.PROBE and ns:
            probes.append((rec["footprint_bytes"], probe_best_bandwidth(ns, rec["traffic_bytes"])))
    probe_curve = RoofCurve(result["threads"], *map(tuple, zip(*sorted(probes)))) if probes else roof
    fp = metadata.get("fingerprint") or {}
    cores = fp.get("usable_physical_cores") or fp.get("usable_cores")
    oversubscribed = bool(cores) and result["threads"] > cores
    cases = []
    overhead = group_overhead([r for r in result["records"] if CaseKind.of(r["kernel"]) is not CaseKind.PROBE])
    for rec in result["records"]:
        row = case_statistics(rec, by_case.get(rec["case_id"], []), probe_curve, result["harness_overhead_ns"], overhead)
        row["order_seed"] = result["order_seed"]
        row["repetition"] = result["repetition"]
        row["oversubscribed"] = oversubscribed
        cases.append(row)
    store.append(cases, samples)
    metadata["groups"][result["group"]] = {
        "rounds": result["rounds"],
        "looks": result["looks"],
        "harness_overhead_ns": result["harness_overhead_ns"],
        "timer_overhead_ns": result["timer_overhead_ns"],
        "flush_ns": result["flush_ns"],
        "sibling_evictions": result.get("sibling_evictions", 0),
        "oversubscribed": oversubscribed,
        "empty_kernel": overhead,
        "order_seed": result["order_seed"],
    }
    metadata["compiles"].extend(result["compiles"])
    store.write_metadata(metadata)


def compile_totals(metadata: dict[str, Any]) -> None:
    recs = metadata.get("compiles", [])
    metadata["compile"] = {
        "compiled": sum(1 for r in recs if not r["from_cache"]),
        "compile_seconds": sum(r["seconds"] for r in recs if not r["from_cache"]),
        "loaded": sum(1 for r in recs if r["from_cache"]),
        "load_seconds": sum(r["seconds"] for r in recs if r["from_cache"]),
    }
