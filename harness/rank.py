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
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from harness import metrics
from harness.intervals import CONFIDENCE, Rounds
from harness.cases import CaseKind, is_plain, of_kind, probe_schedule
from harness.stats import holm, slower_beyond, split_rounds
from harness.runs import Runs
from kernels.errors import StridewiseError

GROUP_KEYS = ["machine", "kernel", "grid", "dtype", "threads"]


@dataclass(frozen=True)
class RankOptions:
    alpha: float = 0.05
    floor: float = 0.03  # minimum practical difference, as a fraction
    reference: str | None = None  # layout speedups are also given against
    mix: dict[str, float] | None = None  # kernel weights; None: from the suites
    confidence: float = CONFIDENCE  # two-sided level of every interval


def tiers(per_round: dict[str, pd.Series], order: list[str], alpha: float, floor: float) -> dict[str, int]:
    """Tier number (1 = fastest) of each layout; see the module docstring for the algorithm."""
    remaining = list(order)
    out: dict[str, int] = {}
    tier = 0
    while remaining:
        tier += 1
        leader, others = remaining[0], remaining[1:]
        out[leader] = tier
        pvals = []
        for layout in others:
            joined = pd.concat([per_round[layout], per_round[leader]], axis=1, join="inner").dropna()
            pvals.append(slower_beyond(joined.iloc[:, 0].to_numpy(float), joined.iloc[:, 1].to_numpy(float), floor))
        adjusted = holm(pvals)
        separated = []
        for layout, p in zip(others, adjusted):
            if p < alpha:
                separated.append(layout)
            else:
                out[layout] = tier
        remaining = separated
    return out


def rank_group(cases: pd.DataFrame, samples: pd.DataFrame, options: RankOptions,
               probes: pd.DataFrame | None = None) -> tuple[pd.DataFrame, Rounds | None]:
    """Ranked layouts of one group (one kernel, grid, dtype, thread count, machine), and the
    reporting rounds of each layout's chosen case (plus the group's roof probes) for intervals."""
    par = cases[(cases["build"] == "parallel") & (cases["status"] == "ok")]
    if par.empty:
        return pd.DataFrame(), None
    smp = samples[samples["case_id"].isin(par["case_id"])]
    if smp.empty:  # summary-only import: rank on recorded medians, no tiers, no intervals
        rows = []
        for layout, lc in par.groupby("layout"):
            best = lc.sort_values("median_ns").iloc[0]
            rows.append({"layout": layout, "schedule": best["schedule"], "reported_median_ns": best["median_ns"], "iqr_rel": np.nan,
                         "tier": np.nan, "rounds": 0, "case": best})
        return _finish(pd.DataFrame(rows), None, None, options), None
    choose, report = map(set, split_rounds(list(smp["round"].unique())))
    by_serial = {cid: g.set_index("round")["ns"] for cid, g in samples[samples["build"] == "serial"].groupby("case_id")} \
        if "build" in samples else {}
    by_case = {cid: g.set_index("round")["ns"] for cid, g in smp.groupby("case_id")}
    blocks = smp.drop_duplicates("round").set_index("round")["block"] if "block" in smp else None
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
        median, iqr = metrics.median_and_iqr(rep.to_numpy(float))
        rows.append({"layout": layout, "schedule": best["schedule"], "reported_median_ns": median,
                     "iqr_rel": iqr / median, "rounds": int(rep.size), "choose_median_ns": best_med, "case": best})
    frame = pd.DataFrame(rows)
    order = sorted(choose_median, key=lambda k: (choose_median[k], not is_plain(k)))
    tier_of = tiers(per_round, order, options.alpha, options.floor)
    frame["tier"] = frame["layout"].map(tier_of)
    frame["split"] = "halves" if choose != report else "all rounds (too few to split)"
    series = dict(per_round)
    serial = cases[(cases["build"] == "serial") & (cases["status"] == "ok")]
    serial_pick: dict[str, tuple[float, str]] = {}
    for layout, lc in serial.groupby("layout"):
        picks = [(float(by_serial[c][by_serial[c].index.isin(choose)].median()), c, sched)
                 for c, sched in zip(lc["case_id"], lc["schedule"]) if c in by_serial]
        if picks:
            med, cid, sched = min(picks)
            series[metrics.SERIAL_PREFIX + layout] = by_serial[cid].loc[lambda x: x.index.isin(report)]
            serial_pick[layout] = (med, sched)
    # The layout's best 1-thread code, chosen on the choosing rounds like its schedule: the threaded
    # build or the parallel=False build, whichever is faster there (the speedup basis of scaling).
    frame["serial_schedule"] = frame["layout"].map(lambda l: serial_pick.get(l, (np.nan, None))[1])
    frame["serial_choose_median_ns"] = frame["layout"].map(lambda l: serial_pick.get(l, (np.nan, None))[0])
    if probes is not None and not probes.empty:
        for cid, g in samples[samples["case_id"].isin(probes["case_id"])].groupby("case_id"):
            series[metrics.PROBE_PREFIX + cid] = g.set_index("round")["ns"].loc[lambda x: x.index.isin(report)]
    first = par.iloc[0]
    name = f"{first.get('machine', '')}|{first['kernel']}|{first['grid']}|{first['dtype']}|{first['threads']}"
    rounds = Rounds.from_series(series, blocks, name)
    return _finish(frame, rounds, probes, options), rounds


