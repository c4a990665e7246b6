"""State storage: the prognostic arrays of one grid held in one layout."""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Callable
from typing import Any

import numpy as np

from kernels.errors import LayoutError
from kernels.grid import LOGICAL_AXES, Extents, check_dtype
from kernels.layout import ALIGNMENT, FLAT, TILES, WITHIN, Layout
from kernels.notation import as_layout


Toucher = Callable[[np.ndarray], None]


def aligned_empty(nbytes: int, base_offset: int = 0, toucher: Toucher | None = None) -> np.ndarray:
    """A zeroed byte buffer of ``nbytes`` starting ``base_offset`` bytes past an ALIGNMENT boundary.

    ``toucher`` zeroes the fresh buffer itself (e.g. with a parallel loop, to place its pages by
    first touch); by default NumPy zeroes it.
    """
    if base_offset < 0:
        raise LayoutError(f"base offset must be >= 0 bytes, got {base_offset}")
    size = nbytes + ALIGNMENT + base_offset
    if toucher is None:
        owner = np.zeros(size, dtype=np.uint8)
    else:
        owner = np.empty(size, dtype=np.uint8)
        toucher(owner)
    shift = (-owner.ctypes.data) % ALIGNMENT + base_offset
    return owner[shift : shift + nbytes]  # the view keeps the larger allocation alive


