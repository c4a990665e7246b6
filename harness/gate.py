"""Regression gate: compare a run with a stored baseline; fail only on significant slowdowns.

A baseline holds, for every case, the median and the within-run standard error of the log
median of each of several runs (3 or more by default). For a case in both, the gate estimates
the log ratio current/baseline and its standard error from the per-run variance: the
between-run variance of run medians (pooled over the gated cases, on their log scale), or the
case's within-run variance where that is larger. A case is a regression when the one-sided test of "slower by more than the threshold"
is significant after Holm's correction across the gated cases; the printed interval is the
two-sided interval at the chosen confidence level (Student t on the between-run degrees of
freedom).
"""

from __future__ import annotations

import fnmatch
import json
import math
import os
import sys
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from harness.cases import CaseKind
from harness.stats import holm
from harness.store import RunStore
from kernels.errors import StridewiseError

BASELINE_FORMAT = "stridewise-baseline"
BASELINE_VERSION = 1
BASELINE_DIR = Path("results") / "baselines"
BOOTSTRAP = 400
#: The environment variable CI systems read as a step's markdown summary.
STEP_SUMMARY_ENV = "GITHUB_STEP_SUMMARY"
STORED_DRIFT_NOTE = (
    "Mode: stored baseline. This run is compared with numbers stored from other runs, so a drift of the machine "
    "between those runs and this one (measured on a shared 2-core VM: up to 1.66x for one case) is "
    "indistinguishable from a change of the code; the interval allows only for the spread between the baseline's "
    "own runs. On a shared runner, compare versions side by side in one run: `stridewise versus BASE [HEAD]`."
)
EXIT_PASS, EXIT_REGRESSION = 0, 1  # unusable input raises GateError: exit 2 through the CLI
FINGERPRINT_FIELDS = ("cpu_model", "logical_cpus", "physical_cores", "usable_cores", "memory_bytes", "numa_nodes", "numba", "numpy", "python")


class GateError(StridewiseError):
    """The gate's input is unusable (exit status 2)."""


def _log_median_se(ns: np.ndarray, rng: np.random.Generator) -> float:
    """Bootstrap standard error of log(median) of one run's samples."""
    if ns.size < 2:
        return float("nan")
    picks = rng.integers(0, ns.size, size=(BOOTSTRAP, ns.size))
    return float(np.std(np.log(np.median(ns[picks], axis=1)), ddof=1))


def run_case_stats(run_dir: str) -> tuple[dict[str, dict[str, Any]], dict[str, Any]]:
    """Per case of one run: median, within-run SE of the log median, roof at its footprint."""
    store = RunStore(Path(run_dir))
    meta = store.metadata()
    if meta.get("imported", {}).get("raw_samples") is False:
        raise GateError(f"{run_dir} was imported without raw samples; the gate needs them for an interval "
                        "(save pytest-benchmark runs with --benchmark-save-data)")
    cases = store.cases()
    samples = store.samples()
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
    machines = {m.get("fingerprint", {}).get("machine_id") for m in metas}
    if len(machines) > 1:
        raise GateError(f"baseline runs come from different machines ({', '.join(sorted(map(str, machines)))}); save one baseline per machine")
    hashes = {m.get("suite_hash") for m in metas}
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
        "fingerprint": metas[0].get("fingerprint", {}),
        "suite": {"name": metas[0].get("suite", {}).get("name"), "hash": hashes.pop()},
        "runs": [str(r) for r in run_dirs],
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "cases": cases,
    }
    path = Path(out) if out else BASELINE_DIR / f"{machine}.json"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(doc, indent=1))
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


@dataclass(frozen=True)
class GateOptions:
    threshold: float = 0.10
    confidence: float = 0.95
    patterns: tuple[str, ...] = ()
    normalise: str | None = None  # None, "triad", or "case:KERNEL|SCHEDULE|BUILD|LAYOUT"


def _metric(run: dict[str, tuple[float, float | None]], cid: str, meta: dict[str, Any], norm: str | None) -> float | None:
    """log of a case's time in one run, normalised if asked; None when the normaliser is missing.

    ``run`` maps case ids to (median ns, roof GB/s at the case's footprint) of that run.
    """
    med, roof = run[cid]
    if norm is None:
        return math.log(med)
    if norm == "triad":  # bytes the same-run triad moves in the case's time
        return None if roof is None or not roof == roof else math.log(med * roof)
    kernel, schedule, build, layout = norm.split(":", 1)[1].split("|")
    ref = run.get("|".join((kernel, schedule, build, layout, meta["dtype"], meta["grid"], str(meta["threads"]))))
    return None if ref is None else math.log(med / ref[0])


