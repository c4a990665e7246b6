"""A job-array script for a batch scheduler (Slurm): one array task per shard of a suite.

Each task asks for a whole node to itself (a benchmark must not share its node), runs
``stridewise sweep SUITE --shard K/N`` into its own run directory, and reads K from the
scheduler's array variable, or from ``STRIDEWISE_SHARD_INDEX`` under any other scheduler.
The time limit is the plan's expected time of the longest shard times a safety factor.
"""

from __future__ import annotations

import math
import shlex
import sys
from pathlib import Path

from harness.plan import plan
from harness.shards import assign, expected_seconds, group_key
from harness.suite import Suite

#: The expected time is a rough model: the time limit allows this many times it.
TIME_FACTOR = 3.0
#: Never ask for less than this (seconds): start-up and compilation on a cold node.
MIN_LIMIT_S = 600


def shard_seconds(suite: Suite, shards: int, thread_counts: tuple[int, ...]) -> list[float]:
    """Expected seconds of each shard (1..shards), from the same model that balances them."""
    groups = plan(suite, thread_counts)
    part = assign(groups, suite, shards)
    loads = [0.0] * shards
    for g in groups:
        loads[part[group_key(g)] - 1] += expected_seconds(g, suite)
    return loads


def _clock(seconds: float) -> str:
    s = int(math.ceil(seconds))
    return f"{s // 3600:02d}:{s % 3600 // 60:02d}:{s % 60:02d}"


def array_script(suite: Suite, suite_path: str, shards: int, results: str, thread_counts: tuple[int, ...],
                 partition: str | None = None) -> str:
    """The text of a Slurm job-array script running every shard of ``suite``."""
    limit = max(MIN_LIMIT_S, TIME_FACTOR * max(shard_seconds(suite, shards, thread_counts)))
    results_dir = str(Path(results).resolve())
    cpus = "" if isinstance(suite.threads.counts, str) else f"#SBATCH --cpus-per-task={max(suite.threads.counts)}\n"
    part = f"#SBATCH --partition={partition}\n" if partition else ""
    command = f"{shlex.quote(sys.executable)} -m harness"
    return f"""#!/bin/bash
# Written by stridewise: suite {suite.name!r} ({suite.digest()}) in {shards} shards, one array task each.
# Submit with: sbatch THIS_FILE. Merge afterwards: stridewise merge {results_dir}/part* --out {results_dir}/merged
#SBATCH --job-name=stridewise-{suite.name}
#SBATCH --array=1-{shards}
#SBATCH --nodes=1
#SBATCH --exclusive
{cpus}{part}#SBATCH --time={_clock(limit)}
#SBATCH --output={results_dir}/task-%a.log
set -eu
# The shard index: Slurm's array variable, or STRIDEWISE_SHARD_INDEX under another scheduler.
K="${{SLURM_ARRAY_TASK_ID:-${{STRIDEWISE_SHARD_INDEX:?set SLURM_ARRAY_TASK_ID or STRIDEWISE_SHARD_INDEX}}}}"
STRIDEWISE="${{STRIDEWISE:-{command}}}"
mkdir -p {shlex.quote(results_dir)}
exec $STRIDEWISE sweep {shlex.quote(str(Path(suite_path).resolve()) if Path(suite_path).exists() else suite_path)} \\
    --shard "$K/{shards}" --out {shlex.quote(results_dir)}/part"$K" --quiet
"""
