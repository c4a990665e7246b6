"""State storage: exact conversions, padding hygiene, alignment and bad input."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from kernels.errors import LayoutError
from kernels.grid import Extents
from kernels.state import State
from kernels.testing.strategies import extents, layouts_for


def _random_logical(ext: Extents, dtype: str, seed: int) -> np.ndarray:
    # Random bit patterns of finite values exercise every mantissa bit of the copy.
    return np.random.default_rng(seed).standard_normal(ext.shape).astype(dtype)


@given(st.data(), st.sampled_from(["float32", "float64"]), st.integers(0, 2**31))
def test_round_trip_is_bit_identical(data: st.DataObject, dtype: str, seed: int) -> None:
    ext = data.draw(extents())
    layout = data.draw(layouts_for(ext)).with_offset(0)
    values = _random_logical(ext, dtype, seed)
    state = State.from_logical(values, layout)
    back = state.to_logical()
    assert back.dtype == values.dtype
    assert np.array_equal(back.view(np.uint8), values.view(np.uint8))


@given(st.data(), st.sampled_from(["float32", "float64"]), st.integers(0, 2**31))
def test_direct_conversion_equals_logical_path(data: st.DataObject, dtype: str, seed: int) -> None:
    ext = data.draw(extents())
    a = data.draw(layouts_for(ext)).with_offset(0)
    b = data.draw(layouts_for(ext)).with_offset(0)
    values = _random_logical(ext, dtype, seed)
    direct = State.from_logical(values, a).convert(b)
    via_logical = State.from_logical(values, b)
    assert np.array_equal(direct.data.view(np.uint8), via_logical.data.view(np.uint8))
    assert np.array_equal(direct.to_logical(), values)


@given(st.data())
def test_padding_never_leaks(data: st.DataObject) -> None:
    ext = data.draw(extents())
    layout = data.draw(layouts_for(ext)).with_offset(0)
    values = np.full(ext.shape, 7.0)
    state = State.from_logical(values, layout)
    assert state.data.sum() == pytest.approx(7.0 * ext.points)  # padding stayed zero
    state.data[...] = -1.0
    state.assign_logical(values)
    assert np.array_equal(state.to_logical(), values)  # padding garbage does not reach logical values


@pytest.mark.parametrize("offset", [0, 8, 24, 64, 136])
def test_alignment_and_base_offset(offset: int) -> None:
    state = State.zeros(f"var.z.y.x@{offset}", Extents(2, 3, 4, 5), "float64")
    assert state.data.ctypes.data % 64 == offset % 64
    assert state.data.flags.c_contiguous
    assert state.describe()["base_offset"] == offset
    assert state.describe()["address_mod_alignment"] == offset % 64


def test_offset_must_fit_item_size() -> None:
    with pytest.raises(LayoutError, match="item size 8"):
        State.zeros("var.z.y.x@4", Extents(1, 1, 1, 1), "float64")
    State.zeros("var.z.y.x@4", Extents(1, 1, 1, 1), "float32")


@pytest.mark.parametrize("dtype", ["int32", "float16", "complex128", "banana"])
def test_unsupported_dtype(dtype: str) -> None:
    with pytest.raises(LayoutError, match=f"'{dtype}'"):
        State.zeros("var.z.y.x", Extents(1, 1, 1, 1), dtype)


def test_wrong_shapes_are_refused() -> None:
    with pytest.raises(LayoutError, match="4 axes"):
        State.from_logical(np.zeros((2, 3, 4)), "var.z.y.x")
    state = State.zeros("var.z.y.x", Extents(1, 2, 3, 4))
    with pytest.raises(LayoutError, match="does not match"):
        state.assign_logical(np.zeros((1, 2, 3, 5)))
    with pytest.raises(LayoutError, match="extents"):
        state.copy_into(State.zeros("var.z.y.x", Extents(1, 2, 3, 5)))
