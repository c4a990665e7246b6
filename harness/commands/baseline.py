"""``stridewise baseline save``: merge runs into a stored baseline."""

from __future__ import annotations

import argparse
import sys

from harness.commands.parser import Parser


def add_parser(sub: argparse._SubParsersAction) -> None:
    base_p = sub.add_parser("baseline", help="manage gate baselines")
    base_sub = base_p.add_subparsers(dest="action", metavar="ACTION", parser_class=Parser)
    base_sub.required = True
    save_p = base_sub.add_parser("save", help="merge several runs into results/baselines/<machine-id>.json")
    save_p.add_argument("runs", nargs="+", metavar="RUN_DIR")
    save_p.add_argument("--out", help="baseline file to write (default: results/baselines/<machine-id>.json)")
    save_p.add_argument("--at-least", type=int, default=3, metavar="N", help="refuse fewer than N runs (default 3)")
    save_p.set_defaults(func=run_save)


def run_save(args: argparse.Namespace) -> int:
    from harness.baseline import save_baseline

    path = save_baseline(args.runs, args.out, args.at_least)
    print(f"stridewise: baseline of {len(args.runs)} runs written to {path}", file=sys.stderr)
    return 0
