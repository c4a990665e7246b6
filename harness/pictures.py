"""The numbers behind every plot, computed from a Ranking (no matplotlib here, so they are testable).

Each function returns plain frames or dataclasses; ``harness.plots`` only draws them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from harness.roof import RoofCurve
from kernels.notation import parse_layout
from kernels.layout import axis_extent

#: The weighted time step's column key: a space, so no kernel name (letters, digits, '_') equals it.
STEP = "weighted step"


@dataclass(frozen=True)
class Heatmap:
    """Slowdown of each layout (rows, in rank order) against the best of each column."""

    machine: str
    grid: str
    dtype: str
    rows: list[str]
    columns: list[tuple[str, int]]  # (kernel or STEP, threads)
    slowdown: np.ndarray  # rows x columns; NaN where a layout did not run
    leading: np.ndarray  # rows x columns, bool: tier 1 (for the step: the best single layout and those near it)
    weights: dict[str, float]


def heatmaps(ranking: Any) -> list[Heatmap]:
    """One heatmap per (machine, grid, dtype): a column per kernel and thread count (``x best`` of
    the ranking table), and a column per thread count for the weighted step (each layout's step
    time over the best layout's) when the runs give kernel weights.

    Rows are in rank order: by the step column at the highest thread count when there is one,
    else by the geometric mean slowdown over the columns (a layout missing a column goes last).
    """
    table, out = ranking.table, []
    mixes = {(m["machine"], m["grid"], m["dtype"], m["threads"]): m for m in ranking.mix if m.get("totals")}
    for (machine, grid, dtype), grp in table.groupby(["machine", "grid", "dtype"], sort=False):
        kernels = list(dict.fromkeys(grp["kernel"]))
        counts = sorted(int(t) for t in grp["threads"].unique())
        layouts = sorted(set(grp["layout"]))
        columns = [(k, t) for t in counts for k in kernels if ((grp["kernel"] == k) & (grp["threads"] == t)).any()]
        step_counts = [t for t in counts if (machine, grid, dtype, t) in mixes]
        columns += [(STEP, t) for t in step_counts]
        slow = np.full((len(layouts), len(columns)), np.nan)
        lead = np.zeros(slow.shape, dtype=bool)
        for j, (kernel, threads) in enumerate(columns):
            if kernel == STEP:
                mix = mixes[(machine, grid, dtype, threads)]
                best = min(mix["totals"].values())
                near = {mix.get("single_layout"), *mix.get("near_single", [])}
                for i, layout in enumerate(layouts):
                    if layout in mix["totals"]:
                        slow[i, j] = mix["totals"][layout] / best
                        lead[i, j] = layout in near
                continue
            col = grp[(grp["kernel"] == kernel) & (grp["threads"] == threads)].set_index("layout")
            top = col["tier"].min()
            for i, layout in enumerate(layouts):
                if layout in col.index:
                    slow[i, j] = col.loc[layout, "time_vs_best"]
                    lead[i, j] = bool(col.loc[layout, "tier"] == top) if pd.notna(top) else col.loc[layout, "rank"] == 1
        if step_counts:
            key = slow[:, columns.index((STEP, step_counts[-1]))]
        else:
            with np.errstate(invalid="ignore"):
                key = np.exp(np.log(slow).mean(axis=1))  # NaN (last) where a column is missing
        order = sorted(range(len(layouts)), key=lambda i: (np.isnan(key[i]), key[i], layouts[i]))
        weights = next((m["weights"] for (mm, g, d, _), m in mixes.items() if (mm, g, d) == (machine, grid, dtype)), {})
        out.append(Heatmap(machine, grid, dtype, [layouts[i] for i in order], columns, slow[order], lead[order], weights))
    return out


def roof_curves(ranking: Any, machine: str) -> dict[int, RoofCurve]:
    """The measured triad curves of a machine's (first) run, by thread count."""
    md = ranking.runs.metadata.get(machine)
    workers = md.workers if md is not None else {}
    return {int(t): RoofCurve.from_dict(w["roof"]) for t, w in workers.items() if "roof" in w}


def fma_ceilings(ranking: Any, machine: str) -> dict[tuple[int, str], float]:
    """Measured FMA ceilings (flop/s) of a machine's run, by (threads, dtype)."""
    md = ranking.runs.metadata.get(machine)
    workers = md.workers if md is not None else {}
    return {(int(t), dt): c["flops_per_s"] for t, w in workers.items() for dt, c in (w.get("compute_roof") or {}).items()}


def _intensity(table: pd.DataFrame) -> pd.Series:
    return table["flops"] / table["traffic_bytes"]


def memory_bound(ranking: Any, machine: str, kernel_rows: pd.DataFrame) -> bool:
    """True when the kernel's intensity (flop/byte, byte model) is under the ridge point of the
    1-thread roofline (FMA ceiling over memory roof); True when either is unmeasured."""
    curves, peaks = roof_curves(ranking, machine), fma_ceilings(ranking, machine)
    dtype = kernel_rows["dtype"].iloc[0]
    if 1 not in curves or (1, dtype) not in peaks:
        return True
    return float(_intensity(kernel_rows).median()) < peaks[(1, dtype)] / curves[1].memory_roof()


def scaling_ceilings(ranking: Any) -> pd.DataFrame:
    """Per (machine, kernel, grid, dtype, threads) of a memory-bound kernel: the speedup its
    bandwidth allows, roof(t) / roof(1) of the run's triad curves at the kernel's footprint."""
    rows = []
    for (machine, kernel, grid, dtype), grp in ranking.table.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        curves = roof_curves(ranking, machine)
        if 1 not in curves or not memory_bound(ranking, machine, grp):
            continue
        footprint = float(grp["footprint_bytes"].median())
        for threads in sorted(int(t) for t in grp["threads"].unique()):
            if threads in curves:
                rows.append({"machine": machine, "kernel": kernel, "grid": grid, "dtype": dtype, "threads": threads,
                             "footprint_bytes": footprint,
                             "ceiling": curves[threads].at(footprint) / curves[1].at(footprint)})
    return pd.DataFrame(rows)


def plateaus(curve: RoofCurve, min_points: int = 3) -> list[tuple[int, int, float]]:
    """The curve's levels between knees: (first footprint, last footprint, median bandwidth). A
    stretch of fewer than ``min_points`` points is a transition, not a level: it joins the next."""
    edges = set(curve.knees())
    out, start = [], 0
    last = len(curve.footprints) - 1
    for i, fp in enumerate(curve.footprints):
        if (fp in edges and i - start + 1 >= min_points) or i == last:
            out.append((curve.footprints[start], fp, float(np.median(curve.bandwidths[start:i + 1]))))
            start = i + 1
    return out


def roofline_points(ranking: Any) -> pd.DataFrame:
    """Every ranked layout at its kernel's intensity: GFLOP/s with the interval of its median."""
    t = ranking.table
    out = t[["machine", "kernel", "grid", "dtype", "threads", "layout", "tier"]].copy()
    out["intensity"] = _intensity(t)
    out["gflops"] = t["flops"] / t["reported_median_ns"]
    out["gflops_lo"] = t["flops"] / t.get("reported_median_ns_hi", t["reported_median_ns"])
    out["gflops_hi"] = t["flops"] / t.get("reported_median_ns_lo", t["reported_median_ns"])
    return out


def forest(ranking: Any) -> pd.DataFrame:
    """Speedup of each layout over the reference layout, with its interval (empty without one)."""
    t = ranking.table
    if not ranking.options.reference:
        return pd.DataFrame()
    cols = ["machine", "kernel", "grid", "dtype", "threads", "layout", "speedup_vs_reference",
            "speedup_vs_reference_lo", "speedup_vs_reference_hi"]
    return t[t["speedup_vs_reference"].notna()][cols].reset_index(drop=True)


def per_point(ranking: Any) -> pd.DataFrame:
    """Time per grid point of every ranked layout against the bytes one thread works through."""
    from kernels.grid import Extents

    t = ranking.table
    rows = []
    for r in t.itertuples():
        ext = Extents.parse(r.grid)
        rows.append({"machine": r.machine, "kernel": r.kernel, "threads": int(r.threads), "layout": r.layout,
                     "grid": r.grid, "dtype": r.dtype,
                     "block_bytes": block_bytes(r.layout, ext, float(r.footprint_bytes), int(r.threads)),
                     "ns_per_point": r.reported_median_ns / ext.points})
    return pd.DataFrame(rows)


def block_bytes(layout: str, extents: Any, footprint_bytes: float, threads: int) -> float:
    """Bytes one thread works through at a time: one horizontal tile across every field and level
    (the footprint over the number of tiles), or its share of the state if that is smaller."""
    tiles = 1
    for tok in parse_layout(layout).tokens:
        if tok.part == "tiles":
            tiles *= -(-axis_extent(extents, tok.axis) // tok.tile)
    return float(min(footprint_bytes / threads, footprint_bytes / tiles))


def traces(ranking: Any) -> pd.DataFrame:
    """Every measured round of each ranked layout's chosen case, in measurement order, over the
    case's median: drift and interference show as shared moves and lone spikes."""
    runs, t = ranking.runs, ranking.table
    cases = runs.cases[runs.cases["build"] == "parallel"]
    keys = ["machine", "kernel", "grid", "dtype", "threads", "layout", "schedule"]
    chosen = cases.merge(t[keys], on=keys)[keys + ["case_id"]]
    smp = runs.samples[["machine", "case_id", "round", "position", "ns"]].merge(chosen, on=["machine", "case_id"])
    smp = smp.sort_values(["machine", "kernel", "grid", "dtype", "threads", "round"])
    smp["relative"] = smp["ns"] / smp.groupby(["machine", "case_id"])["ns"].transform("median")
    return smp[keys + ["round", "position", "ns", "relative"]].reset_index(drop=True)


def across_machines(ranking: Any) -> list[dict[str, Any]]:
    """Per (kernel, grid, dtype, threads) ranked on two or more machines: each layout's ``x best``
    (with interval) and tier on each machine, and the best single layout across machines, the
    one whose worst slowdown over the machines is lowest."""
    out = []
    t = ranking.table
    for (kernel, grid, dtype, threads), grp in t.groupby(["kernel", "grid", "dtype", "threads"], sort=False):
        machines = list(dict.fromkeys(grp["machine"]))
        if len(machines) < 2:
            continue
        layouts = sorted(set.intersection(*(set(grp[grp["machine"] == m]["layout"]) for m in machines)))
        if not layouts:
            continue
        cell = {(r.machine, r.layout): r for r in grp.itertuples()}
        worst = {l: max(machines, key=lambda m: cell[(m, l)].time_vs_best) for l in layouts}
        best = min(layouts, key=lambda l: (cell[(worst[l], l)].time_vs_best, l))
        w = cell[(worst[best], best)]
        out.append({
            "kernel": kernel, "grid": grid, "dtype": dtype, "threads": int(threads), "machines": machines, "layouts": layouts,
            "slowdown": np.array([[cell[(m, l)].time_vs_best for m in machines] for l in layouts]),
            "cells": cell, "winners": {m: grp[grp["machine"] == m].sort_values("rank").iloc[0]["layout"] for m in machines},
            "best_single": best, "worst_machine": worst[best],
            "worst_slowdown": (w.time_vs_best, getattr(w, "time_vs_best_lo", np.nan), getattr(w, "time_vs_best_hi", np.nan)),
        })
    return out
