"""The plain summary a sweep writes when nothing can be ranked: per group, cases by median time."""

from __future__ import annotations

import pandas as pd
from tabulate import tabulate

from harness.cases import CaseKind, of_kind
from harness.machine import numa_note
from harness.report_parts import failed_section, fmt_number
from harness.store import RunMetadata, vector_flag


def render_summary(cases: pd.DataFrame, metadata: RunMetadata) -> str:
    """Markdown: a compact machine header, per group a ranked table, then failures."""
    fp = metadata.fingerprint
    lines = [
        f"# Sweep `{metadata.suite_name}`: {metadata.status}",
        "",
        f"Machine `{fp.get('machine_id', '?')}`: {fp.get('cpu_model', '?')}, {fp.get('usable_cores', '?')} usable cores, "
        f"numba {fp.get('numba', '?')} ({fp.get('numba_target', {}).get('cpu_name', '?')}), "
        f"commit `{fp.get('commit') or 'unknown'}`, kernels source `{fp.get('kernels_source_hash', '?')}`.",
    ]
    comp = metadata.compile_totals
    if comp:
        lines.append(
            f"Compiled {comp.get('compiled', 0)} specialisations in {comp.get('compile_seconds', 0):.1f} s; "
            f"loaded {comp.get('loaded', 0)} from cache in {comp.get('load_seconds', 0):.1f} s."
        )
    if numa_note(fp):
        lines.append(numa_note(fp))
    for threads, info in sorted(metadata.workers.items(), key=lambda kv: int(kv[0])):
        roof = info.get("roof", {}).get("memory_roof_bytes_per_s")
        roof_text = f", memory roof {roof / 1e9:.1f} GB/s" if roof else ""
        lines.append(f"- {threads} thread(s): threading layer `{info.get('threading_layer')}`{roof_text}")
    lines.append("")
    ok = cases[(cases["status"] == "ok") & ~of_kind(cases, CaseKind.PROBE)] if len(cases) else cases
    for (kernel, grid, dtype, threads), grp in ok.groupby(["kernel", "grid", "dtype", "threads"], sort=False):
        grp = grp.sort_values("median_ns")
        lines.append(f"## {kernel}, {grid}, {dtype}, {threads} thread(s)")
        lines.append("")
        rows = []
        for _, r in grp.iterrows():
            flags = []
            if r.get("overhead_bound") is True:
                flags.append("overhead-bound")
            if vector_flag(r):
                flags.append(vector_flag(r))
            if r.get("oversubscribed") is True:
                flags.append("oversubscribed")
            rows.append(
                [
                    r["layout"], r["schedule"], r["build"], fmt_number(r["median_ns"] / 1e6, ".3f"),
                    fmt_number(r["iqr_ns"] / r["median_ns"], ".1%"), fmt_number(r.get("gbps"), ".1f"), fmt_number(r.get("pct_roof"), ".0f"),
                    fmt_number(r.get("gflops"), ".2f"), " ".join(flags),
                ]
            )
        headers = ["layout", "schedule", "build", "median ms", "IQR/median", "GB/s", "% roof", "GFLOP/s", "flags"]
        lines.append(tabulate(rows, headers=headers, tablefmt="github", disable_numparse=True))
        lines.append("")
    bad = cases[cases["status"] != "ok"] if len(cases) else cases
    if len(bad):
        lines += failed_section(bad)
    return "\n".join(lines)
