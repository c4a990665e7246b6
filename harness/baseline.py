"""Stored baselines: several runs of one suite on one machine merged into one compact file.

Per case and run the file keeps the median, the within-run standard error of the log median,
the roof at the case's footprint and the sample count; ``harness.gate`` compares runs with it.
"""

from __future__ import annotations

import json
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from harness.store import RunMetadata, RunStore
from kernels.errors import StridewiseError

BASELINE_FORMAT = "stridewise-baseline"
BASELINE_VERSION = 1
BASELINE_DIR = Path("results") / "baselines"
BOOTSTRAP = 400


class GateError(StridewiseError):
    """The gate's input is unusable (exit status 2)."""


def _log_median_se(ns: np.ndarray, rng: np.random.Generator) -> float:
    """Bootstrap standard error of log(median) of one run's samples."""
    if ns.size < 2:
        return float("nan")
    picks = rng.integers(0, ns.size, size=(BOOTSTRAP, ns.size))
    return float(np.std(np.log(np.median(ns[picks], axis=1)), ddof=1))


def run_case_stats(run_dir: str) -> tuple[dict[str, dict[str, Any]], RunMetadata]:
    """Per case of one run: median, within-run SE of the log median, roof at its footprint."""
    run = RunStore(Path(run_dir)).read()
    meta = run.metadata
    if not meta.has_raw_samples:
        raise GateError(f"{run_dir} was imported without raw samples; the gate needs them for an interval "
                        "(save pytest-benchmark runs with --benchmark-save-data)")
    cases, samples = run.cases, run.samples
    samples = samples[samples["phase"] == "measure"]
    ok = cases[(cases["status"] == "ok")]
    rng = np.random.default_rng(0)
    out = {}
    groups = {cid: g["ns"].to_numpy(float) for cid, g in samples.groupby("case_id")}
    for _, c in ok.iterrows():
        ns = groups.get(c["case_id"])
        if ns is None or ns.size == 0:
            continue
        out[c["case_id"]] = {
            "kernel": c["kernel"], "schedule": c["schedule"], "build": c["build"], "layout": c["layout"],
            "dtype": c["dtype"], "grid": c["grid"], "threads": int(c["threads"]),
            "median_ns": float(np.median(ns)), "log_se": _log_median_se(ns, rng),
            "roof_gbps": float(c["roof_gbps"]) if pd.notna(c.get("roof_gbps")) else None, "samples": int(ns.size),
        }
    return out, meta


def save_baseline(run_dirs: list[str], out: str | None, at_least: int = 3) -> Path:
    """Merge several runs of one suite on one machine into a compact baseline file."""
    if len(run_dirs) < at_least:
        raise GateError(f"a baseline needs at least {at_least} runs (between-run variation), got {len(run_dirs)}; "
                        "run the suite again or lower --at-least")
    per_run, metas = [], []
    for rd in run_dirs:
        stats_, meta = run_case_stats(rd)
        per_run.append(stats_)
        metas.append(meta)
    machines = {m.machine_id for m in metas}
    if len(machines) > 1:
        raise GateError(f"baseline runs come from different machines ({', '.join(sorted(map(str, machines)))}); save one baseline per machine")
    hashes = {m.raw.get("suite_hash") for m in metas}
    if len(hashes) > 1:
        raise GateError("baseline runs were made with different suites; a baseline merges runs of one suite")
    common = set.intersection(*(set(r) for r in per_run))
    if not common:
        raise GateError("the runs have no successful case in common")
    cases = {}
    for cid in sorted(common):
        first = per_run[0][cid]
        cases[cid] = {k: first[k] for k in ("kernel", "schedule", "build", "layout", "dtype", "grid", "threads")}
        for key, plural in (("median_ns", "medians_ns"), ("log_se", "log_ses"), ("roof_gbps", "roofs_gbps"), ("samples", "samples")):
            cases[cid][plural] = [r[cid][key] for r in per_run]
    machine = machines.pop()
    doc = {
        "format": BASELINE_FORMAT,
        "version": BASELINE_VERSION,
        "machine_id": machine,
        "fingerprint": metas[0].fingerprint,
        "suite": {"name": metas[0].suite.get("name"), "hash": hashes.pop()},
        "runs": [str(r) for r in run_dirs],
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "cases": cases,
    }
    path = Path(out) if out else BASELINE_DIR / f"{machine}.json"
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(doc, indent=1))
    except OSError as exc:
        raise GateError(f"cannot write the baseline to {path}: {exc.strerror or exc}") from None
    return path


def load_baseline(path: str, machine_id: str | None) -> dict[str, Any]:
    p = Path(path)
    if p.is_dir():
        candidate = p / f"{machine_id}.json"
        if not candidate.exists():
            have = ", ".join(sorted(f.stem for f in p.glob("*.json"))) or "none"
            raise GateError(f"no baseline for machine {machine_id} in {p}; baselines there: {have}")
        p = candidate
    try:
        doc = json.loads(p.read_text())
    except FileNotFoundError:
        raise GateError(f"baseline '{p}' not found") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise GateError(f"baseline '{p}' is corrupted: {exc}") from None
    if not isinstance(doc, dict) or doc.get("format") != BASELINE_FORMAT or not isinstance(doc.get("cases"), dict):
        raise GateError(f"'{p}' is not a stridewise baseline file")
    for cid, c in doc["cases"].items():
        meds = c.get("medians_ns")
        if not isinstance(meds, list) or not meds or not all(isinstance(m, (int, float)) and m > 0 for m in meds):
            raise GateError(f"baseline '{p}' is corrupted: case '{cid}' has no valid medians")
    return doc
