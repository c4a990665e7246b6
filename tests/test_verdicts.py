"""Verdicts carry their uncertainty: intervals cover, flips need separation, rank inversions are
explained, % of roof uses the probe's best round, the mix verdict waits for its interval."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.intervals import Rounds, combine, ratio_interval
from harness.report import render_markdown
from tests.test_rank import _frames, _ranking, synthetic_rounds


def _rounds(columns: dict[str, np.ndarray]) -> Rounds:
    return Rounds.from_series({k: pd.Series(v) for k, v in columns.items()})


def test_paired_ratio_interval_covers_the_true_ratio() -> None:
    """A shared per-round drift of +-30 % and 5 % noise: the 95 % interval of the ratio of medians
    covers the true ratio (1.2) in at least 90 % of 200 synthetic groups of 30 rounds (the
    percentile bootstrap of a median undercovers a little at small n, so not 95)."""
    covered = 0
    for seed in range(200):
        rng = np.random.default_rng(seed)
        data = synthetic_rounds({"a": 1.0, "b": 1.2}, 30, 0.05, rng)
        interval = ratio_interval(Rounds.from_series(data), "b", "a", f"t{seed}")
        covered += interval.lo <= 1.2 <= interval.hi
    assert covered >= 180, f"covered in {covered} of 200"


def test_pairing_removes_shared_drift_from_the_interval() -> None:
    rng = np.random.default_rng(1)
    drift = 1 + 0.3 * np.sin(np.linspace(0, 3 * np.pi, 40))
    a = drift * np.exp(rng.normal(0, 0.01, 40))
    b = 1.5 * drift * np.exp(rng.normal(0, 0.01, 40))
    paired = ratio_interval(_rounds({"a": a, "b": b}), "b", "a", "paired")
    unpaired = combine([(_rounds({"b": b}), "b"), (_rounds({"a": a}), "a")], lambda m: m[0] / m[1], "unpaired")
    assert paired.hi - paired.lo < 0.5 * (unpaired.hi - unpaired.lo)
    assert paired.lo <= 1.5 <= paired.hi


def _two_thread_ranking(times_1: dict[str, float], times_2: dict[str, float], noise: float, seed: int):
    rng = np.random.default_rng(seed)
    parts = []
    for threads, times in ((1, times_1), (2, times_2)):
        data = synthetic_rounds(times, 30, noise, rng)
        parts.append(_frames({(l, "s"): s for l, s in data.items()}, "k", threads))
    cases = pd.concat([c for c, _ in parts], ignore_index=True)
    samples = pd.concat([s for _, s in parts], ignore_index=True)
    return _ranking(cases, samples)


def test_a_flip_is_claimed_only_when_both_winners_are_separated() -> None:
    clear = _two_thread_ranking({"var.z.y.x": 1.0, "y.x.z.var": 1.3}, {"var.z.y.x": 1.3, "y.x.z.var": 1.0}, 0.02, 3)
    assert "the winner changes from `var.z.y.x` at 1 thread(s) to `y.x.z.var` at 2" in clear.flips[0]
    # Identical layouts: whichever leads by chance, no change may be claimed.
    claims = 0
    for seed in range(40):
        tied = _two_thread_ranking({"var.z.y.x": 1.0, "y.x.z.var": 1.0}, {"var.z.y.x": 1.0, "y.x.z.var": 1.0}, 0.05, seed)
        claims += "the winner changes" in tied.flips[0]
        assert "no separable change" in tied.flips[0] or "same layout" in tied.flips[0] or "the winner changes" in tied.flips[0]
    assert claims <= 2, f"{claims} of 40 tied pairs claimed a flip"


def test_speedup_intervals_and_flags() -> None:
    ranking = _two_thread_ranking({"var.z.y.x": 2.0, "y.x.z.var": 3.0}, {"var.z.y.x": 1.0, "y.x.z.var": 1.0}, 0.02, 5)
    sc = ranking.scaling[ranking.scaling["threads"] == 2].set_index("layout")
    assert sc.loc["var.z.y.x", "speedup_lo"] <= 2.0 <= sc.loc["var.z.y.x", "speedup_hi"]
    assert sc.loc["y.x.z.var", "flags"] == "superlinear"  # 3x on 2 threads, interval wholly above 2
    noisy = _two_thread_ranking({"var.z.y.x": 1.0, "y.x.z.var": 1.0}, {"var.z.y.x": 0.9, "y.x.z.var": 1.0}, 0.9, 6)
    flags = set(noisy.scaling[noisy.scaling["threads"] == 2]["flags"])
    assert "inconclusive" in flags


def test_report_explains_a_faster_median_in_a_lower_tier() -> None:
    """A noisy layout that cannot be separated from the leader stays in tier 1 with a higher median
    than a steady layout that is separated: the report says why, next to the table."""
    rng = np.random.default_rng(11)
    n = 30
    shared = 1 + 0.2 * np.sin(np.linspace(0, 3 * np.pi, n))
    leader = pd.Series(1e6 * shared * np.exp(rng.normal(0, 0.005, n)))
    steady = pd.Series(1.06e6 * shared * np.exp(rng.normal(0, 0.005, n)))
    noisy = pd.Series(1.07e6 * shared * np.exp(rng.normal(0, 0.35, n)))
    cases, samples = _frames({("var.z.y.x", "s"): leader, ("y.x.z.var", "s"): steady, ("z.var.y.x", "s"): noisy})
    ranking = _ranking(cases, samples)
    table = ranking.table.set_index("layout")
    assert table.loc["z.var.y.x", "tier"] == 1 and table.loc["y.x.z.var", "tier"] == 2
    assert table.loc["z.var.y.x", "reported_median_ns"] > table.loc["y.x.z.var", "reported_median_ns"]
    text = render_markdown(ranking)
    assert "shows a higher median than" in text and "not from the medians" in text


def test_headline_claims_a_winner_only_when_it_is_alone_in_tier_1() -> None:
    rng = np.random.default_rng(2)
    alone = synthetic_rounds({"var.z.y.x": 1.0, "y.x.z.var": 1.5}, 30, 0.02, rng)
    text = render_markdown(_ranking(*_frames({(l, "s"): s for l, s in alone.items()})))
    assert "`var.z.y.x` runs best for k stencils, separated from every other layout" in text
    tied = synthetic_rounds({"var.z.y.x": 1.0, "y.x.z.var": 1.0, "var.y.x.z": 2.0}, 30, 0.02, rng)
    text = render_markdown(_ranking(*_frames({(l, "s"): s for l, s in tied.items()})))
    assert "no single layout runs best for k stencils: tier 1 holds" in text and "95% interval" in text


def _with_probe(kernel_bw_ratio: float, probe_noise: float, seed: int) -> pd.DataFrame:
    """One kernel case and its roof probe sampled in the same rounds; the kernel moves its bytes at
    ``kernel_bw_ratio`` times the probe's typical bandwidth."""
    rng = np.random.default_rng(seed)
    n = 30
    probe_ns = 1e6 * np.exp(rng.normal(0, probe_noise, n))
    kernel_ns = 1e6 / kernel_bw_ratio * np.exp(rng.normal(0, 0.02, n))
    cases, samples = _frames({("var.z.y.x", "s"): pd.Series(kernel_ns)})
    probe = cases.iloc[0].copy()
    probe.update({"case_id": "triad|probe-k|parallel|1B|float64|g|1", "kernel": "triad", "schedule": "probe-k",
                  "layout": "1B", "family": "roof"})
    cases = pd.concat([cases.assign(footprint_bytes=3e6), probe.to_frame().T.assign(footprint_bytes=3e6)], ignore_index=True)
    samples = pd.concat([samples, pd.DataFrame({"case_id": probe["case_id"], "round": np.arange(n), "position": 1,
                                                "phase": "measure", "ns": probe_ns, "machine": "m"})], ignore_index=True)
    return _ranking(cases, samples).table.iloc[0]


