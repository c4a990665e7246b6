"""How a gate ends, for both gates: its report (markdown, CSV, JSON) and its exit status."""

from __future__ import annotations

import json
import os
import sys
from typing import Any

import pandas as pd

EXIT_PASS, EXIT_REGRESSION = 0, 1  # unusable input raises an error: exit 2 through the command line
#: The environment variable CI systems read as a step's markdown summary.
STEP_SUMMARY_ENV = "GITHUB_STEP_SUMMARY"
STORED_DRIFT_NOTE = (
    "Mode: stored baseline. This run is compared with numbers stored from other runs, so a drift of the machine "
    "between those runs and this one (measured on a shared 2-core VM: up to 1.66x for one case) is "
    "indistinguishable from a change of the code; the interval allows only for the spread between the baseline's "
    "own runs. On a shared runner, compare versions side by side in one run: `stridewise versus BASE [HEAD]`."
)


def render_gate(frame: pd.DataFrame, summary: dict[str, Any], fmt: str) -> str:
    if fmt == "csv":
        return frame.to_csv(index=False)
    if fmt == "json":
        return json.dumps({"summary": summary, "cases": json.loads(frame.to_json(orient="records"))}, indent=2) + "\n"
    from tabulate import tabulate

    verdict = "FAIL: regression" if summary["result"] == "regression" else "PASS"
    lines = [
        f"## stridewise gate: {verdict}",
        "",
        f"{summary['gated']} cases gated ({summary['mode']}), tolerance {summary['threshold']:.0%} (a case fails when "
        f"slower by more than this), detection target {summary.get('detect', float('nan')):.0%}, "
        f"confidence {summary['confidence']:.0%}, Holm correction; baseline of {summary['baseline_runs']} runs on "
        f"`{summary['baseline_machine']}`, current on `{summary['current_machine']}`. "
        f"{summary['slower']} slower, {summary['faster']} faster.",
        "",
        STORED_DRIFT_NOTE,
        "",
    ]
    lines += [f"> warning: {w}" for w in summary["warnings"]]
    shown = frame.sort_values(["verdict"], key=lambda s: s.map({"slower": 0, "missing": 1, "new": 2, "faster": 3}).fillna(4))
    both = "verdict_raw" in frame
    rows = []
    for _, r in shown.iterrows():
        if pd.isna(r.get("ratio")):
            rows.append([r["case_id"], "", "", "", "", ""] + (["", ""] if both else []) + [r["verdict"]])
            continue
        row = [r["case_id"], f"{r['baseline_ms']:.4g}", f"{r['current_ms']:.4g}", f"{r['ratio']:.3f}",
               f"[{r['ci_low']:.3f}, {r['ci_high']:.3f}]", f"{r['mds']:.0%}" if "mds" in r and pd.notna(r["mds"]) else ""]
        if both:
            row += [f"{r['ratio_raw']:.3f} [{r['ci_low_raw']:.3f}, {r['ci_high_raw']:.3f}]", f"{r['verdict_raw']} / {r['verdict_normalised']}"]
        rows.append(row + [r["verdict"]])
    headers = ["case", "baseline ms", "current ms", "ratio", "interval", "detectable"]
    headers += (["raw ratio", "raw / normalised"] if both else []) + ["verdict"]
    lines.append(tabulate(rows, headers=headers, tablefmt="github"))
    if "mds" in frame:
        lines += ["", "`detectable`: the smallest slowdown this case would be caught at with 80 % power (Holm's first step); "
                  "intervals allow for a run effect shared by all cases of a run and each case's own scatter (shrunk "
                  "towards the pooled value)."]
    return "\n".join(lines) + "\n"


def gate_verdict(frame: pd.DataFrame, markdown: str) -> int:
    """The end of every gate: the markdown report appended to the CI step summary when one is
    set, the slowed cases named on standard error, and the exit status."""
    step_summary = os.environ.get(STEP_SUMMARY_ENV)
    if step_summary:
        with open(step_summary, "a") as fh:
            fh.write(markdown)
    slower = frame[frame["verdict"] == "slower"]["case_id"].tolist()
    if slower:
        print(f"stridewise: regression in {len(slower)} case(s): {', '.join(slower)}", file=sys.stderr)
        return EXIT_REGRESSION
    return EXIT_PASS
