"""Ranking logic on synthetic rounds with known truth, the markdown read back, robustness."""

from __future__ import annotations

import io
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.rank import RankOptions, Runs, rank_group, rank_runs, tiers
from harness.report import render, render_markdown
from kernels.errors import StridewiseError
from harness.store import CASE_COLUMNS, SAMPLE_COLUMNS, RunMetadata

ROOT = Path(__file__).resolve().parent.parent


def synthetic_rounds(true_times: dict[str, float], rounds: int, noise: float, rng: np.random.Generator, drift: float = 0.3) -> dict[str, pd.Series]:
    """Per-layout samples by round: true time x a slow drift shared by all layouts in a round x noise."""
    shared = 1 + drift * np.sin(np.linspace(0, 3 * np.pi, rounds))
    return {
        layout: pd.Series(t * shared * np.exp(rng.normal(0, noise, rounds)), index=np.arange(rounds))
        for layout, t in true_times.items()
    }


def _tiers_on_report_half(true_times: dict[str, float], rounds: int, noise: float, seed: int, floor: float = 0.03) -> dict[str, int]:
    rng = np.random.default_rng(seed)
    data = synthetic_rounds(true_times, rounds, noise, rng)
    choose = {k: float(v[v.index % 2 == 0].median()) for k, v in data.items()}
    report = {k: v[v.index % 2 == 1] for k, v in data.items()}
    return tiers(report, sorted(choose, key=choose.get), alpha=0.05, floor=floor)


def test_clear_winners_are_ranked_right_despite_drift() -> None:
    result = _tiers_on_report_half({"a": 1.0, "b": 1.2, "c": 1.5, "d": 1.5}, rounds=30, noise=0.03, seed=1)
    assert result["a"] == 1 and result["b"] == 2 and result["c"] == result["d"] == 3


def test_family_wise_false_separation_rate_with_30_identical_layouts() -> None:
    trials, hits = 200, 0
    for seed in range(trials):
        result = _tiers_on_report_half({f"L{i}": 1.0 for i in range(30)}, rounds=30, noise=0.05, seed=seed)
        hits += max(result.values()) > 1
    assert hits / trials <= 0.05, f"false separation in {hits} of {trials} trials"


def test_difference_under_the_floor_is_not_separated() -> None:
    trials = 200
    separated = sum(_tiers_on_report_half({"a": 1.0, "b": 1.025}, 30, 0.03, seed)["b"] > 1 for seed in range(trials))
    assert separated / trials <= 0.05, f"{separated} of {trials}"


def test_twenty_percent_is_separated_at_thirty_rounds() -> None:
    trials = 200
    separated = sum(_tiers_on_report_half({"a": 1.0, "b": 1.2}, 30, 0.05, seed)["b"] > 1 for seed in range(trials))
    assert separated / trials >= 0.95, f"only {separated} of {trials}"


def _frames(per_case: dict[tuple[str, str], pd.Series], kernel: str = "k", threads: int = 1) -> tuple[pd.DataFrame, pd.DataFrame]:
    cases, samples = [], []
    for (layout, schedule), series in per_case.items():
        cid = f"{kernel}|{schedule}|parallel|{layout}|float64|g|{threads}"
        cases.append({"case_id": cid, "kernel": kernel, "family": "stencils", "schedule": schedule, "build": "parallel",
                      "layout": layout, "dtype": "float64", "grid": "g", "threads": threads, "status": "ok", "message": "",
                      "traffic_bytes": 1_000_000, "flops": 2_000_000, "roof_gbps": 10.0, "overhead_bound": False,
                      "vectorised": True, "median_ns": float(series.median()), "machine": "m"})
        for rnd, ns in series.items():
            samples.append({"case_id": cid, "round": rnd, "position": 0, "phase": "measure", "ns": ns, "machine": "m"})
    return pd.DataFrame(cases), pd.DataFrame(samples)


def test_best_schedule_is_chosen_on_one_half_and_reported_on_the_other() -> None:
    rounds = np.arange(20)
    lucky = pd.Series(np.where(rounds % 2 == 0, 1e5, 3e5), index=rounds)  # fast only in choosing rounds
    steady = pd.Series(np.full(20, 2e5), index=rounds)
    cases, samples = _frames({("var.z.y.x", "lucky"): lucky, ("var.z.y.x", "steady"): steady})
    ranked, _ = rank_group(cases, samples, RankOptions())
    row = ranked.iloc[0]
    assert row["schedule"] == "lucky" and row["reported_median_ns"] == pytest.approx(3e5)  # its luck is not reported
    assert row["gbps"] == pytest.approx(1_000_000 / 3e5) and row["pct_roof"] == pytest.approx(100 * (1e6 / 3e5) / 10)


