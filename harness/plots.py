"""Plots (the ``plot`` extra: matplotlib)."""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any

from harness import pictures
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


def _tag(*parts: object) -> str:
    return "_".join(str(p).replace(",", "_").replace("=", "") for p in parts)


def _save(fig: Any, path: str, written: list[str]) -> None:
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    _pyplot().close(fig)
    written.append(path)


def plot_ranking(ranking: Any, directory: str) -> list[str]:
    """Every picture of a ranking (numbers from ``harness.pictures``); returns the written paths."""
    os.makedirs(directory, exist_ok=True)
    written: list[str] = []
    for heat in pictures.heatmaps(ranking):
        _heatmap(heat, os.path.join(directory, f"heatmap_{_tag(heat.grid, heat.dtype, heat.machine)}.png"), written)
    _scaling(ranking, directory, written)
    _roofline(ranking, directory, written)
    _forest(ranking, directory, written)
    _per_point(ranking, directory, written)
    _traces(ranking, directory, written)
    _machines(ranking, directory, written)
    return written


def _machines(ranking: Any, directory: str, written: list[str]) -> None:
    """Per kernel ranked on several machines: layout x machine, time over each machine's best."""
    plt = _pyplot()
    for g in pictures.across_machines(ranking):
        fig, ax = plt.subplots(figsize=(2.5 + 1.3 * len(g["machines"]), 1.5 + 0.42 * len(g["layouts"])))
        _slowdown_image(fig, ax, g["slowdown"], "time over the machine's best (log scale)")
        ax.set_xticks(range(len(g["machines"])), g["machines"], fontsize=7)
        ax.set_yticks(range(len(g["layouts"])), [("* " if l == g["best_single"] else "") + l for l in g["layouts"]], fontsize=8)
        ax.set_title(f"{g['kernel']} {g['grid']} {g['threads']} thr: * = best single layout across machines", fontsize=8)
        _save(fig, os.path.join(directory, f"machines_{_tag(g['kernel'], g['grid'], g['dtype'], g['threads'])}.png"), written)


def _slowdown_image(fig: Any, ax: Any, data: Any, label: str) -> None:
    """Slowdowns (1 = best) on a log colour scale, each finite cell labelled, with a colour bar."""
    import numpy as np
    from matplotlib.colors import LogNorm

    top = max(2.0, float(np.nanmax(data))) if np.isfinite(data).any() else 2.0
    im = ax.imshow(data, cmap="magma_r", norm=LogNorm(vmin=1.0, vmax=top), aspect="auto")
    for (i, j), v in np.ndenumerate(data):
        if np.isfinite(v):
            ax.text(j, i, f"{v:.2f}", ha="center", va="center", fontsize=7, color="white" if v > top ** 0.5 else "black")
    bar = fig.colorbar(im, ax=ax, label=label)
    ticks = [v for v in (1, 1.1, 1.25, 1.5, 2, 3, 4, 6, 8, 12, 16) if v <= top]
    bar.set_ticks(ticks, labels=[f"{v:g}x" for v in ticks])
    bar.minorticks_off()


def _heatmap(heat: pictures.Heatmap, path: str, written: list[str]) -> None:
    import numpy as np
    from matplotlib.patches import Rectangle

    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(3 + 0.75 * len(heat.columns), 1.6 + 0.42 * len(heat.rows)))
    _slowdown_image(fig, ax, heat.slowdown, "time over the column's best (log scale)")
    labels = [f"{k}\n{t} thr" if k != pictures.STEP else f"weighted\nstep, {t} thr" for k, t in heat.columns]
    long_names = max(len(k) for k, _ in heat.columns) > 12  # would overlap their neighbours level
    ax.set_xticks(range(len(labels)), labels, fontsize=7, rotation=30 if long_names else 0, ha="right" if long_names else "center")
    ax.set_yticks(range(len(heat.rows)), heat.rows, fontsize=8)
    for i, j in zip(*np.nonzero(heat.leading)):
        ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, edgecolor="#00a0ff", lw=2))
    weights = ", ".join(f"{k} x{w:g}" for k, w in heat.weights.items())
    ax.set_title(f"{heat.grid} {heat.dtype}: slowdown, rows in rank order, tier 1 outlined"
                 + (f"\nstep weights: {weights}" if weights else ""), fontsize=9)
    _save(fig, path, written)


