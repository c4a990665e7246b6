"""The gate's paired test for a side-by-side run: head against base, round by round.

For each case measured in both versions, the per-round log-ratio d = log(t_head / t_base) of
adjacent slots goes to two one-sided Wilcoxon signed-rank tests: "head slower than base by more
than the threshold" (d - log(1 + threshold) > 0) and "head faster by more than the threshold".
Holm's correction runs over the gated cases for each direction; the level is 1 - confidence.
The ratio shown is head's median over base's, with a bootstrap interval over paired rounds.
"""

from __future__ import annotations

import fnmatch
from typing import Any

import numpy as np
import pandas as pd
from tabulate import tabulate

from harness.cases import CaseKind, of_kind
from harness.intervals import Rounds, ratio_interval
from harness.stats import holm, slower_beyond
from harness.store import RunMetadata

DRIFT_NOTE = (
    "Mode: side by side. Both versions ran in this one run on this machine: each round takes one sample of "
    "every case from each version, the two back to back (which goes first alternates), and each comparison is "
    "paired by round. It cancels machine drift slower than a pair of samples (load from other jobs, frequency "
    "and thermal changes, a noisy neighbour that comes and goes)."
)
SHARED_NOTE = (
    "Both versions' state buffers were placed in one shared set of pages, buffer by buffer in allocation order, "
    "so where a buffer lands in memory (which can change a case's time by tens of percent) is the same for both "
    "while their allocations match."
)
PRIVATE_NOTE = (
    "The buffers of at least one version could not be placed in shared pages (its kernels predate that), so "
    "page placement differs between the two processes; such differences pass for differences of the code and "
    "the threshold must cover them."
)


def paired_gate(samples: pd.DataFrame, cases: pd.DataFrame, threshold: float, confidence: float,
                globs: tuple[str, ...] = ()) -> pd.DataFrame:
    """One row per gated case: medians, head/base with its interval, adjusted p-values, verdict."""
    alpha = 1 - confidence
    measured = samples[samples["phase"] == "measure"]
    ok = cases[(cases["status"] == "ok") & ~of_kind(cases, CaseKind.PROBE)]
    present = {v: set(ok[ok["version"] == v]["case_id"]) for v in ("base", "head")}
    ids = sorted(present["base"] | present["head"])
    if globs:
        ids = [c for c in ids if any(fnmatch.fnmatchcase(c, g) for g in globs)]
    rows, slower_p, faster_p, tested = [], [], [], []
    for cid in ids:
        row: dict[str, Any] = {"case_id": cid}
        if cid not in present["base"] or cid not in present["head"]:
            row["verdict"] = "new" if cid not in present["base"] else "missing"
            rows.append(row)
            continue
        mine = measured[measured["case_id"] == cid]
        series = {v: mine[mine["version"] == v].set_index("round")["ns"] for v in ("base", "head")}
        rounds = Rounds.from_series(series, name=f"versus|{cid}")
        head, base = rounds.column("head"), rounds.column("base")
        ratio = ratio_interval(rounds, "head", "base", rounds.name, confidence)
        row.update(base_ms=float(np.median(rounds.column("base"))) / 1e6, head_ms=float(np.median(rounds.column("head"))) / 1e6,
                   ratio=ratio.value, ratio_lo=ratio.lo, ratio_hi=ratio.hi, rounds=int(head.size))
        slower_p.append(slower_beyond(head, base, threshold))
        faster_p.append(slower_beyond(base, head, threshold))
        tested.append(len(rows))
        rows.append(row)
    for index, p_slow, p_fast in zip(tested, holm(slower_p), holm(faster_p)):
        rows[index].update(p_slower=p_slow, p_faster=p_fast,
                           verdict="slower" if p_slow < alpha else "faster" if p_fast < alpha else "unchanged")
    return pd.DataFrame(rows)


def shared_pages(metadata: RunMetadata) -> bool:
    """Whether every group of a side-by-side run placed both versions' buffers in shared pages."""
    groups = metadata.raw.get("groups") or {}
    return bool(groups) and all(g.get("shared_pages") for g in groups.values())


def render_versus(table: pd.DataFrame, metadata: RunMetadata, threshold: float, confidence: float) -> str:
    versions = metadata.versions

    def describe(label: str) -> str:
        v = versions.get(label, {})
        commit = f" ({v['commit'][:12]})" if v.get("commit") else ""
        return f"`{v.get('spec', '?')}`{commit}, kernels `{v.get('kernels_source_hash', '?')}`"

    slower = table[table["verdict"] == "slower"] if len(table) else table
    verdict = f"FAIL: regression in {len(slower)} case(s)" if len(slower) else "PASS: no case slower beyond the threshold"
    lines = [
        f"# Side-by-side gate: {verdict}", "",
        f"Base {describe('base')}; head {describe('head')}; machine `{metadata.machine_id or '?'}`, "
        f"{metadata.raw.get('rounds', '?')} paired rounds per group.", "",
        DRIFT_NOTE + " " + (SHARED_NOTE if shared_pages(metadata) else PRIVATE_NOTE), "",
        f"A case is `slower` when head takes more than {1 + threshold:.2f}x base's time in a one-sided paired Wilcoxon "
        f"signed-rank test, Holm-corrected over the cases at level {1 - confidence:.2g} (`faster` likewise); "
        f"head/base is the ratio of medians with a {confidence:.0%} bootstrap interval over paired rounds.", "",
    ]
    rows = []
    for _, r in table.iterrows():
        if r["verdict"] in ("new", "missing"):
            rows.append([r["case_id"], "", "", "", "", r["verdict"]])
            continue
        rows.append([r["case_id"], f"{r['base_ms']:.4g}", f"{r['head_ms']:.4g}",
                     f"{r['ratio']:.3f} [{r['ratio_lo']:.3f}, {r['ratio_hi']:.3f}]", f"{r['p_slower']:.2g}", r["verdict"]])
    lines.append(tabulate(rows, headers=["case", "base ms", "head ms", "head/base", "p slower (Holm)", "verdict"],
                          tablefmt="github", disable_numparse=True))
    return "\n".join(lines) + "\n"
