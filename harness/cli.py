"""The ``stridewise`` entry point (the commands themselves are in ``harness.commands``).

The commands import numpy, pandas and numba, which takes a second or two; the import runs inside
a guard, so Ctrl-C while they load ends with one line and exit 130, not a traceback. SIGTERM ends
with one line and exit 143 wherever no command has installed its own handler (a sweep stops after
its current sample instead).
"""

from __future__ import annotations

import signal
import sys
from collections.abc import Sequence
from typing import Any


class Terminated(BaseException):
    """SIGTERM arrived outside a command's own handling."""


def _terminate(signum: int, frame: Any) -> None:
    raise Terminated


def main(argv: Sequence[str] | None = None) -> int:
    signal.signal(signal.SIGTERM, _terminate)
    try:
        from harness.commands import main as run_command

        return run_command(argv)
    except KeyboardInterrupt:
        print("stridewise: interrupted", file=sys.stderr)
        return 130
    except Terminated:
        print("stridewise: terminated", file=sys.stderr)
        return 143
