"""The compiled layout conversion: exact for any pair of layouts, every build."""

from __future__ import annotations

import numba
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kernels.convert import conversion_args
from kernels.errors import KernelError
from kernels.grid import LOGICAL_AXES, Extents
from kernels.layout import TILES, WHOLE, WITHIN, Layout
from kernels.state import State
from kernels.testing.strategies import extents, layouts_for


def numpy_physical(values: np.ndarray, layout: Layout) -> np.ndarray:
    """The layout's physical array (padding left out) by NumPy alone: split each tiled axis with
    ``reshape`` (index // tile, index % tile), then ``transpose`` into the layout's token order;
    a partial last tile's unused positions are zero (as a fresh state holds them). A layout blocking
    the flattened horizontal index first reshapes (y, x) into one axis ``yx``."""
    shape, parts = [], []
    axes = LOGICAL_AXES
    if layout.flat_block:
        values, axes = values.reshape(*values.shape[:2], -1), ("var", "z", "yx")
    covered = [-(-n // layout.tiles[a]) * layout.tiles[a] if a in layout.tiles else n for a, n in zip(axes, values.shape)]
    values = np.pad(values, [(0, c - n) for c, n in zip(covered, values.shape)])  # partial tiles: unused positions hold 0
    for axis, n in zip(axes, values.shape):
        tile = layout.tiles.get(axis)
        if tile:
            shape += [n // tile, tile]
            parts += [(axis, TILES), (axis, WITHIN)]
        else:
            shape.append(n)
            parts.append((axis, WHOLE))
    return values.reshape(shape).transpose([parts.index((t.axis, t.part)) for t in layout.tokens])


@settings(max_examples=25)
@given(st.data(), st.sampled_from([("float32", "parallel"), ("float64", "parallel"), ("float64", "serial")]))
def test_conversion_is_bit_exact(data: st.DataObject, dtype_build: tuple[str, str]) -> None:
    """Source: NumPy's reshape and transpose build the expected physical array independently.

    The serial twin is the same code without threads: checked in float64 only (each build costs
    CI seconds to compile; sweeps validate every conversion they time, float32 serial included)."""
    dtype, build = dtype_build
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    ext = data.draw(extents(max_extent=7))
    src_layout = data.draw(layouts_for(ext)).with_offset(0)
    dst_layout = data.draw(layouts_for(ext)).with_offset(0)
    values = np.random.default_rng(0).standard_normal(ext.shape).astype(dtype)
    src = State.from_logical(values, src_layout)
    dst = State.zeros(dst_layout, ext, dtype)
    impl, args = conversion_args(src, dst)
    getattr(impl, build)(*args)
    assert np.array_equal(dst.to_logical().view(np.uint8), values.view(np.uint8))
    # Source: numpy.reshape / numpy.transpose of the logical array, bit for bit; padding stays zero.
    interior = tuple(slice(0, n) for n in dst_layout.counts(ext))
    expected = np.ascontiguousarray(numpy_physical(values, dst_layout))
    assert np.array_equal(np.ascontiguousarray(dst.data[interior]).view(np.uint8), expected.view(np.uint8))
    padding = np.ones(dst.data.shape, dtype=bool)
    padding[interior] = False
    assert not dst.data[padding].any()


def test_mismatched_states_are_refused() -> None:
    a = State.zeros("var.z.y.x", Extents(1, 2, 3, 4))
    with pytest.raises(KernelError, match="extents and dtype must match"):
        conversion_args(a, State.zeros("var.z.y.x", Extents(1, 2, 3, 5)))
    with pytest.raises(KernelError, match="extents and dtype must match"):
        conversion_args(a, State.zeros("var.z.y.x", Extents(1, 2, 3, 4), "float32"))


@pytest.mark.parametrize(
    "pair",
    [("var.z.y.x", "y.x.z.var"), ("var.z.y.x", "var.y.x.z"), ("y.x.z.var", "var.z.y+1.x+8"), ("var.z.y.x", "z.var.y.x"), ("x.y.z.var", "var+1.z.y.x"),
     ("y.x.z.var", "var.z.y.x"), ("y.x.z.var", "y.x.var.z"), ("var.y.x.z", "y.x.z.var"), ("z.var.y.x", "var.z.y+1.x")],
)
def test_blocked_transpose_spans_several_blocks(pair: tuple[str, str]) -> None:
    """Untiled pairs take the blocked transpose; extents above its block size exercise whole,
    partial and same-axis blocks, axes merged because both layouts hold them contiguous (y.x in
    var.z.y.x and z.var.y.x), and a short source run joined with the next source axis (var.z in
    y.x.z.var).

    Source: NumPy's reshape and transpose build the expected physical array, bit for bit."""
    from kernels.convert import TRANSPOSE, TRANSPOSE_BLOCK

    ext = Extents(var=3, z=5, y=TRANSPOSE_BLOCK + 7, x=2 * TRANSPOSE_BLOCK + 3)
    _check_compiled_copy(np.random.default_rng(1).standard_normal(ext.shape), pair, TRANSPOSE)


def _check_compiled_copy(values: np.ndarray, pair: tuple[str, str], expected_impl: object) -> None:
    """Convert ``values`` from pair[0] to pair[1] with the compiled copy ``expected_impl`` and
    compare the destination bit for bit with NumPy's physical array."""
    from kernels.notation import parse_layout

    src = State.from_logical(values, parse_layout(pair[0]))
    dst = State.zeros(parse_layout(pair[1]), src.extents, values.dtype.name)
    impl, args = conversion_args(src, dst)
    assert impl is expected_impl
    impl.parallel(*args)
    expected = np.ascontiguousarray(numpy_physical(values, dst.layout))
    interior = tuple(slice(0, n) for n in dst.layout.counts(src.extents))
    assert np.array_equal(dst.data[interior], expected)


@pytest.mark.parametrize("pair", [("var.z.y.x", "var.y.x.z"), ("z.var.y.x", "y.x.z.var"), ("var.z.y+1.x", "y.x.var.z")])
@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_transpose_with_prefetch_copies_exactly(pair: tuple[str, str], dtype: str) -> None:
    """Blocks of many source rows a page or more apart take the prefetching copy of the transpose
    (rows at least 16, row stride at least 4 KiB); it must copy exactly like the other.

    Source: NumPy's reshape and transpose build the expected physical array, bit for bit."""
    from kernels.convert import TRANSPOSE_AHEAD

    ext = Extents(var=2, z=20, y=33, x=37)  # a y-x plane of 1221 values: 4.8 KiB in float32
    _check_compiled_copy(np.random.default_rng(2).standard_normal(ext.shape).astype(dtype), pair, TRANSPOSE_AHEAD)


def test_planning_keeps_the_fastest_candidate_and_converts_exactly() -> None:
    """Every candidate (each block width, the row conversion, NumPy's strided copy) is run; the
    plan keeps the one with the smallest planning median, and it alone fills the destination
    bit for bit.

    Source: NumPy's reshape and transpose build the expected physical array."""
    from kernels.conversion_plan import NUMPY_COPY, ROW_COPY, TRANSPOSE_WIDTHS, plan_conversion

    ext = Extents(var=3, z=9, y=20, x=24)
    values = np.random.default_rng(3).standard_normal(ext.shape)
    src, dst = State.from_logical(values, "y.x.z.var"), State.zeros("var.z.y+1.x", ext)
    plan = plan_conversion(src, dst, min_bytes=0)
    assert set(plan.medians_ns) == {f"block width {w}" for w in TRANSPOSE_WIDTHS} | {ROW_COPY, NUMPY_COPY}
    assert plan.medians_ns[plan.choice] == min(plan.medians_ns.values())
    assert plan.describe().startswith(f"{plan.choice} (planning runs, time relative to it: ")
    dst.data[...] = 0
    plan.impl.parallel(*plan.args)
    assert np.array_equal(dst.to_logical(), values)
    assert not dst.data[:, :, ext.y, :].any()  # the padding row stays untouched


def test_numpy_candidate_copies_between_logical_views() -> None:
    """The NumPy candidate's arguments are the two logical views, so it copies exactly too."""
    from kernels.conversion_plan import NUMPY_COPY, candidates

    ext = Extents(var=2, z=5, y=6, x=7)
    values = np.random.default_rng(4).standard_normal(ext.shape)
    src, dst = State.from_logical(values, "x.y.z.var"), State.zeros("var.y+1.x.z", ext)
    (label, impl, args), = [c for c in candidates(src, dst) if c[0] == NUMPY_COPY]
    impl.parallel(*args)
    assert np.array_equal(dst.to_logical(), values)


def test_tiled_pairs_plan_widths_and_awkward_pairs_have_nothing_to_plan() -> None:
    """Whole tiles plan the blocked transpose's widths against the row conversion (NumPy has no
    view of a tiled state); a partial last tile, or two tile sizes along one axis, leave the row
    conversion alone."""
    from kernels.conversion_plan import ROW_COPY, TRANSPOSE_WIDTHS, plan_conversion

    ext = Extents(var=2, z=3, y=8, x=8)
    plan = plan_conversion(State.zeros("var.z.y.x", ext), State.zeros("y/4.x/4.var.z.y%4.x%4", ext), min_bytes=0)
    assert set(plan.medians_ns) == {f"block width {w}" for w in TRANSPOSE_WIDTHS} | {ROW_COPY}
    for a, b, e in [("var.z.y.x", "y/3.x/4.var.z.y%3.x%4", ext), ("y/2.x.var.z.y%2", "y/4.x.var.z.y%4", ext)]:
        plan = plan_conversion(State.zeros(a, e), State.zeros(b, e), min_bytes=0)
        assert plan.choice == "" and plan.medians_ns == {} and plan.describe() == ""


@pytest.mark.parametrize(
    "pair",
    [("var.z.y.x", "y/4.x/8.var.z.y%4.x%8"), ("y/4.x/8.var.z.y%4.x%8", "y.x.z.var"),
     ("y/4.x/8.z.var.y%4.x%8", "x/8.y.var.x%8.z"), ("var.y+1.x.z", "y/2.x/2.var.y%2.x%2.z+3"),
     ("y/4.x/8.var.z.y%4.x%8", "y/4.x/8.var.z.y%4.x%8+1")],
)
def test_tiled_pairs_take_the_transpose_on_split_axes(pair: tuple[str, str]) -> None:
    """A tiled axis is split into (tile, position) on both sides and the blocked transpose runs
    over the split axes, padding included.

    Source: NumPy's reshape and transpose build the expected physical array, bit for bit."""
    from kernels.convert import TRANSPOSE

    ext = Extents(var=3, z=5, y=12, x=40)
    _check_compiled_copy(np.random.default_rng(5).standard_normal(ext.shape), pair, TRANSPOSE)


@pytest.mark.parametrize("pair", [("var.y.x.z", "var.z.y.x"), ("y.x.z.var", "var.z.y+1.x"), ("y.x.var.z", "y/4.x/8.z.var.y%4.x%8")])
def test_whole_run_blocks_copy_exactly(pair: tuple[str, str]) -> None:
    """Blocks spanning the source's whole contiguous run (z, or z and var joined) copy exactly.

    Source: NumPy's reshape and transpose build the expected physical array, bit for bit."""
    from kernels.convert import whole_run_args
    from kernels.notation import parse_layout

    ext = Extents(var=3, z=41, y=12, x=40)
    values = np.random.default_rng(6).standard_normal(ext.shape)
    src = State.from_logical(values, parse_layout(pair[0]))
    dst = State.zeros(parse_layout(pair[1]), ext)
    found = whole_run_args(src, dst)
    assert found is not None
    impl, args = found
    assert args[7].shape[2] in (41, 123)  # the scratch spans z, or var.z joined
    impl.parallel(*args)
    assert np.array_equal(dst.to_logical(), values)


def test_whole_run_blocks_only_where_the_run_is_long_and_not_shared() -> None:
    from kernels.convert import WHOLE_RUN_MAX, whole_run_args

    short, long_ = Extents(var=2, z=20, y=6, x=6), Extents(var=2, z=WHOLE_RUN_MAX + 1, y=2, x=2)
    assert whole_run_args(State.zeros("var.y.x.z", short), State.zeros("var.z.y.x", short)) is None
    assert whole_run_args(State.zeros("var.y.x.z", long_), State.zeros("var.z.y.x", long_)) is None
    assert whole_run_args(State.zeros("z.var.y.x", short), State.zeros("var.z.y.x", short)) is None  # x innermost in both


def test_small_states_are_not_planned() -> None:
    from kernels.conversion_plan import PLAN_MIN_BYTES, plan_conversion
    from kernels.convert import TRANSPOSE

    ext = Extents(var=2, z=4, y=8, x=8)
    src, dst = State.zeros("var.z.y.x", ext), State.zeros("var.y.x.z", ext)
    assert src.data.nbytes < PLAN_MIN_BYTES
    plan = plan_conversion(src, dst)
    assert plan.impl is TRANSPOSE and plan.medians_ns == {} and plan.describe() == ""
