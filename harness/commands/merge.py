"""``stridewise merge``: several run directories of one suite as one run directory."""

from __future__ import annotations

import argparse
import sys


def add_parser(sub: argparse._SubParsersAction) -> None:
    merge_p = sub.add_parser("merge", help="merge run directories of one suite (shards, machines) into one",
                             description="Merge run directories of one suite and kernels version into one run directory "
                                         "that rank, gate and the plots read like any other; exit 2 when they differ.")
    merge_p.add_argument("runs", nargs="+", metavar="RUN_DIR")
    merge_p.add_argument("--out", required=True, help="run directory to create")
    merge_p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from harness.merge import merge_runs
    from harness.rank import RankOptions, rank_runs
    from harness.report import render_markdown
    from harness.runs import load_runs
    from harness.store import RunStore
    from kernels.errors import StridewiseError

    path = merge_runs(args.runs, args.out)
    store = RunStore(path)
    metadata = store.metadata()
    machines = sorted(metadata.get("machines") or {})
    try:
        ranking = rank_runs(load_runs([str(path)]), RankOptions(reference=(metadata.get("suite") or {}).get("layouts", [None])[0]))
        store.write_summary(render_markdown(ranking, title=f"Merged run `{(metadata.get('suite') or {}).get('name')}`"))
    except StridewiseError as exc:
        print(f"stridewise: warning: no ranking summary for the merged run: {exc}", file=sys.stderr)
    cases = store.cases()
    print(f"stridewise: merged {len(args.runs)} runs ({len(cases)} case rows, machines {', '.join(machines)}) into {path}",
          file=sys.stderr)
    return 0
