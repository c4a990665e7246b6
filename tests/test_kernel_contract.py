"""One contract, checked for every registered kernel: a kernel is covered the day it registers."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from kernels.errors import KernelError, LayoutError
from kernels.grid import Extents
from kernels.notation import parse_layout
from kernels.registry import all_kernels, get_kernel
from kernels.jit import vector_report
from kernels.state import State
from kernels.testing import CHECKS, DTYPES, GRID, ContractViolation, check_layouts, check_traffic_model
from kernels.testing.strategies import layouts_for

KERNELS = all_kernels()
#: The checks that compile every layout are slow; the rest run in milliseconds.
FAST_CHECKS = [c for c in CHECKS if c is not check_layouts]


def test_registry_has_both_families() -> None:
    families = {k.family for k in KERNELS.values()}
    assert {"columns", "stencils"} <= families
    assert {"varcoef", "levelcoef", "sharedcoef", "laplacian", "hyperdiffusion", "advection"} <= set(KERNELS)


@pytest.mark.parametrize("check", FAST_CHECKS, ids=lambda c: c.__name__)
@pytest.mark.parametrize("name", sorted(KERNELS))
def test_contract(name: str, check) -> None:  # type: ignore[no-untyped-def]
    check(KERNELS[name])


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(KERNELS))
@pytest.mark.parametrize("dtype", DTYPES)
def test_every_layout_schedule_and_build_matches_reference(name: str, dtype: str) -> None:
    """Both builds in float64; the threaded build in float32. The serial twin is the same source
    compiled without threads, and each of its float32 specialisations would cost CI seconds of
    compilation; a sweep still validates every case it times, serial float32 included."""
    check_layouts(KERNELS[name], dtypes=(dtype,), builds=("parallel", "serial") if dtype == "float64" else ("parallel",))


def test_checks_catch_a_broken_kernel() -> None:
    """The shared checks can fail: a kernel with a wrong traffic model and a wrong answer."""

    class Wrong(type(KERNELS["laplacian"])):  # type: ignore[misc]
        def traffic_bytes(self, extents: Extents, dtype: object) -> int:
            return 1

        def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
            return super().reference(logical) + 1.0

    with pytest.raises(ContractViolation, match="counting rule"):
        check_traffic_model(Wrong())
    with pytest.raises(ContractViolation, match="fail validation"):
        check_layouts(Wrong(), layouts=("var.z.y.x",), dtypes=("float64",))


@pytest.mark.slow
@settings(max_examples=25)
@given(data=st.data(), name=st.sampled_from(sorted(KERNELS)))
def test_random_layouts_match_reference(data: st.DataObject, name: str) -> None:
    kernel = KERNELS[name]
    ext = kernel.fitted(Extents(*(data.draw(st.integers(1, 6)) for _ in range(4))))
    layout = data.draw(layouts_for(ext))
    assume(kernel.refuses(layout) is None)
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
    with pytest.raises(LayoutError, match="tile size 8 exceeds extent 6 of axis 'x'"):
        get_kernel("laplacian").make_problem(parse_layout("y/2.x/8.var.z.y%2.x%8"), GRID)





def test_first_touch_toucher_is_used_and_values_survive() -> None:
    touched: list[int] = []

    def toucher(raw: np.ndarray) -> None:
        touched.append(raw.nbytes)
        raw[...] = 0

    kernel = get_kernel("advection")
    problem = kernel.make_problem("y.x.z.var", GRID, toucher=toucher)
    assert len(touched) == 4  # q, u, v and the output
    assert kernel.validate(problem, "block").ok


def _load_example(name: str, monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    import importlib.util
    from pathlib import Path

    import kernels.registry

    monkeypatch.setattr(kernels.registry, "_REGISTRY", dict(kernels.registry._REGISTRY))  # leave no trace
    path = Path(__file__).resolve().parents[1] / "docs" / "examples" / f"{name}.py"
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
    spec.loader.exec_module(module)  # type: ignore[union-attr]
    return get_kernel(name)


def test_the_out_of_tree_stencil_example_meets_the_contract(monkeypatch: pytest.MonkeyPatch) -> None:
    """docs/examples/binomial_smoother.py, the README's example of adding a stencil."""
    kernel = _load_example("binomial_smoother", monkeypatch)
    for check in FAST_CHECKS:
        check(kernel)
    # The threaded build only: the serial twin is the same walk, and each build costs CI seconds to compile.
    check_layouts(kernel, layouts=("var.z.y.x", "y/2.x/3.var.z.y%2.x%3", "z.y.x.var"), dtypes=("float64",), builds=("parallel",))


