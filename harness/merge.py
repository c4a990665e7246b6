"""``stridewise merge``: run directories of one suite (shards, or several machines) as one run.

The runs must come from the same suite and the same kernels source (their hashes are compared);
a case may appear once per machine. Each case and sample keeps its machine id; round ids and
repetitions are shifted run by run (by even amounts, so the parity that splits choosing from
reporting rounds is kept), so no pairing ever crosses runs. The result reads like any run
directory: ``rank``, the plots and the report see one machine per machine id.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path
from typing import Any

import pandas as pd

from harness.runs import machine_ids
from harness.store import RunData, RunStore
from kernels.errors import StridewiseError


class MergeError(StridewiseError):
    """Runs that cannot be merged into one."""


def _field(run: RunData, name: str) -> Any:
    return run.metadata.raw.get("suite_hash") if name == "suite_hash" else run.metadata.fingerprint.get(name)


def merge_runs(paths: list[str], out: str) -> Path:
    """Write the merged run directory ``out`` (which must not hold a run yet); returns its path."""
    if len(paths) < 2:
        raise MergeError("give at least two run directories to merge")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a torn last line is dropped as the reader always does
        runs = [RunStore(Path(p)).read() for p in paths]
    for name in ("suite_hash", "kernels_source_hash"):
        values = {p: _field(r, name) for p, r in zip(paths, runs)}
        if len(set(values.values())) > 1:
            listed = ", ".join(f"{p}: {v}" for p, v in values.items())
            raise MergeError(f"the runs differ in {name} ({listed}); merge runs of one suite and one kernels version")
    target = RunStore(Path(out))
    if (target.path / "cases.csv").exists():
        raise MergeError(f"'{out}' already holds a run; give another --out")
    owner: dict[tuple[str, str, int], str] = {}
    cases_parts, samples_parts, machines, sources = [], [], {}, []
    round_shift = repetition_shift = 0
    for path, run in zip(paths, runs):
        default = run.metadata.machine_id or Path(path).name
        cases = run.cases.assign(machine_id=machine_ids(run.cases, default))
        for cid, rep, mid in zip(cases["case_id"], cases["repetition"], cases["machine_id"]):
            key = (mid, str(cid), int(rep))
            if key in owner:
                raise MergeError(f"case {cid} (repetition {rep}, machine {mid}) is in both {owner[key]} and {path}; "
                                 "each case may be merged once per machine")
            owner[key] = path
        samples = run.samples.assign(machine_id=machine_ids(run.samples, default))
        cases_parts.append(cases.assign(repetition=cases["repetition"] + repetition_shift))
        samples_parts.append(samples.assign(round=samples["round"] + round_shift,
                                            repetition=samples["repetition"] + repetition_shift))
        round_shift += 2 * math.ceil((int(samples["round"].max()) + 1) / 2) if len(samples) else 0
        repetition_shift += int(cases["repetition"].max()) + 1
        raw = run.metadata.raw
        for mid in dict.fromkeys(cases["machine_id"]):
            own = (raw.get("machines") or {}).get(mid) or {"fingerprint": raw.get("fingerprint"), "workers": raw.get("workers")}
            machines.setdefault(mid, own)
        sources.append({"path": str(path), "machine_id": default, "status": raw.get("status"), "shard": raw.get("shard"),
                        "started": raw.get("started"), "ended": raw.get("ended")})
    first = runs[0].metadata.raw
    groups: dict[str, Any] = {}
    for run in runs:
        groups.update(run.metadata.raw.get("groups") or {})
    metadata = {
        "suite": first.get("suite"), "suite_hash": first.get("suite_hash"), "fingerprint": first.get("fingerprint"),
        "started": min(str(s["started"]) for s in sources), "ended": max(str(s["ended"]) for s in sources),
        "status": "complete" if all(s["status"] == "complete" for s in sources) else "partial",
        "workers": first.get("workers") or {}, "groups": groups, "compiles": [], "merged_from": sources,
        "machines": machines, "timing_policy": first.get("timing_policy"), "jit": first.get("jit"),
    }
    target.create(runs[0].path.joinpath("suite.toml").read_text(), metadata)
    cases = pd.concat(cases_parts, ignore_index=True)
    samples = pd.concat(samples_parts, ignore_index=True)
    target.append(_records(cases), _records(samples))
    return target.path


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """Rows as dicts with empty cells for missing values (the CSV writer's convention)."""
    return frame.astype(object).where(frame.notna(), None).to_dict("records")
