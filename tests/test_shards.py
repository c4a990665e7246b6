"""Shards: every case in exactly one part, no group split, parts balanced, one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys
from collections import Counter
from dataclasses import replace
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from harness.plan import plan
from harness.shards import assign, expected_seconds, group_key, parse_shard, shard_groups
from harness.suite import load_suite, parse_suite
from harness.store import RunStore
from kernels.errors import StridewiseError

ROOT = Path(__file__).resolve().parent.parent
KERNELS = ["levelcoef", "varcoef", "laplacian", "advection"]
LAYOUTS = ["var.z.y.x", "y.x.z.var", "var.y.x.z", "y/4.x/4.var.z.y%4.x%4"]


@given(kernels=st.lists(st.sampled_from(KERNELS), min_size=1, unique=True),
       layouts=st.lists(st.sampled_from(LAYOUTS), min_size=1, unique=True),
       threads=st.lists(st.integers(1, 4), min_size=1, max_size=3, unique=True),
       repetitions=st.integers(1, 3), conversions=st.booleans(), parts=st.integers(1, 6))
def test_shards_cover_every_case_exactly_once_and_never_split_a_group(kernels, layouts, threads, repetitions, conversions,
                                                                      parts) -> None:
    data = {"name": "p", "grid": {"sizes": ["var=2,z=8,y=16,x=16", "var=2,z=16,y=32,x=32"]}, "kernels": {"select": kernels},
            "layouts": {"specs": layouts}, "threads": {"counts": threads}, "timing": {"repetitions": repetitions}}
    if conversions and len(layouts) > 1:
        data["conversions"] = {"pairs": [layouts[:2]]}
    suite = parse_suite(data, "p")
    groups = plan(suite, tuple(threads))
    shards = [shard_groups(groups, suite, (k, parts)) for k in range(1, parts + 1)]
    every = Counter((g.label, c.id) for part in shards for g in part for c in g.cases)
    assert every == Counter((g.label, c.id) for g in groups for c in g.cases)  # each case once, none lost
    owner = {}
    for k, part in enumerate(shards):
        for g in part:
            assert owner.setdefault(group_key(g), k) == k  # a group and its repetitions in one part


def test_parts_are_balanced_within_one_group_of_the_mean() -> None:
    """Longest-processing-time rule: no part exceeds the mean load by more than the largest group
    (Graham's bound for list scheduling, from memory)."""
    suite = load_suite("default")
    groups = plan(suite, (1, 2))
    for parts in (2, 3, 5):
        part = assign(groups, suite, parts)
        loads = Counter()
        for g in groups:
            loads[part[group_key(g)]] += expected_seconds(g, suite)
        largest = max(expected_seconds(g, suite) for g in groups)
        assert max(loads.values()) <= sum(loads.values()) / parts + largest
        assert assign(groups, suite, parts) == part  # the same split on every machine


@pytest.mark.parametrize("text", ["0/3", "4/3", "3", "a/b", "-1/2", ""])
def test_bad_shard_is_a_one_line_error(text: str) -> None:
    with pytest.raises(StridewiseError, match="write K/N"):
        parse_shard(text)


@pytest.mark.slow
def test_two_shards_of_a_suite_run_the_cases_of_the_whole(tmp_path: Path) -> None:
    suite = load_suite("smoke")
    expected = {c.id for g in plan(replace(suite, conversions_auto=0), (1,)) for c in g.cases}
    seen: list[str] = []
    for k in (1, 2):
        out = tmp_path / f"part{k}"
        proc = subprocess.run([sys.executable, "-m", "harness", "sweep", "--smoke", "--shard", f"{k}/2", "--out", str(out),
                               "--quiet"], cwd=ROOT, capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        meta = json.loads((out / "metadata.json").read_text())
        assert meta["shard"]["index"] == k and meta["shard"]["count"] == 2 and meta["suite_hash"]
        seen += [c for c in RunStore(out).cases()["case_id"] if not c.startswith("triad|")]
    assert Counter(seen) == Counter(expected)