def test_the_native_c_stencil_example_meets_the_contract(monkeypatch: pytest.MonkeyPatch) -> None:
    """docs/examples/native_laplacian.c built with cc -O3 -march=native, validated like any kernel,
    and its output equal to the numba laplacian's to the last bit in float64 (same operation order)."""
    from kernels.native import c_compiler

    if c_compiler() is None:
        pytest.skip("no C compiler (looked for $CC, cc, gcc, clang): the native stencil example cannot be built")
    kernel = _load_example("native_laplacian", monkeypatch)
    for check in FAST_CHECKS:
        check(kernel)
    check_layouts(kernel, layouts=("var.z.y.x", "y/2.x/3.var.z.y%2.x%3", "z.y.x.var", "var.z.y+1.x+8", "y/3.x/4.var.z.y%3.x%4"))
    numba_kernel = get_kernel("laplacian")
    for spec in ("var.z.y.x", "y.x.z.var"):
        mine, theirs = kernel.make_problem(spec, GRID), numba_kernel.make_problem(spec, GRID)
        kernel.bind(mine, "cyclic")()
        numba_kernel.bind(theirs, "block")()
        assert np.array_equal(mine.output.to_logical(), theirs.output.to_logical())
    report = vector_report(kernel.walk, kernel.bind(kernel.make_problem("var.z.y.x", GRID), "block").args)
    assert report["packed_fp_ops"] > 0  # the disassembled library function, not the numba wrapper
    # Blocks of the flattened horizontal index have no row-walk form: refused in one line, not run.
    flat = kernel.make_problem("yx/5.var.z.yx%5", GRID)
    assert "blocks the flattened horizontal index" in kernel.refuses(flat.layout)
    with pytest.raises(KernelError, match="native stencil 'native_laplacian'"):
        kernel.bind(flat, "block")
    check_layouts(kernel, layouts=("yx/5.var.z.yx%5",), dtypes=("float64",))  # the contract accepts the refusal
    from harness.suite import SuiteError, parse_suite

    with pytest.raises(SuiteError, match="blocks the flattened horizontal index.*leave the layout out of layouts"):
        parse_suite({"grid": {"sizes": ["var=2,z=4,y=8,x=8"]}, "kernels": {"select": ["native_laplacian"]},
                     "layouts": {"specs": ["var.z.y.x", "yx/8.var.z.yx%8"]}})


@pytest.mark.parametrize("example, numba_name, numba_schedule, schedule", [
    ("native_varcoef", "varcoef", "column", "block"),  # 3-D coefficients
    ("native_levelcoef", "levelcoef", "column", "cyclic"),  # per-level coefficients, same signature
    ("native_sharedcoef", "sharedcoef", "column", "block"),  # one system per column: the seven-axis signature
])
def test_the_native_c_column_solve_examples_meet_the_contract(monkeypatch: pytest.MonkeyPatch, example: str, numba_name: str,
                                                              numba_schedule: str, schedule: str) -> None:
    """docs/examples/native_varcoef.c, native_levelcoef.c and native_sharedcoef.c (the column family's C signatures),
    validated in every contract layout, both dtypes, both schedules and builds; float64 output
    within rounding of the numba solve's (the C code multiplies by 1/m in another order)."""
    from kernels.native import c_compiler

    if c_compiler() is None:
        pytest.skip(f"no C compiler (looked for $CC, cc, gcc, clang): the {example} example cannot be built")
    kernel = _load_example(example, monkeypatch)
    for check in CHECKS:
        check(kernel)
    mine, theirs = kernel.make_problem("var.y.x.z", GRID), get_kernel(numba_name).make_problem("var.y.x.z", GRID)
    kernel.bind(mine, schedule)()
    get_kernel(numba_name).bind(theirs, numba_schedule)()
    np.testing.assert_allclose(mine.output.to_logical(), theirs.output.to_logical(), rtol=1e-14, atol=0)


def test_a_native_library_that_is_missing_or_incomplete_is_a_clear_error(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from kernels.native import c_compiler, compile_c, native_walk

    with pytest.raises(KernelError, match="cannot load native library"):
        native_walk(tmp_path / "absent.so", "anything")
    if c_compiler() is None:
        pytest.skip("no C compiler to build an incomplete library")
    source = tmp_path / "half.c"
    source.write_text("void half_f64(void) {}\n")
    with pytest.raises(KernelError, match="no function 'half_f32'"):
        native_walk(compile_c(source), "half")
    broken = tmp_path / "broken.c"
    broken.write_text("this is not C\n")
    with pytest.raises(KernelError, match="could not build"):
        compile_c(broken)


@pytest.mark.parametrize("bad", ["convert", "triad", "Lap", "a|b", "9point", ""])
def test_registration_refuses_reserved_and_malformed_names(bad: str, monkeypatch: pytest.MonkeyPatch) -> None:
    import kernels.registry

    monkeypatch.setattr(kernels.registry, "_REGISTRY", dict(kernels.registry._REGISTRY))
    kernel = type(KERNELS["laplacian"])()
    kernel.name = bad
    with pytest.raises(KernelError, match="reserved" if bad in ("convert", "triad") else "not valid"):
        kernels.registry.register(kernel)


@pytest.mark.parametrize("name", sorted(KERNELS))
def test_deep_columns_and_many_variables_meet_the_contract(name: str) -> None:
    """137 levels and 128 variables (a deep operational column count and a chemistry-sized tracer
    set) on a small horizontal grid, in a variables-innermost, a columns-contiguous, a tiled layout
    with partial tiles, and blocks of the flattened horizontal index with a partial last block."""
    kernel = get_kernel(name)
    ext = kernel.fitted(Extents(var=128, z=137, y=5, x=6))
    for spec in ("y.x.z.var", "var.y.x.z", "y/2.x/4.var.z.y%2.x%4", "yx/4.var.z.yx%4"):
        problem = kernel.make_problem(spec, ext, "float64")
        for schedule in kernel.schedules:
            result = kernel.validate(problem, schedule)
            assert result.ok, result.message


@pytest.mark.parametrize("name", ["hyperdiffusion", "laplacian"])
def test_stencils_on_grids_narrower_than_their_halo(name: str) -> None:
    """A tiled layout with x (or y) smaller than the stencil's halo: every point wraps onto
    itself; found by the random-layout test (the band walk assumed x >= halo)."""
    kernel = KERNELS[name]
    for ext in (Extents(1, 1, 1, 1), Extents(2, 1, 5, 1), Extents(1, 2, 1, 3)):
        problem = kernel.make_problem("y/1.x/1.var.z.y%1.x%1", ext, "float64", seed=1)
        for schedule in kernel.schedules:
            result = kernel.validate(problem, schedule)
            assert result.ok, f"{ext} {schedule.name}: {result.message}"

