"""The regression gate: synthetic truth, a real deliberately slowed schedule, bad input, imports."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from harness.gate import GateOptions, compare
from harness.store import RunMetadata

ROOT = Path(__file__).resolve().parent.parent
META = RunMetadata({"fingerprint": {"machine_id": "m"}})


def _run_stats(times: dict[str, float], rng: np.random.Generator, between: float, within: float, n: int = 15) -> dict:
    """One synthetic run: a run-wide drift factor, then per-sample noise; median and its log SE."""
    drift = np.exp(rng.normal(0, between))
    out = {}
    for cid, t in times.items():
        ns = t * drift * np.exp(rng.normal(0, within, n))
        boots = np.median(ns[rng.integers(0, n, (200, n))], axis=1)
        out[cid] = {"kernel": cid.split("|")[0], "schedule": "s", "build": "parallel", "layout": cid.split("|")[1],
                    "dtype": "float64", "grid": "g", "threads": 1, "median_ns": float(np.median(ns)),
                    "log_se": float(np.std(np.log(boots), ddof=1)), "roof_gbps": 10.0, "samples": n}
    return out


def _baseline(times: dict[str, float], rng: np.random.Generator, runs: int = 3, between: float = 0.03, within: float = 0.05) -> dict:
    per_run = [_run_stats(times, rng, between, within) for _ in range(runs)]
    cases = {}
    for cid in times:
        first = per_run[0][cid]
        cases[cid] = {k: first[k] for k in ("kernel", "schedule", "build", "layout", "dtype", "grid", "threads")}
        cases[cid].update(medians_ns=[r[cid]["median_ns"] for r in per_run], log_ses=[r[cid]["log_se"] for r in per_run],
                          roofs_gbps=[10.0] * runs, samples=[15] * runs)
    return {"format": "stridewise-baseline", "machine_id": "m", "fingerprint": {}, "cases": cases}


TIMES = {f"k{i}|layout{i}": 1e6 * (1 + i) for i in range(10)}


# Synthetic runner: 1 % run-to-run drift shared by every case of a run (a quiet lab machine),
# 5 % sample-to-sample noise, 3 baseline runs, 10 gated cases. (With 3 % drift the same gate
# catches a lone 25 % slowdown in about 70 % of trials: drift of the current run cannot be told
# from a real change without more runs or --normalise.)
DRIFT, NOISE = 0.01, 0.05


def test_a_25_percent_slowdown_in_one_case_is_caught_and_named() -> None:
    trials, caught = 100, 0
    for seed in range(trials):
        rng = np.random.default_rng(seed)
        base = _baseline(TIMES, rng, between=DRIFT, within=NOISE)
        slowed = dict(TIMES, **{"k3|layout3": TIMES["k3|layout3"] * 1.25})
        frame, summary = compare(base, [(_run_stats(slowed, rng, DRIFT, NOISE), META)], GateOptions())
        named = frame.loc[frame["verdict"] == "slower", "case_id"].tolist()
        assert named in ([], ["k3|layout3"]), named  # never another case
        caught += summary["result"] == "regression" and named == ["k3|layout3"]
    assert caught / trials >= 0.95, f"caught in {caught} of {trials} trials"


def test_identical_distributions_pass_in_at_least_95_percent_of_trials() -> None:
    trials, passes = 200, 0
    for seed in range(trials):
        rng = np.random.default_rng(1000 + seed)
        base = _baseline(TIMES, rng, between=DRIFT, within=NOISE)
        _, summary = compare(base, [(_run_stats(TIMES, rng, DRIFT, NOISE), META)], GateOptions())
        passes += summary["result"] == "pass"
    assert passes / trials >= 0.95, f"false alarms in {trials - passes} of {trials} trials"


def test_a_5_percent_change_under_a_10_percent_threshold_passes() -> None:
    for seed in range(20):
        rng = np.random.default_rng(2000 + seed)
        base = _baseline(TIMES, rng, between=DRIFT, within=NOISE)
        current = {c: t * 1.05 for c, t in TIMES.items()}
        frame, summary = compare(base, [(_run_stats(current, rng, DRIFT, NOISE), META)], GateOptions(threshold=0.10, detect=0.20))
        assert summary["result"] == "pass" and not (frame["verdict"] == "slower").any()


def test_a_10_percent_slowdown_is_caught_when_the_tolerance_is_below_it() -> None:
    """With the tolerance equal to the slowdown to catch, a true 10 % slowdown sits on the null
    boundary and is caught at about the false-alarm rate. Tolerance 3 %, target 10 %: with 5
    baseline and 3 current runs its minimum detectable slowdown is under 10 %, so it is caught in
    at least 80 % of trials (the power the detectable slowdown promises)."""
    trials, caught, mds = 100, 0, []
    for seed in range(trials):
        rng = np.random.default_rng(3000 + seed)
        base = _baseline(TIMES, rng, runs=5, between=DRIFT, within=NOISE)
        slowed = dict(TIMES, **{"k3|layout3": TIMES["k3|layout3"] * 1.10})
        currents = [(_run_stats(slowed, rng, DRIFT, NOISE), META) for _ in range(3)]
        frame, _ = compare(base, currents, GateOptions())
        row = frame.set_index("case_id").loc["k3|layout3"]
        caught += row["verdict"] == "slower"
        mds.append(row["mds"])
        assert not (frame.loc[frame["case_id"] != "k3|layout3", "verdict"] == "slower").any()
    assert np.median(mds) < 0.10, np.median(mds)
    assert caught / trials >= 0.80, f"caught in {caught} of {trials}"


def _scattered(times: dict[str, float], scatter: dict[str, float], rng: np.random.Generator) -> dict:
    """A run whose cases also scatter between runs by their own amount (log sd)."""
    run = _run_stats(times, rng, DRIFT, 0.01)
    for cid, sd in scatter.items():
        run[cid]["median_ns"] *= float(np.exp(rng.normal(0, sd)))
    return run


def test_each_case_keeps_its_own_scatter_and_says_what_it_can_detect() -> None:
    rng = np.random.default_rng(11)
    scatter = {c: (0.15 if c.startswith("k0|") else 0.005) for c in TIMES}
    runs = [_scattered(TIMES, scatter, rng) for _ in range(6)]
    base = {"format": "stridewise-baseline", "machine_id": "m", "fingerprint": {}, "cases": {
        c: {**{k: runs[0][c][k] for k in ("kernel", "schedule", "build", "layout", "dtype", "grid", "threads")},
            "medians_ns": [r[c]["median_ns"] for r in runs[:4]], "log_ses": [r[c]["log_se"] for r in runs[:4]],
            "roofs_gbps": [10.0] * 4, "samples": [15] * 4} for c in TIMES}}
    frame, summary = compare(base, [(r, META) for r in runs[4:]], GateOptions())
    mds = frame.set_index("case_id")["mds"]
    quiet = mds.drop("k0|layout0")
    assert mds["k0|layout0"] > 2 * quiet.max()  # one pooled variance would give every case the same
    assert quiet.max() < 0.10 < mds["k0|layout0"]
    assert summary["underpowered"] == 1 and "cannot promise to catch a 10% slowdown" in summary["warnings"][-1]


def test_normalised_gate_also_fails_on_raw_times() -> None:
    """A regression that slows the triad too (the same compile options) cancels in the normalised
    times; the raw verdict still catches it, and the case fails."""
    rng = np.random.default_rng(21)
    base = _baseline(TIMES, rng, between=DRIFT, within=NOISE)
    current = _run_stats({c: t * 1.3 for c, t in TIMES.items()}, rng, DRIFT, NOISE)
    for v in current.values():
        v["roof_gbps"] = 10.0 / 1.3  # the same-run triad moves 1.3x fewer bytes per second
    frame, summary = compare(base, [(current, META)], GateOptions(normalise="triad"))
    assert (frame["verdict_normalised"] == "unchanged").all()
    assert (frame["verdict_raw"] == "slower").all() and (frame["verdict"] == "slower").all()
    assert summary["result"] == "regression" and "either" in summary["mode"]


def test_new_and_missing_cases_and_filters() -> None:
    rng = np.random.default_rng(5)
    base = _baseline(TIMES, rng)
    current = {c: t for c, t in TIMES.items() if c != "k0|layout0"}
    current["k9|extra"] = 1e6
    frame, _ = compare(base, [(_run_stats(current, rng, 0.03, 0.05), META)], GateOptions())
    verdicts = dict(zip(frame["case_id"], frame["verdict"]))
    assert verdicts["k0|layout0"] == "missing" and verdicts["k9|extra"] == "new"
    frame, summary = compare(base, [(_run_stats(TIMES, rng, 0.03, 0.05), META)], GateOptions(patterns=("k1|*",)))
    assert summary["gated"] == 1


def _cli(*args: str, env: dict[str, str] | None = None, cwd: Path = ROOT) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "harness", *args], cwd=cwd, capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT), **(env or {})})


SUITE = """
name = "gate-test"
seed = 1
[grid]
sizes = ["var=2,z=16,y=64,x=64"]
[kernels]
select = ["slowed"]
[layouts]
specs = ["var.z.y.x", "y.x.z.var"]
[threads]
counts = [1]
[timing]
warmup = 1
min_repeats = 9
min_seconds = 0.0
roof = false
serial_baseline = false
"""


@pytest.mark.slow
def test_a_deliberately_slowed_schedule_fails_the_gate_on_real_timings(tmp_path: Path) -> None:
    suite = tmp_path / "suite.toml"
    suite.write_text(SUITE)
    env = {"STRIDEWISE_KERNEL_MODULES": "tests.broken_kernel"}
    runs = []
    for i in range(2):  # two base runs: the baseline pools them; each sweep costs CI seconds
        out = tmp_path / f"base{i}"
        assert _cli("sweep", "--quiet", str(suite), "--out", str(out), env=env).returncode == 0
        runs.append(str(out))
    baseline = tmp_path / "baseline.json"
    assert _cli("baseline", "save", *runs, "--at-least", "2", "--out", str(baseline)).returncode == 0
    slow, fast = tmp_path / "slow", tmp_path / "fast"
    assert _cli("sweep", "--quiet", str(suite), "--out", str(slow), env={**env, "STRIDEWISE_TEST_SLOW_KNOB": "1"}).returncode == 0
    assert _cli("sweep", "--quiet", str(suite), "--out", str(fast), env=env).returncode == 0
    # The knob repeats the work 8 times; a 50 % threshold leaves room for runner noise. Runs on this
    # shared VM drift up to 2x between each other (which is why `stridewise versus` exists), so
    # every time is also normalised by the same run's unslowed cyclic case.
    ref = ("--normalise", "case:slowed|cyclic|parallel|var.z.y.x")
    failed = _cli("gate", str(baseline), str(slow), "--threshold", "0.5", "--format", "json", *ref)
    assert failed.returncode == 1, failed.stderr
    verdicts = {c["case_id"]: c["verdict"] for c in json.loads(failed.stdout)["cases"]}
    assert {c for c, v in verdicts.items() if v == "slower"} == {c for c in verdicts if "|block|" in c}
    assert "regression in 2 case(s)" in failed.stderr and "slowed|block" in failed.stderr
    passed = _cli("gate", str(baseline), str(fast), "--threshold", "0.5", *ref)
    assert passed.returncode == 0, passed.stdout + passed.stderr
    summary_file = tmp_path / "step-summary.md"
    normalised = _cli("gate", str(baseline), str(fast), "--threshold", "2", "--normalise", env={"GITHUB_STEP_SUMMARY": str(summary_file)})
    assert normalised.returncode == 0, normalised.stdout + normalised.stderr  # probes run even with roof = false
    assert "normalised by triad" in summary_file.read_text()


@pytest.mark.slow
def test_normalised_mode_against_smoke_runs(tmp_path: Path, smoke_runs: list[Path]) -> None:
    runs = [str(r) for r in smoke_runs]
    saved = _cli("baseline", "save", *runs, "--at-least", "2", cwd=tmp_path)  # default path, relative to the working directory
    assert saved.returncode == 0, saved.stderr
    base_dir = tmp_path / "results" / "baselines"
    (written,) = base_dir.glob("*.json")
    assert written.stem == json.loads((Path(runs[0]) / "metadata.json").read_text())["fingerprint"]["machine_id"]
    summary_file = tmp_path / "summary.md"
    proc = _cli("gate", str(base_dir), runs[0], "--normalise", "--threshold", "2", env={"GITHUB_STEP_SUMMARY": str(summary_file)})
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "normalised by triad" in proc.stdout and "PASS" in summary_file.read_text()


@pytest.fixture(scope="module")
def smoke_runs(tmp_path_factory: pytest.TempPathFactory) -> list[Path]:
    """Two smoke runs, shared by the tests of this module that only read them."""
    runs = []
    for i in range(2):
        out = tmp_path_factory.mktemp("gate") / f"run{i}"
        assert _cli("sweep", "--smoke", "--quiet", "--out", str(out)).returncode == 0
        runs.append(out)
    return runs


@pytest.fixture(scope="module")
def smoke_run(smoke_runs: list[Path]) -> Path:
    return smoke_runs[0]


@pytest.mark.slow
def test_bad_gate_input_exits_2(tmp_path: Path, smoke_run: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """In-process through the CLI's main(): the same exit codes and messages as the command."""
    from types import SimpleNamespace

    from harness.commands import main

    def _cli(*args: str) -> SimpleNamespace:
        code = main(list(args))
        out, err = capsys.readouterr()
        return SimpleNamespace(returncode=code, stdout=out, stderr=err)

    run = smoke_run
    corrupted = tmp_path / "corrupt.json"
    corrupted.write_text('{"format": "stridewise-baseline", "cases": {"x": {"medians_ns": ')
    proc = _cli("gate", str(corrupted), str(run))
    assert proc.returncode == 2 and "corrupted" in proc.stderr and "Traceback" not in proc.stderr
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"format": "stridewise-baseline", "machine_id": "m", "cases": {
        "b|s|parallel|l|float64|g|1": {"kernel": "b", "schedule": "s", "build": "parallel", "layout": "l", "dtype": "float64",
                                       "grid": "g", "threads": 1, "medians_ns": [1, 2, 3], "log_ses": [0, 0, 0],
                                       "roofs_gbps": [None] * 3, "samples": [1] * 3}}}))
    proc = _cli("gate", str(other), str(run))
    assert proc.returncode == 2 and "no case in common" in proc.stderr
    empty = tmp_path / "empty.json"
    empty.write_text(json.dumps({"format": "stridewise-baseline", "machine_id": "m", "cases": {}}))
    proc = _cli("gate", str(empty), str(run))
    assert proc.returncode == 2 and "no case in common" in proc.stderr  # never a pass on empty input
    proc = _cli("gate", str(tmp_path / "nowhere.json"), str(run))
    assert proc.returncode == 2 and "not found" in proc.stderr
    proc = _cli("gate", str(tmp_path), str(run))
    assert proc.returncode == 2 and "no baseline for machine" in proc.stderr
    proc = _cli("baseline", "save", str(run))
    assert proc.returncode == 2 and "at least 3 runs" in proc.stderr
    proc = _cli("gate", str(empty), str(run), "--threshold", "-1")
    assert proc.returncode == 2 and "--threshold" in proc.stderr


