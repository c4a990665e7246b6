"""The ``stridewise`` command line."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from harness import __version__, layouts_cmd
from kernels.errors import StridewiseError

EXIT_USAGE = 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit status 2
        self.exit(EXIT_USAGE, f"stridewise: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="stridewise",
        description="Benchmark structured-grid kernels over many memory layouts of the same model state.",
    )
    parser.add_argument("--version", action="version", version=f"stridewise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    layouts_cmd.add_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except StridewiseError as exc:
        print(f"stridewise: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("stridewise: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
