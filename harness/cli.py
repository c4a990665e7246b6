"""The ``stridewise`` entry point (the commands themselves are in ``harness.commands``)."""

from harness.commands import build_parser, main

__all__ = ["build_parser", "main"]
