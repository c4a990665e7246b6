"""The numbers behind every plot, checked against the ranking they come from (not pixels)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness import pictures
from harness.rank import RankOptions, Runs, rank_runs
from harness.roof import RoofCurve
from harness.store import RunMetadata
from kernels.grid import Extents

GRID = "var=2,z=8,y=16,x=16"
#: Invented timings (ns) per kernel, layout and thread count, for a demo machine.
TRUE = {
    ("k1", 1): {"var.z.y.x": 1.0e6, "y.x.z.var": 2.0e6, "y/4.x/4.var.z.y%4.x%4": 1.5e6},
    ("k1", 2): {"var.z.y.x": 0.6e6, "y.x.z.var": 1.1e6, "y/4.x/4.var.z.y%4.x%4": 0.8e6},
    ("k2", 1): {"var.z.y.x": 3.0e6, "y.x.z.var": 1.0e6, "y/4.x/4.var.z.y%4.x%4": 2.0e6},
    ("k2", 2): {"var.z.y.x": 1.6e6, "y.x.z.var": 0.55e6, "y/4.x/4.var.z.y%4.x%4": 1.2e6},
}
FOOTPRINT = {"k1": 4 << 20, "k2": 6 << 20}
CURVES = {
    1: RoofCurve(1, (1 << 14, 1 << 16, 1 << 18, 1 << 20, 1 << 22, 1 << 24, 1 << 26),
                 (2e11, 2e11, 1e11, 1e11, 2e10, 2e10, 2e10)),
    2: RoofCurve(2, (1 << 14, 1 << 16, 1 << 18, 1 << 20, 1 << 22, 1 << 24, 1 << 26),
                 (4e11, 4e11, 2e11, 2e11, 3e10, 3.2e10, 3.2e10)),
}


def _ranking(mix: bool = True, reference: str | None = None, second: str = "k2"):
    """``second`` renames kernel k2 (e.g. to a name the pictures also use)."""
    rng = np.random.default_rng(7)
    cases, samples = [], []
    for (name, threads), times in TRUE.items():
        kernel = second if name == "k2" else name
        rounds = 24
        shared = 1 + 0.2 * np.sin(np.linspace(0, 3 * np.pi, rounds))
        for layout, t in times.items():
            cid = f"{kernel}|s|parallel|{layout}|float64|{GRID}|{threads}"
            cases.append({"case_id": cid, "kernel": kernel, "family": "stencils", "schedule": "s", "build": "parallel",
                          "layout": layout, "dtype": "float64", "grid": GRID, "threads": threads, "status": "ok", "message": "",
                          "traffic_bytes": FOOTPRINT[name], "flops": FOOTPRINT[name] // (4 if name == "k1" else 2),
                          "footprint_bytes": FOOTPRINT[name], "roof_gbps": np.nan, "overhead_bound": False,
                          "vectorised": True, "machine": "m"})
            ns = t * shared * np.exp(rng.normal(0, 0.01, rounds))
            samples += [{"case_id": cid, "round": r + 1000 * threads, "position": 0, "phase": "measure", "ns": v,
                         "machine": "m", "build": "parallel", "block": 0} for r, v in enumerate(ns)]
    workers = {str(t): {"roof": c.as_dict(), "compute_roof": {"float64": {"flops_per_s": 4e10 * t}}} for t, c in CURVES.items()}
    meta = RunMetadata({"fingerprint": {"machine_id": "m"}, "workers": workers,
                        "suite": {"name": "demo", "mix": [["k1", 2], [second, 1]] if mix else []}})
    runs = Runs(pd.DataFrame(cases), pd.DataFrame(samples), {"m": meta}, {"m": [meta]})
    return rank_runs(runs, RankOptions(reference=reference))


def test_heatmap_numbers_are_the_ranking_table_and_rows_follow_the_step_rank() -> None:
    ranking = _ranking()
    (heat,) = pictures.heatmaps(ranking)
    table = ranking.table
    for j, (kernel, threads) in enumerate(heat.columns):
        if kernel == pictures.STEP:
            continue
        col = table[(table["kernel"] == kernel) & (table["threads"] == threads)].set_index("layout")
        for i, layout in enumerate(heat.rows):
            assert heat.slowdown[i, j] == pytest.approx(col.loc[layout, "time_vs_best"])
            assert heat.leading[i, j] == (col.loc[layout, "tier"] == col["tier"].min())
    assert heat.columns[-2:] == [(pictures.STEP, 1), (pictures.STEP, 2)]
    (mix2,) = [m for m in ranking.mix if m["threads"] == 2]
    step = heat.slowdown[:, -1]
    assert list(heat.rows) == sorted(mix2["totals"], key=mix2["totals"].get)  # rank order of the weighted step
    assert step[0] == 1.0 and np.all(np.diff(step) >= 0)
    # The weighted step by hand: k1 x2 + k2 x1 at 2 threads, over the best layout's.
    medians = table[table["threads"] == 2].pivot_table(index="layout", columns="kernel", values="reported_median_ns")
    by_hand = (2 * medians["k1"] + medians["k2"]) / (2 * medians["k1"] + medians["k2"]).min()
    np.testing.assert_allclose(step, by_hand.loc[heat.rows].to_numpy())
    assert heat.leading[0, -1]  # the best single layout is outlined


def test_a_kernel_named_step_keeps_its_own_column_beside_the_weighted_step() -> None:
    """The whole-step kernel is called ``step``: its heatmap column is its ranking, not the mix."""
    ranking = _ranking(second="step")
    (heat,) = pictures.heatmaps(ranking)
    assert heat.columns.count(("step", 2)) == 1 and heat.columns.count((pictures.STEP, 2)) == 1
    j = heat.columns.index(("step", 2))
    col = ranking.table[(ranking.table["kernel"] == "step") & (ranking.table["threads"] == 2)].set_index("layout")
    np.testing.assert_allclose(heat.slowdown[:, j], col.loc[heat.rows, "time_vs_best"].to_numpy())
    assert not np.allclose(heat.slowdown[:, j], heat.slowdown[:, heat.columns.index((pictures.STEP, 2))])


def test_without_weights_rows_follow_the_geometric_mean_slowdown() -> None:
    (heat,) = pictures.heatmaps(_ranking(mix=False))
    assert pictures.STEP not in {k for k, _ in heat.columns}
    gmean = np.exp(np.log(heat.slowdown).mean(axis=1))
    assert np.all(np.diff(gmean) >= 0)


def test_scaling_ceiling_is_roof_t_over_roof_1_from_the_runs_curve() -> None:
    ceilings = pictures.scaling_ceilings(_ranking())
    for row in ceilings.itertuples():
        fp = FOOTPRINT[row.kernel]
        assert row.ceiling == pytest.approx(CURVES[row.threads].at(fp) / CURVES[1].at(fp))
    two = ceilings[ceilings["threads"] == 2].set_index("kernel")["ceiling"]
    assert two["k1"] == pytest.approx(np.exp(np.interp(np.log(4 << 20), np.log([1 << 20, 1 << 22]), np.log([2e11, 3e10])))
                                      / np.exp(np.interp(np.log(4 << 20), np.log([1 << 20, 1 << 22]), np.log([1e11, 2e10]))))
    assert two["k2"] == pytest.approx(3e10 / 2e10, rel=0.05)  # at 6 MiB, both curves are on their DRAM plateau


def test_a_compute_bound_kernel_gets_no_bandwidth_ceiling() -> None:
    ranking = _ranking()
    ranking.table.loc[ranking.table["kernel"] == "k1", "flops"] *= 1000  # 250 flop/byte: beyond the ridge (2 flop/byte)
    assert set(pictures.scaling_ceilings(ranking)["kernel"]) == {"k2"}


def test_every_layout_of_a_kernel_sits_on_one_vertical_line_of_the_roofline() -> None:
    points = pictures.roofline_points(_ranking())
    assert points.groupby("kernel")["intensity"].nunique().eq(1).all()
    assert points.set_index("kernel")["intensity"].groupby(level=0).first().to_dict() == {"k1": 0.25, "k2": 0.5}
    assert (points["gflops_lo"] <= points["gflops"]).all() and (points["gflops"] <= points["gflops_hi"]).all()


def test_plateaus_are_the_curves_levels_between_knees() -> None:
    levels = pictures.plateaus(CURVES[1], min_points=2)
    assert [bw for _, _, bw in levels] == [2e11, 1e11, 2e10]
    assert levels[-1][1] == CURVES[1].footprints[-1]


def test_forest_rows_are_the_reference_speedups_of_the_table() -> None:
    ranking = _ranking(reference="var.z.y.x")
    data = pictures.forest(ranking)
    merged = data.merge(ranking.table, on=["kernel", "threads", "layout"], suffixes=("", "_table"))
    assert len(merged) == len(ranking.table)
    np.testing.assert_allclose(merged["speedup_vs_reference"], merged["speedup_vs_reference_table"])
    assert (data.loc[data["layout"] == "var.z.y.x", "speedup_vs_reference"] == 1.0).all()
    assert pictures.forest(_ranking()).empty  # no reference, no forest


def test_block_bytes_is_one_tile_of_every_field_or_a_threads_share() -> None:
    ext = Extents.parse(GRID)
    assert pictures.block_bytes("y/4.x/4.var.z.y%4.x%4", ext, 1 << 20, 1) == (1 << 20) / 16  # 4 x 4 tiles
    assert pictures.block_bytes("var.z.y.x", ext, 1 << 20, 2) == (1 << 20) / 2
    assert pictures.block_bytes("y/16.x/16.var.z.y%16.x%16", ext, 1 << 20, 2) == (1 << 20) / 2  # one tile: the share is smaller


def test_traces_are_every_measured_round_in_order_over_the_case_median() -> None:
    ranking = _ranking()
    data = pictures.traces(ranking)
    assert len(data) == 24 * len(ranking.table)
    for _, g in data.groupby(["kernel", "threads", "layout"]):
        assert g["relative"].median() == pytest.approx(1.0)
        assert g["round"].is_monotonic_increasing


def test_every_picture_of_a_ranking_is_written_as_a_png(tmp_path) -> None:
    pytest.importorskip("matplotlib")
    from harness.plots import plot_ranking

    paths = plot_ranking(_ranking(reference="var.z.y.x"), str(tmp_path))
    kinds = sorted({p.rsplit("/", 1)[1].split("_")[0] for p in paths})
    assert kinds == ["forest", "heatmap", "per", "roofline", "scaling", "traces"]
    assert len([p for p in paths if "/scaling_" in p]) == 2 and len([p for p in paths if "/traces_" in p]) == 2
    for path in paths:  # PNG signature: W3C PNG specification, section 5.2
        with open(path, "rb") as fh:
            assert fh.read(8) == b"\x89PNG\r\n\x1a\n"


def test_oversubscribed_thread_counts_are_left_out_of_scaling() -> None:
    from harness.scaling import scaling_and_flips

    ranking = _ranking()
    assert 2 in set(ranking.scaling["threads"])
    table = ranking.table.assign(oversubscribed=ranking.table["threads"] == 2)
    scaling, _ = scaling_and_flips(table, ranking.rounds, ranking.options)
    assert set(scaling["threads"]) == {1}


def test_across_machines_reads_each_machines_table_and_picks_the_lowest_worst_case() -> None:
    """Two machines (the second is the first with invented changes): the per-machine cells equal
    each machine's ranking rows, and the best single layout has the lowest worst-case slowdown."""
    one = _ranking()
    cases, samples = one.runs.cases.copy(), one.runs.samples.copy()
    factor = {"var.z.y.x": 3.0, "y.x.z.var": 1.0, "y/4.x/4.var.z.y%4.x%4": 1.0}  # var.z.y.x 3x slower on m2
    cases2 = cases.assign(machine="m2", case_id=cases["case_id"] + "|m2")
    samples2 = samples.assign(machine="m2", case_id=samples["case_id"] + "|m2")
    samples2["ns"] = samples2["ns"] * samples2["case_id"].map(lambda c: factor[c.split("|")[3]])
    meta = one.runs.metadata["m"]
    runs = Runs(pd.concat([cases, cases2], ignore_index=True), pd.concat([samples, samples2], ignore_index=True),
                {"m": meta, "m2": meta}, {"m": [meta], "m2": [meta]})
    ranking = rank_runs(runs, RankOptions())
    groups = pictures.across_machines(ranking)
    assert len(groups) == 4  # 2 kernels x 2 thread counts
    t = ranking.table
    for g in groups:
        assert g["machines"] == ["m", "m2"]
        for i, layout in enumerate(g["layouts"]):
            for j, machine in enumerate(g["machines"]):
                row = t[(t["machine"] == machine) & (t["kernel"] == g["kernel"]) & (t["threads"] == g["threads"])
                        & (t["layout"] == layout)].iloc[0]
                assert g["slowdown"][i, j] == pytest.approx(row["time_vs_best"])
        worst = g["slowdown"].max(axis=1)
        assert g["best_single"] == g["layouts"][int(np.argmin(worst))]
    k1 = next(g for g in groups if g["kernel"] == "k1" and g["threads"] == 1)
    # k1 at 1 thread: var.z.y.x wins on m (1.0 ms) but takes 2x the best on m2 (3.0 against 1.5 ms);
    # the tiled layout is at worst 1.5x (on m): the safer single choice.
    assert k1["winners"] == {"m": "var.z.y.x", "m2": "y/4.x/4.var.z.y%4.x%4"}
    assert k1["best_single"] == "y/4.x/4.var.z.y%4.x%4" and k1["worst_machine"] == "m"
