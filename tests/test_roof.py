"""Roof curve arithmetic and the STREAM counting rule."""

from __future__ import annotations

import numba
import numpy as np
import pytest

from harness.roof import RoofCurve, footprints
from harness.commands.roof import parse_bytes
from kernels.errors import StridewiseError
from kernels.triad import TRIAD, triad_arrays, triad_bytes


def test_stream_counting_rule() -> None:
    """STREAM (McCalpin) counts the triad a = b + q*c as 3 words per element: 24 bytes in float64,
    with no write-allocate traffic.

    From memory: J. D. McCalpin, STREAM benchmark, its published counting rules.
    """
    assert triad_bytes(1000, 8) == 24_000
    assert triad_bytes(1000, 4) == 12_000


def test_triad_computes_a_triad() -> None:
    numba.set_num_threads(1)
    a, b, c = triad_arrays(3 * 8 * 1000)
    b[:] = np.arange(b.size)
    c[:] = 2.0
    TRIAD.parallel(a, b, c, np.float64(3.0), 1)
    np.testing.assert_array_equal(a, b + 3.0 * c)
    assert a.ctypes.data % 64 == 0


def test_curve_interpolation_plateau_and_knees() -> None:
    fps = tuple(2**k for k in range(14, 31))  # 16 KiB .. 1 GiB
    bw = tuple(200e9 if f <= 32 << 10 else 100e9 if f <= 1 << 20 else 30e9 if f <= 32 << 20 else 16e9 for f in fps)
    curve = RoofCurve(1, fps, bw)
    assert curve.memory_roof() == pytest.approx(16e9)
    assert curve.knees() == [32 << 10, 1 << 20, 32 << 20]
    assert curve.at(fps[0] / 4) == pytest.approx(200e9)  # clamped below
    assert curve.at(fps[-1] * 4) == pytest.approx(16e9)  # clamped above
    mid = curve.at(np.sqrt((1 << 20) * (2 << 20)))
    assert 30e9 < mid < 100e9  # log-log interpolation between neighbours
    noisy = RoofCurve(2, fps[:4], (100e9, 180e9, 95e9, 170e9))
    assert noisy.knees() == []  # a zigzag is not a cache edge
    assert RoofCurve.from_dict(curve.as_dict()) == curve


def test_footprints_and_sizes() -> None:
    pts = footprints(1 << 20)
    assert pts[0] == 16 << 10 and pts[-1] == 1 << 20 and pts == sorted(pts)
    assert parse_bytes("512MiB") == 512 << 20 and parse_bytes("2GiB") == 2 << 30 and parse_bytes("1000") == 1000
    with pytest.raises(StridewiseError, match="'12 parsecs'"):
        parse_bytes("12 parsecs")


def test_waiting_on_a_dead_or_silent_child_ends_with_a_clear_error() -> None:
    """The roof command's wait: a crashed child and a child that never answers both end it."""
    import multiprocessing
    import sys
    import time

    from harness.processes import ChildError, receive

    ctx = multiprocessing.get_context("spawn")
    dead = ctx.Process(target=sys.exit, args=(3,), daemon=True)
    dead.start()
    with pytest.raises(ChildError, match="exited with status 3 without answering"):
        receive(ctx.Queue(), dead, 60.0, "roof at 1 thread(s)")
    silent = ctx.Process(target=time.sleep, args=(60,), daemon=True)
    silent.start()
    with pytest.raises(ChildError, match="no answer from the child process in 1 s; it was stopped"):
        receive(ctx.Queue(), silent, 1.0, "roof at 1 thread(s)")
    assert not silent.is_alive()


@pytest.mark.parametrize("features, itemsize, lanes, units", [
    (["avx", "avx2", "fma"], 8, 4, 2),      # AVX2 + FMA: 256-bit, 4 doubles
    (["avx", "avx2", "fma"], 4, 8, 2),
    (["avx512f", "avx2", "fma"], 8, 8, 2),  # 512-bit
    (["sse2"], 8, 2, 1),                    # no FMA: a multiply and an add
])
def test_closed_form_compute_peak(features: list[str], itemsize: int, lanes: int, units: int) -> None:
    from harness.compute_roof import closed_form, vector_lanes

    assert vector_lanes(features, itemsize) == (lanes, units)
    # cores x clock x lanes x 2 flops per FMA x FMA units
    assert closed_form(2, 2.5e9, lanes, units) == 2 * 2.5e9 * lanes * 2 * units
    assert closed_form(2, None, lanes, units) is None


def test_fma_ceiling_runs_packed_fused_instructions_near_its_closed_form() -> None:
    import re

    import numba

    from harness.compute_roof import measure
    from harness.machine import numba_target
    from kernels.peak import FMA_OPTIONS, _fma_sweeps

    features = numba_target()["features"]
    if "fma" not in features or "avx2" not in features:
        pytest.skip("the host has no AVX2 FMA: the packed-FMA check is for such hosts")
    ceiling = measure(1, "float64", features, 1)
    fresh = numba.njit(**{**FMA_OPTIONS, "cache": False})(_fma_sweeps.py_func)  # cached code cannot be inspected
    fresh(np.ones((1, 8)), 0.5, 0.5, 1)
    asm = "\n".join(fresh.inspect_asm(sig) for sig in fresh.signatures)
    assert re.search(r"vfmadd\w*pd\s+[^\n]*%[yz]mm", asm), "the FMA chains are not packed and fused"
    if ceiling.closed_form_flops_per_s:
        # Scalar code would reach 1/4 of it and unfused packed code 1/2; turbo can lift the measured
        # rate above the nominal-clock closed form (by up to about 1.5x, from memory).
        assert 0.3 < ceiling.flops_per_s / ceiling.closed_form_flops_per_s < 2.0, ceiling