def _ranking(cases: pd.DataFrame, samples: pd.DataFrame, mix: dict[str, float] | None = None):
    meta = {"m": {"fingerprint": {"machine_id": "m", "cpu_model": "test cpu"}, "suite": {"name": "synthetic", "mix": []}, "workers": {}}}
    return rank_runs(Runs(cases, samples, {k: RunMetadata(v) for k, v in meta.items()}), RankOptions(reference="var.z.y.x", mix=mix))


def test_markdown_tables_read_back_equal_the_numbers() -> None:
    rng = np.random.default_rng(3)
    per = {}
    for kernel, times in (("k1", {"var.z.y.x": 1e6, "y.x.z.var": 2e6, "var.y.x.z": 4e6}), ("k2", {"var.z.y.x": 3e6, "y.x.z.var": 1e6})):
        data = synthetic_rounds(times, 24, 0.02, rng)
        per[kernel] = _frames({(layout, "s"): s for layout, s in data.items()}, kernel)
    cases = pd.concat([c for c, _ in per.values()], ignore_index=True)
    samples = pd.concat([s for _, s in per.values()], ignore_index=True)
    ranking = _ranking(cases, samples)
    text = render_markdown(ranking)
    tables = re.findall(r"(\| rank.*?)(?:\n\n|\Z)", text, re.S)
    assert len(tables) == 2
    for table, (kernel, grp) in zip(tables, ranking.table.groupby("kernel", sort=False)):
        lines = [l for l in table.splitlines() if not set(l) <= set("|-: ")]
        parsed = pd.read_csv(io.StringIO("\n".join(l.strip().strip("|") for l in lines)), sep="|", skipinitialspace=True)
        parsed.columns = [c.strip() for c in parsed.columns]
        assert [s.strip() for s in parsed["layout"]] == list(grp["layout"])
        for column, name, scale, tol in (("median ms", "reported_median_ns", 1e-6, 1e-3), ("x best", "time_vs_best", 1, 0.006),
                                         ("x reference", "speedup_vs_reference", 1, 0.006)):
            cells = parsed[column].str.extract(r"([\d.]+) \[([\d.]+), ([\d.]+)\]").astype(float)
            for part, suffix in zip(range(3), ("", "_lo", "_hi")):
                np.testing.assert_allclose(cells[part], grp[name + suffix] * scale, rtol=tol, atol=tol)
            assert (cells[1] <= cells[0]).all() and (cells[0] <= cells[2]).all()
    headline = re.search(r"At 1 thread\(s\), `(\S+)` runs best for k1[^;]*; the slowest layout, `(\S+)`, takes ([\d.]+)x as long", text)
    assert headline and headline.group(1) == "var.z.y.x" and headline.group(2) == "var.y.x.z"
    assert float(headline.group(3)) == pytest.approx(4.0, rel=0.1)
    exported = pd.read_csv(io.StringIO(render(ranking, "csv")))
    assert len(exported) == 5 and {"machine", "kernel", "layout", "tier", "gbps"} <= set(exported.columns)


def test_mix_prefers_a_single_layout_when_no_conversion_is_measured() -> None:
    rng = np.random.default_rng(4)
    parts = []
    for kernel, times in (("k1", {"var.z.y.x": 1e6, "y.x.z.var": 2e6}), ("k2", {"var.z.y.x": 3e6, "y.x.z.var": 1e6})):
        data = synthetic_rounds(times, 24, 0.01, rng)
        parts.append(_frames({(l, "s"): s for l, s in data.items()}, kernel))
    cases = pd.concat([c for c, _ in parts], ignore_index=True)
    samples = pd.concat([s for _, s in parts], ignore_index=True)
    ranking = _ranking(cases, samples, mix={"k1": 1, "k2": 1})
    (mix,) = ranking.mix
    assert mix["single_layout"] == "y.x.z.var"  # 2e6 + 1e6 beats 1e6 + 3e6
    assert mix["per_kernel"] == {"k1": "var.z.y.x", "k2": "y.x.z.var"}
    assert "not measured" in mix["switch_note"]


def test_mix_weights_come_from_each_runs_own_suite() -> None:
    def meta(name: str, mix: list) -> RunMetadata:
        return RunMetadata({"fingerprint": {"machine_id": "m"}, "suite": {"name": name, "mix": mix}, "workers": {}})

    first, second = meta("alpha", [["k1", 1]]), meta("beta", [["k1", 1], ["k2", 3]])
    empty = pd.DataFrame()
    assert Runs(empty, empty, {"m": first}, {"m": [first, meta("again", [["k1", 1.0]])]}).mix("m") == {"k1": 1.0}
    assert Runs(empty, empty, {"m": second}, {"m": [second]}).mix("m") == {"k1": 1.0, "k2": 3.0}  # not the first seen
    with pytest.raises(StridewiseError, match=r"weight the kernel mix differently \(suite 'alpha': k1=1; suite 'beta'.*--mix"):
        Runs(empty, empty, {"m": first}, {"m": [first, second]}).mix("m")