def _scaling(ranking: Any, directory: str, written: list[str]) -> None:
    import numpy as np

    plt = _pyplot()
    scaling, ceilings = ranking.scaling, pictures.scaling_ceilings(ranking)
    if scaling.empty:
        return
    for (machine, kernel, grid, dtype), sc in scaling.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        if sc["threads"].nunique() < 2:
            continue
        fig, ax = plt.subplots(figsize=(6, 4))
        for layout, lg in sc.groupby("layout"):
            lg = lg.sort_values("threads")
            err = np.vstack([lg["speedup"] - lg["speedup_lo"], lg["speedup_hi"] - lg["speedup"]])
            ax.errorbar(lg["threads"], lg["speedup"], yerr=np.nan_to_num(err), marker="o", capsize=3, label=layout)
        top = int(sc["threads"].max())
        ax.plot([1, top], [1, top], color="grey", ls="--", lw=1, label="ideal (y = x)")
        if not ceilings.empty:
            c = ceilings[(ceilings["machine"] == machine) & (ceilings["kernel"] == kernel) & (ceilings["grid"] == grid)
                         & (ceilings["dtype"] == dtype)]
            if len(c):
                ax.plot(c["threads"], c["ceiling"], color="black", lw=2, label="bandwidth ceiling: roof(t) / roof(1)")
        ax.set_xlabel("threads")
        ax.set_ylabel("speedup over 1 thread (95 % interval)")
        ax.set_title(f"{kernel} {grid} {dtype}: thread scaling", fontsize=9)
        ax.legend(fontsize=7)
        _save(fig, os.path.join(directory, f"scaling_{_tag(kernel, grid, dtype, machine)}.png"), written)


def _roofline(ranking: Any, directory: str, written: list[str]) -> None:
    import numpy as np

    plt = _pyplot()
    points = pictures.roofline_points(ranking)
    for (machine, dtype), pts in points.groupby(["machine", "dtype"], sort=False):
        curves, peaks = pictures.roof_curves(ranking, machine), pictures.fma_ceilings(ranking, machine)
        fig, ax = plt.subplots(figsize=(7.5, 5))
        xs = np.logspace(np.log10(pts["intensity"].min() / 4), np.log10(max(pts["intensity"].max() * 8, 1.0)), 60)
        threads = max(curves) if curves else None
        if threads is not None:
            peak = peaks.get((threads, dtype), np.inf)
            for k, (lo, hi, bw) in enumerate(pictures.plateaus(curves[threads])):
                last = hi == curves[threads].footprints[-1]
                label = (f"DRAM roof {bw / 1e9:.0f} GB/s" if last else
                         f"cache plateau {lo / 2**10:.0f}-{hi / 2**10:.0f} KiB, {bw / 1e9:.0f} GB/s")
                ax.plot(xs, np.minimum(bw * xs, peak) / 1e9, ls="-" if last else ":", lw=1.5 if last else 1, label=label)
            if np.isfinite(peak):
                ax.axhline(peak / 1e9, color="black", lw=1.5, label=f"FMA ceiling {peak / 1e9:.0f} GFLOP/s (measured)")
        for t, tp in pts.groupby("threads"):
            ax.errorbar(tp["intensity"], tp["gflops"], yerr=[tp["gflops"] - tp["gflops_lo"], tp["gflops_hi"] - tp["gflops"]],
                        fmt="o", ms=4, capsize=2, label=f"layouts at {t} thread(s)")
        for kernel, kp in pts.groupby("kernel"):
            x = float(kp["intensity"].iloc[0])
            ax.axvline(x, color="grey", lw=0.5)
            ax.annotate(kernel, (x, kp["gflops"].max()), textcoords="offset points", xytext=(3, 6), fontsize=7, rotation=90)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("arithmetic intensity (flop/byte, byte model)")
        ax.set_ylabel("GFLOP/s")
        ax.set_title(f"roofline, {dtype}, ceilings at {threads} thread(s): every layout of a kernel on one vertical line",
                     fontsize=9)
        ax.legend(fontsize=6, loc="lower right")
        _save(fig, os.path.join(directory, f"roofline_{_tag(dtype, machine)}.png"), written)


