"""Plots (the ``plot`` extra: matplotlib)."""

from __future__ import annotations

from collections.abc import Sequence

from harness.roof import RoofCurve
from kernels.errors import StridewiseError


def _pyplot():  # type: ignore[no-untyped-def]
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise StridewiseError("plots need matplotlib: pip install 'stridewise[plot]'") from None
    return plt


def plot_roof(curves: Sequence[RoofCurve], path: str) -> None:
    """Triad bandwidth against footprint, one line per thread count, log-log."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(7, 4.5))
    for curve in curves:
        ax.plot([f / 2**20 for f in curve.footprints], [b / 1e9 for b in curve.bandwidths], marker="o", ms=3,
                label=f"{curve.threads} thread(s), memory roof {curve.memory_roof() / 1e9:.1f} GB/s")
    ax.set_xscale("log")
    ax.set_xlabel("footprint (MiB)")
    ax.set_ylabel("triad bandwidth (GB/s, STREAM counting)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)
