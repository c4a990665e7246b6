"""``stridewise gate``: a run against a stored baseline."""

from __future__ import annotations

import argparse
import sys

from pathlib import Path

from harness.baseline import load_baseline
from harness.gate import GateOptions, gate
from harness.gate_report import gate_verdict, render_gate
from harness.store import RunStore
from kernels.errors import StridewiseError


def add_parser(sub: argparse._SubParsersAction) -> None:
    gate_p = sub.add_parser("gate", help="compare a run with a stored baseline; exit 1 on significant slowdowns",
                            description="Gate: exit 0 pass, 1 regression found, 2 unusable input.")
    gate_p.add_argument("baseline", help="baseline file, or a directory holding <machine-id>.json baselines")
    gate_p.add_argument("current", nargs="+", metavar="RUN_DIR", help="run directory (several: their runs are pooled)")
    gate_p.add_argument("--threshold", type=float, default=0.03,
                        help="tolerance: a case fails only when slower by more than this fraction, with confidence (default 0.03)")
    gate_p.add_argument("--detect", type=float, default=None,
                        help="detection target: warn about cases whose minimum detectable slowdown exceeds it "
                             "(default 0.10, or twice the tolerance if that is larger)")
    gate_p.add_argument("--confidence", type=float, default=0.95, help="confidence level (default 0.95)")
    gate_p.add_argument("--cases", action="append", default=[], metavar="GLOB", help="gate only case ids matching (repeatable)")
    gate_p.add_argument("--normalise", nargs="?", const="triad", metavar="REF",
                        help="scale each time by a same-run reference: 'triad' (default) or 'case:KERNEL|SCHEDULE|BUILD|LAYOUT'")
    gate_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    gate_p.add_argument("--out", help="write the report here instead of standard output")
    gate_p.set_defaults(func=run)


def check_levels(args: argparse.Namespace) -> None:
    """--threshold and --confidence, shared by both gates."""
    if not 0 < args.threshold:
        raise StridewiseError(f"--threshold must be a positive fraction, got {args.threshold}")
    if not 0.5 <= args.confidence < 1:
        raise StridewiseError(f"--confidence must be in [0.5, 1), got {args.confidence}")


def run(args: argparse.Namespace) -> int:
    check_levels(args)
    norm = args.normalise
    if norm not in (None, "triad") and not (norm.startswith("case:") and norm.count("|") == 3):
        raise StridewiseError(f"--normalise must be 'triad' or 'case:KERNEL|SCHEDULE|BUILD|LAYOUT', got '{norm}'")
    if args.detect is None:
        args.detect = max(0.10, 2 * args.threshold)
    if not args.detect > args.threshold:
        raise StridewiseError(f"--detect ({args.detect}) must exceed --threshold ({args.threshold}): a slowdown at the "
                              "tolerance itself is on the test's null boundary and is never detected")
    options = GateOptions(args.threshold, args.confidence, tuple(args.cases), norm, args.detect)
    return run_gate(args.baseline, args.current, options, args.format, args.out)


def run_gate(baseline_path: str, currents: list[str], options: GateOptions, fmt: str, out: str | None) -> int:
    baseline = load_baseline(baseline_path, RunStore(Path(currents[0])).read().metadata.machine_id)
    frame, summary = gate(baseline, currents, options)
    for w in summary["warnings"]:
        print(f"stridewise: warning: {w}", file=sys.stderr)
    text = render_gate(frame, summary, fmt)
    if out:
        try:
            Path(out).write_text(text)
        except OSError as exc:
            raise StridewiseError(f"cannot write the report to {out}: {exc.strerror or exc}") from None
    else:
        sys.stdout.write(text)
    return gate_verdict(frame, render_gate(frame, summary, "md"))