def gate(baseline: dict[str, Any], current_dirs: list[str], options: GateOptions) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Per-case verdicts and an overall verdict for run directories against a baseline."""
    return compare(baseline, [run_case_stats(d) for d in current_dirs], options)


def compare(
    baseline: dict[str, Any], currents: list[tuple[dict[str, dict[str, Any]], dict[str, Any]]], options: GateOptions
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The gate's statistics on per-run case statistics (see ``run_case_stats``)."""
    cur_machine = currents[0][1].get("fingerprint", {}).get("machine_id")
    warnings_ = []
    if cur_machine != baseline.get("machine_id"):
        fp_b, fp_c = baseline.get("fingerprint", {}), currents[0][1].get("fingerprint", {})
        diffs = [f"{k}: {fp_b.get(k)!r} -> {fp_c.get(k)!r}" for k in FINGERPRINT_FIELDS if fp_b.get(k) != fp_c.get(k)]
        warnings_.append(f"machine {cur_machine} differs from the baseline's {baseline.get('machine_id')}"
                         + (f" ({'; '.join(diffs)})" if diffs else ""))
    base_cases = {c: v for c, v in baseline["cases"].items() if CaseKind.of(v["kernel"]) is not CaseKind.PROBE}
    cur_cases: dict[str, list[dict[str, Any]]] = {}
    for stats_, _ in currents:
        for cid, v in stats_.items():
            if CaseKind.of(v["kernel"]) is not CaseKind.PROBE:
                cur_cases.setdefault(cid, []).append(v)
    if options.patterns:
        keep = lambda cid: any(fnmatch.fnmatch(cid, p) for p in options.patterns)  # noqa: E731
        base_cases = {c: v for c, v in base_cases.items() if keep(c)}
        cur_cases = {c: v for c, v in cur_cases.items() if keep(c)}
    common = sorted(set(base_cases) & set(cur_cases))
    if not common:
        raise GateError("baseline and current run have no case in common (different suites or filters?); nothing to gate")
    k = len(next(iter(base_cases.values()))["medians_ns"])
    rows = []
    t_log = math.log1p(options.threshold)
    all_base = baseline["cases"]
    base_runs = [{c: (v["medians_ns"][i], v["roofs_gbps"][i]) for c, v in all_base.items()} for i in range(k)]
    cur_runs = [{c: (v["median_ns"], v["roof_gbps"]) for c, v in st.items()} for st, _ in currents]
    metrics = {}
    for cid in common:
        meta = base_cases[cid]
        b = [x for x in (_metric(run, cid, meta, options.normalise) for run in base_runs) if x is not None]
        c = [x for x in (_metric(run, cid, meta, options.normalise) for run in cur_runs if cid in run) if x is not None]
        metrics[cid] = (b, c)
    # Between-run variance, pooled over the gated cases: run-to-run drift of a shared runner is
    # mostly machine-wide, and pooling gives the estimate enough degrees of freedom to be useful.
    squares, dof = 0.0, 0
    for b, c in metrics.values():
        for group in (b, c):
            if len(group) > 1:
                squares += float(np.var(group, ddof=1)) * (len(group) - 1)
                dof += len(group) - 1
    pooled = squares / dof if dof else 0.0
    for cid in common:
        b, c = metrics[cid]
        if len(b) < 2 or not c:
            rows.append({"case_id": cid, "verdict": "unusable", "note": "no normalising reference or too few baseline runs"})
            continue
        est = float(np.mean(c) - np.mean(b))
        between = pooled
        within_vals = [x for x in base_cases[cid]["log_ses"] + [v["log_se"] for v in cur_cases[cid]] if x == x]
        within = float(np.mean(np.square(within_vals))) if within_vals else 0.0
        if between >= within:
            var, df, source = between, dof, "between-run"
        else:
            var, df, source = within, math.inf, "within-run"
        se = math.sqrt(var * (1 / len(b) + 1 / len(c))) or 1e-12
        tq = stats.t.ppf(0.5 + options.confidence / 2, df) if math.isfinite(df) else stats.norm.ppf(0.5 + options.confidence / 2)
        cdf = (lambda x: stats.t.cdf(x, df)) if math.isfinite(df) else stats.norm.cdf
        rows.append({
            "case_id": cid, "kernel": base_cases[cid]["kernel"], "layout": base_cases[cid]["layout"],
            "schedule": base_cases[cid]["schedule"], "threads": base_cases[cid]["threads"],
            "baseline_ms": float(np.exp(np.mean([math.log(m) for m in base_cases[cid]["medians_ns"]]))) / 1e6,
            "current_ms": float(np.exp(np.mean([math.log(v["median_ns"]) for v in cur_cases[cid]]))) / 1e6,
            "ratio": math.exp(est), "ci_low": math.exp(est - tq * se), "ci_high": math.exp(est + tq * se),
            "p_slower": float(1 - cdf((est - t_log) / se)), "p_faster": float(cdf((est + t_log) / se)),
            "variation": source, "baseline_runs": len(b),
        })
    frame = pd.DataFrame(rows)
    usable = frame[frame["verdict"].isna()] if "verdict" in frame else frame
    if usable.empty:
        raise GateError("no case could be compared (normalising reference missing in every case)")
    alpha = 1 - options.confidence
    frame.loc[usable.index, "p_slower_holm"] = holm(list(usable["p_slower"]))
    frame.loc[usable.index, "p_faster_holm"] = holm(list(usable["p_faster"]))
    verdicts = []
    for _, r in frame.iterrows():
        if isinstance(r.get("verdict"), str):
            verdicts.append(r["verdict"])
        elif r["p_slower_holm"] < alpha:
            verdicts.append("slower")
        elif r["p_faster_holm"] < alpha:
            verdicts.append("faster")
        else:
            verdicts.append("unchanged")
    frame["verdict"] = verdicts
    extra = [{"case_id": c, "verdict": "missing"} for c in sorted(set(base_cases) - set(cur_cases))]
    extra += [{"case_id": c, "verdict": "new"} for c in sorted(set(cur_cases) - set(base_cases))]
    if extra:
        frame = pd.concat([frame, pd.DataFrame(extra)], ignore_index=True)
    summary = {
        "mode": f"normalised by {options.normalise}" if options.normalise else "absolute times",
        "threshold": options.threshold, "confidence": options.confidence, "correction": "Holm",
        "gated": int(len(usable)), "slower": int((frame["verdict"] == "slower").sum()),
        "faster": int((frame["verdict"] == "faster").sum()), "warnings": warnings_,
        "baseline_runs": k, "baseline_machine": baseline.get("machine_id"), "current_machine": cur_machine,
    }
    summary["result"] = "regression" if summary["slower"] else "pass"
    return frame, summary


