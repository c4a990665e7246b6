"""Hypothesis strategies for extents and layouts that fit them."""

from __future__ import annotations

import hypothesis.strategies as st

from kernels.grid import LOGICAL_AXES, Extents
from kernels.layout import TILES, WHOLE, WITHIN, Layout, Token


@st.composite
def extents(draw: st.DrawFn, max_extent: int = 9) -> Extents:
    return Extents(*(draw(st.integers(1, max_extent)) for _ in LOGICAL_AXES))


@st.composite
def layouts_for(draw: st.DrawFn, ext: Extents, allow_offset: bool = True) -> Layout:
    """A random valid layout for ``ext``: any order, optional tiling of y/x (any tile up to the
    extent, so partial last tiles too), optional pads."""
    tokens: list[Token] = []
    for axis in LOGICAL_AXES:
        pad = lambda: draw(st.sampled_from([0, 0, 0, 1, 3]))  # noqa: E731
        if axis in ("y", "x") and draw(st.booleans()):
            tile = draw(st.integers(1, ext[axis]))
            tokens += [Token(axis, TILES, tile, pad()), Token(axis, WITHIN, tile, pad())]
        else:
            tokens.append(Token(axis, WHOLE, 0, pad()))
    order = draw(st.permutations(tokens))
    offset = draw(st.sampled_from([0, 0, 8, 16, 24])) if allow_offset else 0
    return Layout(tuple(order), offset)
