"""Rendering a Ranking as markdown (tabulate, GitHub pipe tables), CSV or JSON."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
from tabulate import tabulate

from harness.intervals import Interval
from harness.machine import numa_note
from harness.metrics import OVERHEAD_MULTIPLE, SCHEDULE_LIMITED_PCT
from harness.rank import Ranking
from harness.stages import stage_rows_for_export, stage_section
from harness.report_parts import (failed_section, fmt_interval, fmt_number, machines_section, mix_section,
                                  repetition_section, scaling_section)
from harness.store import RunMetadata, vector_flag

FAMILY_WORDS = {"columns": "column solves", "stencils": "stencils"}
TABLE_COLUMNS = ["rank", "tier", "layout", "schedule", "median ms", "IQR/median", "GB/s", "% roof", "GFLOP/s", "x best",
                 "x reference", "flags"]
FLAG_NOTES = {
    ">roof": "`>roof`: the kernel's bandwidth by its byte model is above the best same-footprint triad of its "
             "rounds. The byte model counts no write-allocate traffic (the STREAM convention), so a kernel that "
             "writes a smaller share of its bytes than the triad's 1 in 3 pays less of it than the triad does; "
             "where the interval includes 100 the excess is within noise.",
    "overhead-bound": f"`overhead-bound`: the median is under {OVERHEAD_MULTIPLE:g}x the empty kernel's dispatch and "
                      "fork/join time (the median over the group's cases, so one disturbed measurement moves it little).",
    "scalar": "`scalar`: the compiled code has no packed vector instructions.",
    "short-trip": "`short-trip`: the compiled code has packed vector instructions, but the inner loop that ran "
                  "is shorter than one vector of them (its trip count is in `vector_trip`), so the path that ran was scalar.",
    "oversubscribed": "`oversubscribed`: more threads than the run's usable physical cores, so threads shared a core; "
                      "left out of thread scaling.",
    "schedule-limited": "`schedule-limited`: outside tier 1, and even the upper end of its `% roof` interval is under "
                        f"{SCHEDULE_LIMITED_PCT:g}%: every layout moves the same compulsory bytes, so this gap is the code that "
                        "ran for the order (its best schedule), not the order's memory traffic; a better schedule may close it.",
}


def _headline(kernel: str, family: str, threads: int, grp: pd.DataFrame, confidence: float) -> str:
    best = grp.iloc[0]
    what = f"{kernel} {FAMILY_WORDS.get(family, '')}".strip()
    if len(grp) < 2:
        return f"At {threads} thread(s), only `{best['layout']}` ran for {what}."
    worst = grp.loc[grp["time_vs_best"].idxmax()]
    spread = Interval(worst["time_vs_best"], worst.get("time_vs_best_lo", np.nan), worst.get("time_vs_best_hi", np.nan))
    if np.isfinite(spread.lo):
        tail = f"takes {spread.value:.2f}x as long ({confidence:.0%} interval {spread.lo:.2f} to {spread.hi:.2f})"
    else:
        tail = f"takes {spread.value:.2f}x as long (no interval: no per-round samples)"
    if pd.isna(best["tier"]):
        return f"At {threads} thread(s), `{best['layout']}` has the lowest median for {what} (not tested); " \
               f"the slowest layout, `{worst['layout']}`, {tail}."
    tied = grp[grp["tier"] == best["tier"]]["layout"].tolist()
    if len(tied) == 1:
        return f"At {threads} thread(s), `{best['layout']}` runs best for {what}, separated from every other layout; " \
               f"the slowest layout, `{worst['layout']}`, {tail}."
    leader = best["layout"]
    names = ", ".join(f"`{t}`" for t in tied)
    tail = tail.replace("as long", f"as long as `{leader}`", 1)
    return (f"At {threads} thread(s), no single layout runs best for {what}: tier 1 holds {names}, which cannot be "
            f"told apart; the slowest layout, `{worst['layout']}`, {tail}.")


def _inversions(grp: pd.DataFrame) -> str | None:
    """Explain rows whose median is higher than that of a row ranked below them."""
    pairs = []
    rows = list(grp.itertuples())
    for i, a in enumerate(rows):
        for b in rows[i + 1:]:
            if pd.notna(a.tier) and pd.notna(b.tier) and a.tier < b.tier and a.reported_median_ns > b.reported_median_ns:
                pairs.append((a, b))
    if not pairs:
        return None
    a, b = pairs[0]
    more = f" ({len(pairs) - 1} more such pair(s))" if len(pairs) > 1 else ""
    return (f"Rank {a.rank} `{a.layout}` (tier {a.tier:.0f}) shows a higher median than rank {b.rank} `{b.layout}` "
            f"(tier {b.tier:.0f}){more}: tiers come from round-by-round tests against each tier's leader, not from "
            f"the medians. The paired test separates `{b.layout}` from the leader it was compared with, while "
            f"`{a.layout}` varies too much from round to round to be separated from its own (compare their x best "
            f"intervals, {Interval(a.time_vs_best, a.time_vs_best_lo, a.time_vs_best_hi).text('.2f')} and "
            f"{Interval(b.time_vs_best, b.time_vs_best_lo, b.time_vs_best_hi).text('.2f')}).")


def _power_note(grp: pd.DataFrame, alpha: float) -> str | None:
    """Say so when the rounds are too few for the paired test to separate anything (at the alpha
    the tiers used: divided by the looks of adaptive effort)."""
    n = int(grp["rounds"].min()) if "rounds" in grp and grp["rounds"].notna().all() else 0
    m = len(grp) - 1
    looks = int(grp["looks"].max()) if "looks" in grp else 1
    level = alpha / looks
    if m < 1 or n == 0 or m * 2.0**-n < level:
        return None
    needed = 2 * math.ceil(math.log2(m / level))
    per_look = f" (alpha {alpha:g} over {looks} looks)" if looks > 1 else ""
    return (f"**Too few rounds to separate layouts:** with {n} reporting rounds the smallest possible p-value is "
            f"{2.0**-n:.3g}, so {m} Holm-corrected comparisons can never reach {level:.3g}{per_look}; the tiers above "
            f"carry no information. Run at least {needed} measured rounds (timing.min_repeats).")


def _machine_header(machine: str, md: RunMetadata) -> list[str]:
    fp = md.fingerprint
    roofs = []
    for threads, info in sorted(md.workers.items(), key=lambda kv: int(kv[0])):
        roof = info.get("roof", {}).get("memory_roof_bytes_per_s")
        if roof:
            roofs.append(f"{threads}t {roof / 1e9:.1f} GB/s")
    comp = md.compile_totals
    lines = [
        f"Machine `{machine}`: {fp.get('cpu_model', '?')}, {fp.get('usable_cores', '?')} usable cores, "
        f"numba {fp.get('numba', '?')} on `{fp.get('numba_target', {}).get('cpu_name', '?')}`, "
        f"layer `{next(iter(md.workers.values()), {}).get('threading_layer', '?')}`; "
        f"memory roof {', '.join(roofs) or 'not measured'}; run `{md.suite_name}` "
        f"({md.status}), commit `{fp.get('commit') or 'unknown'}`, kernels `{fp.get('kernels_source_hash', '?')}`.",
    ]
    if comp:
        lines.append(
            f"Compiled {comp.get('compiled', 0)} specialisations in {comp.get('compile_seconds', 0):.1f} s, "
            f"loaded {comp.get('loaded', 0)} from cache."
        )
    note = numa_note(fp)
    if note:
        lines.append(note)
    return lines


def _looks_note(r: Ranking) -> str:
    looks = int(r.table["looks"].max()) if "looks" in r.table else 1
    if looks <= 1:
        return ""
    return (f" (adaptive effort was on: alpha is divided by the {looks} looks a group may take, "
            f"{r.options.alpha / looks:.3g} per comparison family)")


def _group_table(grp: pd.DataFrame) -> tuple[str, list[str]]:
    rows, used = [], []
    for _, e in grp.iterrows():
        flags = []
        if e["overhead_bound"]:
            flags.append("overhead-bound")
        if vector_flag(e):
            flags.append(vector_flag(e))
        if e.get("above_roof"):
            flags.append(">roof")
        if e.get("oversubscribed"):
            flags.append("oversubscribed")
        if e.get("schedule_limited"):
            flags.append("schedule-limited")
        used += flags
        rows.append([
            int(e["rank"]), fmt_number(e["tier"], ".0f"), e["layout"], e["schedule"], fmt_interval(e, "reported_median_ns", ".4g", 1e-6),
            fmt_number(e["iqr_rel"], ".1%"), fmt_number(e["gbps"], ".1f"), fmt_interval(e, "pct_roof", ".0f"), fmt_number(e["gflops"], ".2f"),
            fmt_interval(e, "time_vs_best", ".2f"), fmt_interval(e, "speedup_vs_reference", ".2f"), " ".join(flags),
        ])
    return tabulate(rows, headers=TABLE_COLUMNS, tablefmt="github", disable_numparse=True), used


def _overhead_note(cases: pd.DataFrame, key: tuple) -> str:
    """The robust empty-kernel time behind the overhead-bound flags of a group, with its spread."""
    from harness.metrics import group_overhead

    mine = cases[(cases[["machine", "kernel", "grid", "dtype", "threads"]] == pd.Series(dict(zip(
        ["machine", "kernel", "grid", "dtype", "threads"], key)))).all(axis=1)]
    stats = group_overhead(mine.to_dict("records")).get("parallel")
    if stats is None:
        return "Empty-kernel time: not recorded for this group."
    return (f"Empty-kernel time of this group (dispatch and fork/join): median {stats['median_ns'] / 1e3:.1f} µs over its "
            f"{stats['cases']} cases (quartiles {stats['q25_ns'] / 1e3:.1f}-{stats['q75_ns'] / 1e3:.1f} µs, largest "
            f"{stats['max_ns'] / 1e3:.1f} µs); `overhead-bound` marks medians under {OVERHEAD_MULTIPLE:g}x the median.")


def render_markdown(r: Ranking, title: str = "Layout ranking") -> str:
    opts = r.options
    out = [f"# {title}", ""]
    for machine, md in r.runs.metadata.items():
        out += _machine_header(machine, md)
        if not md.has_raw_samples:
            out.append(f"Imported from {md.raw['imported']['source']} without raw samples: ranked on the recorded medians, "
                       "without tiers, dispersion or intervals.")
    reference = f" `{opts.reference}`" if opts.reference else ""
    out += [
        "",
        f"Ranked on each layout's best schedule (chosen on even rounds, figures from odd rounds). Tiers: paired "
        f"one-sided Wilcoxon signed-rank tests against each tier's leader, Holm-corrected, alpha {opts.alpha:g}, "
        f"minimum practical difference {opts.floor:.0%}{_looks_note(r)}. Figures in brackets are {opts.confidence:.0%} intervals "
        f"(percentile bootstrap over rounds, paired within a group). `x best` is a layout's time over rank 1's; "
        f"`x reference` is the reference layout's{reference} time over the layout's; `% roof` is the median "
        f"bandwidth by the byte model over the best round of a same-footprint triad timed in the same rounds.",
        "",
    ]
    families = dict(zip(r.runs.cases["kernel"], r.runs.cases["family"]))
    flags_used: list[str] = []
    for key, grp in r.table.groupby(["machine", "kernel", "grid", "dtype", "threads"], sort=False):
        machine, kernel, grid, dtype, threads = key
        out.append(f"## {kernel}, {grid}, {dtype}, {threads} thread(s)" + (f", machine {machine}" if len(r.runs.metadata) > 1 else ""))
        out.append("")
        out.append(_headline(kernel, families.get(kernel, ""), int(threads), grp, opts.confidence))
        power = _power_note(grp, opts.alpha)
        if power:
            out += ["", power]
        if (grp["split"] != "halves").any() if "split" in grp else False:
            out.append("")
            out.append("Too few rounds to split: schedules were chosen and reported on the same rounds.")
        out.append("")
        table, used = _group_table(grp)
        flags_used += used
        out.append(table)
        inversion = _inversions(grp)
        if inversion:
            out += ["", inversion]
        if grp["overhead_bound"].any():
            out += ["", _overhead_note(r.runs.cases, key)]
        out.append("")
    notes = [FLAG_NOTES[f] for f in FLAG_NOTES if f in flags_used]
    if notes:
        out += ["Flags: " + " ".join(notes), ""]
    out += repetition_section(r)
    out += scaling_section(r)
    out += stage_section(r.stages, r.options.alpha, r.options.floor)
    out += mix_section(r)
    out += machines_section(r)
    if not r.failed.empty:
        out += failed_section(r.failed)
    return "\n".join(out)


EXPORT_COLUMNS = [
    "machine", "kernel", "grid", "dtype", "threads", "rank", "tier", "layout", "schedule",
    "reported_median_ns", "reported_median_ns_lo", "reported_median_ns_hi", "iqr_rel", "gbps", "roof_gbps",
    "pct_roof", "pct_roof_lo", "pct_roof_hi", "above_roof", "gflops",
    "time_vs_best", "time_vs_best_lo", "time_vs_best_hi",
    "speedup_vs_reference", "speedup_vs_reference_lo", "speedup_vs_reference_hi",
    "overhead_bound", "schedule_limited", "vectorised", "vector_code", "vector_trip", "oversubscribed", "plain", "rounds",
]
SCALING_EXPORT = ["speedup", "speedup_lo", "speedup_hi", "efficiency", "efficiency_lo", "efficiency_hi"]


def export_frame(r: Ranking) -> pd.DataFrame:
    """One row per ranked entry, every key a column (the CSV and JSON content)."""
    frame = r.table[[c for c in EXPORT_COLUMNS if c in r.table.columns]].copy()
    if not r.scaling.empty:
        sc = r.scaling[["machine", "kernel", "grid", "dtype", "layout", "threads", *SCALING_EXPORT]]
        frame = frame.merge(sc.rename(columns={c: c.replace("speedup", "speedup_vs_1thread") for c in SCALING_EXPORT}), how="left",
                            on=["machine", "kernel", "grid", "dtype", "layout", "threads"])
    return frame


def render(r: Ranking, fmt: str) -> str:
    if fmt == "md":
        return render_markdown(r)
    frame = export_frame(r)
    if fmt == "csv":
        return frame.to_csv(index=False)
    if fmt == "json":
        return json.dumps({"ranked": json.loads(frame.to_json(orient="records")), "mix": r.mix, "flips": r.flips,
                           "stages": stage_rows_for_export(r.stages)}, indent=2, default=str) + "\n"
    raise ValueError(f"unknown format {fmt}")
