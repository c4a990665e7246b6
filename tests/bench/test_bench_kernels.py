"""pytest-benchmark suite: every kernel x schedule over a few layouts, small sizes.

Run with timing on:  pytest tests/bench --benchmark-enable --benchmark-save=NAME [--benchmark-save-data]
(the default test run disables timing and executes each benchmark once as a check). A saved
JSON can be imported by ``stridewise import-bench`` when that command is available.
"""

from __future__ import annotations

import numba
import pytest

from kernels.grid import Extents
from kernels.notation import parse_layout
from kernels.registry import all_kernels

GRID = Extents(var=4, z=32, y=64, x=64)
#: With timing disabled (the default test run) each case runs once as a check, on a smaller grid.
CHECK_GRID = Extents(var=2, z=8, y=16, x=32)
LAYOUTS = ("var.z.y.x", "y.x.z.var", "y/8.x/16.var.z.y%8.x%16")
CASES = [(k, s.name, layout) for k, kernel in all_kernels().items() for s in kernel.schedules for layout in LAYOUTS]


@pytest.mark.parametrize("kernel_name, schedule, layout", CASES, ids=[f"{k}-{s}-{parse_layout(lay).file_stem}" for k, s, lay in CASES])
def test_kernel(benchmark: pytest.FixtureRequest, kernel_name: str, schedule: str, layout: str) -> None:
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    kernel = all_kernels()[kernel_name]
    grid = kernel.fitted(CHECK_GRID if benchmark.disabled else GRID)  # var raised where a kernel needs more
    problem = kernel.make_problem(layout, grid, "float64")
    check = kernel.validate(problem, schedule)
    assert check.ok, check.message  # never time a wrong answer
    call = kernel.bind(problem, schedule)
    benchmark.extra_info.update(
        kernel=kernel_name, schedule=schedule, layout=layout, grid=str(grid), dtype="float64",
        threads=numba.get_num_threads(), traffic_bytes=kernel.traffic_bytes(grid, "float64"), flops=kernel.flops(grid),
    )
    benchmark(call)