def _forest(ranking: Any, directory: str, written: list[str]) -> None:
    from matplotlib.ticker import FixedLocator, FuncFormatter

    plt = _pyplot()
    data = pictures.forest(ranking)
    if data.empty:
        return
    for (machine, grid, dtype), grp in data.groupby(["machine", "grid", "dtype"], sort=False):
        kernels = list(dict.fromkeys(grp["kernel"]))
        counts = sorted(grp["threads"].unique())
        layouts = sorted(set(grp["layout"]))
        fig, axes = plt.subplots(len(counts), len(kernels), figsize=(1.2 + 2.1 * len(kernels), 0.8 + 0.28 * len(layouts) * len(counts)),
                                 squeeze=False, sharey=True)
        for i, threads in enumerate(counts):
            for j, kernel in enumerate(kernels):
                ax = axes[i, j]
                kg = grp[(grp["kernel"] == kernel) & (grp["threads"] == threads)].set_index("layout").reindex(layouts)
                y = range(len(layouts))
                v = kg["speedup_vs_reference"]
                ax.errorbar(v, y, xerr=[v - kg["speedup_vs_reference_lo"], kg["speedup_vs_reference_hi"] - v], fmt="o", ms=3, capsize=2)
                ax.axvline(1.0, color="grey", ls="--", lw=1)
                ax.set_xscale("log")
                ax.xaxis.set_major_locator(FixedLocator([0.1, 0.2, 0.3, 0.5, 0.7, 0.8, 0.9, 1, 1.1, 1.25, 1.5, 2, 3, 5]))
                ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: f"{x:g}"))
                ax.xaxis.set_minor_formatter(FuncFormatter(lambda x, _: ""))
                ax.tick_params(labelsize=6)
                if i == 0:
                    ax.set_title(kernel, fontsize=8)
                if j == 0:
                    ax.set_yticks(list(y), layouts, fontsize=6)
                    ax.set_ylabel(f"{threads} thread(s)", fontsize=7)
        fig.suptitle(f"{grid} {dtype}: speedup over {ranking.options.reference} with 95 % intervals (right of 1: faster)",
                     fontsize=9)
        _save(fig, os.path.join(directory, f"forest_{_tag(grid, dtype, machine)}.png"), written)


def _per_point(ranking: Any, directory: str, written: list[str]) -> None:
    plt = _pyplot()
    data = pictures.per_point(ranking)
    for (machine, grid, dtype), grp in data.groupby(["machine", "grid", "dtype"], sort=False):
        fig, ax = plt.subplots(figsize=(7, 4.5))
        kernels, counts = list(dict.fromkeys(grp["kernel"])), sorted(grp["threads"].unique())
        for (kernel, threads), kg in grp.groupby(["kernel", "threads"]):
            ax.plot(kg["block_bytes"], kg["ns_per_point"], "os^Dv"[counts.index(threads) % 5], ms=4,
                    color=f"C{kernels.index(kernel) % 10}", label=f"{kernel}, {threads} thr")
        curves = pictures.roof_curves(ranking, machine)
        if 1 in curves:
            for k, knee in enumerate(curves[1].knees()):
                ax.axvline(knee, color="grey", ls=":", lw=1, label="triad curve knees (1 thread)" if k == 0 else None)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("bytes one thread works through at a time (one tile of every field, or its share)")
        ax.set_ylabel("ns per grid point")
        ax.set_title(f"{grid} {dtype}: time per point against per-thread block size", fontsize=9)
        ax.legend(fontsize=6, ncol=2)
        _save(fig, os.path.join(directory, f"per_point_{_tag(grid, dtype, machine)}.png"), written)


def _traces(ranking: Any, directory: str, written: list[str]) -> None:
    plt = _pyplot()
    data = pictures.traces(ranking)
    for (machine, kernel, grid, dtype), kg in data.groupby(["machine", "kernel", "grid", "dtype"], sort=False):
        counts = sorted(kg["threads"].unique())
        fig, axes = plt.subplots(len(counts), 1, figsize=(7, 2.4 * len(counts)), squeeze=False)
        for ax, threads in zip(axes[:, 0], counts):
            tg = kg[kg["threads"] == threads]
            order = {r: i for i, r in enumerate(sorted(tg["round"].unique()))}
            for layout, lg in tg.groupby("layout"):
                ax.plot([order[r] for r in lg["round"]], lg["relative"], marker=".", lw=0.8, label=layout)
            ax.axhline(1.0, color="grey", lw=0.5)
            ax.set_ylabel(f"{threads} thr: time / median", fontsize=7)
        axes[-1, 0].set_xlabel("measured round, in order")
        axes[0, 0].set_title(f"{kernel} {grid} {dtype}: per-round samples of each layout's chosen case", fontsize=9)
        axes[0, 0].legend(fontsize=6, ncol=3)
        _save(fig, os.path.join(directory, f"traces_{_tag(kernel, grid, dtype, machine)}.png"), written)
