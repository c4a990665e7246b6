"""The figures of a case, computed in one place: median, IQR, GB/s, % of roof, GFLOP/s, ratios.

Column names mean one thing everywhere: ``median_ns`` (``cases.csv``) is over all measured
rounds of a case; ``reported_median_ns`` (a ranking) is over the reporting rounds of a layout's
chosen schedule, the rounds every ranked figure comes from.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.intervals import NAN, Interval, Rounds, median_interval, percentile, ratio_interval

#: A case whose median is below this multiple of the empty kernel's time (dispatch plus fork/join)
#: is flagged overhead-bound: its time says more about the call than about the layout.
OVERHEAD_MULTIPLE = 10.0
#: Labels of roof probes and of serial (parallel=False) builds inside a group's Rounds.
PROBE_PREFIX = "probe:"
SERIAL_PREFIX = "serial:"


def median_and_iqr(ns: Any) -> tuple[float, float]:
    """Median and interquartile range (75th minus 25th percentile) of some samples."""
    arr = np.asarray(ns, dtype=float)
    q75, q25 = np.percentile(arr, [75, 25])
    return float(np.median(arr)), float(q75 - q25)


def group_overhead(records: list[dict[str, Any]]) -> dict[str, dict[str, float]]:
    """Per build, the empty kernel's time over a group's cases: median, quartiles, max and count.

    The empty call's cost (dispatch plus fork/join) hardly depends on the layout, so the median
    over a group's cases is a robust estimate: one case measured while a neighbour stole the
    core (hundreds of µs against a few) moves it little. From memory, no single source: the
    median over many repeated measurements is common practice for such outliers.
    """
    by_build: dict[str, list[float]] = {}
    for rec in records:
        if rec.get("overhead_ns"):
            by_build.setdefault(rec.get("build", "parallel"), []).append(float(rec["overhead_ns"]))
    out = {}
    for build, values in by_build.items():
        q25, q50, q75 = np.percentile(values, [25, 50, 75])
        out[build] = {"median_ns": float(q50), "q25_ns": float(q25), "q75_ns": float(q75), "max_ns": float(max(values)),
                      "cases": len(values)}
    return out


def case_statistics(record: dict[str, Any], ns: list[int], roof: Any | None, harness_overhead_ns: float,
                    overhead: dict[str, dict[str, float]] | None = None) -> dict[str, Any]:
    """Median, IQR, bandwidth, percent of roof and GFLOP/s of one case from all its measured samples;
    ``overhead`` (from ``group_overhead``) sets the overhead-bound flag."""
    out = dict(record)
    out["samples"] = len(ns)
    out["harness_overhead_ns"] = harness_overhead_ns
    if not ns:
        return out
    median, iqr = median_and_iqr(ns)
    out["median_ns"] = median
    out["iqr_ns"] = iqr
    out["gbps"] = record["traffic_bytes"] / median if median else None  # bytes/ns = GB/s
    out["gflops"] = record["flops"] / median if median else None
    if roof is not None:
        roof_gbps = roof.at(record["footprint_bytes"]) / 1e9
        out["roof_gbps"] = roof_gbps
        out["pct_roof"] = 100.0 * out["gbps"] / roof_gbps if roof_gbps else None
    group = (overhead or {}).get(record.get("build", "parallel"))
    if group is not None and record.get("overhead_ns"):  # only cases with an empty kernel (no probes)
        out["group_overhead_ns"] = group["median_ns"]
        out["overhead_bound"] = bool(median < OVERHEAD_MULTIPLE * group["median_ns"])
    elif record.get("overhead_ns"):
        out["overhead_bound"] = bool(median < OVERHEAD_MULTIPLE * record["overhead_ns"])
    return out


def vector_path(packed_code: bool, vector_bits: int, trip: int | None, itemsize: int) -> dict[str, Any]:
    """Whether the path that ran was vectorised: packed instructions in the compiled specialisation
    (``vector_code``) and an inner loop of at least one vector of the widest registers they use
    (``vector_trip`` elements; LLVM's vector body runs only for that many, the rest is its scalar
    remainder). An unknown trip count trusts the code alone."""
    lanes = vector_bits // (8 * itemsize) if vector_bits else 0
    ran = bool(packed_code) and (trip is None or trip >= lanes)
    return {"vector_code": bool(packed_code), "vector_bits": vector_bits, "vector_trip": trip, "vectorised": ran}


def probe_best_bandwidth(ns: list[int] | np.ndarray, traffic_bytes: float) -> float:
    """The roof a probe measured: its best round, in bytes/s.

    From memory: STREAM reports the best rate over its trials; a median would let one slow
    stretch of a shared machine pull the roof under the kernels it is compared with.
    """
    arr = np.asarray(ns, dtype=float)
    return float(traffic_bytes / (arr.min() * 1e-9)) if arr.size else float("nan")


def _columns(name: str, values: list[Interval]) -> dict[str, list[float]]:
    return {name: [v.value for v in values], f"{name}_lo": [v.lo for v in values], f"{name}_hi": [v.hi for v in values]}


def _nearest_probe(probes: pd.DataFrame | None, rounds: Rounds | None, footprint: float) -> tuple[str, float] | None:
    """Label (in ``rounds``) and traffic of the probe nearest in footprint, if any probe was sampled."""
    if probes is None or probes.empty or rounds is None:
        return None
    present = probes[[PROBE_PREFIX + c in rounds.labels for c in probes["case_id"]]]
    if present.empty or not np.isfinite(footprint):
        return None
    row = present.iloc[int(np.argmin(np.abs(np.log(present["footprint_bytes"].to_numpy(float) / footprint))))]
    return PROBE_PREFIX + row["case_id"], float(row["traffic_bytes"])


def roof_share(rounds: Rounds, layout: str, traffic: float, probe: tuple[str, float], key: str,
               confidence: float) -> tuple[float, Interval]:
    """Percent of roof: the layout's median bandwidth over the probe's best round, paired by round."""
    label, probe_traffic = probe
    t = rounds.column(layout)
    p = rounds.column(label)
    point = 100.0 * (traffic / np.median(t)) / (probe_traffic / p.min())
    idx = rounds.resample(key)
    boot = 100.0 * (traffic / np.median(t[idx], axis=1)) / (probe_traffic / p[idx].min(axis=1))
    roof_gbps = probe_traffic / p.min()
    return roof_gbps, percentile(float(point), boot, confidence)


def _model_share(row: Any) -> Interval:
    """Percent of roof from the recorded roof alone (no probe samples to pair with): no interval."""
    share = 100.0 * (row.traffic_bytes / row.reported_median_ns) / row.roof_gbps if row.roof_gbps else np.nan
    return Interval(share, np.nan, np.nan)


def ranked_figures(frame: pd.DataFrame, rounds: Rounds | None, probes: pd.DataFrame | None, reference: str | None,
                   key: str, confidence: float) -> dict[str, Any]:
    """Columns of a ranked group (rows in rank order): every figure with its interval."""
    out: dict[str, Any] = {
        "gbps": (frame["traffic_bytes"] / frame["reported_median_ns"]).to_numpy(),
        "gflops": (frame["flops"] / frame["reported_median_ns"]).to_numpy(),
    }
    layouts = list(frame["layout"])
    leader = layouts[0]
    medians, vs_best, vs_ref, roof, roof_gbps = [], [], [], [], []
    for row in frame.itertuples():
        layout = row.layout
        if rounds is None or layout not in rounds.labels:
            medians.append(Interval(row.reported_median_ns, np.nan, np.nan))
            vs_best.append(Interval(row.reported_median_ns / frame["reported_median_ns"].iloc[0], np.nan, np.nan))
            ref = frame.loc[frame["layout"] == reference, "reported_median_ns"] if reference else pd.Series(dtype=float)
            vs_ref.append(Interval(float(ref.iloc[0]) / row.reported_median_ns, np.nan, np.nan) if len(ref) else NAN)
            roof.append(_model_share(row))
            roof_gbps.append(row.roof_gbps)
            continue
        # One bootstrap draw per group serves every figure of it (joint resampling of its rounds).
        medians.append(median_interval(rounds, layout, key, confidence))
        vs_best.append(ratio_interval(rounds, layout, leader, key, confidence))
        if reference is not None and reference in rounds.labels:
            vs_ref.append(ratio_interval(rounds, reference, layout, key, confidence))
        else:
            vs_ref.append(NAN)
        probe = _nearest_probe(probes, rounds, row.footprint_bytes)
        if probe is None:
            roof.append(_model_share(row))
            roof_gbps.append(row.roof_gbps)
        else:
            gbps, share_interval = roof_share(rounds, layout, row.traffic_bytes, probe, key, confidence)
            roof.append(share_interval)
            roof_gbps.append(gbps)
    out.update(_columns("reported_median_ns", medians))
    out.update(_columns("time_vs_best", vs_best))
    out.update(_columns("speedup_vs_reference", vs_ref))
    out.update(_columns("pct_roof", roof))
    out["roof_gbps"] = roof_gbps
    out["above_roof"] = [bool(np.isfinite(r.value) and r.value > 100.0) for r in roof]
    return out


#: A layout outside tier 1 whose best schedule moves its compulsory bytes at under this share of
#: the roof (upper end of the interval) is labelled schedule-limited: every layout of a kernel has
#: the same byte model, so its gap to tier 1 is not its memory traffic but the code that ran.
SCHEDULE_LIMITED_PCT = 50.0


def schedule_limited(frame: pd.DataFrame) -> list[bool]:
    """Per ranked entry: outside tier 1 and below ``SCHEDULE_LIMITED_PCT`` of the roof with confidence."""
    top = frame["tier"].min() if frame["tier"].notna().any() else None
    return [bool(top is not None and tier > top and np.isfinite(hi) and hi < SCHEDULE_LIMITED_PCT)
            for tier, hi in zip(frame["tier"], frame["pct_roof_hi"])]
