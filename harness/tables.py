"""Render lists of records as markdown, CSV or JSON."""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Sequence
from typing import Any

from tabulate import tabulate

FORMATS = ("md", "csv", "json")


def _cell(value: Any) -> Any:
    if isinstance(value, (tuple, list)):
        return "×".join(str(v) for v in value) if all(isinstance(v, int) for v in value) else str(value)
    return value


def render(records: Sequence[dict[str, Any]], fmt: str, floatfmt: str = ".3g") -> str:
    """Render records (same keys each) as a GitHub pipe table, CSV or JSON."""
    if fmt == "json":
        return json.dumps(list(records), indent=2, default=str) + "\n"
    if not records:
        return "" if fmt == "csv" else "(no rows)\n"
    keys = list(records[0])
    if fmt == "csv":
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        writer.writerow(keys)
        for rec in records:
            writer.writerow([_cell(rec[k]) for k in keys])
        return buf.getvalue()
    if fmt == "md":
        rows = [[_cell(rec[k]) for k in keys] for rec in records]
        return tabulate(rows, headers=keys, tablefmt="github", floatfmt=floatfmt, disable_numparse=False) + "\n"
    raise ValueError(f"unknown format '{fmt}'; valid: {', '.join(FORMATS)}")
