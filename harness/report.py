"""Rendering a Ranking as markdown (tabulate, GitHub pipe tables), CSV or JSON."""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import pandas as pd
from tabulate import tabulate

from harness.rank import Ranking

FAMILY_WORDS = {"columns": "column solves", "stencils": "stencils"}
TABLE_COLUMNS = ["rank", "tier", "layout", "schedule", "median ms", "IQR/median", "GB/s", "% roof", "GFLOP/s", "x slowest", "x reference", "flags"]


def _num(value: Any, spec: str) -> str:
    if value is None or (isinstance(value, float) and (np.isnan(value) or np.isinf(value))):
        return ""
    return format(value, spec)


def _headline(kernel: str, family: str, threads: int, grp: pd.DataFrame) -> str:
    best, worst = grp.iloc[0], grp.iloc[-1]
    what = f"{kernel} {FAMILY_WORDS.get(family, '')}".strip()
    if len(grp) < 2:
        return f"At {threads} thread(s), only `{best['layout']}` ran for {what}."
    ratio = worst["median_ns"] / best["median_ns"]
    tied = grp[grp["tier"] == best["tier"]]["layout"].tolist() if pd.notna(best["tier"]) else [best["layout"]]
    tail = f" Tier 1 also holds {', '.join(f'`{t}`' for t in tied[1:])}." if len(tied) > 1 else ""
    return (f"At {threads} thread(s), `{best['layout']}` runs best for {what}; the slowest layout, "
            f"`{worst['layout']}`, takes {ratio:.1f}x as long.{tail}")


def _power_note(grp: pd.DataFrame, alpha: float) -> str | None:
    """Say so when the rounds are too few for the paired test to separate anything."""
    n = int(grp["rounds"].min()) if "rounds" in grp and grp["rounds"].notna().all() else 0
    m = len(grp) - 1
    if m < 1 or n == 0 or m * 2.0**-n < alpha:
        return None
    needed = 2 * math.ceil(math.log2(m / alpha))
    return (f"**Too few rounds to separate layouts:** with {n} reporting rounds the smallest possible p-value is "
            f"{2.0**-n:.3g}, so {m} Holm-corrected comparisons can never reach alpha {alpha:g}; the tiers above carry "
            f"no information. Run at least {needed} measured rounds (timing.min_repeats).")


def _machine_header(machine: str, md: dict[str, Any]) -> list[str]:
    fp = md.get("fingerprint", {})
    roofs = []
    for threads, info in sorted(md.get("workers", {}).items(), key=lambda kv: int(kv[0])):
        roof = info.get("roof", {}).get("memory_roof_bytes_per_s")
        if roof:
            roofs.append(f"{threads}t {roof / 1e9:.1f} GB/s")
    comp = md.get("compile", {})
    lines = [
        f"Machine `{machine}`: {fp.get('cpu_model', '?')}, {fp.get('usable_cores', '?')} usable cores, "
        f"numba {fp.get('numba', '?')} on `{fp.get('numba_target', {}).get('cpu_name', '?')}`, "
        f"layer `{next(iter(md.get('workers', {}).values()), {}).get('threading_layer', '?')}`; "
        f"memory roof {', '.join(roofs) or 'not measured'}; run `{md.get('suite', {}).get('name', '?')}` "
        f"({md.get('status', '?')}), commit `{fp.get('commit') or 'unknown'}`, kernels `{fp.get('kernels_source_hash', '?')}`.",
    ]
    if comp:
        lines.append(
            f"Compiled {comp.get('compiled', 0)} specialisations in {comp.get('compile_seconds', 0):.1f} s, "
            f"loaded {comp.get('loaded', 0)} from cache."
        )
    return lines


