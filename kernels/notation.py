"""The text form of a layout.

Spec grammar (outermost token first, joined by ``.``, optional ``@N`` base offset)::

    spec    := token ("." token)* ["@" bytes]
    token   := axis [part] ["+" pad]
    axis    := "var" | "z" | "y" | "x"   a whole logical axis
             | "yx"                      the flattened horizontal index y * nx + x (blocked only)
    part    := "/" size                  on y, x or yx: the tile index, for tiles of ``size``
             | "%" size                  on y, x or yx: the position inside a tile of ``size``

Tiling is written as index arithmetic on the logical index: ``y/4`` runs over ``j // 4`` and
``y%4`` over ``j % 4``; both parts of a tiled axis appear, with the same size. ``yx/32`` and
``yx%32`` block the flattened horizontal index ``h = j * nx + i`` into runs of 32 columns, as
column physics often stores its state; a layout with them names neither y nor x.

Examples: ``var.z.y.x``, ``y.x.z.var``, ``y/4.x/8.var.z.y%4.x%8``, ``yx/32.var.z.yx%32``, ``var.z.y+1.x+8``,
``var.z.y.x@128`` (buffer starts 128 bytes past a 64-byte boundary).
"""

from __future__ import annotations

import re

from kernels.errors import LayoutError
from kernels.grid import HORIZONTAL_AXES, LOGICAL_AXES
from kernels.layout import _VALID_NAMES, FLAT, TILES, WHOLE, WITHIN, Layout, Token

_TOKEN_RE = re.compile(r"^(?P<name>[A-Za-z]+)(?P<digits>\d*)(?:(?P<op>[/%])(?P<size>[^+]*))?(?:(?P<plus>\+)(?P<pad>.*))?$")


def parse_layout(spec: str) -> Layout:
    """Parse layout spec text; see the module docstring for the grammar."""
    if not isinstance(spec, str) or not spec.strip():
        raise LayoutError(f"empty layout spec {spec!r}; example: var.z.y.x")
    text = spec.strip()
    body, at, offset_text = text.partition("@")
    base_offset = 0
    if at:
        if not offset_text.isdigit():
            raise LayoutError(f"base offset '@{offset_text}' in '{text}' must be a non-negative integer of bytes")
        base_offset = int(offset_text)
    tokens = tuple(_parse_token(piece, text) for piece in body.split("."))
    return Layout(tokens, base_offset)


def _parse_token(piece: str, text: str) -> Token:
    m = _TOKEN_RE.match(piece)
    if not m:
        raise LayoutError(f"bad token '{piece}' in '{text}'; valid tokens: {_VALID_NAMES}, each optionally +PAD")
    name, op, size_text = m["name"], m["op"], m["size"]
    if name in ("Y", "X") or (m["digits"] and name in HORIZONTAL_AXES):
        axis = name.lower()
        raise LayoutError(
            f"token '{piece}' in '{text}' uses an unsupported tiling form; write a tiled axis as "
            f"'{axis}/N' (tile index) and '{axis}%N' (position in the tile), e.g. y/8.x/16.var.z.y%8.x%16"
        )
    if name == FLAT and not op:
        raise LayoutError(f"token '{piece}' in '{text}': the flattened horizontal index is blocked, written 'yx/N' (block) "
                          f"and 'yx%N' (position in the block), e.g. yx/32.var.z.yx%32; unblocked, write y.x")
    if name not in LOGICAL_AXES + (FLAT,) or m["digits"]:
        raise LayoutError(f"unknown token '{piece}' in '{text}'; valid tokens: {_VALID_NAMES}")
    pad = 0
    if m["plus"]:
        if not re.fullmatch(r"-?\d+", m["pad"] or ""):
            raise LayoutError(f"bad pad in token '{piece}'; write +N with N a non-negative integer")
        pad = int(m["pad"])
        if pad < 0:
            raise LayoutError(f"negative pad in token '{piece}'; pads are >= 0")
    if not op:
        return Token(name, WHOLE, 0, pad)
    if name not in HORIZONTAL_AXES + (FLAT,):
        raise LayoutError(f"axis '{name}' cannot be tiled (token '{piece}'); only y and x (or the flattened yx) can")
    if not size_text.isdigit() or int(size_text) <= 0:
        raise LayoutError(f"tile size in '{piece}' must be a positive integer, e.g. {name}{op}8")
    return Token(name, TILES if op == "/" else WITHIN, int(size_text), pad)


def as_layout(layout: Layout | str) -> Layout:
    """Accept a Layout or its spec text."""
    return layout if isinstance(layout, Layout) else parse_layout(layout)
