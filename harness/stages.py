"""Kernels that run stages back to back (a whole step) set beside the sum of their stages.

Each stage is timed alone, on the whole kernel's buffers, in the same rounds as the whole; so
per round, ``whole / (sum of the stages)`` is a paired ratio. Under 1, the whole gains from data
the stage before left in cache; over 1, the stages alone gained from something the whole loses.
The verdict is one-sided Wilcoxon signed-rank tests in both directions (``stats.slower_beyond``,
beyond the ranking's floor), Holm-corrected across every comparison of the report.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.cases import CaseKind, of_kind, part_of, whole_of
from harness.intervals import Interval, Rounds, median_interval, ratio_interval
from harness.stats import holm, slower_beyond, split_rounds

WHOLE, STAGES = "whole", "stages"


def stage_comparison(cases: pd.DataFrame, samples: pd.DataFrame, table: pd.DataFrame, alpha: float, floor: float,
                     confidence: float) -> pd.DataFrame:
    """One row per ranked entry (machine, kernel, grid, dtype, threads, layout and its chosen
    schedule) whose stages were timed: the whole's median, the stages' summed median, their
    paired ratio with its interval, and the verdict."""
    stage_cases = cases[of_kind(cases, CaseKind.STAGE) & (cases["status"] == "ok") & (cases["build"] == "parallel")]
    if stage_cases.empty or table.empty:
        return pd.DataFrame()
    keys = ["machine", "grid", "dtype", "threads", "layout", "schedule"]
    rows, p_values = [], []
    for _, entry in table.iterrows():
        mine = stage_cases[(stage_cases["kernel"].map(whole_of) == entry["kernel"])
                           & (stage_cases[keys] == entry[keys]).all(axis=1)]
        whole = cases[(cases["kernel"] == entry["kernel"]) & (cases["build"] == "parallel") & (cases[keys] == entry[keys]).all(axis=1)]
        if mine.empty or whole.empty:
            continue
        name = f"stages|{entry['machine']}|{entry['kernel']}|{entry['grid']}|{entry['dtype']}|{entry['threads']}|{entry['layout']}"
        rounds, parts = _paired_rounds(samples, whole.iloc[0]["case_id"], mine, name)
        if rounds is None:
            continue
        w, s = rounds.column(WHOLE), rounds.column(STAGES)
        p_faster, p_slower = slower_beyond(s, w, floor), slower_beyond(w, s, floor)
        p_values += [p_faster, p_slower]
        rows.append({**{k: entry[k] for k in ["machine", "kernel", *keys]}, "rounds": len(w),
                     "whole_ms": _ms(median_interval(rounds, WHOLE, name, confidence)),
                     "stages_ms": _ms(median_interval(rounds, STAGES, name, confidence)),
                     "ratio": ratio_interval(rounds, WHOLE, STAGES, name, confidence),
                     "parts": parts})
    if not rows:
        return pd.DataFrame()
    adjusted = holm(p_values)
    for i, row in enumerate(rows):
        faster, slower = adjusted[2 * i], adjusted[2 * i + 1]
        row["p_faster"], row["p_slower"] = faster, slower
        row["verdict"] = ("faster than its stages" if faster < alpha else "slower than its stages" if slower < alpha
                          else "not separated from its stages")
    return pd.DataFrame(rows)


def _ms(ns: Interval) -> Interval:
    return Interval(ns.value / 1e6, ns.lo / 1e6, ns.hi / 1e6)


def _paired_rounds(samples: pd.DataFrame, whole_id: str, stage_cases: pd.DataFrame, name: str
                   ) -> tuple[Rounds | None, list[tuple[str, float]]]:
    """The reporting rounds of the whole and of its stages' per-round sum, and each stage's median there."""
    def series(cid: str) -> pd.Series:
        return samples[samples["case_id"] == cid].set_index("round")["ns"]

    stage = {part: series(cid) for part, cid in zip(stage_cases["kernel"], stage_cases["case_id"])}
    frame = pd.concat({WHOLE: series(whole_id), **stage}, axis=1, join="inner").dropna()
    if frame.empty:
        return None, []
    _, report = split_rounds(list(frame.index))
    frame = frame.loc[report]
    blocks = samples.drop_duplicates("round").set_index("round")["block"] if "block" in samples else None
    rounds = Rounds.from_series({WHOLE: frame[WHOLE], STAGES: frame[list(stage)].sum(axis=1)}, blocks, name)
    return rounds, [(part_of(part), float(np.median(frame[part])) / 1e6) for part in stage]


def stage_section(frame: pd.DataFrame, alpha: float, floor: float) -> list[str]:
    """The report's section: each whole kernel beside the sum of its stages."""
    from tabulate import tabulate

    if frame is None or frame.empty:
        return []
    out = ["## Whole steps beside their stages", "",
           "Each stage was also timed alone, on the whole kernel's buffers, in the same rounds, so `whole / stages` "
           "is paired by round: under 1 the whole gains from data a stage leaves in cache for the next. Verdicts: "
           f"one-sided Wilcoxon signed-rank tests both ways beyond the {floor:.0%} floor, Holm-corrected across the "
           f"table, alpha {alpha:g}. Stage medians are from the same reporting rounds.", ""]
    rows = [[e["kernel"], e["grid"], e["dtype"], int(e["threads"]), e["layout"], e["schedule"],
             e["whole_ms"].text(".4g"), e["stages_ms"].text(".4g"),
             " + ".join(f"{name} {ms:.3g}" for name, ms in e["parts"]), e["ratio"].text(".2f"), e["verdict"]]
            for _, e in frame.iterrows()]
    out.append(tabulate(rows, headers=["kernel", "grid", "dtype", "threads", "layout", "schedule", "whole ms",
                                       "stages ms (sum)", "stage medians ms", "whole / stages", "verdict"],
                        tablefmt="github", disable_numparse=True))
    return out + [""]


def stage_rows_for_export(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """The section as plain records (the JSON report)."""
    if frame is None or frame.empty:
        return []
    out = []
    for _, e in frame.iterrows():
        rec = {k: e[k] for k in ["machine", "kernel", "grid", "dtype", "threads", "layout", "schedule", "rounds", "verdict"]}
        for name in ("whole_ms", "stages_ms", "ratio"):
            rec[name], rec[f"{name}_lo"], rec[f"{name}_hi"] = e[name].value, e[name].lo, e[name].hi
        rec["stage_medians_ms"] = dict(e["parts"])
        out.append(rec)
    return out
