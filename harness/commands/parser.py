"""The argument parser every command shares: one-line errors with exit status 2."""

from __future__ import annotations

import argparse

EXIT_USAGE = 2


class Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit status 2
        self.exit(EXIT_USAGE, f"stridewise: error: {message}\n")
