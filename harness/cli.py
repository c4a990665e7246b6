"""The ``stridewise`` command line."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from harness import __version__, layouts_cmd
from kernels.errors import StridewiseError

EXIT_USAGE = 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit status 2
        self.exit(EXIT_USAGE, f"stridewise: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="stridewise",
        description="Benchmark structured-grid kernels over many memory layouts of the same model state.",
    )
    parser.add_argument("--version", action="version", version=f"stridewise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    layouts_cmd.add_parser(sub)
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
    sweep_p.add_argument("--quiet", action="store_true", help="no progress bar (for CI logs)")
    sweep_p.add_argument("--no-vector-report", action="store_true", help="skip reading the machine code for vectorisation")
    sweep_p.set_defaults(func=_sweep)
    roof_p = sub.add_parser("roof", help="measure and print the triad bandwidth curve of this machine")
    roof_p.add_argument("--threads", default=None, help="thread counts, comma separated (default: 1 and the usable core count)")
    roof_p.add_argument("--max-bytes", default="1GiB", help="largest triad footprint, e.g. 512MiB, 2GiB")
    roof_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    roof_p.add_argument("--plot", metavar="PNG", help="also plot the curve (needs the 'plot' extra)")
    roof_p.set_defaults(func=_roof)
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
    rank_p.set_defaults(func=_rank)
    gate_p = sub.add_parser("gate", help="compare a run with a stored baseline; exit 1 on significant slowdowns",
                            description="Gate: exit 0 pass, 1 regression found, 2 unusable input.")
    gate_p.add_argument("baseline", help="baseline file, or a directory holding <machine-id>.json baselines")
    gate_p.add_argument("current", nargs="+", metavar="RUN_DIR", help="run directory (several: their runs are pooled)")
    gate_p.add_argument("--threshold", type=float, default=0.10, help="slowdown that counts, as a fraction (default 0.10)")
    gate_p.add_argument("--confidence", type=float, default=0.95, help="confidence level (default 0.95)")
    gate_p.add_argument("--cases", action="append", default=[], metavar="GLOB", help="gate only case ids matching (repeatable)")
    gate_p.add_argument("--normalise", nargs="?", const="triad", metavar="REF",
                        help="scale each time by a same-run reference: 'triad' (default) or 'case:KERNEL|SCHEDULE|BUILD|LAYOUT'")
    gate_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    gate_p.add_argument("--out", help="write the report here instead of standard output")
    gate_p.set_defaults(func=_gate)
    vs_p = sub.add_parser(
        "versus", help="gate: two code versions measured side by side in one run; exit 1 on significant slowdowns",
        description="Measure the kernels of two code versions (git revisions or directories holding kernels/) in one "
        "run, alternating them round by round, and gate head against base with a paired test. Exit 0 pass, "
        "1 regression found, 2 unusable input.")
    vs_p.add_argument("base", help="base version: a git revision (e.g. origin/main) or a directory holding kernels/")
    vs_p.add_argument("head", nargs="?", default=None,
                      help="head version, likewise (default: the kernels this stridewise runs, i.e. the working tree)")
    vs_p.add_argument("--suite", default="smoke", help="suite file or built-in name (default: smoke)")
    vs_p.add_argument("--rounds", type=int, default=20, help="measured round pairs per group (default 20)")
    vs_p.add_argument("--threshold", type=float, default=0.05, help="slowdown that counts, as a fraction (default 0.05)")
    vs_p.add_argument("--confidence", type=float, default=0.95, help="confidence level (default 0.95)")
    vs_p.add_argument("--cases", action="append", default=[], metavar="GLOB", help="gate only case ids matching (repeatable)")
    vs_p.add_argument("--repo", default=".", help="git repository the revisions belong to (default: the current directory)")
    vs_p.add_argument("--out", help="run directory to create (default: results/runs/<time>-versus-<machine>)")
    vs_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    vs_p.add_argument("--quiet", action="store_true", help="no progress lines")
    vs_p.set_defaults(func=_versus)
    base_p = sub.add_parser("baseline", help="manage gate baselines")
    base_sub = base_p.add_subparsers(dest="action", metavar="ACTION", parser_class=_Parser)
    base_sub.required = True
    save_p = base_sub.add_parser("save", help="merge several runs into results/baselines/<machine-id>.json")
    save_p.add_argument("runs", nargs="+", metavar="RUN_DIR")
    save_p.add_argument("--out", help="baseline file to write (default: results/baselines/<machine-id>.json)")
    save_p.add_argument("--at-least", type=int, default=3, metavar="N", help="refuse fewer than N runs (default 3)")
    save_p.set_defaults(func=_baseline_save)
    imp_p = sub.add_parser("import-bench", help="import a pytest-benchmark JSON file as a run directory")
    imp_p.add_argument("file")
    imp_p.add_argument("--out", required=True, help="run directory to create")
    imp_p.set_defaults(func=_import_bench)
    return parser


def _check_gate_levels(args: argparse.Namespace) -> None:
    """--threshold and --confidence, shared by both gates."""
    if not 0 < args.threshold:
        raise StridewiseError(f"--threshold must be a positive fraction, got {args.threshold}")
    if not 0.5 <= args.confidence < 1:
        raise StridewiseError(f"--confidence must be in [0.5, 1), got {args.confidence}")


def _gate(args: argparse.Namespace) -> int:
    from harness.gate import GateOptions, run_gate

    _check_gate_levels(args)
    norm = args.normalise
    if norm not in (None, "triad") and not (norm.startswith("case:") and norm.count("|") == 3):
        raise StridewiseError(f"--normalise must be 'triad' or 'case:KERNEL|SCHEDULE|BUILD|LAYOUT', got '{norm}'")
    options = GateOptions(args.threshold, args.confidence, tuple(args.cases), norm)
    return run_gate(args.baseline, args.current, options, args.format, args.out)


def _versus(args: argparse.Namespace) -> int:
    import json
    from pathlib import Path

    from harness import machine
    from harness.gate import gate_verdict
    from harness.suite import load_suite
    from harness.suite import read_suite_text
    from harness.sweep import default_run_dir
    from harness.versus import run_versus
    from harness.versus_gate import paired_gate, render_versus

    _check_gate_levels(args)
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
    table = paired_gate(store.samples(), store.cases(), args.threshold, args.confidence, tuple(args.cases))
    if table.empty:
        raise StridewiseError("no case ran in both versions; nothing to gate")
    metadata = store.metadata()
    report = render_versus(table, metadata, args.threshold, args.confidence)
    (out / "gate.md").write_text(report)
    table.to_csv(out / "gate.csv", index=False)
    if args.format == "md":
        sys.stdout.write(report)
    elif args.format == "csv":
        sys.stdout.write(table.to_csv(index=False))
    else:
        sys.stdout.write(json.dumps({"versions": metadata.get("versions"), "cases": json.loads(table.to_json(orient="records"))},
                                    indent=2) + "\n")
    return gate_verdict(table, report)


def _baseline_save(args: argparse.Namespace) -> int:
    from harness.gate import save_baseline

    path = save_baseline(args.runs, args.out, args.at_least)
    print(f"stridewise: baseline of {len(args.runs)} runs written to {path}", file=sys.stderr)
    return 0


def _import_bench(args: argparse.Namespace) -> int:
    from harness.bench_import import import_bench

    path, n, raw = import_bench(args.file, args.out)
    note = "" if raw else " (no raw samples: ranked on summary figures only; the gate will refuse it)"
    print(f"stridewise: {n} benchmarks imported into {path}{note}", file=sys.stderr)
    return 0


def _rank(args: argparse.Namespace) -> int:
    from harness.rank import RankOptions, load_runs, rank_runs
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

        Path(args.out).write_text(text)
        print(f"stridewise: report written to {args.out}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    if args.plots:
        from harness.plots import plot_ranking

        paths = plot_ranking(ranking, args.plots)
        print(f"stridewise: {len(paths)} plots written to {args.plots}", file=sys.stderr)
    return 0


def _sweep(args: argparse.Namespace) -> int:
    from harness.sweep import run_sweep

    if args.smoke and args.suite:
        raise StridewiseError("give either a suite or --smoke, not both")
    if args.repeat is not None and args.repeat < 1:
        raise StridewiseError(f"--repeat must be a positive number of runs, got {args.repeat}")
    if args.repeat is not None and args.resume:
        raise StridewiseError("--repeat cannot change a run being resumed; it keeps the repetitions it began with")
    return run_sweep("smoke" if args.smoke else args.suite, args.out, args.resume, args.quiet, args.no_vector_report,
                     args.repeat)


def _roof(args: argparse.Namespace) -> int:
    from harness.roof_cmd import run_roof

    return run_roof(args)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except StridewiseError as exc:
        print(f"stridewise: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("stridewise: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
