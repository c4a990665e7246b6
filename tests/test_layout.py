"""The layout model: parsing, printing, families and geometry (checked against NumPy)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from kernels.errors import LayoutError
from kernels.grid import Extents
from kernels.families import paddings, parse_tile_sizes, permutations, tilings
from kernels.notation import parse_layout
from kernels.state import State
from kernels.testing.strategies import extents, layouts_for


@given(st.data())
def test_parse_print_round_trip(data: st.DataObject) -> None:
    ext = data.draw(extents())
    layout = data.draw(layouts_for(ext))
    assert parse_layout(layout.spec) == layout
    assert hash(parse_layout(layout.spec)) == hash(layout)


@pytest.mark.parametrize(
    "spec, canonical",
    [("var.z.y.x", "var.z.y.x"), (" y.x.z.var ", "y.x.z.var"), ("var.z.y+0.x+8", "var.z.y.x+8"), ("y/4.x/8.var.z.y%4.x%8@0", "y/4.x/8.var.z.y%4.x%8")],
)
def test_canonical_form(spec: str, canonical: str) -> None:
    assert parse_layout(spec).spec == canonical


def test_families() -> None:
    perms = permutations()
    assert len(perms) == 24 and len(set(perms)) == 24
    assert all(p.is_plain for p in perms)
    tiled = tilings([(4, 8), (8, 8)])
    assert [t.spec for t in tiled] == ["y/4.x/8.var.z.y%4.x%8", "y/8.x/8.var.z.y%8.x%8"]
    assert tiled[0].tiles == {"y": 4, "x": 8}
    padded = paddings("var.z.y.x", [0, 1, 8])
    assert [p.spec for p in padded] == ["var.z.y.x", "var.z.y.x+1", "var.z.y.x+8"]
    assert paddings("var.z.y.x", [2], token="z")[0].spec == "var.z+2.y.x"
    assert parse_tile_sizes("4x8, 2x2") == [(4, 8), (2, 2)]


def test_level_stride_aliasing_needs_outer_padding() -> None:
    """The design's example: x=128+8, y=128, float64 still has a level stride of 34 x 4 KiB.

    Common practice: strides that are multiples of 4 KiB map to the same cache sets (set aliasing);
    the arithmetic here is (128 + 8) x 128 x 8 bytes = 139264 = 34 x 4096.
    """
    ext = Extents(var=1, z=4, y=128, x=128)
    inner_only = parse_layout("var.z.y.x+8").strides(ext, "float64")
    assert inner_only[1] == 34 * 4096
    outer_too = parse_layout("var.z.y+1.x+8").strides(ext, "float64")
    assert outer_too[1] % 4096 != 0


@given(st.data())
def test_offsets_match_numpy(data: st.DataObject) -> None:
    """NumPy is the reference: the byte offset of (v, k, j, i) computed by the layout equals the
    offset NumPy's own strides give for the same element of the physical array.

    Source: numpy.ndarray.strides of the allocated buffer (NumPy 2.4).
    """
    ext = data.draw(extents())
    layout = data.draw(layouts_for(ext))
    dtype = data.draw(st.sampled_from(["float32", "float64"]))
    if layout.base_offset % np.dtype(dtype).itemsize:
        layout = layout.with_offset(0)
    state = State.zeros(layout, ext, dtype)
    assert layout.strides(ext, dtype) == state.data.strides
    assert layout.shape(ext) == state.data.shape
    assert layout.nbytes(ext, dtype) == state.data.nbytes
    # Tag every logical element with its flat logical index, then look each up by byte offset.
    tags = np.arange(ext.points, dtype=dtype).reshape(ext.shape)
    state.assign_logical(tags)
    v, k, j, i = np.unravel_index(np.arange(ext.points), ext.shape)
    offsets = layout.byte_offset(ext, dtype, v, k, j, i)
    flat = state.data.reshape(-1)
    assert np.array_equal(flat[offsets // state.data.itemsize], tags.reshape(-1))
    assert state.data.ctypes.data % 64 == layout.base_offset % 64


def test_contiguous_run() -> None:
    ext = Extents(2, 3, 4, 8)
    assert parse_layout("var.z.y.x").contiguous_tokens(ext) == ("var", "z", "y", "x")
    assert parse_layout("var.z.y+1.x").contiguous_tokens(ext) == ("y+1", "x")
    assert parse_layout("var.z.y.x+8").contiguous_tokens(ext) == ("x+8",)


BAD_SPECS = [
    ("var.z.q.x", "'q'"),  # unknown axis
    ("var.z.y.x.z", "'z'"),  # repeated axis
    ("var.z.y", "'x'"),  # missing axis
    ("y/4.var.z.x", "'y/4'"),  # tile index without its partner
    ("y/4.x/8.var.z.y%4", "'x/8'"),  # tile index without partner
    ("x/8.var.z.y.x.x%8", "'x'"),  # whole and tiled x both
    ("var.z.y%4.x/8.x%8", "'y%4'"),  # tile part without tile index
    ("y/4.x/8.var.z.y%2.x%8", "'y%2'"),  # the two parts disagree on the size
    ("var.z/4.y.x.z%4", "'z/4'"),  # tiling a vertical axis
    ("y/0.x.var.z.y%0", "'y/0'"),  # zero tile size
    ("y/a.x.var.z.y%a", "'y/a'"),  # tile size not a number
    ("var.z4.y.x", "'z4'"),  # a size glued to an axis name
    ("var.z.y.x+-1", "'x+-1'"),  # negative pad
    ("var.z.y.x+", "'x+'"),  # empty pad
    ("var.z.y.x@-8", "'@-8'"),  # negative base offset
    ("", "''"),  # empty
    ("var..z.y.x", "''"),  # empty token
    ("yx.var.z", "'yx'"),  # the flattened index unblocked
    ("yx/8.var.z.y.yx%8", "neither y nor x"),  # flattened blocks beside y
    ("yx/8.var.z", "'yx/8'"),  # block index without its partner
    ("yx/8.var.z.yx%4", "'yx/8'"),  # the two parts disagree on the size
    ("var.z/4.yx/4.z%4.yx%4", "'z/4'"),  # tiling a vertical axis, still
]


@pytest.mark.parametrize("spec, named", BAD_SPECS)
def test_bad_specs_name_the_token(spec: str, named: str) -> None:
    with pytest.raises(LayoutError) as info:
        parse_layout(spec)
    assert named in str(info.value)
    assert "\n" not in str(info.value)


def test_a_tile_larger_than_its_extent_is_refused() -> None:
    with pytest.raises(LayoutError, match=r"tile size 16 exceeds extent 10 of axis 'x'.*valid tile sizes are 1..10"):
        parse_layout("y/5.x/16.var.z.y%5.x%16").shape(Extents(4, 8, 128, 10))


def test_a_tile_that_does_not_divide_its_extent_leaves_a_partial_last_tile() -> None:
    """Closed form: y=25 in tiles of 8 takes ceil(25/8) = 4 tiles, the last holding 25 - 24 = 1 row."""
    layout, ext = parse_layout("y/8.x/10.var.z.y%8.x%10"), Extents(2, 3, 25, 50)
    assert layout.shape(ext) == (4, 5, 2, 3, 8, 10)
    assert layout.remainder(ext) == {"y": 7}
    assert layout.describe(ext, "float64")["partial_tiles"] == {"y": "last tile holds 1 of 8"}
    values = np.random.default_rng(3).standard_normal(ext.shape)
    state = State.from_logical(values, layout)
    assert np.array_equal(state.to_logical(), values)
    # Source: NumPy indexing. Logical (v, k, j, i) sits at tile (j // 8, i // 10), position (j % 8, i % 10).
    v, k, j, i = 1, 2, 24, 37
    assert state.data[j // 8, i // 10, v, k, j % 8, i % 10] == values[v, k, j, i]
    assert np.all(state.data[3, :, :, :, 1:, :] == 0)  # the unused rows of the last tile stay as allocated


def test_blocks_of_the_flattened_horizontal_index_straddle_rows() -> None:
    """Closed form: y=5, x=6 flattened is h = 6j + i, 30 points; blocks of 8 take ceil(30/8) = 4
    blocks, the last holding 30 - 24 = 6 points; point (j, i) sits in block h // 8 at h % 8."""
    layout, ext = parse_layout("yx/8.var.z.yx%8"), Extents(2, 3, 5, 6)
    assert layout.shape(ext) == (4, 2, 3, 8) and layout.flat_block == 8
    assert layout.remainder(ext) == {"yx": 2}
    assert layout.describe(ext, "float64")["partial_tiles"] == {"yx": "last block holds 6 of 8"}
    values = np.random.default_rng(4).standard_normal(ext.shape)
    state = State.from_logical(values, layout)
    assert np.array_equal(state.to_logical(), values)
    # Source: NumPy indexing. (v, k, j=2, i=5): h = 17, block 2, position 1 (row 2 starts mid-block).
    assert state.data[2, 1, 2, 1] == values[1, 2, 2, 5]
    assert np.all(state.data[3, :, :, 6:] == 0)  # the unused positions of the last block stay as allocated
    with pytest.raises(LayoutError, match=r"tile size 31 exceeds y \* x points.*valid tile sizes are 1..30"):
        parse_layout("yx/31.var.z.yx%31").shape(ext)


