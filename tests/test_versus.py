"""Side-by-side gate: two code versions in one run, alternated round by round, gated with a paired test."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.versus_gate import paired_gate

ROOT = Path(__file__).resolve().parent.parent

SUITE = """
name = "versus-test"
seed = 1
[grid]
sizes = ["var=2,z=16,y=64,x=64"]
dtypes = ["float64"]
[kernels]
select = ["extra_work", "levelcoef"]
schedules = ["block", "strip"]
[layouts]
specs = ["var.z.y.x", "y.x.z.var"]
[threads]
counts = [1]
[timing]
warmup = 1
roof = false
serial_baseline = false
"""


def make_version(where: Path, extra: float) -> Path:
    """A version directory: this tree's kernels/ plus the test kernel doing ``extra`` more work."""
    where.mkdir(parents=True)
    shutil.copytree(ROOT / "kernels", where / "kernels", ignore=shutil.ignore_patterns("__pycache__"))
    text = (ROOT / "tests" / "extra_work_kernel.py").read_text().replace("EXTRA = 0.0 ", f"EXTRA = {extra} ")
    (where / "extra_work_kernel.py").write_text(text)
    return where


def _versus(tmp_path: Path, base: Path | str, head: Path | str, *extra: str) -> subprocess.CompletedProcess[str]:
    tmp_path.mkdir(parents=True, exist_ok=True)
    suite = tmp_path / "suite.toml"
    suite.write_text(SUITE)
    env = {**os.environ, "STRIDEWISE_KERNEL_MODULES": "extra_work_kernel"}
    return subprocess.run([sys.executable, "-m", "harness", "versus", str(base), str(head), "--suite", str(suite),
                           "--out", str(tmp_path / "run"), "--quiet", *extra], cwd=ROOT, capture_output=True, text=True,
                          env=env)


@pytest.mark.slow
def test_a_slowed_kernel_fails_and_the_unchanged_one_passes(tmp_path: Path) -> None:
    """One side-by-side run: head's test kernel sweeps every row four times (EXTRA = 3.0; at this
    size the repeats partly hit cache, so under 4x the time, but far beyond the threshold even with
    the other test process as a neighbour); levelcoef is the same code in both versions and must
    not be called slower. (Identical trees
    passing is what .ci/run checks on every change, with this checkout against HEAD.)"""
    proc = _versus(tmp_path, make_version(tmp_path / "a", 0.0), make_version(tmp_path / "b", 3.0), "--format", "json",
                   "--rounds", "12")
    assert proc.returncode == 1, proc.stdout + proc.stderr
    verdicts = {c["case_id"]: c["verdict"] for c in json.loads(proc.stdout)["cases"]}
    assert {c for c, v in verdicts.items() if v == "slower"} == {c for c in verdicts if c.startswith("extra_work|")}
    run = tmp_path / "run"
    samples = pd.read_csv(run / "samples.csv")
    assert set(samples["version"]) == {"base", "head"}
    # The version sampled first alternates from round to round (and from case to case).
    firsts = samples[samples["position"] == 0].sort_values("round").drop_duplicates("round")["version"].tolist()
    assert firsts[:4] == ["base", "head", "base", "head"]
    meta = json.loads((run / "metadata.json").read_text())
    assert meta["mode"] == "side-by-side" and meta["versions"]["base"]["kernels_source_hash"]
    assert all(g["shared_pages"] for g in meta["groups"].values())
    # Both versions allocate the same buffers and fill them alike (the knob only repeats work),
    # so neither needs its inputs written back between samples.
    assert not any(g["inputs_restored"] for g in meta["groups"].values())
    report = (run / "gate.md").read_text()
    assert report.startswith("# Side-by-side gate: FAIL") and "Mode: side by side" in report
    assert "one shared set of pages" in report


def test_two_arenas_on_one_file_hand_out_the_same_pages(tmp_path: Path) -> None:
    """What the side-by-side workers rely on: equal allocation sequences land on the same memory."""
    from harness.shared_pages import PAGE, Arena, arena_file

    with arena_file(10 * PAGE, "test") as path:
        first, second = Arena(path), Arena(path)
        a1, a2 = first.aligned_empty(100), first.aligned_empty(PAGE + 1, base_offset=64)
        b1, b2 = second.aligned_empty(100), second.aligned_empty(PAGE + 1, base_offset=64)
        a2[:] = 7
        assert (b2 == 7).all() and not b1.any()  # the same bytes, seen through the other mapping
        assert a2.ctypes.data % PAGE == 64 and first.used == second.used == PAGE + 64 + PAGE + 1
        with pytest.raises(MemoryError, match="arena"):
            first.aligned_empty(10 * PAGE)
        first.reset()
        assert first.aligned_empty(100).ctypes.data == a1.ctypes.data
        del a1, a2, b1, b2
        first.close(), second.close()
    assert not Path(path).exists()


def test_a_git_revision_is_checked_out_for_its_kernels(tmp_path: Path) -> None:
    from harness.versus import materialise

    version = materialise("base", "HEAD", ROOT, tmp_path)
    assert (version.path / "kernels" / "__init__.py").is_file() and len(version.commit) == 40
    assert not (version.path / "harness").exists()  # the running harness drives every version


@pytest.mark.parametrize("args, message", [
    (["no-such-revision-xyz"], "failed"),
    (["HEAD", "--rounds", "2"], "--rounds must be at least 6"),
    (["HEAD", "--threshold", "0"], "--threshold"),
])
def test_bad_versus_input_is_a_one_line_error(tmp_path: Path, args: list[str], message: str) -> None:
    proc = subprocess.run([sys.executable, "-m", "harness", "versus", *args, "--out", str(tmp_path / "run")], cwd=ROOT,
                          capture_output=True, text=True)
    assert proc.returncode == 2 and message in proc.stderr and proc.stderr.count("\n") == 1, proc.stderr


def _paired(ratio: float, noise: float, drift: float, seed: int, rounds: int = 20) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    shared = np.exp(rng.normal(0, drift, rounds))  # the machine state, common to a round pair
    rows = []
    for version, factor in (("base", 1.0), ("head", ratio)):
        ns = 1e6 * factor * shared * np.exp(rng.normal(0, noise, rounds))
        rows += [{"case_id": "k|s|parallel|L|float64|g|1", "round": r, "phase": "measure", "ns": t, "version": version}
                 for r, t in enumerate(ns)]
    cases = pd.DataFrame([{"case_id": "k|s|parallel|L|float64|g|1", "kernel": "k", "status": "ok", "version": v}
                          for v in ("base", "head")])
    return paired_gate(pd.DataFrame(rows), cases, threshold=0.05, confidence=0.95)


def test_pairing_sees_a_ten_percent_change_through_thirty_percent_drift() -> None:
    """Synthetic: per-round machine drift of 30 % (log-sd) and 2 % noise per sample. The paired
    test calls a 10 % slowdown in at least 95 of 100 trials and identical versions in at most 5."""
    caught = sum(_paired(1.10, 0.02, 0.3, seed)["verdict"].iloc[0] == "slower" for seed in range(100))
    false = sum(_paired(1.0, 0.02, 0.3, seed)["verdict"].iloc[0] != "unchanged" for seed in range(100))
    assert caught >= 95 and false <= 5, (caught, false)