@pytest.mark.slow
def test_pytest_benchmark_json_imports_ranks_and_is_refused_by_the_gate_without_data(tmp_path: Path) -> None:
    """--benchmark-json keeps every round's time; a --benchmark-save file keeps them only with
    --benchmark-save-data. Both import; only the one with raw samples can be gated.

    Source: pytest-benchmark 5.3.1 (installed here), whose saved JSON holds a ``stats.data`` list of
    round times only when asked for raw data; this test makes both files with that plugin.
    """
    common = [sys.executable, "-m", "pytest", "-q", "tests/bench/test_bench_kernels.py", "-k", "laplacian and block and not yd8",
              "--benchmark-enable", "--benchmark-min-rounds=5", "--benchmark-max-time=0.1", "-p", "no:cacheprovider", "-n", "0"]
    env = {k: v for k, v in os.environ.items() if not k.startswith("PYTEST_XDIST")}  # a plain pytest, not a worker
    with_data = tmp_path / "with.json"
    assert subprocess.run([*common, f"--benchmark-json={with_data}"], cwd=ROOT, capture_output=True, text=True,
                          env=env).returncode == 0
    storage = tmp_path / "storage"
    assert subprocess.run([*common, "--benchmark-autosave", f"--benchmark-storage={storage}"], cwd=ROOT,
                          capture_output=True, text=True, env=env).returncode == 0
    (without_data,) = storage.rglob("*.json")
    for source, raw in ((with_data, True), (without_data, False)):
        run = tmp_path / f"run-{raw}"
        imported = _cli("import-bench", str(source), "--out", str(run))
        assert imported.returncode == 0, imported.stderr
        assert ("no raw samples" in imported.stderr) is not raw
        ranked = _cli("rank", str(run), "--format", "csv")
        assert ranked.returncode == 0, ranked.stderr
        assert "var.z.y.x" in ranked.stdout and "y.x.z.var" in ranked.stdout
        base = _cli("baseline", "save", str(run), str(run), str(run), "--out", str(tmp_path / f"b-{raw}.json"))
        if raw:
            assert base.returncode == 0, base.stderr
        else:
            assert base.returncode == 2 and "without raw samples" in base.stderr
