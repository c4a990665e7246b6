"""Thread scaling: speedups with intervals, and whether the winner really changes with threads.

Speedup of a layout at t threads is the median of its best 1-thread code over its t-thread median.
The best 1-thread code is chosen on the choosing rounds among the layout's best threaded schedule
at 1 thread and its best parallel=False build (the table names which); the t-thread figure is
its best threaded schedule at t. The two medians come from different worker processes, so their rounds are resampled
independently. A change of winner between thread counts is claimed only when, at each count,
that count's winner is separated from the other count's winner by the ranking's own paired test
(one-sided Wilcoxon on per-round log-ratios beyond the floor, at alpha): an intersection of two
tests at level alpha is itself a test at level alpha.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.intervals import Interval, Rounds, combine
from harness.metrics import SERIAL_PREFIX
from harness.stats import slower_beyond


def _speedup(r1: Rounds, a: str, rt: Rounds, b: str, key: str, confidence: float) -> Interval:
    return combine([(r1, a), (rt, b)], lambda m: m[0] / m[1], key, confidence)


def _basis(one: pd.DataFrame, layout: str, r1: Rounds | None) -> tuple[str, str | None]:
    """The layout's best 1-thread code, chosen on the choosing rounds: its threaded build at 1
    thread or its parallel=False build, as (label in the 1-thread Rounds, "schedule, build")."""
    if layout not in one.index:
        return layout, None
    row = one.loc[layout]
    serial_med = row.get("serial_choose_median_ns", np.nan)
    if (r1 is not None and SERIAL_PREFIX + layout in r1.labels and np.isfinite(serial_med)
            and serial_med < row.get("choose_median_ns", np.inf)):
        return SERIAL_PREFIX + layout, f"{row['serial_schedule']}, serial build"
    return layout, f"{row['schedule']}, threaded build"


def scaling_and_flips(table: pd.DataFrame, rounds: dict[tuple[Any, ...], Rounds], options: Any) -> tuple[pd.DataFrame, list[str]]:
    """Per layout and thread count: speedup over the best 1-thread code and efficiency, each with an
    interval; and one sentence per kernel on flips.
    Oversubscribed thread counts (more threads than physical cores) are left out."""
    rows, flips = [], []
    if "oversubscribed" in table:  # threads sharing a core measure the sharing, not the scaling
        table = table[~table["oversubscribed"].astype(bool)]
    for (machine, kernel, grid, dtype), grp in table.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        one_key = (machine, kernel, grid, dtype, 1)
        r1 = rounds.get(one_key)
        one = grp[grp["threads"] == 1].set_index("layout")
        for _, r in grp.iterrows():
            threads = int(r["threads"])
            key = (machine, kernel, grid, dtype, threads)
            rt = rounds.get(key)
            tag = f"{machine}|{kernel}|{grid}|{dtype}|{threads}|{r['layout']}"
            speed = Interval(np.nan, np.nan, np.nan)
            basis_label, basis = _basis(one, r["layout"], r1)
            if r1 is not None and rt is not None and basis_label in r1.labels and r["layout"] in rt.labels:
                speed = _speedup(r1, basis_label, rt, r["layout"], f"speedup|{tag}", options.confidence)
            elif r["layout"] in one.index:
                speed = Interval(float(one.loc[r["layout"], "reported_median_ns"]) / r["reported_median_ns"], np.nan, np.nan)
            flags = []
            if np.isfinite(speed.lo) and speed.lo < 1 and speed.hi > threads and threads > 1:
                flags.append("inconclusive")
            elif np.isfinite(speed.lo) and speed.lo > threads:
                flags.append("superlinear")
            rows.append({"machine": machine, "kernel": kernel, "grid": grid, "dtype": dtype, "layout": r["layout"],
                         "threads": threads, "schedule": r["schedule"],
                         "basis_1thread": basis,
                         "reported_median_ns": r["reported_median_ns"],
                         "speedup": speed.value, "speedup_lo": speed.lo, "speedup_hi": speed.hi,
                         "efficiency": speed.value / threads, "efficiency_lo": speed.lo / threads,
                         "efficiency_hi": speed.hi / threads,
                         "flags": " ".join(flags)})
        sentence = _flip_sentence(kernel, grid, dtype, machine, grp, rounds, options)
        if sentence:
            flips.append(sentence)
    return pd.DataFrame(rows), flips


def _flip_sentence(kernel: str, grid: str, dtype: str, machine: str, grp: pd.DataFrame,
                   rounds: dict[tuple[Any, ...], Rounds], options: Any) -> str | None:
    winners = {int(t): g.sort_values("rank").iloc[0]["layout"] for t, g in grp.groupby("threads")}
    if len(winners) < 2:
        return None
    where = f"{kernel} ({grid}, {dtype}, machine {machine})"
    counts = sorted(winners)
    changes = [(a, b) for a, b in zip(counts, counts[1:]) if winners[a] != winners[b]]
    if not changes:
        return f"{where}: the same layout, `{winners[counts[0]]}`, leads at every thread count."
    parts = []
    for a, b in changes:
        wa, wb = winners[a], winners[b]
        ra, rb = rounds.get((machine, kernel, grid, dtype, a)), rounds.get((machine, kernel, grid, dtype, b))
        if ra is None or rb is None or not {wa, wb} <= set(ra.labels) or not {wa, wb} <= set(rb.labels):
            parts.append(f"`{wa}` leads at {a} thread(s) and `{wb}` at {b}, but one of them has no samples at the "
                         "other count: no separable change can be claimed")
            continue
        pa = slower_beyond(ra.column(wb), ra.column(wa), options.floor)
        pb = slower_beyond(rb.column(wa), rb.column(wb), options.floor)
        if pa < options.alpha and pb < options.alpha:
            parts.append(f"the winner changes from `{wa}` at {a} thread(s) to `{wb}` at {b} "
                         f"(each separated from the other at its count: p = {pa:.2g}, {pb:.2g})")
        else:
            parts.append(f"`{wa}` leads at {a} thread(s) and `{wb}` at {b}, but no separable change: at "
                         f"{a if pa >= options.alpha else b} thread(s) the two cannot be told apart "
                         f"(p = {max(pa, pb):.2g}, alpha {options.alpha:g}, floor {options.floor:.0%})")
    return f"{where}: " + "; ".join(parts) + "."
