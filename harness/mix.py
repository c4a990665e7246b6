"""The kernel mix: the best single layout for a time step, and whether switching layouts pays.

A time step calls each kernel ``weight`` times. One layout for everything costs the weighted sum
of that layout's medians; switching runs each kernel in its own tier-1 layout and pays the
measured conversions between them. Both totals carry intervals (each group's rounds resampled
independently, cases of one group together), and the verdict is only given when the interval of
switching over single lies wholly on one side of 1.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.intervals import Rounds, combine
from harness.cases import ARROW, CaseKind, is_plain, of_kind


def _weights(runs: Any, options: Any, machine: str) -> dict[str, float]:
    if options.mix is not None:
        return options.mix
    return runs.mix(machine)


def _conversion_rounds(runs: Any, machine: str, grid: str, dtype: str, threads: int) -> dict[str, Rounds]:
    """Rounds of each measured parallel conversion at this grid, dtype and thread count."""
    cases = runs.cases
    conv = cases[(cases["machine"] == machine) & of_kind(cases, CaseKind.CONVERSION) & (cases["grid"] == grid)
                 & (cases["dtype"] == dtype) & (cases["threads"] == threads) & (cases["build"] == "parallel")
                 & (cases["status"] == "ok")]
    out = {}
    samples = runs.samples
    for cid, layout in zip(conv["case_id"], conv["layout"]):
        s = samples[(samples["case_id"] == cid) & (samples["machine"] == machine)]
        if len(s):
            blocks = s.drop_duplicates("round").set_index("round")["block"] if "block" in s else None
            out[layout] = Rounds.from_series({layout: s.set_index("round")["ns"]}, blocks, name=f"{machine}|{cid}")
    return out


def kernel_mix(table: pd.DataFrame, rounds: dict[tuple[Any, ...], Rounds], runs: Any, options: Any) -> list[dict[str, Any]]:

    out = []
    for (machine, grid, dtype, threads), grp in table.groupby(["machine", "grid", "dtype", "threads"], sort=False):
        weights = {k: w for k, w in _weights(runs, options, machine).items() if w > 0}
        if not weights:
            continue
        missing = [k for k in weights if k not in set(grp["kernel"])]
        entry: dict[str, Any] = {"machine": machine, "grid": grid, "dtype": dtype, "threads": int(threads), "weights": weights}
        if missing:
            entry["note"] = f"not in the runs: {', '.join(missing)}"
            out.append(entry)
            continue
        med = {k: g.set_index("layout")["reported_median_ns"] for k, g in grp.groupby("kernel") if k in weights}
        group_rounds = {k: rounds.get((machine, k, grid, dtype, threads)) for k in weights}
        common = set.intersection(*(set(s.index) for s in med.values()))
        totals = {layout: sum(w * med[k][layout] for k, w in weights.items()) for layout in common}
        if not totals:
            entry["note"] = "no layout was run for every weighted kernel"
            out.append(entry)
            continue
        entry["totals"] = dict(sorted(totals.items(), key=lambda kv: kv[1]))
        best_total = min(totals.values())
        near = [l for l, t in totals.items() if t <= best_total * (1 + options.floor)]
        single = min(near, key=lambda l: (not is_plain(l), totals[l]))
        entry["single_layout"] = single
        entry["single_ns"] = totals[single]
        entry["near_single"] = sorted(l for l in near if l != single)
        per_kernel = {}
        for k in weights:
            g = grp[grp["kernel"] == k]
            top = g[g["tier"] == g["tier"].min()] if g["tier"].notna().any() else g.head(1)
            per_kernel[k] = min(top["layout"], key=lambda l: (not is_plain(l), float(top.set_index("layout").loc[l, "reported_median_ns"])))
        entry["per_kernel"] = per_kernel
        compute = sum(w * med[k][per_kernel[k]] for k, w in weights.items())
        sequence = [per_kernel[k] for k in weights]
        hops = [f"{a}{ARROW}{b}" for a, b in zip(sequence, sequence[1:] + sequence[:1]) if a != b]
        conv = _conversion_rounds(runs, machine, grid, dtype, int(threads))
        unpriced = [h for h in hops if h not in conv]
        entry["switch_compute_ns"] = compute
        if unpriced:
            entry["switch_note"] = f"conversion {', '.join(unpriced)} not measured; add it to [conversions]"
            out.append(entry)
            continue
        entry["convert_ns"] = sum(float(np.median(conv[h].column(h))) for h in hops)
        entry["switch_ns"] = compute + entry["convert_ns"]
        kernel_parts = list(weights)
        if all(group_rounds[k] is not None and single in group_rounds[k].labels and per_kernel[k] in group_rounds[k].labels
               for k in kernel_parts):
            w = [weights[k] for k in kernel_parts]
            single_parts = [(group_rounds[k], single) for k in kernel_parts]
            switch_parts = [(group_rounds[k], per_kernel[k]) for k in kernel_parts] + [(conv[h], h) for h in hops]
            n, m = len(kernel_parts), len(hops)

            def ratio(meds: list[np.ndarray]) -> np.ndarray:
                single_total = sum(wi * x for wi, x in zip(w, meds[:n]))
                switch_total = sum(wi * x for wi, x in zip(w, meds[n:2 * n])) + sum(meds[2 * n:2 * n + m], np.zeros(1))
                return switch_total / single_total

            tag = f"mix|{machine}|{grid}|{dtype}|{threads}"
            interval = combine(single_parts + switch_parts, ratio, tag, options.confidence)
            single_interval = combine(single_parts, lambda meds: sum(wi * x for wi, x in zip(w, meds)), tag + "|single",
                                      options.confidence)
            entry.update(single_lo=single_interval.lo, single_hi=single_interval.hi,
                         switch_ratio=interval.value, switch_ratio_lo=interval.lo, switch_ratio_hi=interval.hi)
            entry["switch_pays"] = True if interval.hi < 1 else False if interval.lo > 1 else None
        else:
            entry["switch_pays"] = None
        out.append(entry)
    return out
