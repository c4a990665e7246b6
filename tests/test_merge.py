"""Merging run directories: shards of one suite, and the same suite on two machines."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

from harness.store import RunStore

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def shards(tmp_path_factory: pytest.TempPathFactory) -> list[Path]:
    """The smoke suite in two shards, run on this machine."""
    base = tmp_path_factory.mktemp("shards")
    out = []
    for k in (1, 2):
        run = base / f"part{k}"
        proc = subprocess.run([sys.executable, "-m", "harness", "sweep", "--smoke", "--shard", f"{k}/2", "--out", str(run),
                               "--quiet"], cwd=ROOT, capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        out.append(run)
    return out


def _cli(capsys: pytest.CaptureFixture[str], *args: str) -> SimpleNamespace:
    from harness.commands import main

    code = main(list(args))
    captured = capsys.readouterr()
    return SimpleNamespace(returncode=code, stdout=captured.out, stderr=captured.err)


def _relabel(run: Path, dest: Path, **fingerprint: str) -> Path:
    """A copy of a run whose metadata says another machine, suite or kernels (test-only edit)."""
    shutil.copytree(run, dest)
    meta = json.loads((dest / "metadata.json").read_text())
    suite_hash = fingerprint.pop("suite_hash", None)
    if suite_hash:
        meta["suite_hash"] = suite_hash
    meta["fingerprint"].update(fingerprint)
    meta["started"] = f"{meta['started']}-copy"
    (dest / "metadata.json").write_text(json.dumps(meta))
    return dest


@pytest.mark.slow
def test_shards_merge_into_one_run_that_ranks_like_an_unsharded_one(shards: list[Path], tmp_path: Path,
                                                                    capsys: pytest.CaptureFixture[str]) -> None:
    merged = tmp_path / "merged"
    proc = _cli(capsys, "merge", *map(str, shards), "--out", str(merged))
    assert proc.returncode == 0, proc.stderr
    cases = RunStore(merged).cases()
    parts = [RunStore(s).cases() for s in shards]
    assert sorted(cases["case_id"]) == sorted(c for p in parts for c in p["case_id"])
    samples = RunStore(merged).samples()
    assert len(samples) == sum(len(RunStore(s).samples()) for s in shards)
    # Part 2's rounds are shifted by an even amount (choosing/reporting parity kept) past part 1's.
    second = RunStore(shards[1]).samples()
    moved = samples[samples["case_id"].isin(set(second["case_id"]))].sort_values(["case_id", "round"])["round"].to_numpy()
    shift = moved - second.sort_values(["case_id", "round"])["round"].to_numpy()
    assert len(set(shift)) == 1 and shift[0] % 2 == 0 and shift[0] > RunStore(shards[0]).samples()["round"].max()
    meta = RunStore(merged).metadata()
    assert meta["status"] == "complete" and [m["shard"]["index"] for m in meta["merged_from"]] == [1, 2]
    ranked = _cli(capsys, "rank", str(merged))
    assert ranked.returncode == 0 and "## levelcoef" in ranked.stdout and "## laplacian" in ranked.stdout
    assert (merged / "summary.md").read_text().startswith("# Merged run `smoke`")


@pytest.mark.slow
def test_two_machines_keep_their_machine_ids_and_rank_side_by_side(shards: list[Path], tmp_path: Path,
                                                                  capsys: pytest.CaptureFixture[str]) -> None:
    other = [_relabel(s, tmp_path / f"other{i}", machine_id="second000000") for i, s in enumerate(shards)]
    merged = tmp_path / "merged"
    assert _cli(capsys, "merge", *map(str, shards), *map(str, other), "--out", str(merged)).returncode == 0
    cases = RunStore(merged).cases()
    assert set(cases["machine_id"]) == {json.loads((shards[0] / "metadata.json").read_text())["fingerprint"]["machine_id"],
                                        "second000000"}
    ranked = _cli(capsys, "rank", str(merged))
    assert ranked.returncode == 0, ranked.stderr
    assert ranked.stdout.count("Machine `") == 2 and "machine second000000" in ranked.stdout
    assert "## Across machines" in ranked.stdout
    assert "rank 1 on every machine" in ranked.stdout or "Best single layout across machines" in ranked.stdout


@pytest.mark.slow
@pytest.mark.parametrize("edit, field", [({"suite_hash": "0123456789abcdef"}, "suite_hash"),
                                         ({"kernels_source_hash": "fedcba9876543210"}, "kernels_source_hash")])
def test_merge_refuses_runs_of_another_suite_or_kernels(shards: list[Path], tmp_path: Path, capsys, edit, field) -> None:
    odd = _relabel(shards[1], tmp_path / "odd", **edit)
    proc = _cli(capsys, "merge", str(shards[0]), str(odd), "--out", str(tmp_path / "m"))
    assert proc.returncode == 2 and f"differ in {field}" in proc.stderr and len(proc.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "m").exists()


@pytest.mark.slow
def test_merge_refuses_a_case_twice_on_one_machine(shards: list[Path], tmp_path: Path, capsys) -> None:
    again = _relabel(shards[0], tmp_path / "again")
    proc = _cli(capsys, "merge", str(shards[0]), str(again), "--out", str(tmp_path / "m"))
    assert proc.returncode == 2 and "is in both" in proc.stderr and "Traceback" not in proc.stderr


def test_a_forced_machine_id_is_recorded_for_trying_several_machine_reports(monkeypatch: pytest.MonkeyPatch) -> None:
    from harness.machine import FORCED_MACHINE_ID_ENV, fingerprint

    measured = fingerprint()["machine_id"]
    monkeypatch.setenv(FORCED_MACHINE_ID_ENV, "lab-node-b")
    assert fingerprint()["machine_id"] == "lab-node-b" != measured
