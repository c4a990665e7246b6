"""The project's exception types."""


class StridewiseError(ValueError):
    """Base of every error caused by bad input; the CLI prints it as one line."""


class LayoutError(StridewiseError):
    """A layout spec, grid extent, dtype or allocation request is invalid."""


class KernelError(StridewiseError):
    """A kernel was given inputs it cannot work on (wrong extents, dtype, singular system)."""
