"""The compute ceiling of the roofline: measured FMA rate, beside its closed form.

Closed form: cores x clock x SIMD lanes x 2 flops per FMA x FMA units per core. The facts behind
it, from memory (vendor optimisation manuals; no single source at hand): x86 cores since Intel
Haswell and AMD Zen 2 issue two vector FMAs per cycle, at the widest width the target supports
(AVX-512: 512 bits; AVX2 with FMA: 256 bits); without FMA, a multiply and an add issue separately
(2 flops per cycle per lane at best, counted here as one "FMA unit"). The clock is the nominal
one the OS reports; a core running above it (turbo) measures above the closed form.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

#: Vector FMA issue per cycle and core on the CPUs this project targets (see the module docstring).
FMA_UNITS = 2


@dataclass(frozen=True)
class ComputeRoof:
    """Best measured rate (flop/s) of the FMA chains at one thread count and dtype, and its closed form."""

    threads: int
    dtype: str
    cores: int  # cores the closed form counts: the threads, at most the usable cores
    flops_per_s: float
    closed_form_flops_per_s: float | None
    clock_hz: float | None
    lanes: int
    fma_units: int

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


def vector_lanes(features: list[str], itemsize: int) -> tuple[int, int]:
    """SIMD lanes of ``itemsize``-byte values at the target's widest width, and FMA units per core."""
    bits = 512 if "avx512f" in features else 256 if "avx2" in features or "avx" in features else 128
    units = FMA_UNITS if "fma" in features or "avx512f" in features else 1
    return bits // (8 * itemsize), units


def closed_form(cores: int, clock_hz: float | None, lanes: int, fma_units: int) -> float | None:
    """cores x clock x lanes x 2 x FMA units (flop/s); None without a clock."""
    return None if not clock_hz else cores * clock_hz * lanes * 2 * fma_units


def measure(threads: int, dtype: str, features: list[str], cores: int) -> ComputeRoof:
    """Measure the FMA ceiling at the current numba thread count (call inside a worker)."""
    import numpy as np

    from harness.machine import nominal_clock_hz
    from kernels.peak import fma_rates

    lanes, units = vector_lanes(features, np.dtype(dtype).itemsize)
    clock = nominal_clock_hz()
    used = min(threads, cores)
    best = max(fma_rates(threads, dtype))
    return ComputeRoof(threads, dtype, used, best, closed_form(used, clock, lanes, units), clock, lanes, units)


def describe_ceiling(ceiling: dict[str, Any]) -> str:
    """One line: the measured FMA ceiling and its closed form, e.g. for the roof command."""
    text = f"FMA ceiling {ceiling['flops_per_s'] / 1e9:.1f} GFLOP/s {ceiling['dtype']}"
    if ceiling.get("closed_form_flops_per_s"):
        text += (f" (closed form {ceiling['closed_form_flops_per_s'] / 1e9:.1f} = {ceiling['cores']} core(s) x "
                 f"{ceiling['clock_hz'] / 1e9:.2f} GHz nominal x {ceiling['lanes']} lanes x 2 x {ceiling['fma_units']} FMA units)")
    return text
