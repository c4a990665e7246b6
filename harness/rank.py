"""Ranking: which layout wins each kernel, in tiers, with thread scaling and the kernel mix.

Definitions (also in the README):

* Rounds of a group are split by position: even-numbered measured rounds *choose*, odd ones
  *report*. Each layout's best schedule is the one with the lowest median over the choosing
  rounds; every figure shown for the layout comes from the reporting rounds, so a schedule
  that was merely lucky is not rewarded for its luck.
* Tiers: order the layouts by their choosing-round median. The first remaining layout leads a
  new tier. Each other remaining layout is compared with the leader, paired by round: the
  per-round log-ratios d = log(t_layout / t_leader), shifted by log(1 + floor), go to a
  one-sided Wilcoxon signed-rank test ("slower than the leader by more than the floor").
  Holm's correction runs across the comparisons of that step. Layouts not separated at level
  alpha join the leader's tier; the rest wait for the next step. Indistinguishability is not
  transitive, so a tier is exactly "the leader and what cannot be told apart from it".
* Ties for a recommendation go to the simpler layout (no tiling, no padding, no offset).
"""

from __future__ import annotations

import math
import sys
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from harness.plan import ARROW, CONVERT
from harness.stats import holm, wilcoxon_greater
from harness.store import RunStore, RunStoreError
from kernels.errors import StridewiseError
from kernels.layout import parse_layout

GROUP_KEYS = ["machine", "kernel", "grid", "dtype", "threads"]


@dataclass(frozen=True)
class RankOptions:
    alpha: float = 0.05
    floor: float = 0.03  # minimum practical difference, as a fraction
    reference: str | None = None  # layout speedups are also given against
    mix: dict[str, float] | None = None  # kernel weights; None: from the suites


@dataclass
class Runs:
    """Cases and measured samples of one or more run directories, labelled by machine."""

    cases: pd.DataFrame
    samples: pd.DataFrame
    metadata: dict[str, dict[str, Any]]  # machine id -> metadata (the first run seen)


def load_runs(paths: list[str]) -> Runs:
    cases_list, samples_list, meta = [], [], {}
    for path in paths:
        store = RunStore(Path(path))
        md = store.metadata()
        machine = md.get("fingerprint", {}).get("machine_id", Path(path).name)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            cases, samples = store.cases(), store.samples()
        for w in caught:
            print(f"stridewise: warning: {w.message}", file=sys.stderr)
        if cases.empty:
            raise RunStoreError(f"{path} holds no cases")
        cases = cases.assign(machine=machine, run=str(path))
        samples = samples.assign(machine=machine, run=str(path))
        cases_list.append(cases)
        samples_list.append(samples[samples["phase"] == "measure"])
        meta.setdefault(machine, md)
    return Runs(pd.concat(cases_list, ignore_index=True), pd.concat(samples_list, ignore_index=True), meta)


def _is_plain(layout: str) -> bool:
    try:
        return parse_layout(layout).is_plain
    except StridewiseError:
        return False


def _split_rounds(rounds: list[int]) -> tuple[set[int], set[int]]:
    ordered = sorted(rounds)
    if len(ordered) < 4:  # too few to split: both halves use every round (noted in the report)
        return set(ordered), set(ordered)
    return set(ordered[0::2]), set(ordered[1::2])


def tiers(per_round: dict[str, pd.Series], order: list[str], alpha: float, floor: float) -> dict[str, int]:
    """Tier number (1 = fastest) of each layout; see the module docstring for the algorithm."""
    remaining = list(order)
    out: dict[str, int] = {}
    tier = 0
    shift = math.log1p(floor)
    while remaining:
        tier += 1
        leader, others = remaining[0], remaining[1:]
        out[leader] = tier
        pvals = []
        for layout in others:
            joined = pd.concat([per_round[layout], per_round[leader]], axis=1, join="inner").dropna()
            d = np.log(joined.iloc[:, 0].to_numpy(float)) - np.log(joined.iloc[:, 1].to_numpy(float))
            pvals.append(wilcoxon_greater(d - shift)[1] if d.size else 1.0)
        adjusted = holm(pvals)
        separated = []
        for layout, p in zip(others, adjusted):
            if p < alpha:
                separated.append(layout)
            else:
                out[layout] = tier
        remaining = separated
    return out


