"""Figures and report of a halo-exchange measurement: per layout and part, with intervals."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.halos import PARTS, TOTAL, HaloOptions
from harness.intervals import CONFIDENCE, Rounds, median_interval, ratio_interval
from harness.stats import holm, slower_beyond

FLOOR = 0.03  # the ranking's minimum practical difference


def slowest_rank(samples: list[tuple[Any, ...]]) -> pd.DataFrame:
    """Per round, layout and part, the slowest rank's time (ns); plus each round's total."""
    frame = pd.DataFrame(samples, columns=["rank", "round", "layout", "part", "ns"])
    worst = frame.groupby(["round", "layout", "part"])["ns"].max().unstack("part")
    worst[TOTAL] = worst[list(PARTS)].sum(axis=1)
    return worst


def figures(result: dict[str, Any], options: HaloOptions, alpha: float = 0.05, confidence: float = CONFIDENCE) -> list[dict[str, Any]]:
    """One row per layout and part: median µs, x best (paired by round) and whether the layout is
    separated from the best (one-sided Wilcoxon beyond the floor, Holm across layouts per part)."""
    worst = slowest_rank(result["samples"])
    itemsize = np.dtype(options.dtype).itemsize
    rows = []
    for part in (*PARTS, TOTAL):
        table = worst[part].unstack("layout").dropna()
        name = f"halos|{part}"
        rounds = Rounds(tuple(table.columns), table.to_numpy(float), np.zeros(len(table), dtype=int), name)
        medians = {layout: float(np.median(rounds.column(layout))) for layout in rounds.labels}
        best = min(medians, key=medians.get)
        others = [l for l in rounds.labels if l != best]
        p = dict(zip(others, holm([slower_beyond(rounds.column(l), rounds.column(best), FLOOR) for l in others])))
        for layout in sorted(rounds.labels, key=medians.get):
            pack_runs, unpack_runs, elements = result["runs"][layout]
            med = median_interval(rounds, layout, name, confidence)
            rows.append({
                "part": part, "layout": layout, "median_us": med.value / 1e3, "median_us_lo": med.lo / 1e3,
                "median_us_hi": med.hi / 1e3, **_ratio(rounds, layout, best, name, confidence),
                "separated": layout != best and p[layout] < alpha, "p_holm": p.get(layout, np.nan),
                "pack_runs": pack_runs, "unpack_runs": unpack_runs, "bytes": elements * itemsize,
                "rounds": len(table),
            })
    return rows


def _ratio(rounds: Rounds, layout: str, best: str, name: str, confidence: float) -> dict[str, float]:
    iv = ratio_interval(rounds, layout, best, name, confidence)
    return {"x_best": iv.value, "x_best_lo": iv.lo, "x_best_hi": iv.hi}


def render_markdown(rows: list[dict[str, Any]], result: dict[str, Any], options: HaloOptions) -> str:
    from tabulate import tabulate

    dims, e = result["dims"], options.interior
    out = ["# Halo exchange per layout", "",
           f"{result['ranks']} rank(s) on a periodic {dims[0]} x {dims[1]} process grid, each holding var={e.var}, z={e.z}, "
           f"y={e.y}, x={e.x} plus a halo of {options.halo}, {options.dtype}; {options.rounds} rounds after {options.warmup} "
           f"warm-up, layouts in a shuffled order per round, a barrier before each part, a round's figure the slowest "
           f"rank's. MPI: {result['library']}. Every face was checked against the neighbour's interior first.", "",
           "Figures in brackets are 95% intervals (percentile bootstrap over rounds, paired within a round); `x best` "
           f"is the layout's time over the part's best layout's; `separated`: slower than the best by more than "
           f"{FLOOR:.0%} (one-sided Wilcoxon signed-rank, Holm across the part's layouts, alpha 0.05). Runs: the "
           "contiguous copies packing (and unpacking) the four faces take in this layout.", ""]
    if result["ranks"] == 1:
        out += ["With one rank every neighbour is the rank itself: the exchange is MPI's copy to self.", ""]
    if result["nodes"] == 1 and result["ranks"] > result["cores"]:
        out += [f"**{result['ranks']} ranks on {result['cores']} usable cores:** ranks share cores, so each part's slowest "
                "rank includes time spent descheduled; the figures bound the cost from above and the layout order may "
                "reflect scheduling as much as memory order.", ""]
    if result["nodes"] == 1:
        out += ["All ranks ran on one node, so the exchange measures the MPI library's shared-memory path, not a network.", ""]
    failed = {l: err for l, err in result["errors"].items() if err != 0.0}
    for part in (*PARTS, TOTAL):
        out += [f"## {part}", ""]
        table = [[r["layout"], f"{r['median_us']:.4g} [{r['median_us_lo']:.4g}, {r['median_us_hi']:.4g}]",
                  f"{r['x_best']:.2f} [{r['x_best_lo']:.2f}, {r['x_best_hi']:.2f}]", "yes" if r["separated"] else "no",
                  f"{r['pack_runs']} / {r['unpack_runs']}", f"{r['bytes'] / 1e3:.4g}"]
                 for r in rows if r["part"] == part]
        out += [tabulate(table, headers=["layout", "median µs", "x best", "separated", "runs (pack / unpack)", "kB per rank"],
                         tablefmt="github", disable_numparse=True), ""]
    if failed:
        out += ["Not timed, their exchange did not reproduce the neighbours' interiors: "
                + ", ".join(f"`{l}` (largest difference {err:.3g})" for l, err in failed.items()), ""]
    return "\n".join(out)
