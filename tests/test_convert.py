"""The compiled layout conversion: exact for any pair of layouts, every build."""

from __future__ import annotations

import numba
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kernels.convert import conversion_args
from kernels.errors import KernelError
from kernels.grid import Extents
from kernels.state import State
from tests.strategies import extents, layouts_for


@settings(max_examples=40)
@given(st.data(), st.sampled_from(["float32", "float64"]), st.sampled_from(["parallel", "serial"]))
def test_conversion_is_bit_exact(data: st.DataObject, dtype: str, build: str) -> None:
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
    assert np.array_equal(dst.data, src.convert(dst_layout).data)  # padding untouched, same as NumPy's path


def test_mismatched_states_are_refused() -> None:
    a = State.zeros("var.z.y.x", Extents(1, 2, 3, 4))
    with pytest.raises(KernelError, match="extents and dtype must match"):
        conversion_args(a, State.zeros("var.z.y.x", Extents(1, 2, 3, 5)))
    with pytest.raises(KernelError, match="extents and dtype must match"):
        conversion_args(a, State.zeros("var.z.y.x", Extents(1, 2, 3, 4), "float32"))
