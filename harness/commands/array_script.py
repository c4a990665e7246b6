"""``stridewise array-script``: a batch-scheduler job array running a suite in shards."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from kernels.errors import StridewiseError


def add_parser(sub: argparse._SubParsersAction) -> None:
    arr_p = sub.add_parser("array-script", help="write a Slurm job-array script running a suite in N shards",
                           description="Write a job-array script: one array task per shard, each on a whole node, with "
                                       "a time limit from the plan; submit it with sbatch, then stridewise merge the parts.")
    arr_p.add_argument("suite", help="suite file or built-in name")
    arr_p.add_argument("--shards", type=int, required=True, metavar="N", help="number of shards (array tasks)")
    arr_p.add_argument("--results", required=True, metavar="DIR", help="directory for the tasks' run directories part1..partN")
    arr_p.add_argument("--partition", help="Slurm partition to ask for")
    arr_p.add_argument("--out", help="write the script here (default: standard output)")
    arr_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from harness.batch import array_script, shard_seconds
    from harness.suite import load_suite

    if args.shards < 1:
        raise StridewiseError(f"--shards must be a positive number, got {args.shards}")
    suite = load_suite(args.suite)
    counts = suite.threads.counts if not isinstance(suite.threads.counts, str) else (1,)
    text = array_script(suite, args.suite, args.shards, args.results, tuple(counts), args.partition)
    try:  # the scheduler writes each task's log there before the task runs
        Path(args.results).mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StridewiseError(f"cannot create the results directory {args.results}: {exc.strerror or exc}") from None
    if args.out:
        try:
            Path(args.out).write_text(text)
            Path(args.out).chmod(0o755)
        except OSError as exc:
            raise StridewiseError(f"cannot write the script to {args.out}: {exc.strerror or exc}") from None
        loads = shard_seconds(suite, args.shards, tuple(counts))
        print(f"stridewise: {args.shards}-task array script written to {args.out} (expected per shard: "
              f"{', '.join(f'{s / 60:.1f}' for s in loads)} min)", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0