@pytest.mark.parametrize("axis", ["var", "z", "y", "x"])
@pytest.mark.parametrize("bad", [0, -3])
def test_bad_extents(axis: str, bad: int) -> None:
    values = {"var": 2, "z": 3, "y": 4, "x": 5, axis: bad}
    with pytest.raises(LayoutError, match=f"axis '{axis}'"):
        Extents(**values)


@pytest.mark.parametrize(
    "text, named", [("var=4,z=64,y=8", "x"), ("var=4,z=0,y=8,x=8", "z"), ("var=4,q=2,y=8,x=8", "q=2"), ("var=a,z=1,y=1,x=1", "'a'")]
)
def test_bad_grid_text(text: str, named: str) -> None:
    with pytest.raises(LayoutError, match=named):
        Extents.parse(text)


def test_bad_tile_size_text_and_pads() -> None:
    with pytest.raises(LayoutError, match="'4by8'"):
        parse_tile_sizes("4by8")
    with pytest.raises(LayoutError, match="-1"):
        paddings("var.z.y.x", [-1])
    with pytest.raises(LayoutError, match="'q'"):
        paddings("var.z.y.x", [1], token="q")
    with pytest.raises(LayoutError, match="'y/.var.z.y%.x'"):
        tilings([(4, 4)], order="y/.var.z.y%.x")


