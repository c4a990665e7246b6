"""The kernel contract as checks any kernel can run, in this project or in a lab's own module.

Each check takes one kernel and raises ``ContractViolation`` naming what is wrong. The project's
own test suite runs every check over the registry; a lab's out-of-tree kernel module (loaded via
``STRIDEWISE_KERNEL_MODULES``) runs the same checks with ``check_kernel`` or check by check::

    from kernels.testing import CHECKS
    @pytest.mark.parametrize("check", CHECKS, ids=lambda c: c.__name__)
    def test_contract(check): check(MY_KERNEL)

``kernels.testing.strategies`` adds hypothesis strategies (extents, layouts that fit them).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from kernels.base import Kernel
from kernels.errors import KernelError
from kernels.grid import Extents
from kernels.families import permutations

DTYPES = ("float64", "float32")
#: Small and uneven on purpose: every axis distinct, so a transposed index shows up.
GRID = Extents(var=3, z=5, y=4, x=6)
#: Beyond the 24 permutations: tilings with tiles at each depth, padding of outer and inner axes,
#: a base offset, tile indices innermost, partial last tiles (3 and 4 divide neither 4 nor 6), and
#: blocks of the flattened horizontal index that straddle rows (5 and 7 divide neither 6 nor 24).
SPECIAL_LAYOUTS = (
    "y/2.x/3.var.z.y%2.x%3",
    "y/4.x/6.var.z.y%4.x%6+2",
    "var.z.y+1.x+8",
    "z+2.var+1.y.x@16",
    "y%2.x%3.var.z.y/2.x/3",
    "x/3.y/2.z.x%3+1.var.y%2+2",
    "var.y/2.z.y%2.x",
    "y/3.x/4.var.z.y%3.x%4",
    "yx/5.var.z.yx%5",
    "z.yx/7.var.yx%7+1",
)
LAYOUTS = tuple(p.spec for p in permutations()) + SPECIAL_LAYOUTS


class ContractViolation(AssertionError):
    """A kernel does not meet the contract."""


def _require(condition: bool, message: str) -> None:
    if not condition:
        raise ContractViolation(message)


def check_declarations(kernel: Kernel) -> None:
    """Name, family, summary, two or more distinct schedules, tolerances, a positive flop count,
    and a var rule that accepts the grids it fits."""
    _require(isinstance(kernel, Kernel), f"{kernel!r} is not a kernels.base.Kernel")
    names = [s.name for s in kernel.schedules]
    _require(len(names) >= 2 and len(set(names)) == len(names), f"{kernel.name}: needs two or more distinct schedules, has {names}")
    _require(bool(kernel.summary and kernel.family), f"{kernel.name}: summary and family must be set")
    _require(kernel.tolerance("float32") > kernel.tolerance("float64") > 0, f"{kernel.name}: tolerances must be positive, float32's larger")
    _require(kernel.flops(kernel.fitted(GRID)) > 0, f"{kernel.name}: flops must be positive")
    for var in range(1, 9):
        fitted = kernel.fitted(GRID.replace(var=var))
        _require(fitted.var >= var and kernel.unsupported(fitted) is None,
                 f"{kernel.name}: fitted() gives var={fitted.var} for var={var}, which unsupported() refuses")


def check_traffic_model(kernel: Kernel) -> None:
    """STREAM convention: each input read once and the output written once, logical elements only
    (those the kernel writes: ``defined_output``).

    From memory: J. D. McCalpin's STREAM benchmark counts each array once per kernel pass and no
    write-allocate traffic (its published counting rules).
    """
    grid = kernel.fitted(GRID)
    mask = kernel.defined_output(grid)
    written = grid.points if mask is None else int(np.broadcast_to(mask, grid.shape).sum())
    for dtype in DTYPES:
        logical = kernel.logical_inputs(grid, np.dtype(dtype), 0)
        expected = (sum(v.size for v in logical.values()) + written) * np.dtype(dtype).itemsize
        got = kernel.traffic_bytes(grid, dtype)
        _require(got == expected, f"{kernel.name}: traffic_bytes is {got} in {dtype}, the counting rule gives {expected}")


def check_inputs_deterministic(kernel: Kernel) -> None:
    """The same seed gives the same inputs; another seed different ones."""
    a, b, c = (kernel.logical_inputs(kernel.fitted(GRID), np.dtype("float64"), s) for s in (7, 7, 8))
    _require(all(np.array_equal(a[k], b[k]) for k in a), f"{kernel.name}: inputs differ between two calls with seed 7")
    _require(any(not np.array_equal(a[k], c[k]) for k in a), f"{kernel.name}: seeds 7 and 8 give the same inputs")


def check_input_shapes_and_footprint(kernel: Kernel) -> None:
    """Declared input shapes match the inputs made; the footprint model matches allocation."""
    grid = kernel.fitted(GRID)
    logical = kernel.logical_inputs(grid, np.dtype("float64"), 0)
    declared = kernel.input_shapes(grid)
    _require(set(declared) == set(logical), f"{kernel.name}: declares inputs {sorted(declared)}, makes {sorted(logical)}")
    for key, shape in declared.items():
        expected = shape.shape if isinstance(shape, Extents) else (shape,)
        _require(logical[key].shape == expected, f"{kernel.name}: input '{key}' has shape {logical[key].shape}, declared {expected}")
    for spec in ("var.z.y.x", "var.z+1.y.x+8", "y/2.x/3.var.z.y%2.x%3"):
        problem = kernel.make_problem(spec, grid)
        model, real = kernel.footprint(spec, grid, "float64"), problem.nbytes()
        _require(model == real, f"{kernel.name}: footprint model {model} B, allocated {real} B in {spec}")


def check_layouts(kernel: Kernel, layouts: Sequence[str] = LAYOUTS, dtypes: Sequence[str] = DTYPES,
                  extents: Extents = GRID, builds: Sequence[str] = ("parallel", "serial")) -> None:
    """Every layout, schedule and build (parallel, serial) matches the reference, and so does each
    stage of a kernel that runs stages (first build); the empty twin runs. A layout the kernel
    ``refuses`` must fail to bind with a KernelError instead.

    The grid is ``extents`` with var raised to the kernel's smallest accepted value at or above it.
    """
    extents = kernel.fitted(extents)
    failures = []
    for dtype in dtypes:
        for spec in layouts:
            problem = kernel.make_problem(spec, extents, dtype, seed=3)
            reason = kernel.refuses(problem.layout)
            if reason:
                try:
                    kernel.bind(problem, kernel.schedules[0])
                    failures.append(f"{spec}: refused ({reason}), yet it binds")
                except KernelError:
                    pass
                continue
            for schedule in kernel.schedules:
                for build in builds:
                    result = kernel.validate(problem, schedule, build)
                    if not result.ok:
                        failures.append(f"{spec} {dtype} {schedule.name} {build}: {result.message}")
                for index, (part, _) in enumerate(kernel.stages(schedule)):
                    result = kernel.validate_stage(problem, schedule, index, builds[0])
                    if not result.ok:
                        failures.append(f"{spec} {dtype} {schedule.name} stage {index} ({part}): {result.message}")
                kernel.bind(problem, schedule, "empty")()
    _require(not failures, f"{kernel.name}: {len(failures)} case(s) fail validation:\n" + "\n".join(failures))


CHECKS: tuple[Callable[[Kernel], None], ...] = (
    check_declarations,
    check_traffic_model,
    check_inputs_deterministic,
    check_input_shapes_and_footprint,
    check_layouts,
)


def check_kernel(kernel: Kernel) -> None:
    """Run every check of the contract on one kernel."""
    for check in CHECKS:
        check(kernel)
