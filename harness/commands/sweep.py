"""``stridewise sweep``: run a suite and write a run directory."""

from __future__ import annotations

import argparse

from kernels.errors import StridewiseError


def add_parser(sub: argparse._SubParsersAction) -> None:
    sweep_p = sub.add_parser(
        "sweep",
        help="run a suite: every case validated, then timed; results in a run directory",
        description="Run a suite (a TOML file, or the built-in 'default' / 'smoke') and write a run directory.",
    )
    sweep_p.add_argument("suite", nargs="?", default=None, help="suite file or built-in name (default: the built-in default suite)")
    sweep_p.add_argument("--smoke", action="store_true", help="run the tiny built-in smoke suite (seconds, for CI and first checks)")
    sweep_p.add_argument("--out", help="run directory to create (default: results/runs/<time>-<suite>-<machine>)")
    sweep_p.add_argument("--resume", metavar="RUN_DIR", help="continue an interrupted run, skipping finished cases")
    sweep_p.add_argument("--repeat", type=int, metavar="N", help="run every group N times, interleaved, to measure "
                         "run-to-run spread (overrides the suite's timing.repetitions)")
    sweep_p.add_argument("--shard", metavar="K/N", help="run only part K of N of the suite (groups are never split; "
                         "parts are balanced by expected time; merge the parts' run directories afterwards)")
    sweep_p.add_argument("--quiet", action="store_true", help="no progress bar (for CI logs)")
    sweep_p.add_argument("--no-vector-report", action="store_true", help="skip reading the machine code for vectorisation")
    sweep_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from harness.sweep import run_sweep

    if args.smoke and args.suite:
        raise StridewiseError("give either a suite or --smoke, not both")
    if args.repeat is not None and args.repeat < 1:
        raise StridewiseError(f"--repeat must be a positive number of runs, got {args.repeat}")
    if args.repeat is not None and args.resume:
        raise StridewiseError("--repeat cannot change a run being resumed; it keeps the repetitions it began with")
    from harness.shards import parse_shard

    shard = parse_shard(args.shard) if args.shard else None
    if shard and args.resume:
        raise StridewiseError("--shard cannot change a run being resumed; it keeps the shard it began with")
    return run_sweep("smoke" if args.smoke else args.suite, args.out, args.resume, args.quiet, args.no_vector_report,
                     args.repeat, shard)
