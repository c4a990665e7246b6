"""Whole kernels beside their stages: the paired comparison and the report section."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.cases import CaseKind, part_of, stage_name, whole_of
from harness.stages import stage_comparison, stage_section

KEYS = {"machine": "m1", "grid": "var=3,z=4,y=4,x=4", "dtype": "float64", "threads": 1}


def _frames(whole_over_parts: float, rounds: int = 24, seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Invented timings: three stages of 1, 2 and 3 ms with 5 % noise; the whole is their per-round
    sum times ``whole_over_parts`` (with its own noise)."""
    rng = np.random.default_rng(seed)
    parts = {"hyperdiffusion": 1e6, "varcoef": 2e6, "saturation": 3e6}
    cases, samples = [], []
    for name, ns in [("step", None), *((stage_name("step", p), ns) for p, ns in parts.items())]:
        cid = f"{name}|rows|var.z.y.x"
        cases.append({"case_id": cid, "kernel": name, "schedule": "rows", "build": "parallel", "layout": "var.z.y.x",
                      "status": "ok", **KEYS})
    totals = np.zeros(rounds)
    for p, ns in parts.items():
        t = ns * rng.lognormal(0, 0.05, rounds)
        totals += t
        samples += [{"case_id": f"step.{p}|rows|var.z.y.x", "round": r, "ns": v} for r, v in enumerate(t)]
    whole = totals * whole_over_parts * rng.lognormal(0, 0.02, rounds)
    samples += [{"case_id": "step|rows|var.z.y.x", "round": r, "ns": v} for r, v in enumerate(whole)]
    table = pd.DataFrame([{"kernel": "step", "layout": "var.z.y.x", "schedule": "rows", **KEYS}])
    return pd.DataFrame(cases), pd.DataFrame(samples), table


def test_stage_cases_have_their_own_kind_and_names() -> None:
    assert CaseKind.of("step.varcoef") is CaseKind.STAGE and CaseKind.of("step") is CaseKind.KERNEL
    assert whole_of("step.varcoef") == "step" and part_of("step.varcoef") == "varcoef" and part_of("laplacian") == "laplacian"


def test_a_whole_that_reuses_cache_is_faster_than_its_stages() -> None:
    cases, samples, table = _frames(0.8)
    out = stage_comparison(cases, samples, table, alpha=0.05, floor=0.03, confidence=0.95)
    row = out.iloc[0]
    assert row["verdict"] == "faster than its stages"
    assert row["ratio"].lo < 0.8 < row["ratio"].hi and row["ratio"].hi < 0.97
    assert abs(row["stages_ms"].value - 6.0) < 0.3
    assert [name for name, _ in row["parts"]] == ["hyperdiffusion", "varcoef", "saturation"]
    assert row["rounds"] == 12  # the reporting half


def test_equal_times_are_not_separated_and_a_slower_whole_is_called_slower() -> None:
    cases, samples, table = _frames(1.0)
    same = stage_comparison(cases, samples, table, alpha=0.05, floor=0.03, confidence=0.95).iloc[0]
    assert same["verdict"] == "not separated from its stages"
    assert same["ratio"].lo < 1.0 < same["ratio"].hi
    cases, samples, table = _frames(1.25)
    assert stage_comparison(cases, samples, table, 0.05, 0.03, 0.95).iloc[0]["verdict"] == "slower than its stages"


def test_the_section_prints_every_stage_and_the_verdict() -> None:
    cases, samples, table = _frames(0.8)
    text = "\n".join(stage_section(stage_comparison(cases, samples, table, 0.05, 0.03, 0.95), 0.05, 0.03))
    assert "## Whole steps beside their stages" in text
    assert "hyperdiffusion 1" in text and "varcoef 2" in text and "saturation 3" in text
    assert "faster than its stages" in text
    assert stage_section(pd.DataFrame(), 0.05, 0.03) == []
