"""Hypothesis strategies for extents and layouts that fit them."""

from __future__ import annotations

import hypothesis.strategies as st

from kernels.grid import LOGICAL_AXES, Extents
from kernels.layout import FLAT, TILES, WHOLE, WITHIN, Layout, Token


@st.composite
def extents(draw: st.DrawFn, max_extent: int = 9) -> Extents:
    return Extents(*(draw(st.integers(1, max_extent)) for _ in LOGICAL_AXES))


@st.composite
def layouts_for(draw: st.DrawFn, ext: Extents, allow_offset: bool = True) -> Layout:
    """A random valid layout for ``ext``: any order, optional tiling of y/x (any tile up to the
    extent, so partial last tiles too) or, one time in five, blocks of the flattened horizontal
    index (any block size up to y * x), optional pads."""
    tokens: list[Token] = []
    pad = lambda: draw(st.sampled_from([0, 0, 0, 1, 3]))  # noqa: E731
    flat = draw(st.integers(0, 4)) == 0
    if flat:
        block = draw(st.integers(1, ext.y * ext.x))
        tokens += [Token(FLAT, TILES, block, pad()), Token(FLAT, WITHIN, block, pad())]
    for axis in LOGICAL_AXES:
        if flat and axis in ("y", "x"):
            continue
        if axis in ("y", "x") and draw(st.booleans()):
            tile = draw(st.integers(1, ext[axis]))
            tokens += [Token(axis, TILES, tile, pad()), Token(axis, WITHIN, tile, pad())]
        else:
            tokens.append(Token(axis, WHOLE, 0, pad()))
    order = draw(st.permutations(tokens))
    offset = draw(st.sampled_from([0, 0, 8, 16, 24])) if allow_offset else 0
    return Layout(tuple(order), offset)