def _finish(frame: pd.DataFrame, rounds: Rounds | None, probes: pd.DataFrame | None, options: RankOptions) -> pd.DataFrame:
    case = frame.pop("case")
    frame["traffic_bytes"] = [c["traffic_bytes"] for c in case]
    frame["flops"] = [c["flops"] for c in case]
    frame["footprint_bytes"] = [c.get("footprint_bytes", np.nan) for c in case]
    frame["roof_gbps"] = [c.get("roof_gbps", np.nan) for c in case]
    frame["overhead_bound"] = [c.get("overhead_bound") is True for c in case]
    frame["vectorised"] = [c.get("vectorised") for c in case]
    frame["vector_code"] = [c.get("vector_code") for c in case]
    frame["vector_trip"] = [c.get("vector_trip") for c in case]
    frame["oversubscribed"] = [c.get("oversubscribed") is True for c in case]
    frame["plain"] = frame["layout"].map(is_plain)
    frame = frame.sort_values(["tier", "reported_median_ns"], na_position="last").reset_index(drop=True)
    frame["rank"] = np.arange(1, len(frame) + 1)
    key = rounds.name if rounds is not None else ""
    frame = frame.assign(**metrics.ranked_figures(frame, rounds, probes, options.reference, key, options.confidence))
    frame["schedule_limited"] = metrics.schedule_limited(frame)
    return frame


@dataclass
class Ranking:
    """Everything the reports show."""

    table: pd.DataFrame  # one row per ranked entry (group keys + layout figures)
    scaling: pd.DataFrame  # per layout and thread count: speedup over 1 thread, efficiency
    flips: list[str]  # sentences on whether the winner changes with thread count
    mix: list[dict[str, Any]]  # per (machine, grid, dtype, threads): best single layout and switching
    machine_diffs: pd.DataFrame  # winners that differ between machines
    failed: pd.DataFrame
    runs: Runs
    options: RankOptions
    rounds: dict[tuple[Any, ...], Rounds]  # group key -> reporting rounds of each ranked layout
    repetitions: pd.DataFrame  # per group with several runs or repetitions: spread and agreement
    stages: pd.DataFrame = field(default_factory=pd.DataFrame)  # whole kernels beside the sum of their stages


def _probes_of(cases: pd.DataFrame, key: tuple[Any, ...]) -> pd.DataFrame:
    machine, kernel, grid, dtype, threads = key
    return cases[of_kind(cases, CaseKind.PROBE) & (cases["schedule"] == probe_schedule(kernel)) & (cases["machine"] == machine)
                 & (cases["grid"] == grid) & (cases["dtype"] == dtype) & (cases["threads"] == threads)]


