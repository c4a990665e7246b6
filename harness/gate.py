"""Regression gate: compare a run with a stored baseline; fail only on significant slowdowns.

A baseline holds, for every case, the median and the within-run standard error of the log
median of each of several runs (3 or more by default). The log time of case c in run r is
modelled as its level, plus a run effect u_r shared by every case of the run (a shared runner
drifts as a whole), plus the case's own run-to-run scatter. The run effect's variance comes from
the runs' median deviation over cases; each case's scatter variance from its own residuals,
shrunk towards the pooled value (a moderated variance: quiet cases stay quiet, noisy ones keep
their noise, and few runs still give a usable estimate). A case's change is the difference of its
mean log times, with variance (run + case) x (1/n_baseline + 1/n_current); the within-run
standard error is a floor.

Two levels, kept apart: the *tolerance* (``threshold``) is the slowdown the test asks to exceed
("slower by more than 3 %"), and the *detection target* (``detect``) is the slowdown the gate
should catch; each case's minimum detectable slowdown (80 % power at the Holm level its first
step faces) is reported and compared with the target. With ``normalise``, raw and normalised
times are both gated and a case fails if either fails: a regression that also slows the
normaliser (same compile options) passes a normalised gate alone, and a compute-bound kernel on a
runner with slower memory passes a raw one.
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
#: Prior degrees of freedom of the shrunk per-case variance. From memory: the moderated variance
#: of Smyth (2004, empirical Bayes for many parallel tests) estimates this weight; a fixed 4 is
#: our simplification (it counts as two extra runs of the pooled scatter).
PRIOR_DOF = 4.0
#: Power at which the minimum detectable slowdown is stated.
POWER = 0.80


@dataclass(frozen=True)
class GateOptions:
    threshold: float = 0.03  # tolerance: the test asks "slower by more than this"
    confidence: float = 0.95
    patterns: tuple[str, ...] = ()
    normalise: str | None = None  # None, "triad", or "case:KERNEL|SCHEDULE|BUILD|LAYOUT"
    detect: float = 0.10  # detection target: the slowdown the gate should catch


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
    base_runs = [{c: (v["medians_ns"][i], v["roofs_gbps"][i]) for c, v in baseline["cases"].items()} for i in range(k)]
    cur_runs = [{c: (v["median_ns"], v["roof_gbps"]) for c, v in st.items()} for st, _ in currents]
    frame = _gated(common, base_cases, cur_cases, base_runs, cur_runs, options, None)
    mode = "absolute times"
    if options.normalise:
        normed = _gated(common, base_cases, cur_cases, base_runs, cur_runs, options, options.normalise)
        frame = normed.merge(frame[["case_id", "ratio", "ci_low", "ci_high", "verdict"]].rename(columns={
            "ratio": "ratio_raw", "ci_low": "ci_low_raw", "ci_high": "ci_high_raw", "verdict": "verdict_raw"}), on="case_id")
        frame["verdict_normalised"] = frame["verdict"]
        either = (frame["verdict_raw"] == "slower") | (frame["verdict_normalised"] == "slower")
        frame.loc[either, "verdict"] = "slower"
        mode = f"normalised by {options.normalise} and absolute times (a case fails if either fails)"
    extra = [{"case_id": c, "verdict": "missing"} for c in sorted(set(base_cases) - set(cur_cases))]
    extra += [{"case_id": c, "verdict": "new"} for c in sorted(set(cur_cases) - set(base_cases))]
    if extra:
        frame = pd.concat([frame, pd.DataFrame(extra)], ignore_index=True)
    gated = frame[frame["verdict"].isin(["slower", "faster", "unchanged"])]
    short = gated[gated["mds"] > options.detect] if "mds" in gated else gated.iloc[:0]
    if len(short):
        warnings_.append(f"{len(short)} of {len(gated)} cases cannot promise to catch a {options.detect:.0%} slowdown "
                         f"(their minimum detectable slowdown, at {POWER:.0%} power, is larger; worst "
                         f"{short['mds'].max():.0%}): add baseline or current runs, or gate fewer cases")
    summary = {
        "mode": mode, "threshold": options.threshold, "detect": options.detect, "confidence": options.confidence,
        "correction": "Holm", "gated": int(len(gated)), "slower": int((frame["verdict"] == "slower").sum()),
        "faster": int((frame["verdict"] == "faster").sum()), "warnings": warnings_,
        "baseline_runs": k, "baseline_machine": baseline.get("machine_id"), "current_machine": cur_machine,
        "underpowered": int(len(short)),
    }
    summary["result"] = "regression" if summary["slower"] else "pass"
    return frame, summary


def variance_model(metrics: dict[str, tuple[list[float], list[float]]]) -> tuple[float, float, dict[str, tuple[float, float]]]:
    """Run-effect variance and its degrees of freedom, and per case its shrunk scatter variance
    and degrees of freedom, from the log times of every case in the baseline and current runs."""
    run_squares, run_dof = 0.0, 0
    residuals: dict[str, list[float]] = {c: [] for c in metrics}
    case_dof: dict[str, int] = {c: 0 for c in metrics}
    for side in (0, 1):
        n = max((len(m[side]) for m in metrics.values()), default=0)
        full = [c for c, m in metrics.items() if len(m[side]) == n]
        if n < 2 or not full:
            continue
        dev = np.array([np.asarray(metrics[c][side]) - np.mean(metrics[c][side]) for c in full])  # cases x runs
        effect = np.median(dev, axis=0)  # the run effect: what every case of a run shares
        run_squares += float(np.sum(effect**2))
        run_dof += n - 1
        for c, row in zip(full, dev - effect):
            residuals[c] += list(row)
            case_dof[c] += n - 1
    run_var = run_squares / run_dof if run_dof else 0.0
    raw = {c: float(np.sum(np.square(residuals[c]))) / case_dof[c] for c in metrics if case_dof[c]}
    pooled = float(np.mean(list(raw.values()))) if raw else 0.0
    out = {}
    for c in metrics:
        d = case_dof[c]
        var = (d * raw.get(c, 0.0) + PRIOR_DOF * pooled) / (d + PRIOR_DOF)
        out[c] = (var, d + PRIOR_DOF)
    return run_var, float(run_dof), out


def _gated(common: list[str], base_cases: dict[str, Any], cur_cases: dict[str, list[dict[str, Any]]],
           base_runs: list[dict[str, Any]], cur_runs: list[dict[str, Any]], options: GateOptions, norm: str | None) -> pd.DataFrame:
    """Per-case verdicts in one mode (raw times, or normalised by ``norm``)."""
    metrics = {}
    for cid in common:
        meta = base_cases[cid]
        b = [x for x in (_metric(run, cid, meta, norm) for run in base_runs) if x is not None]
        c = [x for x in (_metric(run, cid, meta, norm) for run in cur_runs if cid in run) if x is not None]
        metrics[cid] = (b, c)
    run_var, run_dof, case_var = variance_model({c: m for c, m in metrics.items() if len(m[0]) >= 2 and m[1]})
    t_log = math.log1p(options.threshold)
    usable = [c for c in common if len(metrics[c][0]) >= 2 and metrics[c][1]]
    alpha = 1 - options.confidence
    rows = []
    for cid in common:
        b, c = metrics[cid]
        if cid not in usable:
            rows.append({"case_id": cid, "verdict": "unusable", "note": "no normalising reference or too few baseline runs"})
            continue
        est = float(np.mean(c) - np.mean(b))
        cvar, cdof = case_var[cid]
        within_vals = [x for x in base_cases[cid]["log_ses"] + [v["log_se"] for v in cur_cases[cid]] if x == x]
        within = float(np.mean(np.square(within_vals))) if within_vals else 0.0
        cvar = max(cvar, within)  # a run's own sampling error is a floor under its scatter
        var = run_var + cvar
        # Satterthwaite's degrees of freedom for a sum of two variance estimates.
        df = var**2 / ((run_var**2 / run_dof if run_dof else 0.0) + cvar**2 / cdof) if var > 0 else math.inf
        se = math.sqrt(var * (1 / len(b) + 1 / len(c))) or 1e-12
        tq = stats.t.ppf(0.5 + options.confidence / 2, df)
        # Minimum detectable slowdown: a lone regression faces Holm's first step, alpha / cases.
        mds = math.expm1(t_log + (stats.t.ppf(1 - alpha / len(usable), df) + stats.t.ppf(POWER, df)) * se)
        rows.append({
            "case_id": cid, "kernel": base_cases[cid]["kernel"], "layout": base_cases[cid]["layout"],
            "schedule": base_cases[cid]["schedule"], "threads": base_cases[cid]["threads"],
            "baseline_ms": float(np.exp(np.mean([math.log(m) for m in base_cases[cid]["medians_ns"]]))) / 1e6,
            "current_ms": float(np.exp(np.mean([math.log(v["median_ns"]) for v in cur_cases[cid]]))) / 1e6,
            "ratio": math.exp(est), "ci_low": math.exp(est - tq * se), "ci_high": math.exp(est + tq * se),
            "p_slower": float(stats.t.sf((est - t_log) / se, df)), "p_faster": float(stats.t.cdf((est + t_log) / se, df)),
            "mds": mds, "sd_run": math.sqrt(run_var), "sd_case": math.sqrt(cvar), "df": df, "baseline_runs": len(b),
        })
    frame = pd.DataFrame(rows)
    ok = frame[frame["verdict"].isna()] if "verdict" in frame else frame
    if ok.empty:
        raise GateError("no case could be compared (normalising reference missing in every case)")
    frame.loc[ok.index, "p_slower_holm"] = holm(list(ok["p_slower"]))
    frame.loc[ok.index, "p_faster_holm"] = holm(list(ok["p_faster"]))
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
    return frame