@dataclass(frozen=True, eq=False)
class State:
    """A grid's prognostic variables held in one layout.

    ``data`` is the C-contiguous physical array (shape ``layout.shape(extents)``);
    padding elements are zero and never part of logical values.
    """

    layout: Layout
    extents: Extents
    data: np.ndarray

    # -- construction ---------------------------------------------------------------------
    @classmethod
    def zeros(cls, layout: Layout | str, extents: Extents, dtype: Any = "float64", toucher: Toucher | None = None) -> State:
        """An all-zero state (padding included) in an aligned buffer (see ``aligned_empty``)."""
        layout = as_layout(layout)
        dt = check_dtype(dtype)
        if layout.base_offset % dt.itemsize:
            raise LayoutError(
                f"base offset {layout.base_offset} bytes of layout '{layout.spec}' is not a multiple of "
                f"the {dt.name} item size {dt.itemsize}; valid offsets are multiples of {dt.itemsize}"
            )
        shape = layout.shape(extents)
        raw = aligned_empty(layout.nbytes(extents, dt), layout.base_offset, toucher)
        return cls(layout, extents, raw.view(dt).reshape(shape))

    @classmethod
    def from_logical(cls, values: np.ndarray, layout: Layout | str, dtype: Any | None = None) -> State:
        """Store a logical ``(var, z, y, x)`` array in ``layout`` (dtype defaults to the array's)."""
        values = np.asarray(values)
        if values.ndim != 4:
            raise LayoutError(f"a logical array has 4 axes (var, z, y, x); got shape {values.shape}")
        extents = Extents(*values.shape)
        state = cls.zeros(layout, extents, values.dtype if dtype is None else dtype)
        state.assign_logical(values)
        return state

    # -- views ----------------------------------------------------------------------------
    @property
    def dtype(self) -> np.dtype:
        return self.data.dtype

    def _groups(self) -> tuple[tuple[str, int], ...]:
        """The logical axes as the layout groups them: var, z, then y and x, or the flattened yx."""
        if self.layout.flat_block:
            return (("var", self.extents.var), ("z", self.extents.z), (FLAT, self.extents.y * self.extents.x))
        return tuple(zip(LOGICAL_AXES, self.extents.shape))

    def _split_shape(self) -> tuple[int, ...]:
        """Grouped logical shape with each tiled axis split into (tiles, within)."""
        out: list[int] = []
        for axis, n in self._groups():
            tile = self.layout.tiles.get(axis)
            out.extend((-(-n // tile), tile) if tile else (n,))
        return tuple(out)

    def _split_positions(self) -> list[int]:
        """For each physical axis, its position in the split logical shape."""
        pos: dict[tuple[str, str], int] = {}
        i = 0
        for axis, _ in self._groups():
            if axis in self.layout.tiles:
                pos[(axis, TILES)], pos[(axis, WITHIN)] = i, i + 1
                i += 2
            else:
                pos[(axis, "whole")] = i
                i += 1
        return [pos[(t.axis, t.part)] for t in self.layout.tokens]

    def horizontal_offsets(self) -> np.ndarray:
        """Element offset contributed by each flattened horizontal index ``y * nx + x`` (from the
        y and x tokens, or from the ``yx`` blocks), as int64."""
        nx = self.extents.x
        h = np.arange(self.extents.y * nx, dtype=np.int64)
        coords = {"y": h // nx, "x": h % nx, FLAT: h}
        out = np.zeros(h.size, dtype=np.int64)
        for tok, stride in zip(self.layout.tokens, self.data.strides):
            if tok.axis in coords:
                out += tok.logical_index(coords[tok.axis]).astype(np.int64) * (stride // self.data.itemsize)
        return out

    def interior(self) -> np.ndarray:
        """The physical array without padding (a strided view)."""
        counts = self.layout.counts(self.extents)
        return self.data[tuple(slice(0, n) for n in counts)]

    def split_view(self) -> np.ndarray:
        """A view indexed like the split logical array (tiled axes as (tiles, within))."""
        return self.interior().transpose(np.argsort(self._split_positions()))

    # -- conversion -----------------------------------------------------------------------
    def _grouped_shape(self) -> tuple[int, ...]:
        return tuple(n for _, n in self._groups())

    def _covered_shape(self) -> tuple[int, ...]:
        """Grouped logical shape rounded up to whole tiles (the grouped shape when no tile is partial)."""
        tiles = self.layout.tiles
        return tuple(-(-n // tiles[a]) * tiles[a] if a in tiles else n for a, n in self._groups())

    def to_logical(self) -> np.ndarray:
        """A new C-contiguous logical ``(var, z, y, x)`` array (exact copy of the values)."""
        covered = np.ascontiguousarray(self.split_view()).reshape(self._covered_shape())
        grouped = self._grouped_shape()
        if covered.shape != grouped:
            covered = np.ascontiguousarray(covered[tuple(slice(0, n) for n in grouped)])
        return covered.reshape(self.extents.shape)

    def assign_logical(self, values: np.ndarray) -> None:
        """Overwrite every logical value from a ``(var, z, y, x)`` array; padding is untouched."""
        values = np.asarray(values)
        if values.shape != self.extents.shape:
            raise LayoutError(f"logical array of shape {values.shape} does not match extents {self.extents}")
        covered, grouped = self._covered_shape(), self._grouped_shape()
        values = values.reshape(grouped)
        if covered != grouped:  # partial tiles: keep what the unused positions hold
            whole = np.ascontiguousarray(self.split_view()).reshape(covered).astype(values.dtype, copy=False)
            whole[tuple(slice(0, n) for n in grouped)] = values
            values = whole
        split = values.reshape(self._split_shape())
        self.interior()[...] = split.transpose(self._split_positions())

    def convert(self, layout: Layout | str) -> State:
        """The same values in another layout (same dtype)."""
        target = State.zeros(layout, self.extents, self.dtype)
        self.copy_into(target)
        return target

    def copy_into(self, target: State) -> None:
        """Write this state's values into ``target`` (another layout, same extents)."""
        if target.extents != self.extents:
            raise LayoutError(f"cannot copy a state of extents {self.extents} into one of {target.extents}")
        if target.layout.tiles == self.layout.tiles and bool(target.layout.flat_block) == bool(self.layout.flat_block):
            # Same split: one strided copy, no intermediate logical array.
            target.interior()[...] = self.split_view().transpose(target._split_positions())
        else:
            target.assign_logical(self.to_logical())

    def describe(self) -> dict[str, Any]:
        """The layout's description at this state's extents, plus the real buffer address."""
        out = self.layout.describe(self.extents, self.dtype)
        out["address_mod_alignment"] = self.data.ctypes.data % ALIGNMENT
        return out

    def __repr__(self) -> str:
        return f"State(layout='{self.layout.spec}', extents={self.extents}, dtype={self.dtype.name})"
