"""Adaptive effort: more rounds for an undecided leader, without inflating false separations."""

from __future__ import annotations

import random

import numpy as np
import pandas as pd
import pytest

from harness.adaptive import leader_undecided
from harness.rank import RankOptions, rank_group
from harness.suite import Timing
from harness.timing import sample_rounds

@pytest.fixture(autouse=True)
def few_replicates(monkeypatch: pytest.MonkeyPatch) -> None:
    """These tests judge tiers only; a small bootstrap keeps the intervals they do not read cheap."""
    from harness import intervals

    monkeypatch.setattr(intervals, "REPLICATES", 20)


POLICY = Timing(warmup=0, min_repeats=8, min_seconds=0.0, max_rounds=128, max_seconds=1e9)
LAYOUTS = ("var.z.y.x", "y.x.z.var", "z.var.y.x")


def _adaptive_group(true_times: dict[str, float], noise: float, seed: int) -> tuple[pd.DataFrame, int]:
    """Sample a synthetic group through the real round loop and stopping rule; rank it at the
    alpha the ranking uses for an adaptive run. Returns the ranked table and the rounds taken."""
    rng = np.random.default_rng(seed)
    state = {"drift": 1.0, "calls": 0}

    def fake(layout: str):  # the "call" returns its own synthetic duration in ns
        return lambda: int(1e6 * true_times[layout] * state["drift"] * np.exp(rng.normal(0, noise)))

    def measure(call) -> int:  # a machine-wide drift of +-20 % that changes between rounds
        if state["calls"] % len(true_times) == 0:
            state["drift"] = 1 + 0.2 * np.sin(rng.uniform(0, 6.3))
        state["calls"] += 1
        return call()

    calls = {f"k|s|parallel|{l}|float64|g|1": fake(l) for l in true_times}
    layout_of = {cid: cid.split("|")[3] for cid in calls}
    out = sample_rounds(calls, POLICY, random.Random(seed), lambda: False, measure=measure,
                        wants_more=lambda rows: leader_undecided(rows, layout_of, 0.05 / POLICY.max_looks()))
    cases = pd.DataFrame([{"case_id": cid, "kernel": "k", "family": "stencils", "schedule": "s", "build": "parallel",
                           "layout": l, "dtype": "float64", "grid": "g", "threads": 1, "status": "ok",
                           "traffic_bytes": 1, "flops": 1, "roof_gbps": np.nan, "overhead_bound": False,
                           "vectorised": True, "machine": "m"} for cid, l in layout_of.items()])
    samples = pd.DataFrame(out.rows, columns=["case_id", "round", "position", "phase", "ns"]).assign(machine="m")
    options = RankOptions(alpha=0.05 / POLICY.max_looks())
    table, _ = rank_group(cases, samples, options)
    return table, out.rounds


def test_max_looks_counts_the_doublings() -> None:
    assert POLICY.max_looks() == 5  # 8, 16, 32, 64, 128 rounds
    assert Timing(min_repeats=8, max_rounds=128).max_looks() == 1  # adaptive effort off


def test_undecided_rule_on_plain_rows() -> None:
    rows = [(f"c{l}", r, 0, "measure", 100 + l * 50 + (r % 3)) for r in range(12) for l in range(2)]
    assert not leader_undecided(rows, {"c0": "a", "c1": "b"})  # 1.5x apart in every round
    rows = [(f"c{l}", r, 0, "measure", 100 + (r * 7 + l * 3) % 5) for r in range(12) for l in range(2)]
    assert leader_undecided(rows, {"c0": "a", "c1": "b"})


def test_identical_layouts_are_not_separated_more_often_with_adaptive_rounds() -> None:
    """200 groups of three identical layouts: the family-wise false separation rate stays within
    alpha = 0.05 although undecided groups keep sampling (most go to the full 128 rounds)."""
    false, extended = 0, 0
    for seed in range(200):
        table, rounds = _adaptive_group(dict.fromkeys(LAYOUTS, 1.0), 0.05, seed)
        false += table["tier"].max() > 1
        extended += rounds > POLICY.min_repeats
    assert false <= 10, f"{false} false separations in 200"
    assert extended >= 150  # the rule did look again and again


def test_a_ten_percent_difference_is_separated_within_the_budget() -> None:
    """A leader 10 % faster than the runner-up, 8 % noise per sample: separated in at least 90 of
    100 groups, most of them needing more than the planned 8 rounds."""
    separated, extended = 0, 0
    for seed in range(100):
        table, rounds = _adaptive_group({"var.z.y.x": 1.0, "y.x.z.var": 1.1}, 0.08, seed)
        tiers = table.set_index("layout")["tier"]
        separated += tiers["var.z.y.x"] == 1 and tiers["y.x.z.var"] == 2
        extended += rounds > POLICY.min_repeats
    assert separated >= 90, f"separated in {separated} of 100"
    assert extended >= 50