def _write_run(path: Path, cases_text: str, samples_text: str) -> None:
    path.mkdir()
    (path / "metadata.json").write_text('{"fingerprint": {"machine_id": "m"}, "suite": {"name": "t"}, "workers": {}}')
    (path / "cases.csv").write_text(cases_text)
    (path / "samples.csv").write_text(samples_text)


@pytest.mark.slow
def test_truncated_samples_line_is_read_with_a_warning(tmp_path: Path) -> None:
    out = tmp_path / "run"
    proc = subprocess.run([sys.executable, "-m", "harness", "sweep", "--smoke", "--quiet", "--out", str(out)], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    text = (out / "samples.csv").read_text()
    (out / "samples.csv").write_text(text[: len(text) - 7])  # cut the last row mid-way, as a crash would
    rank = subprocess.run([sys.executable, "-m", "harness", "rank", str(out), "--format", "csv"], cwd=ROOT, capture_output=True, text=True)
    assert rank.returncode == 0, rank.stderr
    assert "last line is incomplete" in rank.stderr
    assert len(pd.read_csv(io.StringIO(rank.stdout))) == 4  # 2 kernels x 2 layouts


def test_failed_cases_get_their_own_section() -> None:
    rounds = pd.Series(np.full(12, 1e6), index=np.arange(12))
    cases, samples = _frames({("var.z.y.x", "s"): rounds})
    bad = cases.iloc[0].copy()
    bad.update({"case_id": "x", "schedule": "wrong", "status": "failed", "message": "max relative error 1 exceeds tolerance"})
    cases = pd.concat([cases, bad.to_frame().T], ignore_index=True)
    text = render_markdown(_ranking(cases, samples))
    assert "## Failed cases" in text and "exceeds tolerance" in text.split("## Failed cases")[1]


@pytest.mark.parametrize(
    "cases_text, message",
    [
        ("", "is empty"),
        ("name,score\nalice,3\n", "missing columns"),
        (",".join(CASE_COLUMNS) + "\n", "holds no cases"),
    ],
)
def test_empty_or_foreign_csv_is_a_clear_error(tmp_path: Path, cases_text: str, message: str) -> None:
    run = tmp_path / "run"
    _write_run(run, cases_text, ",".join(SAMPLE_COLUMNS) + "\n")
    proc = subprocess.run([sys.executable, "-m", "harness", "rank", str(run)], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 2 and message in proc.stderr and "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1


def test_not_a_run_directory(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-m", "harness", "rank", str(tmp_path)], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 2 and "not a run directory" in proc.stderr


def test_report_says_when_rounds_are_too_few_to_separate() -> None:
    """With n paired rounds the exact one-sided Wilcoxon signed-rank p is at least 2**-n (all signs
    agree: one of 2**n equally likely sign patterns under the null).

    Common practice: the exact null distribution of the signed-rank statistic (any nonparametric
    statistics text); checked here against scipy.stats.wilcoxon in tests/test_stats.py.
    """
    rng = np.random.default_rng(9)
    times = {"var.z.y.x": 1e6, "y.x.z.var": 3e6, "var.y.x.z": 4e6}
    few = synthetic_rounds(times, 6, 0.01, rng)  # 3 reporting rounds: smallest p = 1/8
    cases, samples = _frames({(l, "s"): s for l, s in few.items()})
    text = render_markdown(_ranking(cases, samples))
    assert "Too few rounds to separate layouts" in text
    many = synthetic_rounds(times, 24, 0.01, rng)
    cases, samples = _frames({(l, "s"): s for l, s in many.items()})
    ranking = _ranking(cases, samples)
    assert "Too few rounds" not in render_markdown(ranking)
    assert list(ranking.table["tier"]) == [1, 2, 3]


def test_schedule_limited_marks_only_losers_far_below_the_roof() -> None:
    """Common practice (no source): a loser whose compulsory bytes move at under half the roof,
    with confidence, lost to its code, not to its memory traffic (the byte model is shared)."""
    from harness.metrics import SCHEDULE_LIMITED_PCT, schedule_limited

    frame = pd.DataFrame({
        "tier": [1, 1, 2, 2, 3, 3],
        "pct_roof_hi": [20.0, 30.0, SCHEDULE_LIMITED_PCT - 1, SCHEDULE_LIMITED_PCT + 1, np.nan, 10.0],
    })
    # tier 1 is never flagged however slow; unknown roof share is never flagged
    assert schedule_limited(frame) == [False, False, True, False, False, True]
    assert schedule_limited(frame.assign(tier=np.nan)) == [False] * 6
