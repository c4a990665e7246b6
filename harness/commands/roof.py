"""``stridewise roof``: the triad bandwidth curve of this machine, alone (a quick look at a new lab machine)."""

from __future__ import annotations

import argparse
import multiprocessing
import re
import sys
from typing import Any

from harness import machine
from harness.compute_roof import describe_ceiling
from harness.processes import ChildError, environment, receive, signals_held
from harness.roof import MAX_FOOTPRINT, MIN_FOOTPRINT, RoofCurve
from harness.sweep import MEMORY_SHARE
from harness.tables import render
from harness.worker import compute_ceilings, worker_environment
from kernels.errors import StridewiseError

#: Longest wait for one thread count's curve (a 1 GiB curve takes well under a minute here).
ROOF_TIMEOUT_S = 900.0
_UNITS = {"": 1, "B": 1, "KIB": 1 << 10, "MIB": 1 << 20, "GIB": 1 << 30, "KB": 10**3, "MB": 10**6, "GB": 10**9}


def add_parser(sub: argparse._SubParsersAction) -> None:
    roof_p = sub.add_parser("roof", help="measure and print the triad bandwidth curve of this machine")
    roof_p.add_argument("--threads", default=None, help="thread counts, comma separated (default: 1 and the usable core count)")
    roof_p.add_argument("--max-bytes", default="1GiB", help="largest triad footprint, e.g. 512MiB, 2GiB")
    roof_p.add_argument("--format", default="md", choices=("md", "csv", "json"))
    roof_p.add_argument("--plot", metavar="PNG", help="also plot the curve (needs the 'plot' extra)")
    roof_p.set_defaults(func=run_roof)


def parse_bytes(text: str) -> int:
    """'512MiB' -> 536870912; plain integers are bytes."""
    m = re.fullmatch(r"\s*(\d+)\s*([A-Za-z]*)\s*", text)
    if not m or m[2].upper() not in _UNITS or int(m[1]) <= 0:
        raise StridewiseError(f"bad size '{text}'; write a positive number with an optional unit: B, KiB, MiB, GiB, KB, MB, GB")
    return int(m[1]) * _UNITS[m[2].upper()]


def _measure(threads: int, max_bytes: int, out: Any) -> None:
    import numba

    from harness.roof import measure_curve

    from harness.processes import exit_with_parent

    exit_with_parent()
    numba.set_num_threads(threads)
    try:
        out.put(("ok", measure_curve(threads, max_bytes).as_dict(), compute_ceilings(threads, ["float64"])["float64"]))
    except MemoryError:
        out.put(("error", f"the triad at {max_bytes / 2**30:.3g} GiB does not fit in the memory this process may use"))
    except Exception as exc:  # noqa: BLE001 - reported by the parent in one line
        out.put(("error", f"{type(exc).__name__}: {exc}"))


def run_roof(args: argparse.Namespace) -> int:
    usable = machine.usable_cores()
    if args.threads:
        try:
            counts = [int(t) for t in args.threads.split(",")]
        except ValueError:
            raise StridewiseError(f"bad thread counts '{args.threads}'; write positive integers, e.g. 1,2") from None
        if any(c <= 0 for c in counts):
            raise StridewiseError(f"thread counts must be positive, got {args.threads}")
    else:
        counts = sorted({1, usable})
    max_bytes = parse_bytes(args.max_bytes)
    if not MIN_FOOTPRINT <= max_bytes <= MAX_FOOTPRINT:
        raise StridewiseError(f"--max-bytes must be between 16KiB (the smallest triad footprint) and 1TiB, got {args.max_bytes}")
    available = machine.available_memory_bytes()
    if available and max_bytes > MEMORY_SHARE * available:
        raise StridewiseError(f"--max-bytes {args.max_bytes} is more than {MEMORY_SHARE:.0%} of the {available / 2**30:.1f} GiB "
                              "this process may use (available memory, or its ulimit -v); give a smaller size")
    ctx = multiprocessing.get_context("spawn")
    curves, ceilings = [], []
    for threads in counts:  # one fresh process per thread count, like the sweep's workers
        q = ctx.Queue()
        with environment(worker_environment(threads, "default", False)), signals_held():
            proc = ctx.Process(target=_measure, args=(threads, max_bytes, q), daemon=True)
            proc.start()
        try:
            answer = receive(q, proc, ROOF_TIMEOUT_S, f"roof at {threads} thread(s)")
            if answer[0] == "error":
                raise ChildError(f"roof at {threads} thread(s): {answer[1]}")
            _, curve, ceiling = answer
            curves.append(RoofCurve.from_dict(curve))
            ceilings.append(ceiling)
        except ChildError as exc:
            print(f"stridewise: {exc}", file=sys.stderr)
            return 1
        proc.join()
    records = []
    for curve in curves:
        for fp, bw in zip(curve.footprints, curve.bandwidths):
            records.append({"threads": curve.threads, "footprint_MiB": fp / 2**20, "GB/s": bw / 1e9})
    print(render(records, args.format, floatfmt=".4g"), end="")
    for curve, ceiling in zip(curves, ceilings):
        knees = ", ".join(f"{k / 2**20:.3g} MiB" for k in curve.knees()) or "none"
        print(f"{curve.threads} thread(s): memory roof {curve.memory_roof() / 1e9:.1f} GB/s; knees after {knees}; "
              f"{describe_ceiling(ceiling)}", file=sys.stderr)
    if args.plot:
        from harness.plots import plot_roof

        try:
            plot_roof(curves, args.plot)
        except OSError as exc:
            raise StridewiseError(f"cannot write the plot to {args.plot}: {exc.strerror or exc}") from None
        print(f"plot written to {args.plot}", file=sys.stderr)
    return 0
