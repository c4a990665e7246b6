"""Families of layouts a suite or ``stridewise layouts`` expands: permutations, tilings, paddings.

One set of defaults (``TILING_ORDER``, ``TILING_SIZES``) serves both.
"""

from __future__ import annotations

import itertools
import re
from collections.abc import Iterable, Sequence

from kernels.errors import LayoutError
from kernels.grid import LOGICAL_AXES
from kernels.layout import Layout, Token
from kernels.notation import as_layout, parse_layout


def permutations() -> list[Layout]:
    """All 24 orders of the four logical axes, in lexicographic order of ``(var, z, y, x)``."""
    return [Layout(tuple(Token(a) for a in order)) for order in itertools.permutations(LOGICAL_AXES)]


#: Default token order of the tilings family: tiles outermost, each tile holding every level of
#: every variable. One default for suites and ``stridewise layouts`` alike.
TILING_ORDER = "y/.x/.var.z.y%.x%"
#: Default tile sizes (y, x) of the tilings family.
TILING_SIZES = ((4, 8), (8, 8))


def tilings(tiles: Iterable[tuple[int, int]], order: str = TILING_ORDER) -> list[Layout]:
    """Tiled layouts over tile sizes ``(ty, tx)``.

    ``order`` places the six parts, sizes left out: ``y/`` and ``x/`` (tile index), ``y%`` and
    ``x%`` (position in a tile), ``var`` and ``z``; any part may carry ``+PAD``.
    """
    template = order.split(".")
    bare = sorted(t.split("+")[0] for t in template)
    if bare != sorted(["y/", "x/", "y%", "x%", "var", "z"]):
        raise LayoutError(f"tiling order '{order}' must name y/, x/, var, z, y%, x% once each, e.g. {TILING_ORDER}")
    out = []
    for ty, tx in tiles:
        size = {"y": ty, "x": tx}
        spec = ".".join(
            f"{t[:2]}{size[t[0]]}{t[2:]}" if t[0] in size and t[1:2] in ("/", "%") else t for t in template
        )
        out.append(parse_layout(spec))
    return out


def paddings(base: Layout | str, pads: Sequence[int], token: str | None = None) -> list[Layout]:
    """Copies of ``base`` with one token (default: the innermost) padded by each of ``pads``."""
    base = as_layout(base)
    names = [t.text.split("+")[0] for t in base.tokens]
    target = names[-1] if token is None else token
    if target not in names:
        raise LayoutError(f"token '{target}' is not in layout '{base.spec}'; its tokens: {', '.join(names)}")
    pos = names.index(target)
    out = []
    for pad in pads:
        if pad < 0:
            raise LayoutError(f"negative pad {pad}; pads are >= 0")
        toks = list(base.tokens)
        toks[pos] = Token(toks[pos].axis, toks[pos].part, toks[pos].tile, pad)
        out.append(Layout(tuple(toks), base.base_offset))
    return out


def format_tile_sizes(tiles: Iterable[tuple[int, int]]) -> str:
    """Inverse of ``parse_tile_sizes``: ``[(4, 8)]`` -> ``"4x8"``."""
    return ",".join(f"{ty}x{tx}" for ty, tx in tiles)


def parse_tile_sizes(text: str) -> list[tuple[int, int]]:
    """Parse ``"4x8,8x8"`` into ``[(4, 8), (8, 8)]`` (y-size first)."""
    out = []
    for item in text.split(","):
        m = re.fullmatch(r"\s*(\d+)x(\d+)\s*", item)
        if not m or int(m[1]) <= 0 or int(m[2]) <= 0:
            raise LayoutError(f"bad tile size '{item.strip()}'; write YSIZExXSIZE with positive sizes, e.g. 4x8")
        out.append((int(m[1]), int(m[2])))
    return out
