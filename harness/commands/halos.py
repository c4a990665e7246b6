"""``stridewise halos``: pack, MPI exchange and unpack of halo faces per layout, run under mpiexec."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from harness.halos import HaloOptions
from harness.tables import FORMATS
from kernels.errors import StridewiseError

DEFAULT_LAYOUTS = ("var.z.y.x", "z.var.y.x", "var.y.x.z", "y.x.z.var", "y.x.var.z", "var.z.y+1.x", "y/8.x/16.var.z.y%8.x%16")
#: Written to --out; an existing one is never overwritten.
REPORT, FIGURES, SAMPLES = "halos.md", "halos.csv", "halo_samples.csv"
MISSING_MPI = ("halos skipped: mpi4py is not installed, so nothing was measured; "
               "pip install 'stridewise[mpi]' brings mpi4py and the MPICH library, then run e.g. mpiexec -n 4 stridewise halos")


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("halos", help="time packing, MPI exchange and unpacking of halo faces per layout (run under mpiexec -n N)")
    p.add_argument("--grid", default="var=4,z=64,y=48,x=48", help="each rank's interior extents, halo excluded")
    p.add_argument("--halo", type=int, default=2, help="halo width in cells (default 2)")
    p.add_argument("--layouts", default=",".join(DEFAULT_LAYOUTS), help="layout specs, comma separated (default: the default suite's)")
    p.add_argument("--dtype", default="float64", help="float64 or float32")
    p.add_argument("--rounds", type=int, default=24, help="measured rounds (default 24), after 2 warm-up rounds")
    p.add_argument("--seed", type=int, default=0, help="seed of the per-round layout order")
    p.add_argument("--format", default="md", choices=FORMATS)
    p.add_argument("--out", metavar="DIR", help=f"also write {REPORT}, {FIGURES} and {SAMPLES} there (a new directory or one without them)")
    p.set_defaults(func=run_halos)


def _rank_from_environment() -> int:
    """This process's rank as the MPI launcher set it, before MPI starts (0 when not launched)."""
    for key in ("PMI_RANK", "OMPI_COMM_WORLD_RANK", "PMIX_RANK"):
        if key in os.environ:
            return int(os.environ[key])
    return 0


def options_from(args: argparse.Namespace) -> HaloOptions:
    """Checked options; every rank checks the same arguments the same way."""
    from kernels.grid import Extents, check_dtype
    from kernels.notation import parse_layout

    interior = Extents.parse(args.grid)
    if args.halo < 1 or min(interior.y, interior.x) < args.halo:
        raise StridewiseError(f"--halo {args.halo}: the halo must be 1 or more and at most the interior's y and x "
                              f"({interior.y}, {interior.x}); valid: 1..{min(interior.y, interior.x)}")
    layouts = tuple(dict.fromkeys(parse_layout(s.strip()).spec for s in args.layouts.split(",") if s.strip()))
    if not layouts:
        raise StridewiseError("--layouts names no layout; give layout specs separated by commas, e.g. var.z.y.x,y.x.z.var")
    full = interior.replace(y=interior.y + 2 * args.halo, x=interior.x + 2 * args.halo)
    for spec in layouts:
        parse_layout(spec).check(full)
    if args.rounds < 4:
        raise StridewiseError(f"--rounds {args.rounds}: at least 4 rounds are needed for an interval; valid: 4 or more")
    if args.out and any((Path(args.out) / name).exists() for name in (REPORT, FIGURES, SAMPLES)):
        raise StridewiseError(f"--out {args.out} already holds a halo measurement; give a new directory (nothing is overwritten)")
    return HaloOptions(interior, args.halo, layouts, check_dtype(args.dtype).name, args.rounds, seed=args.seed)


def run_halos(args: argparse.Namespace) -> int:
    try:
        options = options_from(args)
    except StridewiseError:
        if _rank_from_environment() != 0:
            return 2  # rank 0 prints the one line
        raise
    try:
        from mpi4py import MPI
    except ImportError:
        print(f"stridewise: {MISSING_MPI}", file=sys.stderr)
        return 0
    from harness.halo_report import figures, render_markdown, slowest_rank
    from harness.halos import measure
    from harness.tables import render

    result = measure(MPI.COMM_WORLD, options)
    if result is None:
        return 0
    failed = {layout: err for layout, err in result["errors"].items() if err != 0.0}
    if len(failed) == len(options.layouts):
        print("stridewise: error: no layout's exchange reproduced the neighbours' interiors, so nothing was timed; "
              "largest differences: " + ", ".join(f"{l} {err:.3g}" for l, err in failed.items()), file=sys.stderr)
        return 1
    rows = figures(result, options)
    text = render_markdown(rows, result, options) if args.format == "md" else render(rows, args.format)
    sys.stdout.write(text if text.endswith("\n") else text + "\n")
    if args.out:
        out = Path(args.out)
        try:
            out.mkdir(parents=True, exist_ok=True)
            (out / REPORT).write_text(render_markdown(rows, result, options) + "\n")
            (out / FIGURES).write_text(render(rows, "csv"))
            slowest_rank(result["samples"]).reset_index().to_csv(out / SAMPLES, index=False)
        except OSError as exc:
            raise StridewiseError(f"cannot write the halo results to {out}: {exc.strerror or exc}") from None
    return 1 if any(err != 0.0 for err in result["errors"].values()) else 0
