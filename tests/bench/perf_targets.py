"""Measure the kernel performance targets side by side in one process.

For each kernel and thread count: the best (layout, schedule) among the given layouts, its
bandwidth by the byte model, a STREAM-style triad of the same footprint measured in the same
process at the same thread count, and the NumPy reference's time. Samples are interleaved
(one call of every case per round), medians reported.

    python -m tests.bench.perf_targets --grid var=4,z=64,y=128,x=128 --rounds 15
"""

from __future__ import annotations

import argparse
import random
import time

import numba
import numpy as np
from tabulate import tabulate

from kernels.grid import Extents
from kernels.registry import all_kernels
from kernels.triad import TRIAD, triad_arrays, triad_bytes

DEFAULT_LAYOUTS = "var.z.y.x,var.y.x.z,y.x.z.var,z.var.y.x,var.z.y+1.x,y/8.x/16.var.z.y%8.x%16"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--grid", default="var=4,z=64,y=128,x=128")
    parser.add_argument("--layouts", default=DEFAULT_LAYOUTS)
    parser.add_argument("--kernels", default=",".join(all_kernels()))
    parser.add_argument("--threads", default="1,2")
    parser.add_argument("--rounds", type=int, default=15)
    parser.add_argument("--dtype", default="float64")
    args = parser.parse_args()
    ext = Extents.parse(args.grid)
    kernels = all_kernels()
    rows = []
    for name in args.kernels.split(","):
        kernel = kernels[name]
        problems = {spec: kernel.make_problem(spec, ext, args.dtype) for spec in args.layouts.split(",")}
        ref_times = []
        for _ in range(3):
            start = time.perf_counter()
            kernel.reference(next(iter(problems.values())).logical)
            ref_times.append(time.perf_counter() - start)
        ref = float(np.median(ref_times))
        for threads in (int(t) for t in args.threads.split(",")):
            numba.set_num_threads(threads)
            cases = {}
            for spec, problem in problems.items():
                for schedule in kernel.schedules:
                    check = kernel.validate(problem, schedule)
                    assert check.ok, check.message
                    cases[(spec, schedule.name)] = kernel.bind(problem, schedule)
            # The triad of each layout's footprint runs inside the same rounds, so it sees the same
            # cache and machine state as the kernels it is compared with.
            triads = {}
            for spec, problem in problems.items():
                a, b, c = triad_arrays(problem.nbytes(), args.dtype)
                triads[spec] = triad_bytes(a.shape[0], a.itemsize)
                cases[(spec, "triad")] = (lambda a=a, b=b, c=c: TRIAD.parallel(a, b, c, a.dtype.type(3), threads))
            samples: dict[tuple[str, str], list[float]] = {key: [] for key in cases}
            order = list(cases)
            rng = random.Random(0)
            for _ in range(args.rounds):
                rng.shuffle(order)
                for key in order:
                    start = time.perf_counter_ns()
                    cases[key]()
                    samples[key].append((time.perf_counter_ns() - start) * 1e-9)
            best = min((k for k in samples if k[1] != "triad"), key=lambda k: np.median(samples[k]))
            t = float(np.median(samples[best]))
            triad = triads[best[0]] / float(np.median(samples[(best[0], "triad")]))
            moved = kernel.traffic_bytes(ext, args.dtype)
            rows.append([name, threads, best[0], best[1], t * 1e3, moved / t / 1e9, triad / 1e9, 100 * moved / t / triad, ref / t])
    headers = ["kernel", "threads", "best layout", "schedule", "ms", "GB/s", "triad GB/s", "% triad", "x NumPy ref"]
    print(tabulate(rows, headers=headers, tablefmt="github", floatfmt=".3g"))


if __name__ == "__main__":
    main()