def test_percent_of_roof_uses_the_probes_best_round_and_flags_excess() -> None:
    """Equal byte rates: the median-over-median share would scatter around 100 % and exceed it half
    the time; over the probe's best round it stays at or below 100 unless the kernel is faster."""
    over = 0
    for seed in range(40):
        row = _with_probe(1.0, 0.15, seed)
        over += row["pct_roof"] > 100
        assert row["pct_roof_lo"] <= row["pct_roof"] <= row["pct_roof_hi"]
    assert over == 0
    fast = _with_probe(1.6, 0.02, 1)
    assert fast["pct_roof"] > 100 and fast["above_roof"]


def _mix_ranking(convert_ns: float, noise: float, seed: int):
    """k1 runs twice as fast in var.z.y.x, k2 in y.x.z.var: a step of one call each costs 3 ms in
    either single layout, and 2 ms plus two conversions when switching."""
    rng = np.random.default_rng(seed)
    parts = []
    for kernel, times in (("k1", {"var.z.y.x": 1e6, "y.x.z.var": 2e6}), ("k2", {"var.z.y.x": 2e6, "y.x.z.var": 1e6}),
                          ("convert", {"var.z.y.x->y.x.z.var": convert_ns, "y.x.z.var->var.z.y.x": convert_ns})):
        data = synthetic_rounds(times, 30, noise, rng)
        parts.append(_frames({(l, "rows"): s for l, s in data.items()}, kernel))
    cases = pd.concat([c for c, _ in parts], ignore_index=True)
    samples = pd.concat([s for _, s in parts], ignore_index=True)
    return _ranking(cases, samples, mix={"k1": 1, "k2": 1})


