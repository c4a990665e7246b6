"""The roof: STREAM-style triad bandwidth against footprint, at one thread count.

The curve runs from inside L1 to well past the last-level cache. Reported cache sizes are not
trusted to place the memory roof (a virtual machine reports the host's); instead the memory
roof is read off the curve itself: the plateau after its last knee.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Relative drop between neighbouring curve points that counts as a knee.
KNEE_DROP = 0.15
#: Points within this fraction of the largest footprint's bandwidth form the final plateau.
PLATEAU_BAND = 0.10


@dataclass(frozen=True)
class RoofCurve:
    """Triad bandwidth (bytes/s, median of samples) at each footprint (bytes), ascending."""

    threads: int
    footprints: tuple[int, ...]
    bandwidths: tuple[float, ...]

    def at(self, footprint: float) -> float:
        """Bandwidth at a footprint, interpolated in log-log; clamped to the curve's ends."""
        x = np.log(np.asarray(self.footprints, dtype=float))
        y = np.log(np.asarray(self.bandwidths, dtype=float))
        return float(np.exp(np.interp(np.log(max(footprint, 1.0)), x, y)))

    def memory_roof(self) -> float:
        """Median bandwidth of the plateau after the last knee: the main-memory roof."""
        bw = np.asarray(self.bandwidths)
        last = bw[-1]
        start = len(bw) - 1
        while start > 0 and abs(bw[start - 1] - last) <= PLATEAU_BAND * last:
            start -= 1
        return float(np.median(bw[start:]))

    def knees(self) -> list[int]:
        """Cache-level edges: footprints after which the best bandwidth still reachable at larger
        footprints (the suffix maximum, which ignores single-point noise) falls by more than
        KNEE_DROP."""
        bw = list(self.bandwidths)
        suffix = [max(bw[i:]) for i in range(len(bw))]
        return [self.footprints[i] for i in range(len(bw) - 1) if suffix[i + 1] < (1 - KNEE_DROP) * suffix[i]]

    def as_dict(self) -> dict[str, object]:
        return {
            "threads": self.threads,
            "footprint_bytes": list(self.footprints),
            "bandwidth_bytes_per_s": list(self.bandwidths),
            "memory_roof_bytes_per_s": self.memory_roof(),
            "knees_bytes": self.knees(),
        }

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> RoofCurve:
        return cls(int(data["threads"]), tuple(data["footprint_bytes"]), tuple(data["bandwidth_bytes_per_s"]))  # type: ignore[arg-type]


#: The roof curve's triad footprints: from 16 KiB (its first point) up to at most 1 TiB.
MIN_FOOTPRINT, MAX_FOOTPRINT = 16 << 10, 1 << 40


def footprints(max_bytes: int, min_bytes: int = MIN_FOOTPRINT) -> list[int]:
    """Footprints from 16 KiB doubling up to ``max_bytes``, with a midpoint between each doubling."""
    out, size = [], min_bytes
    while size <= max_bytes:
        out.append(size)
        if size * 3 // 2 <= max_bytes:
            out.append(size * 3 // 2)
        size *= 2
    return out


def measure_curve(threads: int, max_bytes: int, repeats: int = 5) -> RoofCurve:
    """Measure the triad curve at the current numba thread count (call inside a worker)."""
    from kernels.triad import measure_triad

    points = footprints(max_bytes)
    bandwidths = [float(np.median(measure_triad(fp, repeats=repeats, min_seconds=0.02))) for fp in points]
    return RoofCurve(threads, tuple(points), tuple(bandwidths))