@pytest.mark.parametrize("old", ["Y.X.var.z.y8.x16", "y8.x16.var.z.Y.X", "var.z.Y.x.y4"])
def test_old_tile_notation_names_the_new_one(old: str) -> None:
    with pytest.raises(LayoutError) as info:
        parse_layout(old)
    message = str(info.value)
    assert "unsupported tiling form" in message and "y/8.x/16.var.z.y%8.x%16" in message and "\n" not in message


def test_tilings_order_places_pads_and_parts() -> None:
    (layout,) = tilings([(2, 4)], order="var.y/.z.x/.y%+1.x%")
    assert layout.spec == "var.y/2.z.x/4.y%2+1.x%4"


@given(st.data())
def test_file_stem_is_safe_and_one_to_one(data: st.DataObject) -> None:
    """A spec used in a file name keeps no path separator, wildcard or shell-special character,
    and two different layouts never share a file stem."""
    ext = data.draw(extents())
    a, b = data.draw(layouts_for(ext)), data.draw(layouts_for(ext))
    for layout in (a, b):
        assert re.fullmatch(r"[A-Za-z0-9._-]+", layout.file_stem), layout.file_stem
    assert (a.file_stem == b.file_stem) == (a == b)


def test_layout_is_hashable_and_frozen() -> None:
    layout = parse_layout("var.z.y.x")
    assert {layout: 1}[parse_layout("var.z.y.x")] == 1
    with pytest.raises(AttributeError):
        layout.base_offset = 8  # type: ignore[misc]
