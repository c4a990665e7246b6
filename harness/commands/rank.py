"""``stridewise rank``: rank layouts per kernel from run directories."""

from __future__ import annotations

import argparse
import sys

from kernels.errors import StridewiseError


def add_parser(sub: argparse._SubParsersAction) -> None:
    rank_p = sub.add_parser("rank", help="rank layouts per kernel from one or more run directories",
                            description="Rank layouts per kernel (tiers, scaling, kernel mix) from run directories.")
    rank_p.add_argument("runs", nargs="+", metavar="RUN_DIR")
    rank_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    rank_p.add_argument("--out", help="write the report to this file instead of standard output")
    rank_p.add_argument("--reference", metavar="LAYOUT", help="also give speedups over this layout")
    rank_p.add_argument("--alpha", type=float, default=0.05, help="family-wise significance level of tier separations")
    rank_p.add_argument("--floor", type=float, default=0.03, help="minimum practical difference, as a fraction (0.03 = 3%%)")
    rank_p.add_argument("--confidence", type=float, default=0.95, help="two-sided level of every interval (default 0.95)")
    rank_p.add_argument("--mix", help="kernel weights, e.g. varcoef=1,advection=2 (default: the suite's [mix])")
    rank_p.add_argument("--plots", metavar="DIR", help="write PNG plots here (needs the 'plot' extra)")
    rank_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from harness.rank import RankOptions, rank_runs
    from harness.runs import load_runs
    from harness.report import render
    from kernels.notation import parse_layout

    if not 0 < args.alpha < 1:
        raise StridewiseError(f"--alpha must be between 0 and 1, got {args.alpha}")
    if not 0 <= args.floor < 1:
        raise StridewiseError(f"--floor must be a fraction in [0, 1), got {args.floor}")
    if not 0.5 <= args.confidence < 1:
        raise StridewiseError(f"--confidence must be in [0.5, 1), got {args.confidence}")
    mix = None
    if args.mix:
        mix = {}
        for item in args.mix.split(","):
            name, sep, weight = item.partition("=")
            try:
                mix[name.strip()] = float(weight)
            except ValueError:
                raise StridewiseError(f"bad --mix item '{item}'; write KERNEL=WEIGHT, e.g. varcoef=1,advection=2") from None
            if not sep or mix[name.strip()] < 0:
                raise StridewiseError(f"bad --mix item '{item}'; write KERNEL=WEIGHT with WEIGHT >= 0")
    reference = parse_layout(args.reference).spec if args.reference else None
    ranking = rank_runs(load_runs(args.runs), RankOptions(args.alpha, args.floor, reference, mix, args.confidence))
    text = render(ranking, args.format)
    if args.out:
        from pathlib import Path

        try:
            Path(args.out).write_text(text)
        except OSError as exc:
            raise StridewiseError(f"cannot write the report to {args.out}: {exc.strerror or exc}") from None
        print(f"stridewise: report written to {args.out}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    if args.plots:
        from harness.plots import plot_ranking

        try:
            paths = plot_ranking(ranking, args.plots)
        except OSError as exc:
            raise StridewiseError(f"cannot write plots to {args.plots}: {exc.strerror or exc}") from None
        print(f"stridewise: {len(paths)} plots written to {args.plots}", file=sys.stderr)
    return 0
