"""The job-array script, run end to end by a stand-in for the batch scheduler."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest

from harness.batch import MIN_LIMIT_S, TIME_FACTOR, array_script, shard_seconds
from harness.plan import plan
from harness.store import RunStore
from harness.suite import load_suite

ROOT = Path(__file__).resolve().parent.parent

#: A stand-in for Slurm's sbatch: runs the array tasks of a script one after another, with the
#: array variable set, and nothing else (no queue, no nodes).
FAKE_SBATCH = r"""#!/bin/bash
set -eu
script="$1"
range=$(sed -n 's/^#SBATCH --array=\([0-9-]*\)$/\1/p' "$script")
for k in $(seq "${range%-*}" "${range#*-}"); do
    SLURM_ARRAY_TASK_ID=$k bash "$script"
done
echo "Submitted batch job 1"
"""


def test_script_asks_for_whole_nodes_and_a_limit_from_the_plan(tmp_path: Path) -> None:
    suite = load_suite("default")
    text = array_script(suite, "default", 4, str(tmp_path / "res"), (1, 2))
    assert "#SBATCH --array=1-4" in text and "#SBATCH --exclusive" in text and "#SBATCH --cpus-per-task=2" in text
    h, m, s = map(int, re.search(r"#SBATCH --time=(\d+):(\d+):(\d+)", text).groups())
    expected = max(MIN_LIMIT_S, TIME_FACTOR * max(shard_seconds(suite, 4, (1, 2))))
    assert abs(h * 3600 + m * 60 + s - expected) <= 1
    assert 'SLURM_ARRAY_TASK_ID:-${STRIDEWISE_SHARD_INDEX' in text and '--shard "$K/4"' in text


@pytest.mark.slow
def test_array_tasks_under_a_stand_in_scheduler_merge_into_the_whole_suite(tmp_path: Path) -> None:
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    (bin_dir / "sbatch").write_text(FAKE_SBATCH)
    (bin_dir / "sbatch").chmod(0o755)
    results, script = tmp_path / "results", tmp_path / "job.sh"
    env = {**os.environ, "PATH": f"{bin_dir}{os.pathsep}{os.environ['PATH']}", "PYTHONPATH": str(ROOT)}
    run = lambda *args: subprocess.run(args, cwd=ROOT, capture_output=True, text=True, env=env)  # noqa: E731
    made = run(sys.executable, "-m", "harness", "array-script", "smoke", "--shards", "3", "--results", str(results),
               "--out", str(script))
    assert made.returncode == 0, made.stderr
    submitted = run("sbatch", str(script))
    assert submitted.returncode == 0 and "Submitted batch job" in submitted.stdout, submitted.stderr
    parts = sorted(results.glob("part*"))
    assert [p.name for p in parts] == ["part1", "part2", "part3"]
    merged = run(sys.executable, "-m", "harness", "merge", *map(str, parts), "--out", str(results / "merged"))
    assert merged.returncode == 0, merged.stderr
    cases = RunStore(results / "merged").cases()
    kernels = cases[~cases["case_id"].str.startswith("triad|")]
    expected = Counter(c.id for g in plan(load_suite("smoke"), (1,)) for c in g.cases)
    assert Counter(kernels["case_id"]) == expected and (kernels["status"] == "ok").all()