def render_gate(frame: pd.DataFrame, summary: dict[str, Any], fmt: str) -> str:
    if fmt == "csv":
        return frame.to_csv(index=False)
    if fmt == "json":
        return json.dumps({"summary": summary, "cases": json.loads(frame.to_json(orient="records"))}, indent=2) + "\n"
    from tabulate import tabulate

    verdict = "FAIL: regression" if summary["result"] == "regression" else "PASS"
    lines = [
        f"## stridewise gate: {verdict}",
        "",
        f"{summary['gated']} cases gated ({summary['mode']}), threshold {summary['threshold']:.0%}, "
        f"confidence {summary['confidence']:.0%}, Holm correction; baseline of {summary['baseline_runs']} runs on "
        f"`{summary['baseline_machine']}`, current on `{summary['current_machine']}`. "
        f"{summary['slower']} slower, {summary['faster']} faster.",
        "",
        STORED_DRIFT_NOTE,
        "",
    ]
    lines += [f"> warning: {w}" for w in summary["warnings"]]
    shown = frame.sort_values(["verdict"], key=lambda s: s.map({"slower": 0, "missing": 1, "new": 2, "faster": 3}).fillna(4))
    rows = []
    for _, r in shown.iterrows():
        if pd.isna(r.get("ratio")):
            rows.append([r["case_id"], "", "", "", "", r["verdict"]])
        else:
            rows.append([r["case_id"], f"{r['baseline_ms']:.4g}", f"{r['current_ms']:.4g}", f"{r['ratio']:.3f}",
                         f"[{r['ci_low']:.3f}, {r['ci_high']:.3f}]", r["verdict"]])
    lines.append(tabulate(rows, headers=["case", "baseline ms", "current ms", "ratio", "interval", "verdict"], tablefmt="github"))
    return "\n".join(lines) + "\n"


def run_gate(baseline_path: str, currents: list[str], options: GateOptions, fmt: str, out: str | None) -> int:
    first_meta = RunStore(Path(currents[0])).metadata()
    baseline = load_baseline(baseline_path, first_meta.get("fingerprint", {}).get("machine_id"))
    frame, summary = gate(baseline, currents, options)
    for w in summary["warnings"]:
        print(f"stridewise: warning: {w}", file=sys.stderr)
    text = render_gate(frame, summary, fmt)
    if out:
        Path(out).write_text(text)
    else:
        sys.stdout.write(text)
    return gate_verdict(frame, render_gate(frame, summary, "md"))


def gate_verdict(frame: pd.DataFrame, markdown: str) -> int:
    """The end of every gate: the markdown report appended to the CI step summary when one is
    set, the slowed cases named on standard error, and the exit status."""
    step_summary = os.environ.get(STEP_SUMMARY_ENV)
    if step_summary:
        with open(step_summary, "a") as fh:
            fh.write(markdown)
    slower = frame[frame["verdict"] == "slower"]["case_id"].tolist()
    if slower:
        print(f"stridewise: regression in {len(slower)} case(s): {', '.join(slower)}", file=sys.stderr)
        return EXIT_REGRESSION
    return EXIT_PASS
