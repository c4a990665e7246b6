"""Pieces of the ranking report: number and interval formatting, and the sections after the
per-group tables (run-to-run agreement, thread scaling, kernel mix, failed cases)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from tabulate import tabulate

from harness.intervals import Interval
from harness.rank import Ranking


def fmt_number(value: Any, spec: str) -> str:
    if value is None or (isinstance(value, float) and (np.isnan(value) or np.isinf(value))):
        return ""
    return format(value, spec)


def fmt_interval(row: Any, name: str, spec: str, scale: float = 1.0) -> str:
    """A figure with its interval from a row's ``name``, ``name_lo``, ``name_hi`` columns."""
    value = row.get(name) if hasattr(row, "get") else None
    lo, hi = row.get(f"{name}_lo", np.nan), row.get(f"{name}_hi", np.nan)
    if value is None or not np.isfinite(value):
        return ""
    return Interval(value * scale, lo * scale, hi * scale).text(spec)


def repetition_section(r: Ranking) -> list[str]:
    rep = r.repetitions
    if rep is None or rep.empty:
        return []
    out = ["## Run-to-run agreement", "",
           "Groups measured in several runs or repetitions (`sweep --repeat N`, or several run directories of one "
           "machine). Intervals above pool them, resampling runs and then rounds within runs, so they include the "
           "between-run spread; the tiers' paired tests pool the rounds. Spread: the largest ratio between one "
           "layout's medians in two runs. Kendall's tau: agreement of the layout orders of two runs (1 = same order).",
           ""]
    rows = [[e["kernel"], e["grid"], e["dtype"], int(e["threads"]), int(e["blocks"]),
             f"{e['spread_max']:.2f}x ({e['spread_layout']})", f"{e['tau_min']:.2f}", f"{e['tau_median']:.2f}",
             "yes" if e["same_leader"] else f"no: {e['leaders']}"] for _, e in rep.iterrows()]
    out.append(tabulate(rows, headers=["kernel", "grid", "dtype", "threads", "runs", "largest spread", "tau (min)",
                                       "tau (median)", "same leader in every run"], tablefmt="github", disable_numparse=True))
    held = int(rep["same_leader"].sum())
    out += ["", f"The leader held in every run for {held} of {len(rep)} group(s)."]
    return out + [""]


def scaling_section(r: Ranking) -> list[str]:
    if r.scaling.empty or r.scaling["threads"].nunique() < 2:
        return []
    out = ["## Thread scaling", ""]
    out += [f"- {f}" for f in r.flips]
    out += ["", "Speedup is over the layout's best 1-thread code: the faster, on the choosing rounds, of its best "
            "threaded schedule at 1 thread and its best parallel=False build (column `1-thread basis`); the t-thread "
            "figure is its best threaded schedule at t. Efficiency is speedup over threads. `inconclusive`: the "
            "interval reaches both below 1 and above the thread count; `superlinear`: the whole interval is above "
            "the thread count. Oversubscribed thread counts are left out.", ""]
    rows = [[s["kernel"], s["layout"], int(s["threads"]), s["basis_1thread"] or "", s["schedule"],
             fmt_number(s["reported_median_ns"] / 1e6, ".4g"), fmt_interval(s, "speedup", ".2f"), fmt_interval(s, "efficiency", ".0%"),
             s["flags"]]
            for _, s in r.scaling[r.scaling["threads"] > 1].iterrows()]
    out.append(tabulate(rows, headers=["kernel", "layout", "threads", "1-thread basis", "t-thread schedule", "median ms",
                                       "speedup", "efficiency", "flags"], tablefmt="github", disable_numparse=True))
    return out + [""]


