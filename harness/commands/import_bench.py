"""``stridewise import-bench``: a pytest-benchmark JSON file as a run directory."""

from __future__ import annotations

import argparse
import sys


def add_parser(sub: argparse._SubParsersAction) -> None:
    imp_p = sub.add_parser("import-bench", help="import a pytest-benchmark JSON file as a run directory")
    imp_p.add_argument("file")
    imp_p.add_argument("--out", required=True, help="run directory to create")
    imp_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from harness.bench_import import import_bench

    path, n, raw = import_bench(args.file, args.out)
    note = "" if raw else " (no raw samples: ranked on summary figures only; the gate will refuse it)"
    print(f"stridewise: {n} benchmarks imported into {path}{note}", file=sys.stderr)
    return 0