def test_mix_verdict_waits_for_a_separating_interval() -> None:
    even = _mix_ranking(0.5e6, 0.2, 7)  # switching costs 2 + 2 x 0.5 = 3 ms: the same as staying
    (mix,) = even.mix
    assert mix["per_kernel"] == {"k1": "var.z.y.x", "k2": "y.x.z.var"}
    assert mix["switch_ratio_lo"] < 1 < mix["switch_ratio_hi"] and mix["switch_pays"] is None
    assert "cannot tell whether it pays off" in render_markdown(even)
    cheap = _mix_ranking(0.05e6, 0.02, 8)  # 2.1 ms against 3 ms
    (mix,) = cheap.mix
    assert mix["switch_ratio_hi"] < 1 and mix["switch_pays"] is True
    dear = _mix_ranking(2e6, 0.02, 9)  # 6 ms against 3 ms
    (mix,) = dear.mix
    assert mix["switch_ratio_lo"] > 1 and mix["switch_pays"] is False


@pytest.mark.parametrize("fmt", ["csv", "json"])
def test_exports_carry_the_intervals(fmt: str) -> None:
    import io
    import json

    from harness.report import render

    rng = np.random.default_rng(4)
    data = synthetic_rounds({"var.z.y.x": 1.0, "y.x.z.var": 1.5}, 20, 0.02, rng)
    text = render(_ranking(*_frames({(l, "s"): s for l, s in data.items()})), fmt)
    rows = pd.read_csv(io.StringIO(text)) if fmt == "csv" else pd.DataFrame(json.loads(text)["ranked"])
    for name in ("reported_median_ns", "time_vs_best", "speedup_vs_reference"):
        assert (rows[f"{name}_lo"] <= rows[name] + 1e-9).all() and (rows[name] <= rows[f"{name}_hi"] + 1e-9).all()


def test_adaptive_runs_rank_at_alpha_over_looks_and_say_when_that_is_out_of_reach() -> None:
    from harness.rank import RankOptions, Runs, rank_runs
    from harness.store import RunMetadata

    rng = np.random.default_rng(12)
    data = synthetic_rounds({"var.z.y.x": 1.0, "y.x.z.var": 2.0, "var.y.x.z": 2.0, "z.var.y.x": 2.0}, 14, 0.01, rng)
    cases, samples = _frames({(l, "s"): s for l, s in data.items()})
    timing = {"min_repeats": 14, "max_rounds": 56, "max_seconds": 6.0}
    meta = {"m": {"fingerprint": {"machine_id": "m"}, "suite": {"name": "s", "mix": [], "timing": timing}, "workers": {}}}
    ranking = rank_runs(Runs(cases, samples, {"m": RunMetadata(meta["m"])}), RankOptions())
    assert set(ranking.table["looks"]) == {3}
    # 7 reporting rounds: smallest p 2**-7 = 0.0078 > 0.05 / 3 / 3 comparisons: nothing can be separated.
    assert set(ranking.table["tier"]) == {1}
    text = render_markdown(ranking)
    assert "Too few rounds to separate layouts" in text and "over 3 looks" in text
    plain = {"m": {**meta["m"], "suite": {"name": "s", "mix": []}}}
    assert max(rank_runs(Runs(cases, samples, {"m": RunMetadata(plain["m"])}), RankOptions()).table["tier"]) == 2