def rank_group(cases: pd.DataFrame, samples: pd.DataFrame, options: RankOptions) -> pd.DataFrame:
    """Ranked layouts of one group (one kernel, grid, dtype, thread count, machine)."""
    par = cases[(cases["build"] == "parallel") & (cases["status"] == "ok")]
    if par.empty:
        return pd.DataFrame()
    smp = samples[samples["case_id"].isin(par["case_id"])]
    if smp.empty:  # summary-only import: rank on recorded medians, no tiers
        rows = []
        for layout, lc in par.groupby("layout"):
            best = lc.sort_values("median_ns").iloc[0]
            rows.append({"layout": layout, "schedule": best["schedule"], "median_ns": best["median_ns"], "iqr_rel": np.nan,
                         "tier": np.nan, "rounds": 0, "case": best})
        return _finish(pd.DataFrame(rows), options)
    choose, report = _split_rounds(list(smp["round"].unique()))
    by_case = {cid: g.set_index("round")["ns"] for cid, g in smp.groupby("case_id")}
    rows, per_round, choose_median = [], {}, {}
    for layout, lc in par.groupby("layout"):
        best, best_med = None, math.inf
        for _, case in lc.iterrows():
            s = by_case.get(case["case_id"])
            if s is None:
                continue
            med = float(s[s.index.isin(choose)].median())
            if med < best_med:
                best, best_med = case, med
        if best is None:
            continue
        s = by_case[best["case_id"]]
        rep = s[s.index.isin(report)]
        per_round[layout] = rep
        choose_median[layout] = best_med
        q75, q25 = np.percentile(rep.to_numpy(float), [75, 25])
        rows.append({"layout": layout, "schedule": best["schedule"], "median_ns": float(rep.median()),
                     "iqr_rel": float((q75 - q25) / rep.median()), "rounds": int(rep.size), "case": best})
    frame = pd.DataFrame(rows)
    order = sorted(choose_median, key=lambda k: (choose_median[k], not _is_plain(k)))
    tier_of = tiers(per_round, order, options.alpha, options.floor)
    frame["tier"] = frame["layout"].map(tier_of)
    frame["split"] = "halves" if choose != report else "all rounds (too few to split)"
    return _finish(frame, options)


def _finish(frame: pd.DataFrame, options: RankOptions) -> pd.DataFrame:
    case = frame.pop("case")
    frame["traffic_bytes"] = [c["traffic_bytes"] for c in case]
    frame["flops"] = [c["flops"] for c in case]
    frame["roof_gbps"] = [c.get("roof_gbps", np.nan) for c in case]
    frame["overhead_bound"] = [str(c.get("overhead_bound")) == "True" for c in case]
    frame["vectorised"] = [c.get("vectorised") for c in case]
    frame["gbps"] = frame["traffic_bytes"] / frame["median_ns"]
    frame["pct_roof"] = 100 * frame["gbps"] / frame["roof_gbps"]
    frame["gflops"] = frame["flops"] / frame["median_ns"]
    frame["speedup_vs_slowest"] = frame["median_ns"].max() / frame["median_ns"]
    if options.reference is not None and options.reference in set(frame["layout"]):
        ref = float(frame.loc[frame["layout"] == options.reference, "median_ns"].iloc[0])
        frame["speedup_vs_reference"] = ref / frame["median_ns"]
    else:
        frame["speedup_vs_reference"] = np.nan
    frame["plain"] = frame["layout"].map(_is_plain)
    frame = frame.sort_values(["tier", "median_ns"], na_position="last").reset_index(drop=True)
    frame["rank"] = np.arange(1, len(frame) + 1)
    return frame.drop(columns=["traffic_bytes", "flops"])


@dataclass
class Ranking:
    """Everything the reports show."""

    table: pd.DataFrame  # one row per ranked entry (group keys + layout figures)
    scaling: pd.DataFrame  # per layout and thread count: speedup over 1 thread, efficiency
    flips: list[str]  # sentences where the winner changes with thread count
    mix: list[dict[str, Any]]  # per (machine, grid, dtype, threads): best single layout and switching
    machine_diffs: pd.DataFrame  # winners that differ between machines
    failed: pd.DataFrame
    runs: Runs
    options: RankOptions


def rank_runs(runs: Runs, options: RankOptions) -> Ranking:
    cases = runs.cases
    kernels = cases[(cases["kernel"] != "triad") & (cases["kernel"] != CONVERT)]
    tables = []
    for key, grp in kernels.groupby(GROUP_KEYS, sort=False):
        ranked = rank_group(grp, runs.samples[runs.samples["case_id"].isin(grp["case_id"]) & (runs.samples["machine"] == key[0])], options)
        if ranked.empty:
            continue
        for name, value in zip(GROUP_KEYS, key):
            ranked[name] = value
        tables.append(ranked)
    if not tables:
        raise StridewiseError("no successful kernel cases to rank in the given run directories")
    table = pd.concat(tables, ignore_index=True)
    table = table[GROUP_KEYS + [c for c in table.columns if c not in GROUP_KEYS]]
    scaling, flips = _scaling(table, cases)
    failed = cases[(cases["status"] != "ok") & (cases["kernel"] != "triad")]
    return Ranking(table, scaling, flips, _mix(table, cases, runs, options), _machine_diffs(table), failed, runs, options)


