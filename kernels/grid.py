"""Logical axes, grid extents and supported dtypes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kernels.errors import LayoutError

#: The logical axes, in the order of the logical array ``(var, z, y, x)``.
LOGICAL_AXES: tuple[str, ...] = ("var", "z", "y", "x")
#: Axes that may be tiled.
HORIZONTAL_AXES: tuple[str, ...] = ("y", "x")
#: Element types a state may hold.
SUPPORTED_DTYPES: tuple[str, ...] = ("float32", "float64")


#: Largest extent of one axis, and of a whole grid in points: byte offsets of any layout of such a
#: grid (padding and 16-byte elements included) stay far inside a signed 64-bit integer.
MAX_EXTENT = 2**31 - 1
MAX_POINTS = 2**48


@dataclass(frozen=True)
class Extents:
    """Logical extents of a grid: variables, vertical levels and the horizontal grid."""

    var: int
    z: int
    y: int
    x: int

    def __post_init__(self) -> None:
        for axis in LOGICAL_AXES:
            value = getattr(self, axis)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
                raise LayoutError(f"extent of axis '{axis}' must be an integer, got {value!r}")
            if value <= 0:
                raise LayoutError(f"extent of axis '{axis}' must be positive, got {value}")
            if value > MAX_EXTENT:
                raise LayoutError(f"extent of axis '{axis}' is {value}, above the largest supported extent {MAX_EXTENT}")
            object.__setattr__(self, axis, int(value))
        if self.var * self.z * self.y * self.x > MAX_POINTS:
            largest = max(LOGICAL_AXES, key=lambda a: getattr(self, a))
            raise LayoutError(f"grid {self.var}x{self.z}x{self.y}x{self.x} has more than {MAX_POINTS} points, beyond any "
                              f"machine's memory (largest axis: '{largest}' = {getattr(self, largest)}); use a smaller grid")

    def __getitem__(self, axis: str) -> int:
        if axis not in LOGICAL_AXES:
            raise LayoutError(f"unknown axis '{axis}'; valid axes: {', '.join(LOGICAL_AXES)}")
        return getattr(self, axis)

    @property
    def shape(self) -> tuple[int, int, int, int]:
        """Shape of the logical array ``(var, z, y, x)``."""
        return (self.var, self.z, self.y, self.x)

    @property
    def points(self) -> int:
        """Number of logical elements."""
        return self.var * self.z * self.y * self.x

    def replace(self, **changes: int) -> Extents:
        """A copy with some extents changed (e.g. ``var=1`` for a field shared by all variables)."""
        values = {axis: getattr(self, axis) for axis in LOGICAL_AXES}
        values.update(changes)
        return Extents(**values)

    @classmethod
    def parse(cls, text: str) -> Extents:
        """Parse ``"var=4,z=64,y=128,x=128"`` (every axis named once)."""
        values: dict[str, int] = {}
        for item in text.split(","):
            name, sep, number = item.strip().partition("=")
            name = name.strip()
            if not sep or name not in LOGICAL_AXES:
                raise LayoutError(
                    f"bad grid item '{item.strip()}'; expected AXIS=N with AXIS one of "
                    f"{', '.join(LOGICAL_AXES)}, e.g. var=4,z=64,y=128,x=128"
                )
            if name in values:
                raise LayoutError(f"axis '{name}' given twice in grid '{text}'")
            try:
                values[name] = int(number)
            except ValueError:
                raise LayoutError(f"extent of axis '{name}' must be an integer, got '{number.strip()}'") from None
        missing = [a for a in LOGICAL_AXES if a not in values]
        if missing:
            raise LayoutError(f"grid '{text}' is missing axis {', '.join(missing)}; give all of var, z, y, x")
        return cls(**values)

    def __str__(self) -> str:
        return ",".join(f"{a}={getattr(self, a)}" for a in LOGICAL_AXES)


def check_dtype(dtype: object) -> np.dtype:
    """Return the NumPy dtype for a supported element type, or raise LayoutError."""
    try:
        resolved = np.dtype(dtype)  # type: ignore[call-overload]
    except TypeError:
        resolved = None
    if resolved is None or resolved.name not in SUPPORTED_DTYPES:
        raise LayoutError(f"unsupported dtype '{dtype}'; supported: {', '.join(SUPPORTED_DTYPES)}")
    return resolved
