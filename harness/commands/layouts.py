"""``stridewise layouts``: list a layout family's shapes, strides and footprints."""

from __future__ import annotations

import argparse

from harness.tables import FORMATS, render
from kernels.grid import SUPPORTED_DTYPES, Extents
from kernels.families import TILING_ORDER, TILING_SIZES, format_tile_sizes, paddings, parse_tile_sizes, permutations, tilings
from kernels.layout import Layout
from kernels.notation import parse_layout

FAMILIES = ("permutations", "tilings", "paddings")


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "layouts",
        help="print the shape, byte strides and footprint of layouts",
        description="Print, for given grid extents, each layout's physical shape, byte strides, "
        "footprint and contiguous run. Pick layouts with --layout and/or --family.",
    )
    p.add_argument("--grid", default="var=4,z=64,y=128,x=128", help="extents, e.g. var=4,z=64,y=128,x=128")
    p.add_argument("--dtype", default="float64", help=f"element type: {', '.join(SUPPORTED_DTYPES)}")
    p.add_argument("--layout", action="append", default=[], metavar="SPEC", help="a layout spec (repeatable)")
    p.add_argument("--family", choices=FAMILIES, help="a family of layouts (default: permutations)")
    p.add_argument("--tiles", default=format_tile_sizes(TILING_SIZES), help="tilings: tile sizes YxX, comma separated")
    p.add_argument(
        "--order",
        default=TILING_ORDER,
        help="tilings: part order without sizes (y/ x/ tile index, y%% x%% position in a tile), e.g. %(default)s",
    )
    p.add_argument("--base", default="var.z.y.x", help="paddings: layout to pad")
    p.add_argument("--pads", default="0,1,8", help="paddings: pads to apply, comma separated")
    p.add_argument("--pad-token", default=None, help="paddings: token to pad (default: innermost)")
    p.add_argument("--format", default="md", choices=FORMATS)
    p.set_defaults(func=run)


def _parse_pads(text: str) -> list[int]:
    from kernels.errors import LayoutError

    try:
        return [int(v) for v in text.split(",")]
    except ValueError:
        raise LayoutError(f"bad pad list '{text}'; write non-negative integers, e.g. 0,1,8") from None


def selected_layouts(args: argparse.Namespace) -> list[Layout]:
    layouts = [parse_layout(spec) for spec in args.layout]
    family = args.family or (None if layouts else "permutations")
    if family == "permutations":
        layouts += permutations()
    elif family == "tilings":
        layouts += tilings(parse_tile_sizes(args.tiles), args.order)
    elif family == "paddings":
        layouts += paddings(args.base, _parse_pads(args.pads), args.pad_token)
    return layouts


def run(args: argparse.Namespace) -> int:
    extents = Extents.parse(args.grid)
    records = []
    for layout in selected_layouts(args):
        d = layout.describe(extents, args.dtype)
        records.append(
            {
                "layout": d["layout"],
                "shape": d["shape"],
                "strides_bytes": d["strides_bytes"],
                "MiB": d["bytes"] / 2**20,
                "padding_bytes": d["padding_bytes"],
                "partial_tiles": "; ".join(f"{axis}: {text}" for axis, text in d["partial_tiles"].items()) or "none",
                "contiguous": d["contiguous"],
                "base_offset": d["base_offset"],
            }
        )
    print(render(records, args.format, floatfmt=".4g"), end="")
    return 0