def _scaling(table: pd.DataFrame, cases: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """Per layout and thread count: speedup over the same (threaded) build at 1 thread, parallel
    efficiency, and the ratio to the best single-threaded (parallel=False) build."""
    rows, flips = [], []
    for (machine, kernel, grid, dtype), grp in table.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        serial = cases[(cases["machine"] == machine) & (cases["kernel"] == kernel) & (cases["grid"] == grid)
                       & (cases["dtype"] == dtype) & (cases["build"] == "serial") & (cases["status"] == "ok")]
        one = grp[grp["threads"] == 1].set_index("layout")["median_ns"]
        for _, r in grp.iterrows():
            base = float(one[r["layout"]]) if r["layout"] in one.index else np.nan
            ser = serial[serial["layout"] == r["layout"]]["median_ns"]
            speedup = base / r["median_ns"]
            rows.append({"machine": machine, "kernel": kernel, "grid": grid, "dtype": dtype, "layout": r["layout"],
                         "threads": r["threads"], "median_ns": r["median_ns"], "speedup": speedup,
                         "efficiency": speedup / r["threads"],
                         "vs_serial_build": float(ser.min()) / r["median_ns"] if len(ser) else np.nan})
        winners = {int(t): g.iloc[0]["layout"] for t, g in grp.groupby("threads")}
        if len(set(winners.values())) > 1:
            text = ", ".join(f"`{w}` at {t} thread(s)" for t, w in sorted(winners.items()))
            flips.append(f"{kernel} ({grid}, {dtype}, machine {machine}): the winner changes with threads: {text}.")
    return pd.DataFrame(rows), flips


def _mix_weights(runs: Runs, options: RankOptions, machine: str) -> dict[str, float]:
    if options.mix is not None:
        return options.mix
    mix = runs.metadata[machine].get("suite", {}).get("mix") or []
    return {k: float(v) for k, v in mix}


def _mix(table: pd.DataFrame, cases: pd.DataFrame, runs: Runs, options: RankOptions) -> list[dict[str, Any]]:
    out = []
    for (machine, grid, dtype, threads), grp in table.groupby(["machine", "grid", "dtype", "threads"], sort=False):
        weights = {k: w for k, w in _mix_weights(runs, options, machine).items() if w > 0}
        if not weights:
            continue
        missing = [k for k in weights if k not in set(grp["kernel"])]
        entry: dict[str, Any] = {"machine": machine, "grid": grid, "dtype": dtype, "threads": int(threads), "weights": weights}
        if missing:
            entry["note"] = f"not in the runs: {', '.join(missing)}"
            out.append(entry)
            continue
        med = {k: g.set_index("layout")["median_ns"] for k, g in grp.groupby("kernel") if k in weights}
        common = set.intersection(*(set(s.index) for s in med.values()))
        totals = {layout: sum(w * med[k][layout] for k, w in weights.items()) for layout in common}
        if not totals:
            entry["note"] = "no layout was run for every weighted kernel"
            out.append(entry)
            continue
        best_total = min(totals.values())
        near = [l for l, t in totals.items() if t <= best_total * (1 + options.floor)]
        single = min(near, key=lambda l: (not _is_plain(l), totals[l]))
        entry["single_layout"] = single
        entry["single_ns"] = totals[single]
        per_kernel = {}
        for k in weights:
            g = grp[grp["kernel"] == k]
            top = g[g["tier"] == g["tier"].min()] if g["tier"].notna().any() else g.head(1)
            per_kernel[k] = min(top["layout"], key=lambda l: (not _is_plain(l), float(top.set_index("layout").loc[l, "median_ns"])))
        entry["per_kernel"] = per_kernel
        compute = sum(w * med[k][per_kernel[k]] for k, w in weights.items())
        sequence = [per_kernel[k] for k in weights]
        hops = [(a, b) for a, b in zip(sequence, sequence[1:] + sequence[:1]) if a != b]
        conv = cases[(cases["machine"] == machine) & (cases["kernel"] == CONVERT) & (cases["grid"] == grid)
                     & (cases["dtype"] == dtype) & (cases["threads"] == threads) & (cases["build"] == "parallel")
                     & (cases["status"] == "ok")].set_index("layout")["median_ns"]
        unpriced = [f"{a}{ARROW}{b}" for a, b in hops if f"{a}{ARROW}{b}" not in conv.index]
        entry["switch_compute_ns"] = compute
        if unpriced:
            entry["switch_note"] = f"conversion {', '.join(unpriced)} not measured; add it to [conversions]"
        else:
            convert_ns = sum(float(conv[f"{a}{ARROW}{b}"]) for a, b in hops)
            entry["switch_ns"] = compute + convert_ns
            entry["convert_ns"] = convert_ns
            entry["switch_pays"] = bool(entry["switch_ns"] < entry["single_ns"] * (1 - options.floor))
        out.append(entry)
    return out


def _machine_diffs(table: pd.DataFrame) -> pd.DataFrame:
    if table["machine"].nunique() < 2:
        return pd.DataFrame()
    winners = table[table["rank"] == 1].pivot_table(index=["kernel", "grid", "dtype", "threads"], columns="machine",
                                                    values="layout", aggfunc="first")
    differs = winners[winners.nunique(axis=1) > 1]
    return differs.reset_index()
