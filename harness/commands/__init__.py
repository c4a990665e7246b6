"""The ``stridewise`` command line: one module per verb, each with ``add_parser`` and ``run``.

A command turns its arguments into options, calls the harness, and writes the output. Commands
import ``harness``; nothing in ``harness`` outside this package imports a command.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence

from harness import __version__
from harness.commands import array_script, baseline, gate, halos, import_bench, layouts, merge, rank, roof, sweep, versus
from harness.commands.parser import EXIT_USAGE, Parser
from kernels.errors import StridewiseError

#: In the order ``stridewise --help`` lists them.
COMMANDS = (layouts, sweep, roof, rank, merge, array_script, gate, versus, baseline, import_bench, halos)


def build_parser() -> Parser:
    parser = Parser(
        prog="stridewise",
        description="Benchmark structured-grid kernels over many memory layouts of the same model state.",
    )
    parser.add_argument("--version", action="version", version=f"stridewise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    sub.required = True
    for command in COMMANDS:
        command.add_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    try:
        args = build_parser().parse_args(argv)
        return int(args.func(args) or 0)
    except StridewiseError as exc:
        print(f"stridewise: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("stridewise: interrupted", file=sys.stderr)
        return 130
