"""Import a pytest-benchmark JSON file as a run directory, so its history can be ranked and gated.

Raw samples exist only when the file was saved with pytest-benchmark's option for keeping data
(``--benchmark-save-data``); without them the run holds summary figures only: ranking then works
on medians (no tiers) and the gate refuses it.
"""

from __future__ import annotations

import hashlib
import json
from datetime import datetime, timezone
from pathlib import Path

from harness.store import RunStore, RunStoreError
from kernels.errors import StridewiseError


def import_bench(path: str, out: str) -> tuple[Path, int, bool]:
    """Write a run directory from a pytest-benchmark JSON; returns (dir, cases, had raw samples)."""
    try:
        doc = json.loads(Path(path).read_text())
    except FileNotFoundError:
        raise StridewiseError(f"pytest-benchmark file '{path}' not found") from None
    except json.JSONDecodeError as exc:
        raise StridewiseError(f"'{path}' is not JSON: {exc}") from None
    benches = doc.get("benchmarks") if isinstance(doc, dict) else None
    if not isinstance(benches, list) or not benches:
        raise StridewiseError(f"'{path}' is not a pytest-benchmark file with benchmarks")
    info = doc.get("machine_info", {})
    machine_id = "bench-" + hashlib.sha256(json.dumps({k: info.get(k) for k in ("cpu", "machine", "processor")}, sort_keys=True, default=str).encode()).hexdigest()[:8]
    cases, samples, raw = [], [], True
    for b in benches:
        extra = b.get("extra_info", {})
        st = b.get("stats", {})
        if "median" not in st:
            raise StridewiseError(f"benchmark '{b.get('name')}' in '{path}' has no median")
        key = {
            "kernel": extra.get("kernel", b.get("group") or "bench"),
            "schedule": extra.get("schedule", b.get("name", "?")),
            "build": "parallel",
            "layout": extra.get("layout", b.get("param") or b.get("name", "?")),
            "dtype": extra.get("dtype", "float64"),
            "grid": extra.get("grid", "?"),
            "threads": int(extra.get("threads", 1)),
        }
        cid = "|".join(str(key[k]) for k in ("kernel", "schedule", "build", "layout", "dtype", "grid", "threads"))
        data = st.get("data")
        raw = raw and bool(data)
        cases.append({"case_id": cid, **key, "family": extra.get("family", "imported"), "status": "ok",
                      "message": "imported from pytest-benchmark", "footprint_bytes": extra.get("footprint_bytes", 0),
                      "traffic_bytes": extra.get("traffic_bytes", 0), "flops": extra.get("flops", 0),
                      "samples": len(data or []), "median_ns": st["median"] * 1e9,
                      "iqr_ns": st.get("iqr", float("nan")) * 1e9})
        for i, seconds in enumerate(data or []):
            samples.append({"case_id": cid, **key, "round": i, "position": 0, "phase": "measure", "ns": int(seconds * 1e9)})
    meta = {
        "suite": {"name": f"pytest-benchmark {Path(path).stem}", "layouts": sorted({c["layout"] for c in cases}), "mix": []},
        "suite_hash": hashlib.sha256(Path(path).read_bytes()).hexdigest()[:16],
        "fingerprint": {"machine_id": machine_id, "cpu_model": info.get("cpu", {}).get("brand_raw", info.get("processor")),
                        "python": info.get("python_version")},
        "status": "complete",
        "started": doc.get("datetime", datetime.now(timezone.utc).isoformat()),
        "workers": {},
        "imported": {"source": str(path), "raw_samples": raw,
                     "note": "round ids are pytest-benchmark's own per-benchmark rounds, not interleaved across cases"},
    }
    store = RunStore(Path(out))
    if (store.path / "cases.csv").exists():
        raise RunStoreError(f"'{out}' already holds a run; choose another --out")
    store.create(f"# imported from {path}\n", meta)
    store.append(cases, samples)
    return store.path, len(cases), raw
