"""Automatic conversions: after a thread count's kernels are timed, the cost of moving the state
between each kernel's best layouts (what switching layouts between kernels would cost)."""

from __future__ import annotations

from harness.cases import ARROW, CONVERT, CaseKey, Group, is_plain
from harness.store import RunStore
from harness.suite import Suite
from kernels.errors import StridewiseError


def auto_conversions(store: RunStore, suite: Suite, threads: int) -> list[Group]:
    """Conversion groups among each kernel's best layouts at this thread count, from the results
    so far: the first ``conversions.auto`` layouts of tier 1 in median order, plus tier 1's
    simplest layout (the one a recommendation prefers on a tie); every ordered pair of picks of
    different kernels that is not measured yet."""
    from harness.rank import RankOptions, rank_runs
    from harness.runs import load_runs

    try:
        table = rank_runs(load_runs([str(store.path)]), RankOptions()).table
    except StridewiseError:
        return []
    done = store.finished_case_ids()
    groups = []
    for (grid, dtype), grp in table[table["threads"] == threads].groupby(["grid", "dtype"], sort=False):
        picks: dict[str, set[str]] = {}
        for kernel, kg in grp.groupby("kernel", sort=False):
            top = kg[kg["tier"] == kg["tier"].min()].sort_values("reported_median_ns")
            chosen = list(top["layout"][: suite.conversions_auto])
            plain = [l for l in top["layout"] if is_plain(l)]
            if plain:
                chosen.append(plain[0])
            picks[kernel] = set(chosen)
        pairs = sorted({(a, b) for ka, la in picks.items() for kb, lb in picks.items() if ka != kb
                        for a in la for b in lb if a != b})
        builds = ("parallel",)
        cases = tuple(CaseKey(CONVERT, "rows", b, f"{x}{ARROW}{y}", dtype, grid, threads) for x, y in pairs for b in builds)
        cases = tuple(c for c in cases if c.id not in done)
        if cases:
            groups.append(Group(CONVERT, grid, dtype, threads, cases, tag="-auto"))
    return groups
