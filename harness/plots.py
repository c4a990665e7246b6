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


def plot_ranking(ranking: "object", directory: str) -> list[str]:
    """Per kernel: a heatmap of layout x threads coloured by percent of roof and thread-scaling
    curves; and one roofline chart of every case. Returns the written paths."""
    import os

    import numpy as np

    plt = _pyplot()
    os.makedirs(directory, exist_ok=True)
    table = ranking.table  # type: ignore[attr-defined]
    scaling = ranking.scaling  # type: ignore[attr-defined]
    written = []
    for (machine, kernel, grid, dtype), grp in table.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        tag = f"{kernel}_{grid.replace(',', '_').replace('=', '')}_{dtype}_{machine}"
        pivot = grp.pivot_table(index="layout", columns="threads", values="pct_roof", aggfunc="first")
        fig, ax = plt.subplots(figsize=(2.5 + 1.2 * pivot.shape[1], 1.5 + 0.4 * pivot.shape[0]))
        im = ax.imshow(pivot.to_numpy(float), cmap="viridis", aspect="auto", vmin=0, vmax=100)
        ax.set_xticks(range(pivot.shape[1]), [f"{t} thr" for t in pivot.columns])
        ax.set_yticks(range(pivot.shape[0]), pivot.index)
        for (i, j), v in np.ndenumerate(pivot.to_numpy(float)):
            if np.isfinite(v):
                ax.text(j, i, f"{v:.0f}", ha="center", va="center", color="white" if v < 60 else "black", fontsize=8)
        fig.colorbar(im, ax=ax, label="% of roof")
        ax.set_title(f"{kernel} {grid} {dtype}")
        fig.tight_layout()
        path = os.path.join(directory, f"heatmap_{tag}.png")
        fig.savefig(path, dpi=110)
        plt.close(fig)
        written.append(path)
        sc = scaling[(scaling["machine"] == machine) & (scaling["kernel"] == kernel) & (scaling["grid"] == grid) & (scaling["dtype"] == dtype)] if not scaling.empty else scaling
        if not sc.empty and sc["threads"].nunique() > 1:
            fig, ax = plt.subplots(figsize=(6, 4))
            for layout, lg in sc.groupby("layout"):
                lg = lg.sort_values("threads")
                err = np.vstack([lg["speedup"] - lg["speedup_lo"], lg["speedup_hi"] - lg["speedup"]]) \
                    if "speedup_lo" in lg else None
                ax.errorbar(lg["threads"], lg["speedup"], yerr=err, marker="o", capsize=3, label=layout)
            top = int(sc["threads"].max())
            ax.plot([1, top], [1, top], color="grey", ls="--", lw=1, label="ideal")
            ax.set_xlabel("threads")
            ax.set_ylabel("speedup over 1 thread (95 % interval)")
            ax.set_title(f"{kernel} {grid} {dtype}: thread scaling")
            ax.legend(fontsize=7)
            fig.tight_layout()
            path = os.path.join(directory, f"scaling_{tag}.png")
            fig.savefig(path, dpi=110)
            plt.close(fig)
            written.append(path)
    fig, ax = plt.subplots(figsize=(7, 5))
    data = table.assign(intensity=table["gflops"] / table["gbps"]).dropna(subset=["intensity"])
    data = data[data["intensity"] > 0]
    for kernel, kg in data.groupby("kernel"):
        ax.scatter(kg["intensity"], kg["gflops"], label=kernel, s=18)
    roofs = table.groupby("threads")["roof_gbps"].median()
    if len(data):
        xs = np.logspace(np.log10(data["intensity"].min() / 2), np.log10(data["intensity"].max() * 2), 50)
        for threads, roof in roofs.items():
            if np.isfinite(roof):
                ax.plot(xs, roof * xs, ls="--", lw=1, label=f"bandwidth roof, {threads} thr ({roof:.0f} GB/s)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("arithmetic intensity (flop/byte, byte model)")
    ax.set_ylabel("GFLOP/s")
    ax.set_title("roofline: every ranked case under its measured bandwidth roof")
    ax.legend(fontsize=7)
    fig.tight_layout()
    path = os.path.join(directory, "roofline.png")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    written.append(path)
    return written
