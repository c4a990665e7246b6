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
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from harness.baseline import GateError, run_case_stats
from harness.cases import CaseKind
from harness.stats import holm
from harness.store import RunMetadata

FINGERPRINT_FIELDS = ("cpu_model", "logical_cpus", "physical_cores", "usable_cores", "memory_bytes", "numa_nodes", "numba", "numpy", "python")


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
    baseline: dict[str, Any], currents: list[tuple[dict[str, dict[str, Any]], RunMetadata]], options: GateOptions
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The gate's statistics on per-run case statistics (see ``run_case_stats``)."""
    cur_machine = currents[0][1].machine_id
    warnings_ = []
    if cur_machine != baseline.get("machine_id"):
        fp_b, fp_c = baseline.get("fingerprint", {}), currents[0][1].fingerprint
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


