"""Halo faces packed and unpacked per layout, checked against NumPy slicing of the global array."""

from __future__ import annotations

import numpy as np
import pytest

from kernels.errors import LayoutError
from kernels.grid import Extents
from kernels.halo import exchange_in_process, halo_plan, halo_reference
from kernels.testing import LAYOUTS


@pytest.mark.parametrize("spec", LAYOUTS)
@pytest.mark.parametrize("dims, halo, dtype", [((2, 2), 2, "float64"), ((1, 3), 1, "float64"), ((2, 1), 3, "float32")])
def test_every_halo_face_equals_the_neighbours_interior(spec: str, dims: tuple[int, int], halo: int, dtype: str) -> None:
    """Reference: the doubly periodic global array cut with NumPy slicing (halo_reference); every
    rank's interior is untouched, its four faces of halo filled, its corners not exchanged."""
    rng = np.random.default_rng(1)
    ny, nx = 3 * halo + 1, 3 * halo + 2
    glob = rng.standard_normal((3, 2, dims[0] * ny, dims[1] * nx)).astype(dtype)
    got = exchange_in_process(glob, spec, dims, halo, dtype)
    for (cy, cx), local in got.items():
        expected = halo_reference(glob, (cy * ny, cx * nx), (ny, nx), halo)
        known = ~np.isnan(expected)
        np.testing.assert_array_equal(local[known], expected[known], err_msg=f"{spec} rank {(cy, cx)}")


def test_runs_follow_the_layout() -> None:
    """x innermost: north and south faces go as runs of the interior x (8), east and west as runs
    of the halo (2), one per (var, level, row); var innermost: each face row is one run, every
    point carrying var x z = 12 values."""
    ext = Extents(var=3, z=4, y=10, x=12)  # interior 6 x 8, halo 2
    rows = halo_plan("var.z.y.x", ext, "float64", 2)
    assert rows.face_size == {"north": 3 * 4 * 2 * 8, "south": 3 * 4 * 2 * 8, "east": 3 * 4 * 6 * 2, "west": 3 * 4 * 6 * 2}
    assert rows.pack.count == 2 * (3 * 4 * 2) + 2 * (3 * 4 * 6) and sorted(set(rows.pack.length)) == [2, 8]
    points = halo_plan("y.x.z.var", ext, "float64", 2)
    assert points.pack.count == 2 * 2 + 2 * 6 and sorted(set(points.pack.length)) == [2 * 12, 8 * 12]
    assert points.unpack.count == points.pack.count and points.buffer_size == rows.buffer_size


def test_a_halo_without_room_is_refused() -> None:
    with pytest.raises(LayoutError, match="halo 3 needs y and x of at least 9"):
        halo_plan("var.z.y.x", Extents(var=1, z=2, y=8, x=12), "float64", 3)


def _mpiexec() -> str:
    """The MPI launcher beside this interpreter (the MPICH wheel's), or skip with the reason."""
    import shutil
    import sys
    from pathlib import Path

    import importlib.util

    if importlib.util.find_spec("mpi4py") is None:
        pytest.skip("mpi4py is not installed (pip install '.[mpi]'); the halo exchange under MPI is not tested")
    launcher = Path(sys.executable).with_name("mpiexec")
    found = str(launcher) if launcher.exists() else shutil.which("mpiexec")
    if not found:
        pytest.skip("no mpiexec found beside the interpreter or on PATH; the halo exchange under MPI is not tested")
    return found


def test_the_exchange_under_mpiexec_checks_times_and_writes_its_results(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Two ranks: every layout's faces are checked, timed, reported per part with intervals, and
    the results written; the same --out is then refused in one line (nothing overwritten)."""
    import subprocess
    import sys

    launcher = _mpiexec()
    out = tmp_path / "halos"
    cmd = [launcher, "-n", "2", sys.executable, "-m", "harness", "halos", "--grid", "var=2,z=3,y=6,x=8", "--halo", "2",
           "--layouts", "var.z.y.x,y.x.z.var,y/4.x/4.var.z.y%4.x%4", "--rounds", "4", "--out", str(out)]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    for part in ("pack", "exchange", "unpack", "total"):
        assert f"## {part}" in done.stdout
    assert "2 rank(s) on a periodic 2 x 1 process grid" in done.stdout and "Not timed" not in done.stdout
    figures = __import__("pandas").read_csv(out / "halos.csv")
    assert len(figures) == 4 * 3 and (figures["x_best_lo"] <= figures["x_best"]).all()
    assert set(figures.loc[figures["layout"] == "y.x.z.var", "pack_runs"]) == {2 + 2 + 6 + 6}  # a run per face row
    again = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert again.returncode == 2 and again.stderr.count("\n") == 1 and "already holds a halo measurement" in again.stderr
    single = subprocess.run([*cmd[:-2], "--dtype", "float32", "--format", "csv"], capture_output=True, text=True, timeout=300)
    assert single.returncode == 0, single.stderr  # float32 faces checked bit for bit, then timed
    assert single.stdout.startswith("part,layout,median_us") and single.stdout.count("\n") == 1 + 4 * 3


def test_without_mpi_the_command_is_skipped_with_a_message() -> None:
    import subprocess
    import sys

    code = "import sys; sys.modules['mpi4py'] = None; from harness.commands import main; sys.exit(main(['halos']))"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0 and "halos skipped: mpi4py is not installed" in done.stderr and done.stdout == ""


@pytest.mark.parametrize("args, message", [(["--halo", "0"], "--halo 0"), (["--layouts", ","], "--layouts names no layout"),
                                           (["--rounds", "2"], "--rounds 2"), (["--layouts", "var.z.q.x"], "unknown token")])
def test_bad_halo_arguments_are_one_line_errors(args: list[str], message: str) -> None:
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-m", "harness", "halos", *args], capture_output=True, text=True, timeout=120)
    assert done.returncode == 2 and done.stderr.count("\n") == 1 and message in done.stderr, done.stderr
