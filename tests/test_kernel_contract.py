"""One contract, checked for every registered kernel: a kernel is covered the day it registers."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kernels.base import Kernel
from kernels.errors import KernelError, LayoutError
from kernels.grid import Extents
from kernels.layout import parse_layout, permutations
from kernels.registry import all_kernels, get_kernel
from kernels.state import State
from tests.strategies import layouts_for

KERNELS = all_kernels()
DTYPES = ("float64", "float32")
GRID = Extents(var=3, z=5, y=4, x=6)
# Beyond the 24 permutations: tilings with tiles at each depth, padding of outer and inner axes,
# a base offset, and tile indices innermost.
SPECIAL = [
    "y/2.x/3.var.z.y%2.x%3",
    "y/4.x/6.var.z.y%4.x%6",
    "var.z.y+1.x+8",
    "z+2.var+1.y.x@16",
    "y%2.x%3.var.z.y/2.x/3",
    "x/3.y/2.z.x%3+1.var.y%2+2",
    "var.y/2.z.y%2.x",
]
LAYOUTS = [p.spec for p in permutations()] + SPECIAL


def test_registry_has_both_families() -> None:
    families = {k.family for k in KERNELS.values()}
    assert {"columns", "stencils"} <= families
    assert {"varcoef", "levelcoef", "sharedcoef", "laplacian", "hyperdiffusion", "advection"} <= set(KERNELS)


@pytest.mark.parametrize("name", sorted(KERNELS))
def test_declares_the_contract(name: str) -> None:
    kernel = KERNELS[name]
    assert isinstance(kernel, Kernel)
    names = [s.name for s in kernel.schedules]
    assert len(names) >= 2 and len(set(names)) == len(names)
    assert kernel.summary and kernel.family
    assert kernel.tolerance("float32") > kernel.tolerance("float64") > 0
    assert kernel.flops(GRID) > 0


@pytest.mark.parametrize("name", sorted(KERNELS))
@pytest.mark.parametrize("dtype", DTYPES)
def test_traffic_model_counts_each_array_once(name: str, dtype: str) -> None:
    """STREAM convention: each input read once and the output written once, logical elements only.

    From memory: J. D. McCalpin's STREAM benchmark counts each array once per kernel pass and no
    write-allocate traffic (its published counting rules).
    """
    kernel = KERNELS[name]
    logical = kernel.logical_inputs(GRID, np.dtype(dtype), 0)
    itemsize = np.dtype(dtype).itemsize
    expected = (sum(v.size for v in logical.values()) + GRID.points) * itemsize
    assert kernel.traffic_bytes(GRID, dtype) == expected


@pytest.mark.parametrize("name", sorted(KERNELS))
def test_inputs_are_deterministic(name: str) -> None:
    kernel = KERNELS[name]
    a = kernel.logical_inputs(GRID, np.dtype("float64"), 7)
    b = kernel.logical_inputs(GRID, np.dtype("float64"), 7)
    c = kernel.logical_inputs(GRID, np.dtype("float64"), 8)
    assert all(np.array_equal(a[k], b[k]) for k in a)
    assert any(not np.array_equal(a[k], c[k]) for k in a)


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(KERNELS))
@pytest.mark.parametrize("dtype", DTYPES)
def test_every_layout_schedule_and_build_matches_reference(name: str, dtype: str) -> None:
    kernel = KERNELS[name]
    failures = []
    for spec in LAYOUTS:
        problem = kernel.make_problem(spec, GRID, dtype, seed=3)
        for schedule in kernel.schedules:
            for build in ("parallel", "serial"):
                result = kernel.validate(problem, schedule, build)
                if not result.ok:
                    failures.append(f"{spec} {schedule.name} {build}: {result.message}")
            kernel.bind(problem, schedule, "empty")()  # the overhead twin runs with the same arguments
    assert not failures, "\n".join(failures)


@pytest.mark.slow
@settings(max_examples=25)
@given(data=st.data(), name=st.sampled_from(sorted(KERNELS)))
def test_random_layouts_match_reference(data: st.DataObject, name: str) -> None:
    ext = Extents(*(data.draw(st.integers(1, 6)) for _ in range(4)))
    layout = data.draw(layouts_for(ext))
    kernel = KERNELS[name]
    problem = kernel.make_problem(layout, ext, "float64", seed=1)
    for schedule in kernel.schedules:
        result = kernel.validate(problem, schedule)
        assert result.ok, f"{layout.spec} {ext} {schedule.name}: {result.message}"


def test_a_wrong_answer_fails_validation() -> None:
    """The validator can fail: corrupt one input after the reference inputs were taken."""
    kernel = get_kernel("laplacian")
    problem = kernel.make_problem("var.z.y.x", GRID)
    problem.fields["q"].data[0, 0, 0, 0] += 1.0
    result = kernel.validate(problem, "block")
    assert not result.ok and "exceeds tolerance" in result.message


def test_singular_column_system_is_a_validation_failure() -> None:
    kernel = get_kernel("levelcoef")
    logical = kernel.logical_inputs(GRID, np.dtype("float64"), 0)
    logical["b"][:] = 0.0
    logical["a"][:] = 0.0
    logical["c"][:] = 0.0  # every pivot is zero
    problem = kernel.problem_from("var.z.y.x", logical, "float64")
    result = kernel.validate(problem, "strip")
    assert not result.ok and "not finite" in result.message


def test_inputs_of_wrong_extents_or_dtype_are_refused() -> None:
    kernel = get_kernel("varcoef")
    problem = kernel.make_problem("var.z.y.x", GRID)
    problem.fields["a"] = State.zeros("var.z.y.x", GRID.replace(x=7))
    with pytest.raises(KernelError, match="input 'a'"):
        kernel.bind(problem, "column")
    problem = kernel.make_problem("var.z.y.x", GRID)
    problem.fields["d"] = State.zeros("var.z.y.x", GRID, "float32")
    with pytest.raises(KernelError, match="input 'd'.*float32"):
        kernel.bind(problem, "strip")
    problem = get_kernel("levelcoef").make_problem("var.z.y.x", GRID)
    problem.arrays["b"] = np.ones(GRID.z + 1)
    with pytest.raises(KernelError, match="input 'b'"):
        get_kernel("levelcoef").bind(problem, "column")


def test_unknown_names_suggest_close_matches() -> None:
    with pytest.raises(KernelError, match="did you mean 'laplacian'"):
        get_kernel("laplacain")
    with pytest.raises(KernelError, match="schedules: column, strip"):
        get_kernel("varcoef").schedule("diagonal")


def test_tile_that_does_not_fit_the_grid_is_refused() -> None:
    with pytest.raises(LayoutError, match="axis 'x'"):
        get_kernel("laplacian").make_problem(parse_layout("y/2.x/4.var.z.y%2.x%4"), GRID)


@pytest.mark.parametrize("name", sorted(KERNELS))
def test_declared_input_shapes_and_footprint(name: str) -> None:
    kernel = KERNELS[name]
    logical = kernel.logical_inputs(GRID, np.dtype("float64"), 0)
    declared = kernel.input_shapes(GRID)
    assert set(declared) == set(logical)
    for key, shape in declared.items():
        expected = shape.shape if isinstance(shape, Extents) else (shape,)
        assert logical[key].shape == expected, key
    for spec in ("var.z.y.x", "var.z+1.y.x+8", "y/2.x/3.var.z.y%2.x%3"):
        problem = kernel.make_problem(spec, GRID)
        assert kernel.footprint(spec, GRID, "float64") == problem.nbytes()


def test_first_touch_toucher_is_used_and_values_survive() -> None:
    touched: list[int] = []

    def toucher(raw: np.ndarray) -> None:
        touched.append(raw.nbytes)
        raw[...] = 0

    kernel = get_kernel("advection")
    problem = kernel.make_problem("y.x.z.var", GRID, toucher=toucher)
    assert len(touched) == 4  # q, u, v and the output
    assert kernel.validate(problem, "block").ok
