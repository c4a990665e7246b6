"""The layout model: which physical order, tiling and padding holds the logical axes.

A layout is a tuple of tokens, outermost first: a whole logical axis (``var``, ``z``, ``y``,
``x``) or one part of a tiled horizontal axis (the tile index, or the position in a tile), each
with optional padding, plus a base offset in bytes. Instead of y and x, a layout may block the
flattened horizontal index ``h = y * nx + x`` (the blocking column physics uses): ``yx/N`` runs
over the blocks of N points and ``yx%N`` over the positions in a block; a block may straddle rows. Its text form is in ``kernels.notation``;
the families of layouts a suite expands are in ``kernels.families``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kernels.errors import LayoutError
from kernels.grid import HORIZONTAL_AXES, LOGICAL_AXES, Extents, check_dtype

#: Alignment of every state buffer, in bytes (a cache line on x86-64 and most Arm cores).
ALIGNMENT = 64

WHOLE, TILES, WITHIN = "whole", "tiles", "within"
#: The flattened horizontal index ``y * nx + x``, which a layout may block in place of y and x.
FLAT = "yx"
_VALID_NAMES = ("var, z, y, x, y/N and x/N (tile index), y%N and x%N (position in a tile of N), "
                "yx/N and yx%N (block and position over the flattened horizontal index, in place of y and x)")


def axis_extent(extents: Extents, axis: str) -> int:
    """Logical extent of a logical axis, or of the flattened horizontal index ``yx``."""
    return extents.y * extents.x if axis == FLAT else extents[axis]
_OP = {TILES: "/", WITHIN: "%"}
_FILE_SAFE = str.maketrans({"/": "d", "%": "m", "+": "p", "@": "o"})


@dataclass(frozen=True)
class Token:
    """One physical axis of a layout: a whole logical axis, or one part of a tiled one."""

    axis: str
    part: str = WHOLE
    tile: int = 0
    pad: int = 0

    @property
    def text(self) -> str:
        """Canonical spec text of this token."""
        name = f"{self.axis}{_OP[self.part]}{self.tile}" if self.part in _OP else self.axis
        return f"{name}+{self.pad}" if self.pad else name

    def count(self, extents: Extents) -> int:
        """Logical (unpadded) extent of this physical axis; a last, partial tile counts as a tile."""
        n = axis_extent(extents, self.axis)
        if self.part == TILES:
            return -(-n // self.tile)
        if self.part == WITHIN:
            return self.tile
        return n

    def extent(self, extents: Extents) -> int:
        """Physical extent of this axis, padding included."""
        return self.count(extents) + self.pad

    def logical_index(self, index: np.ndarray) -> np.ndarray:
        """Map logical indices along ``axis`` to indices along this physical axis."""
        if self.part == TILES:
            return index // self.tile
        if self.part == WITHIN:
            return index % self.tile
        return index


@dataclass(frozen=True)
class Layout:
    """A physical order of the logical axes, with optional tiling, padding and base offset.

    Frozen and hashable; ``parse_layout(layout.spec) == layout`` always holds (``kernels.notation``).
    """

    tokens: tuple[Token, ...]
    base_offset: int = 0
    _tiles: dict[str, int] = field(default_factory=dict, init=False, repr=False, compare=False, hash=False)

    def __post_init__(self) -> None:
        _validate(self.tokens, self.base_offset)
        object.__setattr__(self, "_tiles", {t.axis: t.tile for t in self.tokens if t.part == WITHIN})

    # -- text -----------------------------------------------------------------------------
    @property
    def spec(self) -> str:
        """Canonical spec text."""
        body = ".".join(t.text for t in self.tokens)
        return f"{body}@{self.base_offset}" if self.base_offset else body

    def __str__(self) -> str:
        return self.spec

    @property
    def file_stem(self) -> str:
        """The spec as a file-name part: ``/`` becomes ``d``, ``%`` ``m``, ``+`` ``p``, ``@`` ``o``.

        Injective on canonical specs (those letters never follow a digit or ``.`` there).
        """
        return self.spec.translate(_FILE_SAFE)

    def __repr__(self) -> str:
        return f"Layout('{self.spec}')"

    # -- structure ------------------------------------------------------------------------
    @property
    def tiles(self) -> dict[str, int]:
        """Tile size per tiled axis (``{}`` when untiled)."""
        return dict(self._tiles)

    @property
    def is_tiled(self) -> bool:
        return bool(self._tiles)

    @property
    def flat_block(self) -> int | None:
        """Points per block of the flattened horizontal index (``yx/N``), or None."""
        return self._tiles.get(FLAT)

    @property
    def is_padded(self) -> bool:
        return any(t.pad for t in self.tokens)

    @property
    def is_plain(self) -> bool:
        """A pure permutation: no tiling, no padding, no base offset (preferred on ties)."""
        return not (self.is_tiled or self.is_padded or self.base_offset)

    @property
    def order(self) -> tuple[str, ...]:
        """Logical axis of each physical axis, outermost first."""
        return tuple(t.axis for t in self.tokens)

    def index_of(self, axis: str, part: str = WHOLE) -> int:
        """Physical position of a logical axis (or of one part of a tiled axis)."""
        for pos, tok in enumerate(self.tokens):
            if tok.axis == axis and tok.part == part:
                return pos
        raise LayoutError(f"layout '{self.spec}' has no {part} part of axis '{axis}'")

    def with_offset(self, base_offset: int) -> Layout:
        """The same layout starting ``base_offset`` bytes past an aligned address."""
        return Layout(self.tokens, base_offset)

    # -- geometry -------------------------------------------------------------------------
    def check(self, extents: Extents) -> None:
        """Raise LayoutError if the layout cannot hold a grid of these extents."""
        for axis, tile in self._tiles.items():
            n = axis_extent(extents, axis)
            if tile > n:
                what = "y * x points" if axis == FLAT else f"extent {n} of axis '{axis}'"
                raise LayoutError(
                    f"tile size {tile} exceeds {what} in layout '{self.spec}'; "
                    f"valid tile sizes are 1..{n} (a tile that does not divide {n} leaves a partial last tile)"
                )

    def remainder(self, extents: Extents) -> dict[str, int]:
        """Unused positions in the last tile of each tiled axis whose tile does not divide the extent."""
        return {axis: -axis_extent(extents, axis) % tile for axis, tile in self._tiles.items() if axis_extent(extents, axis) % tile}

    def counts(self, extents: Extents) -> tuple[int, ...]:
        """Logical (unpadded) extent of each physical axis."""
        self.check(extents)
        return tuple(t.count(extents) for t in self.tokens)

    def shape(self, extents: Extents) -> tuple[int, ...]:
        """Physical shape, padding included."""
        self.check(extents)
        return tuple(t.extent(extents) for t in self.tokens)

    def strides(self, extents: Extents, dtype: Any) -> tuple[int, ...]:
        """Byte strides of the C-contiguous physical array."""
        itemsize = check_dtype(dtype).itemsize
        shape = self.shape(extents)
        out = [0] * len(shape)
        step = itemsize
        for pos in range(len(shape) - 1, -1, -1):
            out[pos] = step
            step *= shape[pos]
        return tuple(out)

    def nbytes(self, extents: Extents, dtype: Any) -> int:
        """Bytes of the physical array, padding included (base offset excluded)."""
        return int(np.prod(self.shape(extents), dtype=np.int64)) * check_dtype(dtype).itemsize

    def contiguous_tokens(self, extents: Extents) -> tuple[str, ...]:
        """Innermost physical axes that together form one unbroken run of memory.

        The innermost axis always has unit stride; an outer axis joins the run while every
        axis inside it is unpadded (padding breaks the run).
        """
        run: list[str] = []
        for tok in reversed(self.tokens):
            run.append(tok.text)
            if tok.pad:
                break
        return tuple(reversed(run))

    def byte_offset(self, extents: Extents, dtype: Any, v: Any, k: Any, j: Any, i: Any) -> np.ndarray:
        """Byte offset (from the array start) of logical element(s) ``(v, k, j, i)``."""
        strides = self.strides(extents, dtype)
        index = dict(zip(LOGICAL_AXES, (np.asarray(v), np.asarray(k), np.asarray(j), np.asarray(i))))
        index[FLAT] = index["y"].astype(np.int64) * extents.x + index["x"]
        total = np.zeros(np.broadcast(*index.values()).shape, dtype=np.int64)
        for tok, stride in zip(self.tokens, strides):
            total = total + tok.logical_index(index[tok.axis]).astype(np.int64) * stride
        return total

    def describe(self, extents: Extents, dtype: Any) -> dict[str, Any]:
        """Everything a person needs to reason about this layout at these extents."""
        dt = check_dtype(dtype)
        return {
            "layout": self.spec,
            "dtype": dt.name,
            "shape": self.shape(extents),
            "strides_bytes": self.strides(extents, dt),
            "bytes": self.nbytes(extents, dt),
            "padding_bytes": self.nbytes(extents, dt) - extents.points * dt.itemsize,
            "partial_tiles": {axis: f"last {'block' if axis == FLAT else 'tile'} holds {self._tiles[axis] - left} of {self._tiles[axis]}"
                              for axis, left in self.remainder(extents).items()},
            "contiguous": ".".join(self.contiguous_tokens(extents)),
            "alignment": ALIGNMENT,
            "base_offset": self.base_offset,
        }


def _validate(tokens: tuple[Token, ...], base_offset: int) -> None:
    if not tokens:
        raise LayoutError("empty layout; a layout names each of var, z, y, x once")
    if isinstance(base_offset, bool) or not isinstance(base_offset, (int, np.integer)) or base_offset < 0:
        raise LayoutError(f"base offset must be a non-negative number of bytes, got {base_offset!r}")
    seen: dict[tuple[str, str], Token] = {}
    for tok in tokens:
        if tok.axis not in LOGICAL_AXES + (FLAT,):
            raise LayoutError(f"unknown axis '{tok.axis}'; valid tokens: {_VALID_NAMES}")
        if tok.pad < 0:
            raise LayoutError(f"negative pad {tok.pad} on token '{tok.axis}'; pads are >= 0")
        if tok.part != WHOLE and tok.axis not in HORIZONTAL_AXES + (FLAT,):
            raise LayoutError(f"axis '{tok.axis}' cannot be tiled; only y and x (or the flattened yx) can")
        if tok.axis == FLAT and tok.part == WHOLE:
            raise LayoutError("the flattened horizontal index is written blocked, 'yx/N' and 'yx%N'; unblocked, write 'y.x'")
        if tok.part != WHOLE and tok.tile <= 0:
            raise LayoutError(f"tile size of '{tok.text}' must be positive")
        key = (tok.axis, tok.part)
        if key in seen:
            raise LayoutError(f"token '{tok.text}' repeats axis '{tok.axis}'; each axis appears once")
        seen[key] = tok
    flat = any(a == FLAT for a, _ in seen)
    if flat and any(a in HORIZONTAL_AXES for a, _ in seen):
        raise LayoutError("a layout blocking the flattened horizontal index (yx/N, yx%N) names neither y nor x; "
                          "e.g. yx/32.var.z.yx%32")
    for axis in LOGICAL_AXES[:2] + ((FLAT,) if flat else HORIZONTAL_AXES):
        parts = {part for (a, part) in seen if a == axis}
        if not parts:
            raise LayoutError(f"layout is missing axis '{axis}'; a layout names each of var, z, y, x once")
        if WHOLE in parts and len(parts) > 1:
            raise LayoutError(f"axis '{axis}' appears both whole and tiled; use '{axis}' or both '{axis}/N' and '{axis}%N'")
        if parts == {TILES}:
            tile = seen[(axis, TILES)].tile
            raise LayoutError(f"tile index '{axis}/{tile}' has no partner '{axis}%{tile}' (position in the tile)")
        if parts == {WITHIN}:
            tile = seen[(axis, WITHIN)].tile
            raise LayoutError(f"tile position '{axis}%{tile}' has no partner '{axis}/{tile}' (tile index)")
        if parts == {TILES, WITHIN} and seen[(axis, TILES)].tile != seen[(axis, WITHIN)].tile:
            a, b = seen[(axis, TILES)].tile, seen[(axis, WITHIN)].tile
            raise LayoutError(f"'{axis}/{a}' and '{axis}%{b}' disagree on the tile size; both parts take the same N")