def mix_section(r: Ranking) -> list[str]:
    if not r.mix:
        return []
    conf = f"{r.options.confidence:.0%}"
    out = ["## Kernel mix", ""]
    for m in r.mix:
        weights = ", ".join(f"{k} x{w:g}" for k, w in m["weights"].items())
        out.append(f"### {m['grid']}, {m['dtype']}, {m['threads']} thread(s) (weights: {weights})")
        out.append("")
        if "note" in m:
            out += [f"Cannot rank the mix: {m['note']}.", ""]
            continue
        single = Interval(m["single_ns"] / 1e6, m.get("single_lo", np.nan) / 1e6, m.get("single_hi", np.nan) / 1e6)
        near = m.get("near_single") or []
        within = f" (within {r.options.floor:.0%} of it: {', '.join(f'`{l}`' for l in near)})" if near else ""
        out.append(f"- Best single layout: `{m['single_layout']}`, {single.text('.3f')} ms per step{within}.")
        per = ", ".join(f"{k}: `{v}`" for k, v in m["per_kernel"].items())
        out.append(f"- Best layout per kernel: {per}; {m['switch_compute_ns'] / 1e6:.3f} ms of kernels per step.")
        if "switch_note" in m:
            out.append(f"- Switching cannot be priced: {m['switch_note']}.")
        else:
            ratio = Interval(m.get("switch_ratio", np.nan), m.get("switch_ratio_lo", np.nan), m.get("switch_ratio_hi", np.nan))
            verdict = {True: "it pays off", False: "it does not pay off",
                       None: f"cannot tell whether it pays off at {conf}"}[m.get("switch_pays")]
            ratio_text = f"{ratio.text('.2f')} times the single layout's step" if np.isfinite(ratio.value) else "no interval"
            out.append(f"- With {m['convert_ns'] / 1e6:.3f} ms of measured conversions, switching costs "
                       f"{m['switch_ns'] / 1e6:.3f} ms per step, {ratio_text}: {verdict}.")
        out.append("")
    return out


def failed_section(failed: pd.DataFrame) -> list[str]:
    """Markdown lines listing cases that failed validation or raised (with a machine column when known)."""
    columns = [c for c in ("machine", "kernel", "schedule", "build", "layout", "dtype", "threads", "status", "message") if c in failed]
    rows = [[f[c] for c in columns] for _, f in failed.iterrows()]
    return ["## Failed cases", "", tabulate(rows, headers=columns, tablefmt="github"), ""]


def machines_section(r: Ranking) -> list[str]:
    """Which layout wins on which machine, with each machine's tiers, and the best single layout."""
    from harness.pictures import across_machines

    groups = across_machines(r)
    if not groups:
        return []
    out = ["## Across machines", "",
           "Each layout's time over the best on each machine (`x best`, with its interval) and its tier there; the best "
           "single layout is the one whose worst slowdown over the machines is lowest.", ""]
    for g in groups:
        out.append(f"### {g['kernel']}, {g['grid']}, {g['dtype']}, {g['threads']} thread(s)")
        out.append("")
        rows = []
        for layout in g["layouts"]:
            row = [layout]
            for m in g["machines"]:
                c = g["cells"][(m, layout)]
                tier = "" if c.tier != c.tier else f", tier {int(c.tier)}"
                row.append(fmt_interval(c._asdict(), "time_vs_best", ".2f") + tier)
            rows.append(row)
        out.append(tabulate(rows, headers=["layout"] + [f"machine {m}" for m in g["machines"]], tablefmt="github",
                            disable_numparse=True))
        value, lo, hi = g["worst_slowdown"]
        bracket = f" [{lo:.2f}, {hi:.2f}]" if lo == lo else ""
        winners = "; ".join(f"`{w}` on {m}" for m, w in g["winners"].items())
        if set(g["winners"].values()) == {g["best_single"]}:
            verdict = f"`{g['best_single']}` is rank 1 on every machine."
        else:
            verdict = (f"Rank 1 per machine: {winners}. Best single layout across machines: `{g['best_single']}`, at most "
                       f"{value:.2f}x{bracket} the best layout's time on any machine (its worst: {g['worst_machine']}).")
        out += ["", verdict, ""]
    return out