def render_markdown(r: Ranking, title: str = "Layout ranking") -> str:
    opts = r.options
    out = [f"# {title}", ""]
    for machine, md in r.runs.metadata.items():
        out += _machine_header(machine, md)
        if md.get("imported", {}).get("raw_samples") is False:
            out.append(f"Imported from {md['imported']['source']} without raw samples: ranked on the recorded medians, "
                       "without tiers or dispersion.")
    out += [
        "",
        f"Ranked on each layout's best schedule (chosen on even rounds, figures from odd rounds). Tiers: paired "
        f"one-sided Wilcoxon signed-rank tests against each tier's leader, Holm-corrected, alpha {opts.alpha:g}, "
        f"minimum practical difference {opts.floor:.0%}.",
        "",
    ]
    families = dict(zip(r.runs.cases["kernel"], r.runs.cases["family"]))
    for key, grp in r.table.groupby(["machine", "kernel", "grid", "dtype", "threads"], sort=False):
        machine, kernel, grid, dtype, threads = key
        out.append(f"## {kernel}, {grid}, {dtype}, {threads} thread(s)" + (f", machine {machine}" if len(r.runs.metadata) > 1 else ""))
        out.append("")
        out.append(_headline(kernel, families.get(kernel, ""), int(threads), grp))
        power = _power_note(grp, opts.alpha)
        if power:
            out += ["", power]
        if (grp["split"] != "halves").any() if "split" in grp else False:
            out.append("")
            out.append("Too few rounds to split: schedules were chosen and reported on the same rounds.")
        out.append("")
        rows = []
        for _, e in grp.iterrows():
            flags = []
            if e["overhead_bound"]:
                flags.append("overhead-bound")
            if str(e.get("vectorised")) == "False":
                flags.append("scalar")
            rows.append([
                int(e["rank"]), _num(e["tier"], ".0f"), e["layout"], e["schedule"], _num(e["median_ns"] / 1e6, ".4g"),
                _num(e["iqr_rel"], ".1%"), _num(e["gbps"], ".1f"), _num(e["pct_roof"], ".0f"), _num(e["gflops"], ".2f"),
                _num(e["speedup_vs_slowest"], ".2f"), _num(e["speedup_vs_reference"], ".2f"), " ".join(flags),
            ])
        out.append(tabulate(rows, headers=TABLE_COLUMNS, tablefmt="github", disable_numparse=True))
        out.append("")
    if not r.scaling.empty and r.scaling["threads"].nunique() > 1:
        out += ["## Thread scaling", ""]
        out += [f"- {f}" for f in r.flips] or ["- The winner is the same at every thread count."]
        out.append("")
        out.append("Speedup and efficiency are over the same threaded build at 1 thread; the last column compares "
                   "with the best single-threaded (parallel=False) build, the compiler's view of serial code.")
        out.append("")
        rows = [[s["kernel"], s["layout"], int(s["threads"]), _num(s["median_ns"] / 1e6, ".4g"),
                 _num(s["speedup"], ".2f"), _num(s["efficiency"], ".0%"), _num(s["vs_serial_build"], ".2f")]
                for _, s in r.scaling[r.scaling["threads"] > 1].iterrows()]
        out.append(tabulate(rows, headers=["kernel", "layout", "threads", "median ms", "speedup", "efficiency", "x serial build"],
                            tablefmt="github", disable_numparse=True))
        out.append("")
    if r.mix:
        out += ["## Kernel mix", ""]
        for m in r.mix:
            weights = ", ".join(f"{k} x{w:g}" for k, w in m["weights"].items())
            out.append(f"### {m['grid']}, {m['dtype']}, {m['threads']} thread(s) (weights: {weights})")
            out.append("")
            if "note" in m:
                out += [f"Cannot rank the mix: {m['note']}.", ""]
                continue
            out.append(f"- Best single layout: `{m['single_layout']}`, {m['single_ns'] / 1e6:.3f} ms per step.")
            per = ", ".join(f"{k}: `{v}`" for k, v in m["per_kernel"].items())
            out.append(f"- Best layout per kernel: {per}; {m['switch_compute_ns'] / 1e6:.3f} ms of kernels per step.")
            if "switch_note" in m:
                out.append(f"- Switching cannot be priced: {m['switch_note']}.")
            else:
                verdict = "pays off" if m["switch_pays"] else "does not pay off"
                out.append(f"- With {m['convert_ns'] / 1e6:.3f} ms of measured conversions, switching costs "
                           f"{m['switch_ns'] / 1e6:.3f} ms per step: it {verdict}.")
            out.append("")
    if not r.machine_diffs.empty:
        out += ["## Where the winner differs between machines", ""]
        out.append(tabulate(r.machine_diffs.values.tolist(), headers=list(map(str, r.machine_diffs.columns)), tablefmt="github"))
        out.append("")
    if not r.failed.empty:
        out += failed_section(r.failed)
    return "\n".join(out)


def failed_section(failed: pd.DataFrame) -> list[str]:
    """Markdown lines listing cases that failed validation or raised (with a machine column when known)."""
    columns = [c for c in ("machine", "kernel", "schedule", "build", "layout", "dtype", "threads", "status", "message") if c in failed]
    rows = [[f[c] for c in columns] for _, f in failed.iterrows()]
    return ["## Failed cases", "", tabulate(rows, headers=columns, tablefmt="github"), ""]


EXPORT_COLUMNS = [
    "machine", "kernel", "grid", "dtype", "threads", "rank", "tier", "layout", "schedule", "median_ns", "iqr_rel",
    "gbps", "roof_gbps", "pct_roof", "gflops", "speedup_vs_slowest", "speedup_vs_reference", "overhead_bound",
    "vectorised", "plain", "rounds",
]


def export_frame(r: Ranking) -> pd.DataFrame:
    """One row per ranked entry, every key a column (the CSV and JSON content)."""
    frame = r.table[[c for c in EXPORT_COLUMNS if c in r.table.columns]].copy()
    if not r.scaling.empty:
        sc = r.scaling[["machine", "kernel", "grid", "dtype", "layout", "threads", "speedup", "efficiency"]]
        frame = frame.merge(sc.rename(columns={"speedup": "speedup_vs_1thread"}), how="left",
                            on=["machine", "kernel", "grid", "dtype", "layout", "threads"])
    return frame


def render(r: Ranking, fmt: str) -> str:
    if fmt == "md":
        return render_markdown(r)
    frame = export_frame(r)
    if fmt == "csv":
        return frame.to_csv(index=False)
    if fmt == "json":
        return json.dumps({"ranked": json.loads(frame.to_json(orient="records")), "mix": r.mix, "flips": r.flips}, indent=2, default=str) + "\n"
    raise ValueError(f"unknown format {fmt}")
