"""``stridewise versus``: two code versions side by side in one run, gated with a paired test."""

from __future__ import annotations

import argparse
import sys

from harness.commands.gate import check_levels
from kernels.errors import StridewiseError


def add_parser(sub: argparse._SubParsersAction) -> None:
    vs_p = sub.add_parser(
        "versus", help="gate: two code versions measured side by side in one run; exit 1 on significant slowdowns",
        description="Measure the kernels of two code versions (git revisions or directories holding kernels/) in one "
        "run, alternating them round by round, and gate head against base with a paired test. Exit 0 pass, "
        "1 regression found, 2 unusable input.")
    vs_p.add_argument("base", help="base version: a git revision (e.g. origin/main) or a directory holding kernels/")
    vs_p.add_argument("head", nargs="?", default=None,
                      help="head version, likewise (default: the kernels this stridewise runs, i.e. the working tree)")
    vs_p.add_argument("--suite", default="smoke", help="suite file or built-in name (default: smoke)")
    vs_p.add_argument("--rounds", type=int, default=40,
                      help="measured rounds per group, each one sample of every case from each version (default 40)")
    vs_p.add_argument("--threshold", type=float, default=0.05, help="slowdown that counts, as a fraction (default 0.05)")
    vs_p.add_argument("--confidence", type=float, default=0.95, help="confidence level (default 0.95)")
    vs_p.add_argument("--cases", action="append", default=[], metavar="GLOB", help="gate only case ids matching (repeatable)")
    vs_p.add_argument("--repo", default=".", help="git repository the revisions belong to (default: the current directory)")
    vs_p.add_argument("--out", help="run directory to create (default: results/runs/<time>-versus-<machine>)")
    vs_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    vs_p.add_argument("--quiet", action="store_true", help="no progress lines")
    vs_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    import json
    from pathlib import Path

    from harness import machine
    from harness.gate_report import gate_verdict
    from harness.suite import load_suite, read_suite_text
    from harness.sweep import default_run_dir
    from harness.versus import run_versus
    from harness.versus_gate import paired_gate, render_versus

    check_levels(args)
    if args.rounds < 6:
        raise StridewiseError(f"--rounds must be at least 6 (the paired test needs them), got {args.rounds}")
    # The suite is checked against this process's kernels; extra kernel modules kept beside a
    # version directory's kernels/ (STRIDEWISE_KERNEL_MODULES) are found there, after our own.
    for version in (args.head, args.base):
        if version is not None and Path(version).is_dir():
            sys.path.append(str(Path(version).resolve()))
    suite = load_suite(args.suite)
    out = Path(args.out) if args.out else default_run_dir("versus", machine.fingerprint()["machine_id"])
    store = run_versus(args.base, args.head, suite, read_suite_text(args.suite), out, args.rounds, Path(args.repo), args.quiet)
    run = store.read()
    table = paired_gate(run.samples, run.cases, args.threshold, args.confidence, tuple(args.cases))
    if table.empty:
        raise StridewiseError("no case ran in both versions; nothing to gate")
    metadata = run.metadata
    report = render_versus(table, metadata, args.threshold, args.confidence)
    (out / "gate.md").write_text(report)
    table.to_csv(out / "gate.csv", index=False)
    if args.format == "md":
        sys.stdout.write(report)
    elif args.format == "csv":
        sys.stdout.write(table.to_csv(index=False))
    else:
        sys.stdout.write(json.dumps({"versions": metadata.versions, "cases": json.loads(table.to_json(orient="records"))},
                                    indent=2) + "\n")
    return gate_verdict(table, report)
