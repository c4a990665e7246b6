"""The ``stridewise`` entry point (the commands themselves are in ``harness.commands``).

The commands import numpy, pandas and numba, which takes a second or two; the import runs inside
a guard, so Ctrl-C while they load ends with one line and exit 130, not a traceback.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence


def main(argv: Sequence[str] | None = None) -> int:
    try:
        from harness.commands import main as run_command
    except KeyboardInterrupt:
        print("stridewise: interrupted", file=sys.stderr)
        return 130
    return run_command(argv)
