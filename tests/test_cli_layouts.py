"""``stridewise layouts`` output and its one-line errors."""

from __future__ import annotations

import io
import json
import subprocess
import sys

import pandas as pd
import pytest

from harness.cli import main
from kernels.grid import Extents
from kernels.layout import parse_layout


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_csv_lists_every_permutation_with_numpy_strides(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = _run(capsys, "layouts", "--grid", "var=2,z=3,y=4,x=8", "--format", "csv")
    assert code == 0
    table = pd.read_csv(io.StringIO(out))
    assert len(table) == 24
    ext = Extents(2, 3, 4, 8)
    for spec, strides in zip(table["layout"], table["strides_bytes"]):
        assert tuple(int(s) for s in strides.split("×")) == parse_layout(spec).strides(ext, "float64")


def test_json_and_md(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = _run(capsys, "layouts", "--family", "tilings", "--tiles", "2x4", "--grid", "var=1,z=2,y=4,x=8", "--format", "json")
    rows = json.loads(out)
    assert code == 0 and rows[0]["layout"] == "Y.X.var.z.y2.x4" and rows[0]["shape"] == [2, 2, 1, 2, 2, 4]
    code, out, _ = _run(capsys, "layouts", "--layout", "var.z.y+1.x+8", "--format", "md")
    assert code == 0 and out.startswith("| layout") and "var.z.y+1.x+8" in out


@pytest.mark.parametrize(
    "argv, named",
    [
        (["layouts", "--layout", "var.z.q.x"], "'q'"),
        (["layouts", "--grid", "var=0,z=1,y=1,x=1"], "'var'"),
        (["layouts", "--family", "tilings", "--tiles", "3x8"], "tile size 3"),
        (["layouts", "--family", "paddings", "--pads", "1,-2"], "-2"),
        (["layouts", "--dtype", "int8"], "int8"),
    ],
)
def test_bad_input_is_one_line_exit_2(capsys: pytest.CaptureFixture[str], argv: list[str], named: str) -> None:
    code, out, err = _run(capsys, *argv)
    assert code == 2 and out == ""
    assert named in err and err.count("\n") == 1 and "Traceback" not in err


def test_console_entry_point_exit_status() -> None:
    proc = subprocess.run([sys.executable, "-m", "harness", "layouts", "--layout", "var.var.y.x"], capture_output=True, text=True)
    assert proc.returncode == 2
    assert "'var'" in proc.stderr and "Traceback" not in proc.stderr
