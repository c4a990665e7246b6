"""``stridewise layouts`` output and its one-line errors."""

from __future__ import annotations

import io
import json
import subprocess
import sys

import pandas as pd
import pytest

from harness.commands import main
from kernels.grid import Extents
from kernels.state import State


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("family", ["permutations", "tilings", "paddings"])
def test_csv_strides_are_numpys_own(capsys: pytest.CaptureFixture[str], family: str) -> None:
    """Source: numpy.ndarray.strides of the buffer a State allocates for each listed layout."""
    code, out, _ = _run(capsys, "layouts", "--family", family, "--grid", "var=2,z=3,y=8,x=8", "--format", "csv")
    assert code == 0
    table = pd.read_csv(io.StringIO(out))
    assert len(table) == {"permutations": 24, "tilings": 2, "paddings": 3}[family]
    ext = Extents(2, 3, 8, 8)
    for spec, strides in zip(table["layout"], table["strides_bytes"]):
        assert tuple(int(s) for s in strides.split("×")) == State.zeros(spec, ext, "float64").data.strides


def test_json_and_md(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = _run(capsys, "layouts", "--family", "tilings", "--tiles", "2x4", "--grid", "var=1,z=2,y=4,x=8", "--format", "json")
    rows = json.loads(out)
    assert code == 0 and rows[0]["layout"] == "y/2.x/4.var.z.y%2.x%4" and rows[0]["shape"] == [2, 2, 1, 2, 2, 4]
    code, out, _ = _run(capsys, "layouts", "--layout", "var.z.y+1.x+8", "--format", "md")
    assert code == 0 and out.startswith("| layout") and "var.z.y+1.x+8" in out


def test_flattened_horizontal_blocks(capsys: pytest.CaptureFixture[str]) -> None:
    """Closed form: 25 x 50 = 1250 columns in blocks of 32 take ceil(1250/32) = 40 blocks, the last
    holding 1250 - 39 x 32 = 2."""
    code, out, _ = _run(capsys, "layouts", "--layout", "yx/32.var.z.yx%32", "--grid", "var=4,z=137,y=25,x=50", "--format", "json")
    row = json.loads(out)[0]
    assert code == 0 and row["shape"] == [40, 4, 137, 32] and row["partial_tiles"] == "yx: last block holds 2 of 32"


@pytest.mark.parametrize(
    "argv, named",
    [
        (["layouts", "--layout", "var.z.q.x"], "'q'"),
        (["layouts", "--grid", "var=0,z=1,y=1,x=1"], "'var'"),
        (["layouts", "--family", "tilings", "--tiles", "3x512"], "tile size 512 exceeds"),
        (["layouts", "--family", "paddings", "--pads", "1,-2"], "-2"),
        (["layouts", "--dtype", "int8"], "int8"),
        (["layouts", "--layout", "yx.var.z"], "'yx'"),
        (["layouts", "--layout", "yx/64.var.z.yx%64", "--grid", "var=1,z=1,y=4,x=8"], "exceeds y * x points"),
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