def rank_runs(runs: Runs, options: RankOptions) -> Ranking:
    from harness.mix import kernel_mix
    from harness.scaling import scaling_and_flips
    from harness.stages import stage_comparison

    cases = runs.cases
    kernels = cases[of_kind(cases, CaseKind.KERNEL)]
    tables, rounds = [], {}
    for key, grp in kernels.groupby(GROUP_KEYS, sort=False):
        probes = _probes_of(cases, key)
        wanted = set(grp["case_id"]) | set(probes["case_id"])  # serial builds are in grp
        mine = runs.samples[runs.samples["case_id"].isin(wanted) & (runs.samples["machine"] == key[0])]
        looks = runs.looks(key[0])
        group_options = replace(options, alpha=options.alpha / looks)
        ranked, group_rounds = rank_group(grp, mine, group_options, probes)
        ranked["looks"] = looks
        if ranked.empty:
            continue
        for name, value in zip(GROUP_KEYS, key):
            ranked[name] = value
        tables.append(ranked)
        if group_rounds is not None:
            rounds[key] = group_rounds
    if not tables:
        raise StridewiseError("no successful kernel cases to rank in the given run directories")
    table = pd.concat(tables, ignore_index=True)
    table = table[GROUP_KEYS + [c for c in table.columns if c not in GROUP_KEYS]]
    scaling, flips = scaling_and_flips(table, rounds, options)
    failed = cases[(cases["status"] != "ok") & ~of_kind(cases, CaseKind.PROBE)]
    mix = kernel_mix(table, rounds, runs, options)
    looks = max((runs.looks(m) for m in table["machine"].unique()), default=1)
    stages = stage_comparison(cases, runs.samples, table, options.alpha / looks, options.floor, options.confidence)
    return Ranking(table, scaling, flips, mix, _machine_diffs(table), failed, runs, options, rounds,
                   repetition_agreement(table, rounds), stages)


def repetition_agreement(table: pd.DataFrame, rounds: dict[tuple[Any, ...], Rounds]) -> pd.DataFrame:
    """For groups measured in several runs or repetitions (blocks): between-run spread of each
    layout's median, Kendall's tau between the layout orders of every two blocks, and whether
    every block has the same leader."""
    rows = []
    for key, r in rounds.items():
        blocks = np.unique(r.blocks)
        layouts = [l for l in table[(table[GROUP_KEYS] == pd.Series(dict(zip(GROUP_KEYS, key)))).all(axis=1)]["layout"]
                   if l in r.labels]
        if blocks.size < 2 or len(layouts) < 2:
            continue
        from scipy.stats import kendalltau  # imported here: it takes seconds, and most reports need none

        medians = np.array([[np.median(r.column(l)[r.blocks == b]) for l in layouts] for b in blocks])
        taus = [kendalltau(medians[i], medians[j]).statistic for i in range(len(blocks)) for j in range(i + 1, len(blocks))]
        leaders = {layouts[int(np.argmin(m))] for m in medians}
        spread = medians.max(axis=0) / medians.min(axis=0)
        rows.append({**dict(zip(GROUP_KEYS, key)), "blocks": int(blocks.size), "tau_min": float(np.nanmin(taus)),
                     "tau_median": float(np.nanmedian(taus)), "same_leader": len(leaders) == 1,
                     "leaders": ", ".join(sorted(leaders)), "spread_max": float(spread.max()),
                     "spread_layout": layouts[int(np.argmax(spread))]})
    return pd.DataFrame(rows)


def _machine_diffs(table: pd.DataFrame) -> pd.DataFrame:
    if table["machine"].nunique() < 2:
        return pd.DataFrame()
    winners = table[table["rank"] == 1].pivot_table(index=["kernel", "grid", "dtype", "threads"], columns="machine",
                                                    values="layout", aggfunc="first")
    differs = winners[winners.nunique(axis=1) > 1]
    return differs.reset_index()
